"""drape: body postures and gestures sensed by textile antennas, turned into live control messages.

Data flows one way through the sub-packages:
sources -> signal -> recognition -> decisions -> mapping -> outputs.
``service`` runs them live, ``garment`` simulates a jacket, ``evaluation`` holds offline tools.
"""

__version__ = "0.1.0"
