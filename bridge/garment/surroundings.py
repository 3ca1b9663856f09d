"""What else comes near the jacket on stage: a second person, a grounded metal stand, a table.

A *scene* is an array (n, N_SCENE) of where these objects are, in the room's
frame (the wearer's standing frame of ``body``: x forward, y left, z up, metres);
an object that is not there sits ``FAR_M`` away and costs nothing.

Each object adds capacitance from a cable to room ground, in parallel with the
path through the wearer's body, so it lowers the frequency of the cables on
the side it comes near.  Approximations (modelling choices, not handbook results):

* the second person is one upright cylinder (a torso, radius 0.14 m, 0.95-1.45 m
  above the floor) coupled to ground through the human-body-model order of
  100 pF (JEDEC/ESDA JS-001), in series with the cable-to-person capacitance;
* the stand is a grounded vertical tube (radius 20 mm, floor to 2 m);
* the table is a grounded conducting half-plane (its top, 0.74 m high, from
  memory of common table heights) whose front edge faces the wearer; a cable
  piece at distance h from the top or the edge sees the wire-over-plane
  capacitance 2 pi eps0 / arccosh(h / a);
* every cable piece uses the same per-length formulas as the body coupling
  (``coupling``), with a longer taper reach (``OBJECT_REACH_M``), because a
  large object outside the body is not screened the way the far side of the
  body is.  The objects do not couple to the wearer's body in this model.
"""

from __future__ import annotations

import numpy as np

from .coupling import (
    CONTACT_GAP_M,
    WIRE_RADIUS_M,
    _piece_capacitance_f_per_m,
    series_capacitance_f,
    taper,
    wire_over_plane_capacitance_f_per_m,
)

SCENE_FIELDS: tuple[str, ...] = (
    "partner_x_m", "partner_y_m",  # axis of the second person's torso
    "stand_x_m", "stand_y_m",  # axis of the metal stand
    "table_edge_x_m",  # distance of the table's front edge ahead of the wearer's axis
    "table_heading_rad",  # direction the table is met in (the wearer's heading then)
)
SCENE = {name: i for i, name in enumerate(SCENE_FIELDS)}
N_SCENE = len(SCENE_FIELDS)
FAR_M = 100.0

PARTNER_RADIUS_M = 0.14
PARTNER_Z_M = (0.95, 1.45)
PARTNER_GROUND_F = 100e-12  # human-body-model order, as for the wearer
STAND_RADIUS_M = 0.02
STAND_Z_M = (0.0, 2.0)
TABLE_TOP_Z_M = 0.74
OBJECT_REACH_M = 0.4


def empty_scene(n: int) -> np.ndarray:
    """Nothing near: every object FAR_M away, shape (n, N_SCENE)."""
    return np.full((n, N_SCENE), FAR_M)


def _capsule(x, y, z_span, radius):
    n = x.shape[0]
    ends = np.empty((n, 1, 2, 3))
    ends[:, 0, :, 0] = x[:, None]
    ends[:, 0, :, 1] = y[:, None]
    ends[:, 0, 0, 2], ends[:, 0, 1, 2] = z_span
    return ends, np.full((n, 1), radius)


def surroundings_capacitance_f(points_m: np.ndarray, scene: np.ndarray, wire_radius_m: float = WIRE_RADIUS_M,
                               contact_gap_m: float = CONTACT_GAP_M, reach_m: float = OBJECT_REACH_M) -> np.ndarray:
    """Capacitance (n,) from a cable polyline (n, K, 3) to room ground through the scene's objects, F."""
    mid = 0.5 * (points_m[:, 1:] + points_m[:, :-1])
    length = np.linalg.norm(points_m[:, 1:] - points_m[:, :-1], axis=-1)  # (n, K-1)
    total = np.zeros(points_m.shape[0])
    one = {"object": (0,)}
    partner = _capsule(scene[:, SCENE["partner_x_m"]], scene[:, SCENE["partner_y_m"]], PARTNER_Z_M, PARTNER_RADIUS_M)
    c_partner = np.sum(_piece_capacitance_f_per_m(mid, *partner, wire_radius_m, contact_gap_m, reach_m, one) * length,
                       axis=1)
    total += series_capacitance_f(c_partner, PARTNER_GROUND_F)
    stand = _capsule(scene[:, SCENE["stand_x_m"]], scene[:, SCENE["stand_y_m"]], STAND_Z_M, STAND_RADIUS_M)
    total += np.sum(_piece_capacitance_f_per_m(mid, *stand, wire_radius_m, contact_gap_m, reach_m, one) * length,
                    axis=1)
    edge = scene[:, SCENE["table_edge_x_m"]][:, None]
    if np.any(edge < FAR_M):
        # Distance from each piece to the table (top and front edge), then the image formula.
        h = scene[:, SCENE["table_heading_rad"]][:, None]
        ahead = np.cos(h) * mid[..., 0] + np.sin(h) * mid[..., 1]  # along the table's facing direction
        gap = np.hypot(np.maximum(edge - ahead, 0.0), np.maximum(mid[..., 2] - TABLE_TOP_Z_M, 0.0)) - wire_radius_m
        height = np.maximum(gap, contact_gap_m) + wire_radius_m
        per_m = wire_over_plane_capacitance_f_per_m(height, wire_radius_m) * taper(gap, reach_m)
        total += np.sum(per_m * length, axis=1)
    return total
