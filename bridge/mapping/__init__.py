"""Mapping files: which event sends which message to which destination."""

from .loader import Mapping, MappingError, load_mapping, parse_mapping
from .messages import Destination, Dispatch, OscMessage, Rule

__all__ = ["Destination", "Dispatch", "Mapping", "MappingError", "OscMessage", "Rule", "load_mapping", "parse_mapping"]
