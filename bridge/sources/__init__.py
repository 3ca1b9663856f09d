"""Sources of samples: the simulated jacket, a serial garment, a recorded take."""

from .base import Block, Source, SourceGone
from .recording import Label, Recording, RecordingError, RecordingWriter, read_recording, write_recording
from .textline import LineStats, TextLineParser, format_line

__all__ = [
    "Block", "Label", "LineStats", "Recording", "RecordingError", "RecordingWriter", "Source", "SourceGone",
    "TextLineParser", "format_line", "read_recording", "write_recording",
]
