"""Small immutable values passed from mapping to outputs."""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class OscMessage:
    """An OSC message: address and typed arguments (int → i, float → f, str → s, bool → T/F)."""

    address: str
    args: tuple = ()


@dataclass(frozen=True)
class Destination:
    """Where messages go, declared once in a mapping file and referred to by name."""

    name: str
    kind: str        # "osc"
    host: str
    port: int


@dataclass(frozen=True)
class Rule:
    """On an event of `on` kind for `gesture`, send an OSC message to `to`."""

    gesture: str
    on: str
    to: str
    address: str
    args: tuple
    line: int = 0


@dataclass(frozen=True)
class Dispatch:
    """A message bound for a named destination, with the time its event was decided."""

    destination: str
    message: OscMessage
    decided_s: float = 0.0
