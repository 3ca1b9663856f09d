"""The daemon's config file (TOML): which garment, on which port, with which model and mapping.

    [garment]
    name = "jacket"              # used in logs and event fields
    port = "/dev/ttyACM0"        # the garment's serial device
    baud = 115200
    model = "jacket.npz"         # paths are relative to this file
    mapping = "../mappings/demo.toml"
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
    for key in ("port", "model"):
        if not isinstance(g.get(key), str):
            raise ConfigError(f"{path}: [garment] {key} must be a string (the {'serial device' if key == 'port' else 'model file'})")
    baud = g.get("baud", 115200)
    if not isinstance(baud, int) or baud <= 0:
        raise ConfigError(f"{path}: [garment] baud must be a positive integer")
    here = path.resolve().parent
    mapping = g.get("mapping")
    return GarmentConfig(
        name=str(g.get("name", "garment")),
        port=g["port"],
        baud=baud,
        model=(here / g["model"]).resolve(),
        mapping=(here / mapping).resolve() if isinstance(mapping, str) else None,
    )
