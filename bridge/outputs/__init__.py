"""Outputs: send mapped messages to the world. They see messages only, never the classifier."""

from .base import Output, OutputStats, open_output
from .osc import OscUdpOutput, encode_osc

__all__ = ["Output", "OutputStats", "OscUdpOutput", "encode_osc", "open_output"]
