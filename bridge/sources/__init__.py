"""Sources of samples: the simulated jacket, a serial garment, a recorded take."""

from .base import Block, Source, SourceGone
from .recording import Label, Recording, RecordingError, RecordingWriter, read_recording, write_recording
from .frames import FrameParser, encode_frame
from .protocols import StreamDecoder
from .textline import LineStats, ProtocolUndecided, TextLineParser, format_line

__all__ = [
    "Block", "Label", "LineStats", "Recording", "RecordingError", "RecordingWriter", "Source", "SourceGone",
    "TextLineParser", "format_line", "read_recording", "write_recording",
    "FrameParser", "ProtocolUndecided", "StreamDecoder", "encode_frame",
]
