"""Sources of samples: the simulated jacket, a serial garment, a recorded take."""

from .base import Block, Source, SourceGone
from .recording import (CutShort, Label, Recording, RecordingError, RecordingWriter, describe_incomplete,
                        read_recording, warn_incomplete, write_recording)
from .frames import FrameParser, encode_frame
from .protocols import StreamDecoder
from .textline import LineStats, ProtocolUndecided, TextLineParser, format_line

__all__ = [
    "Block", "CutShort", "Label", "LineStats", "Recording", "RecordingError", "RecordingWriter", "Source", "SourceGone",
    "TextLineParser", "describe_incomplete", "format_line", "read_recording", "warn_incomplete", "write_recording",
    "FrameParser", "ProtocolUndecided", "StreamDecoder", "encode_frame",
]
