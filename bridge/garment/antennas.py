"""Where the antenna cables lie: a loose jacket hanging on the posed body.

A sleeve cable runs along the front-outer face of a loose cloth tube around
the arm.  The tube hangs on the limb under gravity (its centre drops by a
fraction of the gap, so the upper side of a raised sleeve rests on the arm),
and slides along the arm toward the shoulder when the arm is raised.

A front cable runs down a front panel, from the chest to the belly.  The
panel hangs from the shoulders: upright it rests near the chest and stands
off the belly; in a forward bow it falls away from the body in proportion to
the distance below the shoulders.

On top of this static drape, every cable point lags the body like a damped
spring (the cloth sways when the wearer walks, turns or moves fast).  Taking
the jacket off and putting it on again (a new *session*) shifts each cable
by a few millimetres to centimetres: see ``draw_fit``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import signal

from .body import Dimensions, Wearer, torso_surface_local
from .coupling import CONTACT_GAP_M

ANTENNA_ORDER: tuple[str, ...] = ("left_sleeve", "right_sleeve", "left_front", "right_front", "collar", "hem", "back")

SLEEVE_SAG = 0.6  # fraction of the gap by which a horizontal sleeve drops onto the arm
SLEEVE_SLIDE_M = 0.02  # how far the sleeve slides toward the shoulder per unit of raised axis
PANEL_HANG = 0.7  # fraction of the lean-induced fall-away that the panel really shows
LAG_LIMIT_M = 0.04  # cloth cannot swing further than this from where it hangs


@dataclass(frozen=True)
class SleeveLayout:
    """A cable along a sleeve; fractions measured from the shoulder / the elbow."""

    side: str
    upper_fracs: tuple[float, ...]
    fore_fracs: tuple[float, ...]
    angle_rad: float  # around the limb from its front face toward the midline (negative: outward)
    gap_m: float  # cloth gap around the limb for an average girth
    natural_hz: float = 3.5  # cloth sway resonance
    damping: float = 0.5  # cloth is well damped by air and friction
    # How differently it sits each time the jacket is put on (one standard deviation; ``draw_fit``).
    turn_spread_rad: float = 0.15  # about the arm: a loose sleeve turns freely
    gap_spread_m: float = 0.004    # standing off the arm
    slide_spread_m: float = 0.012  # along the arm


@dataclass(frozen=True)
class PanelLayout:
    """A cable on the torso part of the jacket.

    ``heights_frac`` run along the torso axis (0 = hips, 1 = base of neck),
    ``azimuths_rad`` around it (0 = front, +pi/2 = left), ``gaps_m`` the cloth
    gap in front of each point for an average girth, upright.
    """

    heights_frac: tuple[float, ...]
    azimuths_rad: tuple[float, ...]
    gaps_m: tuple[float, ...]
    natural_hz: float = 2.0
    damping: float = 0.5
    turn_spread_rad: float = 0.05  # around the torso: a panel is held by the shoulders
    gap_spread_m: float = 0.004
    slide_spread_m: float = 0.012  # up the torso


def _lin(a: float, b: float, n: int) -> tuple[float, ...]:
    return tuple(float(v) for v in np.linspace(a, b, n))


LAYOUTS: dict[str, SleeveLayout | PanelLayout] = {
    "left_sleeve": SleeveLayout("left", _lin(0.3, 0.95, 4), _lin(0.08, 0.95, 6), -0.4, 0.022),
    "right_sleeve": SleeveLayout("right", _lin(0.3, 0.95, 4), _lin(0.08, 0.95, 6), -0.4, 0.022),
    "left_front": PanelLayout(_lin(0.8, 0.15, 8), (0.55,) * 8, _lin(0.012, 0.035, 8)),
    "right_front": PanelLayout(_lin(0.8, 0.15, 8), (-0.55,) * 8, _lin(0.012, 0.035, 8)),
    "collar": PanelLayout((1.0,) * 7, _lin(-1.0, 1.0, 7), (0.02,) * 7),
    "hem": PanelLayout((0.0,) * 7, _lin(-0.9, 0.9, 7), (0.04,) * 7),
    "back": PanelLayout((0.75,) * 7, _lin(np.pi - 0.7, np.pi + 0.7, 7), (0.015,) * 7),
}


@dataclass(frozen=True)
class Fit:
    """How one cable sits in one session, relative to its nominal place."""

    slide_m: float  # along the limb (sleeves) or up the torso (panels)
    turn_rad: float  # around the limb (sleeves) or around the torso (panels)
    gap_m: float  # extra cloth gap (cuffs closed, zip open ...)


def draw_fit(rng: np.random.Generator, names, cables=None) -> dict[str, Fit]:
    """Draw each cable's placement for one session (jacket put on anew).

    ``cables`` maps names to their layouts (default: the built-in ``LAYOUTS``); each
    cable's ``*_spread_*`` fields are the standard deviations of its slide, turn and gap
    (the built-in values are our guesses, not measured on cloth). Draws are clipped to
    ±30 mm, ±0.4 rad and ±8 mm. The same generator state gives the same unit draws
    whatever the spreads, so halving a spread halves every unclipped placement.
    """
    cables = LAYOUTS if cables is None else cables
    fits = {}
    for name in names:
        c = cables[name]
        fits[name] = Fit(
            slide_m=float(np.clip(rng.normal(0.0, c.slide_spread_m), -0.03, 0.03)),
            turn_rad=float(np.clip(rng.normal(0.0, c.turn_spread_rad), -0.4, 0.4)),
            gap_m=float(np.clip(rng.normal(0.0, c.gap_spread_m), -0.008, 0.008)),
        )
    return fits


def _sleeve_points(layout: SleeveLayout, fit: Fit, geo, dims: Dimensions, wearer: Wearer):
    arm = geo.left if layout.side == "left" else geo.right
    g = geo.gravity_local
    gap = max(layout.gap_m + fit.gap_m + (1.0 - wearer.girth_scale) * 0.04, CONTACT_GAP_M)
    angle = layout.angle_rad + fit.turn_rad
    points, normals = [], []
    for start, axis, front, length, radius, fracs in (
        (arm.shoulder, arm.upper_axis, arm.upper_front, dims.upper_arm_m, dims.upper_arm_radius_m, layout.upper_fracs),
        (arm.elbow, arm.fore_axis, arm.fore_front, dims.forearm_m, dims.forearm_radius_m, layout.fore_fracs),
    ):
        g_axis = np.sum(g * axis, -1, keepdims=True)
        sag = SLEEVE_SAG * gap * (g - g_axis * axis)  # tube centre drops onto the limb
        slide = fit.slide_m + SLEEVE_SLIDE_M * (g_axis - 1.0)  # toward the shoulder when raised
        normal = np.cos(angle) * front + np.sin(angle) * arm.medial
        for frac in fracs:
            centre = start + (frac * length + slide) * axis + sag
            points.append(centre + (radius + gap) * normal)
            normals.append(normal)
    return np.stack(points, 1), np.stack(normals, 1)


def _panel_points(layout: PanelLayout, fit: Fit, geo, dims: Dimensions, wearer: Wearer):
    n = geo.gravity_local.shape[0]
    span = dims.torso_high_z_m - dims.torso_low_z_m
    z = dims.torso_low_z_m + np.asarray(layout.heights_frac) * span + fit.slide_m
    az = np.asarray(layout.azimuths_rad) + fit.turn_rad
    surface, direction = torso_surface_local(z, az, dims)  # (K, 3)
    rest_gap = np.asarray(layout.gaps_m) + fit.gap_m + (1.0 - wearer.girth_scale) * 0.08
    below = dims.shoulder_z_m - z  # cloth length hanging above each point
    # Gravity along the outward direction makes the cloth stand off the body.
    fall = PANEL_HANG * below[None, :] * (geo.gravity_local @ direction.T)  # (n, K)
    gap = np.maximum(rest_gap[None, :] + fall, CONTACT_GAP_M)
    points = surface[None] + gap[..., None] * direction[None]
    return points, np.broadcast_to(direction, (n,) + direction.shape)


def antenna_points_local(name, fit: Fit, geo, dims: Dimensions, wearer: Wearer):
    """Static (un-lagged) cable polyline in torso-local axes.

    ``name`` is a built-in cable's name or a ``SleeveLayout`` / ``PanelLayout``.
    Returns (points (n, K, 3), outward normals (n, K, 3)).
    """
    layout = LAYOUTS[name] if isinstance(name, str) else name
    if isinstance(layout, SleeveLayout):
        return _sleeve_points(layout, fit, geo, dims, wearer)
    return _panel_points(layout, fit, geo, dims, wearer)


def lag_filter(natural_hz: float, damping: float, rate_hz: float):
    """Digital filter from a cable's anchor position to its lag displacement.

    The cloth point x follows its anchor p as a damped spring,
    x'' = -w^2 (x - p) - 2 zeta w (x' - p'), so the displacement e = x - p
    obeys E(s) / P(s) = -s^2 / (s^2 + 2 zeta w s + w^2) (a second-order
    high-pass).  Discretised with the bilinear transform.  Returns (b, a).
    """
    w = 2.0 * np.pi * natural_hz
    return signal.bilinear([-1.0, 0.0, 0.0], [1.0, 2.0 * damping * w, w * w], fs=rate_hz)


def lag_displacement(anchors_m: np.ndarray, b, a, state):
    """Apply the cloth lag to anchor positions (n, K, 3).

    ``state`` is the filter state (2, K*3) carried between calls.  Returns
    (displacement (n, K, 3) softly limited to LAG_LIMIT_M, new state).
    """
    n, k, _ = anchors_m.shape
    e, state = signal.lfilter(b, a, anchors_m.reshape(n, k * 3), axis=0, zi=state)
    e = e.reshape(n, k, 3)
    size = np.linalg.norm(e, axis=-1, keepdims=True)
    return e / np.sqrt(1.0 + (size / LAG_LIMIT_M) ** 2), state


def lag_initial_state(b, a, anchors_m: np.ndarray):
    """Filter state for cloth hanging still at ``anchors_m`` (K, 3)."""
    return signal.lfilter_zi(b, a)[:, None] * anchors_m.reshape(1, -1)
