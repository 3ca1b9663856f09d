"""Cable layouts: where a jacket's antennas run, read from a small TOML file.

A layout names 2 to 16 cables, each a polyline sewn either along a sleeve or on
the torso part of the jacket (front panels, back, collar, hem)::

    name = "rain jacket, four cables"

    [[cable]]
    name = "left_sleeve"
    on = "sleeve"
    side = "left"
    upper_arm = [0.3, 0.95]   # from, to: fractions of the upper arm from the shoulder
    forearm = [0.08, 0.95]    # from, to: fractions of the forearm from the elbow
    around_deg = -23          # around the limb from its front face; negative = outward
    gap_mm = 22               # cloth gap around the limb, average girth

    [[cable]]
    name = "left_front"
    on = "torso"
    # vertices [height, azimuth_deg, gap_mm]: height 0 = hips (hem) .. 1 = base of
    # the neck (collar); azimuth 0 = front centre, +90 = the wearer's left, 180 = back
    path = [[0.8, 31.5, 12], [0.15, 31.5, 35]]
    points = 8                # vertices the polyline is resampled to (more: finer, slower)

Any cable may also say how differently it sits each time the garment is put on, one
standard deviation of each (defaults: a loose jacket, our guesses, not measured on cloth)::

    turn_spread_deg = 8.6     # about the limb (sleeves) or the torso (panels: 2.9)
    gap_spread_mm = 4         # standing off the body
    slide_spread_mm = 12      # along the limb, or up the torso

A cable sewn down so that it cannot turn or stand off gets smaller spreads.
The order of the cables is the order of the channels.  Errors name the file,
the cable and what to change.
"""

from __future__ import annotations

import math
import tomllib
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .antennas import ANTENNA_ORDER, LAYOUTS, PanelLayout, SleeveLayout

MIN_CABLES, MAX_CABLES = 2, 16
_SPREAD_KEYS = {"turn_spread_deg", "gap_spread_mm", "slide_spread_mm"}
_SLEEVE_KEYS = {"name", "on", "side", "upper_arm", "forearm", "around_deg", "gap_mm", "points", "sway_hz"} | _SPREAD_KEYS
_TORSO_KEYS = {"name", "on", "path", "points", "sway_hz"} | _SPREAD_KEYS


class LayoutError(ValueError):
    """A layout file that cannot be used; the message says where and why."""


@dataclass(frozen=True)
class GarmentLayout:
    """Named cables in channel order; each a ``SleeveLayout`` or ``PanelLayout``."""

    name: str
    cables: tuple[tuple[str, SleeveLayout | PanelLayout], ...]

    @property
    def channel_names(self) -> tuple[str, ...]:
        return tuple(n for n, _ in self.cables)

    def as_dict(self) -> dict[str, SleeveLayout | PanelLayout]:
        return dict(self.cables)


def default_layout(n_antennas: int = 4) -> GarmentLayout:
    """The built-in jacket: the first ``n_antennas`` of sleeves, fronts, collar, hem, back."""
    if not 1 <= n_antennas <= len(ANTENNA_ORDER):
        raise ValueError(f"n_antennas must be 1..{len(ANTENNA_ORDER)}, got {n_antennas}")
    names = ANTENNA_ORDER[:n_antennas]
    return GarmentLayout(f"built-in, {n_antennas} cables", tuple((n, LAYOUTS[n]) for n in names))


def load_layout(path: str | Path) -> GarmentLayout:
    """Read and check a layout file; raises LayoutError naming the file and the cable."""
    path = Path(path)
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise LayoutError(f"{path}: no such layout file") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise LayoutError(f"{path}: cannot read ({exc})") from None
    except tomllib.TOMLDecodeError as exc:
        raise LayoutError(f"{path}: not valid TOML ({exc})") from None
    return parse_layout(data, str(path))


def parse_layout(data: dict, where: str = "layout") -> GarmentLayout:
    """A GarmentLayout from the parsed TOML tables of a layout file."""
    unknown = set(data) - {"name", "cable"}
    if unknown:
        raise LayoutError(f"{where}: unknown key(s) {', '.join(sorted(unknown))}; a layout has 'name' and [[cable]] tables")
    cables = data.get("cable")
    if not isinstance(cables, list) or not MIN_CABLES <= len(cables) <= MAX_CABLES:
        n = len(cables) if isinstance(cables, list) else 0
        raise LayoutError(f"{where}: a layout needs {MIN_CABLES} to {MAX_CABLES} [[cable]] tables, found {n}")
    out, seen = [], set()
    for i, table in enumerate(cables, start=1):
        here = f"{where}: cable {i}"
        if not isinstance(table, dict):
            raise LayoutError(f"{here}: must be a table")
        name = table.get("name")
        if not isinstance(name, str) or not name.isidentifier():
            raise LayoutError(f"{here}: 'name' must be a word of letters, digits and '_' (it becomes the channel name)")
        here = f"{where}: cable {i} ({name})"
        if name in seen:
            raise LayoutError(f"{here}: the name is used twice")
        seen.add(name)
        on = table.get("on")
        if on == "sleeve":
            out.append((name, _sleeve(table, here)))
        elif on == "torso":
            out.append((name, _torso(table, here)))
        else:
            raise LayoutError(f"{here}: 'on' must be \"sleeve\" or \"torso\", got {on!r}")
    return GarmentLayout(str(data.get("name", Path(where).stem)), tuple(out))


def _number(table: dict, key: str, here: str, default: float, lo: float, hi: float) -> float:
    v = table.get(key, default)
    if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v) or not lo <= v <= hi:
        raise LayoutError(f"{here}: '{key}' must be a number from {lo:g} to {hi:g}, got {v!r}")
    return float(v)


def _unknown(table: dict, allowed: set, here: str) -> None:
    extra = set(table) - allowed
    if extra:
        raise LayoutError(f"{here}: unknown key(s) {', '.join(sorted(extra))}; allowed: {', '.join(sorted(allowed))}")


def _span(table: dict, key: str, here: str) -> tuple[float, float] | None:
    v = table.get(key)
    if v is None or v == []:
        return None
    if (not isinstance(v, list) or len(v) != 2 or any(isinstance(x, bool) or not isinstance(x, (int, float)) for x in v)
            or not all(0.0 <= x <= 1.0 for x in v)):
        raise LayoutError(f"{here}: '{key}' must be [from, to], fractions from 0 to 1, got {v!r}")
    return float(v[0]), float(v[1])


def _spreads(table: dict, here: str, default: SleeveLayout | PanelLayout) -> dict:
    """The cable's dressing spreads in SI units; absent keys keep ``default``'s. The upper
    limits are the clips of ``antennas.draw_fit``: a larger spread would only pile draws there."""
    out = {}
    if "turn_spread_deg" in table:
        out["turn_spread_rad"] = math.radians(_number(table, "turn_spread_deg", here, 0.0, 0.0, 23.0))
    if "gap_spread_mm" in table:
        out["gap_spread_m"] = _number(table, "gap_spread_mm", here, 0.0, 0.0, 8.0) / 1000.0
    if "slide_spread_mm" in table:
        out["slide_spread_m"] = _number(table, "slide_spread_mm", here, 0.0, 0.0, 30.0) / 1000.0
    return {k: out.get(k, getattr(default, k)) for k in ("turn_spread_rad", "gap_spread_m", "slide_spread_m")}


_LOOSE_SLEEVE = SleeveLayout("left", (), (), 0.0, 0.0)   # the default spreads of each kind
_LOOSE_PANEL = PanelLayout((), (), ())


def _sleeve(table: dict, here: str) -> SleeveLayout:
    _unknown(table, _SLEEVE_KEYS, here)
    side = table.get("side")
    if side not in ("left", "right"):
        raise LayoutError(f"{here}: 'side' must be \"left\" or \"right\", got {side!r}")
    upper, fore = _span(table, "upper_arm", here), _span(table, "forearm", here)
    if upper is None and fore is None:
        raise LayoutError(f"{here}: give 'upper_arm' or 'forearm' (or both) as [from, to]")
    points = table.get("points")
    if points is None:  # about one vertex every 5-6 cm, at least two per run
        points = [0 if upper is None else max(2, math.ceil(abs(upper[1] - upper[0]) * 6)),
                  0 if fore is None else max(2, math.ceil(abs(fore[1] - fore[0]) * 6))]
    if (not isinstance(points, list) or len(points) != 2 or any(isinstance(p, bool) or not isinstance(p, int) for p in points)
            or not all(0 <= p <= 40 for p in points)):
        raise LayoutError(f"{here}: 'points' must be [upper arm, forearm] vertex counts (0-40), got {points!r}")
    if (upper is not None and points[0] < 2) or (fore is not None and points[1] < 2):
        raise LayoutError(f"{here}: each run needs at least 2 points")

    def fracs(span, k):
        return () if span is None else tuple(float(v) for v in np.linspace(span[0], span[1], k))

    return SleeveLayout(
        side=side,
        upper_fracs=fracs(upper, points[0]),
        fore_fracs=fracs(fore, points[1]),
        angle_rad=math.radians(_number(table, "around_deg", here, -23.0, -180.0, 180.0)),
        gap_m=_number(table, "gap_mm", here, 22.0, 2.0, 80.0) / 1000.0,
        natural_hz=_number(table, "sway_hz", here, 3.5, 0.5, 20.0),
        **_spreads(table, here, _LOOSE_SLEEVE),
    )


def _torso(table: dict, here: str) -> PanelLayout:
    _unknown(table, _TORSO_KEYS, here)
    path = table.get("path")
    ok = isinstance(path, list) and len(path) >= 1 and all(
        isinstance(v, list) and len(v) == 3 and all(not isinstance(x, bool) and isinstance(x, (int, float)) for x in v)
        for v in path)
    if not ok:
        raise LayoutError(f"{here}: 'path' must be a list of [height, azimuth_deg, gap_mm] vertices")
    p = np.array(path, float)
    if not (np.all((p[:, 0] >= 0.0) & (p[:, 0] <= 1.0)) and np.all(np.abs(p[:, 1]) <= 360.0)
            and np.all((p[:, 2] >= 2.0) & (p[:, 2] <= 120.0))):
        raise LayoutError(f"{here}: path heights must be 0-1, azimuths -360..360 degrees, gaps 2-120 mm")
    points = table.get("points", 8)
    if isinstance(points, bool) or not isinstance(points, int) or not 2 <= points <= 40:
        raise LayoutError(f"{here}: 'points' must be a whole number from 2 to 40, got {points!r}")
    if len(p) == 1:
        raise LayoutError(f"{here}: 'path' needs at least two vertices")
    # Resample evenly along the path (arc length on a torso of ~0.27 m height, ~0.15 m radius).
    step = np.hypot(np.diff(p[:, 0]) * 0.27, np.radians(np.diff(p[:, 1])) * 0.15)
    s = np.concatenate([[0.0], np.cumsum(step)])
    if s[-1] <= 0.01:
        raise LayoutError(f"{here}: the path is shorter than 1 cm")
    u = np.linspace(0.0, s[-1], points)
    col = [tuple(float(x) for x in np.interp(u, s, p[:, k])) for k in range(3)]
    return PanelLayout(
        heights_frac=col[0],
        azimuths_rad=tuple(math.radians(a) for a in col[1]),
        gaps_m=tuple(g / 1000.0 for g in col[2]),
        natural_hz=_number(table, "sway_hz", here, 2.0, 0.5, 20.0),
        **_spreads(table, here, _LOOSE_PANEL),
    )
