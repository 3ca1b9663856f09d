"""drape: body postures and gestures sensed by textile antennas, turned into live control messages.

Data flows one way through the sub-packages:
sources -> signal -> recognition -> decisions -> mapping -> outputs.
``service`` runs them live, ``garment`` simulates a jacket, ``evaluation`` holds offline tools.
"""

__version__ = "0.1.0"

import os as _os

# Live work is many small products per hop. BLAS worker threads speed up none of them and,
# on a busy machine, waking them costs milliseconds per product (measured: an 8-channel
# linear hop 8 ms with threads, 0.4 ms without, on 2 loaded cores). So one thread unless
# the user says otherwise; effective only when drape is imported before numpy (the
# `drape` command, `python -m bridge`).
for _name in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    _os.environ.setdefault(_name, "1")
del _name
