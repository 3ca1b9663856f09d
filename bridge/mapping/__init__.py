"""Mapping files: which event sends which message to which destination; the router that
applies them live (layers, arming, held notes and keys, panic, continuous controls)."""

from .loader import MappingError, load_mapping, parse_mapping
from .messages import Destination, Dispatch, OscMessage
from .router import Router
from .rules import ControlRule, Mapping, Rule
from .watcher import MappingWatcher

__all__ = ["ControlRule", "Destination", "Dispatch", "Mapping", "MappingError", "MappingWatcher", "OscMessage",
           "Router", "Rule", "load_mapping", "parse_mapping"]
