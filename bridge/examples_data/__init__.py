"""The example mapping files, shipped inside the package.

`drape demo` and `drape bench --live/--soak/--fuzz` need a mapping even when drape was
installed with pip and runs far from any checkout, so the files of ``mappings/`` (and the
service example's cue mapping) are copied here as package data and read through
``importlib.resources``. The checkout's ``mappings/`` stays the copy users read and edit;
a test keeps the two identical.
"""

from __future__ import annotations

import tempfile
from importlib import resources
from pathlib import Path

#: Files shipped here, by name (all TOML mappings).
NAMES = ("demo.toml", "game-keys.toml", "lighting.toml", "music.toml", "single-switch.toml",
         "stage-cues.toml", "chorus_cues.toml")


def example_text(name: str) -> str:
    """The text of a shipped example mapping, e.g. ``example_text("demo.toml")``."""
    if name not in NAMES:
        raise KeyError(f"no shipped example {name!r}; there are {', '.join(NAMES)}")
    return resources.files(__name__).joinpath(name).read_text(encoding="utf-8")


def example_path(name: str) -> Path:
    """A file-system path to a shipped example mapping.

    An ordinary install keeps package files on disk, so this is the file itself; from a zip
    archive the text is first written to a new temporary folder.
    """
    item = resources.files(__name__).joinpath(name)
    if isinstance(item, Path) and item.is_file():
        return item
    folder = Path(tempfile.mkdtemp(prefix="drape-examples-"))
    out = folder / name
    out.write_text(example_text(name), encoding="utf-8")
    return out
