"""The daemon's config file (TOML): which garment, on which port, with which model and mapping.

    [garment]
    name = "jacket"              # used in logs and event fields
    port = "/dev/ttyACM0"        # the garment's serial device
    baud = 115200
    model = "jacket.npz"         # paths are relative to this file
    mapping = "../mappings/demo.toml"

Acquisition (all optional; see docs/acquisition.md):

    port = "usb:2341:8037"       # or by USB vendor:product[:serial], or "serial:SERIALNO"
    protocol = "auto"            # "text", "frames" or "auto" (told from the first bytes)
    timestamp = true             # text lines start with the device time (default: detect)
    resample = true              # device-timed samples onto the model's rate
    stall_s = 1.0                # no sample for this long: "no data", postures released
    input = "osc"                # instead of a serial port: OSC over UDP
    listen = "0.0.0.0:9100"
    address = "/jacket/antennas"
    arguments = ["t_s", "left_sleeve", "right_sleeve", "front_left", "front_right"]
"""

from __future__ import annotations

import tomllib
from dataclasses import dataclass
from pathlib import Path


class ConfigError(ValueError):
    pass


@dataclass(frozen=True)
class GarmentConfig:
    name: str
    port: str
    baud: int
    model: Path
    mapping: Path | None
    protocol: str = "auto"
    timestamp: bool | None = None
    resample: bool = True
    stall_s: float = 1.0
    input: str = "serial"
    listen: str = ""
    address: str = ""
    arguments: tuple[str, ...] = ()


def load_config(path: str | Path) -> GarmentConfig:
    path = Path(path)
    try:
        doc = tomllib.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise ConfigError(f"{path}: no such config file") from None
    except (tomllib.TOMLDecodeError, OSError, UnicodeDecodeError) as exc:
        raise ConfigError(f"{path}: {exc}") from None
    g = doc.get("garment")
    if not isinstance(g, dict):
        raise ConfigError(f"{path}: needs a [garment] table with port and model")
    kind = g.get("input", "serial")
    if kind not in ("serial", "osc"):
        raise ConfigError(f"{path}: [garment] input must be \"serial\" or \"osc\", not {kind!r}")
    for key in (("port", "model") if kind == "serial" else ("model",)):
        if not isinstance(g.get(key), str):
            raise ConfigError(f"{path}: [garment] {key} must be a string (the {'serial device' if key == 'port' else 'model file'})")
    baud = g.get("baud", 115200)
    if not isinstance(baud, int) or baud <= 0:
        raise ConfigError(f"{path}: [garment] baud must be a positive integer")
    protocol = g.get("protocol", "auto")
    if protocol not in ("auto", "text", "frames"):
        raise ConfigError(f"{path}: [garment] protocol must be \"auto\", \"text\" or \"frames\", not {protocol!r}")
    timestamp = g.get("timestamp")
    if timestamp is not None and not isinstance(timestamp, bool):
        raise ConfigError(f"{path}: [garment] timestamp must be true or false")
    resample = g.get("resample", True)
    if not isinstance(resample, bool):
        raise ConfigError(f"{path}: [garment] resample must be true or false")
    stall_s = g.get("stall_s", 1.0)
    if not isinstance(stall_s, (int, float)) or isinstance(stall_s, bool) or not 0 < stall_s <= 3600:
        raise ConfigError(f"{path}: [garment] stall_s must be a number of seconds above 0")
    listen, address, arguments = "", "", ()
    if kind == "osc":
        listen, address, arguments = g.get("listen"), g.get("address"), g.get("arguments")
        if not isinstance(listen, str) or ":" not in listen:
            raise ConfigError(f"{path}: [garment] listen must be \"HOST:PORT\" for OSC input")
        if not isinstance(address, str) or not address.startswith("/"):
            raise ConfigError(f"{path}: [garment] address must be an OSC address starting with /")
        if not isinstance(arguments, list) or not arguments or not all(isinstance(a, str) for a in arguments):
            raise ConfigError(f"{path}: [garment] arguments must list each OSC argument's name "
                              "(\"t_s\" for the device time, \"-\" to ignore one, else a channel name)")
    here = path.resolve().parent
    mapping = g.get("mapping")
    return GarmentConfig(
        name=str(g.get("name", "garment")),
        port=g.get("port", ""),
        baud=baud,
        model=(here / g["model"]).resolve(),
        mapping=(here / mapping).resolve() if isinstance(mapping, str) else None,
        protocol=protocol,
        timestamp=timestamp,
        resample=resample,
        stall_s=float(stall_s),
        input=kind,
        listen=listen,
        address=address,
        arguments=tuple(arguments),
    )
