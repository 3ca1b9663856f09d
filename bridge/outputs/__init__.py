"""Outputs: send mapped messages to the world. They see messages only, never the classifier.

Backends are picked by name with ``open_output(destination)`` (``registry``); MIDI, keys
and sACN live in their own modules so their optional packages are imported only when used.
"""

from .base import Output, OutputStats, OutputUnavailable
from .osc import OscTcpOutput, OscUdpOutput, encode_osc, frame_osc_stream
from .queued import QueuedOutput
from .registry import open_backend, open_output

__all__ = ["Output", "OutputStats", "OutputUnavailable", "OscTcpOutput", "OscUdpOutput", "QueuedOutput",
           "encode_osc", "frame_osc_stream", "open_backend", "open_output"]
