"""Telling the serial protocols apart, and decoding either one from a byte stream.

``sniff_protocol`` looks at the first bytes of a stream: two intact binary frames mean
"frames"; three complete lines of printable ASCII mean "text". ``StreamDecoder`` holds the
bytes until it knows (or is told) the protocol, then hands everything to that parser, so
nothing read while sniffing is lost.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from .frames import FrameParser, looks_like_frames
from .textline import ProtocolUndecided, TextLineParser

PROTOCOLS = ("auto", "text", "frames")
SNIFF_BYTES = 4096  # give up telling the protocols apart after this much
_PRINTABLE = frozenset(range(0x20, 0x7F)) | {0x09, 0x0D}


def sniff_protocol(data: bytes) -> str | None:
    """"frames", "text", or None while the bytes do not tell yet."""
    if looks_like_frames(data):
        return "frames"
    lines = data.split(b"\n")[:-1]
    # Three printable lines in a row, just arrived: text. Only the latest three count, so boot
    # noise or bytes at a wrong baud rate before the lines do not hide them (the parser counts
    # the noise as malformed lines); the first line may be the tail of one cut when we joined.
    if len(lines) >= 4 and all(b in _PRINTABLE for line in lines[-3:] for b in line):
        return "text"
    if len(lines) == 3 and all(b in _PRINTABLE for line in lines[1:] for b in line):
        return "text"
    return None


@dataclass
class StreamDecoder:
    """Bytes in, samples out: (device time s or None, values Hz) per sample.

    protocol: "auto", "text" or "frames"; n_channels and timestamp as for TextLineParser
    (frames always carry a device time). Raises ProtocolUndecided when the protocol or the
    text layout cannot be told, with a message saying what to state in the config.
    """

    protocol: str = "auto"
    n_channels: int | None = None
    timestamp: bool | None = None
    parser: TextLineParser | FrameParser | None = None
    sniffed: bytes = b""

    def __post_init__(self):
        if self.protocol not in PROTOCOLS:
            raise ValueError(f"protocol must be one of {', '.join(PROTOCOLS)}, not {self.protocol!r}")
        if self.protocol != "auto":
            self._start(self.protocol)

    def _start(self, kind: str) -> None:
        self.protocol = kind
        self.parser = (FrameParser(self.n_channels) if kind == "frames"
                       else TextLineParser(self.n_channels, self.timestamp))

    def feed(self, data: bytes) -> list[tuple[float | None, list[float]]]:
        if self.parser is None:
            self.sniffed += data
            kind = sniff_protocol(self.sniffed)
            if kind is None:
                if len(self.sniffed) > SNIFF_BYTES:
                    raise ProtocolUndecided(
                        f"neither text lines nor binary frames in the first {SNIFF_BYTES} bytes; check the "
                        "baud rate, or state protocol = \"text\" or \"frames\" in the config's [garment] table")
                return []
            self._start(kind)
            data, self.sniffed = self.sniffed, b""
        return self.parser.feed(data)

    @property
    def decided_channels(self) -> int | None:
        return None if self.parser is None else self.parser.n_channels

    @property
    def header_names(self) -> tuple[str, ...] | None:
        return getattr(self.parser, "channel_names", None)

    def counters(self) -> dict:
        if self.parser is None:
            return {"protocol": "undecided", "good": 0}
        st = self.parser.stats
        c = {k: getattr(st, k) for k in st.__dataclass_fields__}
        c["protocol"] = self.protocol
        return c


def describe_counters(c: dict) -> str:
    """One line for logs: how much came in, what was skipped and why."""
    if c.get("protocol") == "frames":
        bad = c["corrupt"] + c["duplicate"] + c["wrong_count"] + c["out_of_range"]
        s = (f"frames good {c['good']}, skipped {bad} (corrupt {c['corrupt']}, duplicate {c['duplicate']}, "
             f"wrong count {c['wrong_count']}, out of range {c['out_of_range']}), dropped {c['dropped']}")
    elif c.get("protocol") == "text":
        s = (f"lines good {c['good']}, skipped {c['malformed'] + c['wrong_count'] + c['out_of_range']} "
             f"(malformed {c['malformed']}, wrong count {c['wrong_count']}, out of range {c['out_of_range']})")
    elif c.get("protocol") == "osc":
        kinds = [(k, c.get(k, 0)) for k in ("malformed", "other_address", "wrong_count", "out_of_range",
                                             "not_allowed", "wrong_token")]
        s = (f"OSC samples good {c['good']}, ignored {sum(n for _, n in kinds)} ("
             + ", ".join(f"{k.replace('_', ' ')} {n}" for k, n in kinds) + ")")
    else:
        s = "no samples (protocol not yet known)"
    extra = [f"{k.replace('_', ' ')} {c[k]}" for k in ("gaps", "jumps", "restarts", "reconnects", "outages") if c.get(k)]
    return s + ("; " + ", ".join(extra) if extra else "")
