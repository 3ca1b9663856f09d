"""Capacitance between a textile antenna and the wearer's body.

The antenna is a thin round conductor (a cable sewn into the cloth); the body
is a set of capsules (see ``body``).  Each short piece of antenna sees each
nearby body part locally as a parallel cylinder, so its capacitance per unit
length comes from the two-cylinder formula of electrostatics handbooks

    C' = 2 pi eps0 / arccosh((D^2 - a^2 - b^2) / (2 a b))     [F/m]

with D the distance between the axes, a and b the radii.  Summing C' times the
piece's length over the antenna and over body parts gives the antenna-to-body
capacitance.  Two corrections make the sum behave on a body:

* the gap is clipped to ``contact_gap_m`` (the cloth between skin and cable),
  so a touch saturates instead of diverging;
* the 2-D formula decays only logarithmically, which is wrong for finite
  parts far away, and a nearer part screens the ones behind it; so each part
  group (torso, head, each arm) contributes through its strongest (nearest) capsule only,
  weighted by a taper (1 - gap/reach)^2 that reaches zero at ``reach_m``.
  This taper is a modelling choice of this simulator, not a handbook result.

The body couples to room ground through ``body_ground_f`` (order 100 pF), in
series with the antenna-to-body capacitance.
"""

from __future__ import annotations

import numpy as np

from .body import GROUPS

EPSILON_0_F_PER_M = 8.8541878128e-12  # vacuum permittivity, CODATA 2018

WIRE_RADIUS_M = 0.75e-3  # conductive textile cable, about 1.5 mm across
CONTACT_GAP_M = 1.5e-3  # cloth and cable insulation between skin and conductor at a touch
REACH_M = 0.15  # beyond this gap a body part no longer couples (screened, finite)


def parallel_cylinders_capacitance_f_per_m(separation_m, radius_a_m, radius_b_m):
    """Capacitance per unit length between two parallel round conductors, F/m.

    ``separation_m`` is the distance between the axes (must exceed the sum of
    the radii).  Formula: C' = 2 pi eps0 / arccosh((D^2 - a^2 - b^2) / (2ab)),
    the standard result for two parallel cylinders of unequal radii in any
    electrostatics or transmission-line handbook.
    """
    d = np.asarray(separation_m, float)
    a = np.asarray(radius_a_m, float)
    b = np.asarray(radius_b_m, float)
    return 2.0 * np.pi * EPSILON_0_F_PER_M / np.arccosh((d * d - a * a - b * b) / (2.0 * a * b))


def wire_over_plane_capacitance_f_per_m(height_m, radius_m):
    """Capacitance per unit length of a round wire over a conducting plane, F/m.

    ``height_m`` is the axis height above the plane.  Formula:
    C' = 2 pi eps0 / arccosh(h / a) (method of images; handbook result).
    It is the two-cylinder formula with the plane as the mirror wire.
    """
    return 2.0 * np.pi * EPSILON_0_F_PER_M / np.arccosh(np.asarray(height_m, float) / np.asarray(radius_m, float))


def series_capacitance_f(c1_f, c2_f):
    """Two capacitors in series, F: c1 c2 / (c1 + c2)."""
    c1_f = np.asarray(c1_f, float)
    c2_f = np.asarray(c2_f, float)
    return c1_f * c2_f / (c1_f + c2_f)


def point_capsule_distance_m(points, ends):
    """Distance from points to capsule axes (line segments), metres.

    ``points`` (n, K, 3); ``ends`` (n, M, 2, 3).  Returns (M, n, K): capsule
    first, so that per-capsule results are contiguous slices.
    """
    # Coordinates are handled one at a time (numpy reduces a length-3 axis slowly),
    # in single precision: a micrometre is plenty and it halves memory traffic.
    f32 = np.float32
    p = [points[..., i].astype(f32)[None] for i in range(3)]  # (1, n, K)
    a = [ends[:, :, 0, i].T.astype(f32)[..., None] for i in range(3)]  # (M, n, 1)
    ab = [ends[:, :, 1, i].T.astype(f32)[..., None] - a[i] for i in range(3)]
    ab2 = ab[0] * ab[0] + ab[1] * ab[1] + ab[2] * ab[2]
    inv = np.divide(f32(1.0), ab2, out=np.zeros_like(ab2), where=ab2 > 0.0)  # spheres: t = 0
    ap = [p[i] - a[i] for i in range(3)]  # (M, n, K)
    t = (ap[0] * ab[0] + ap[1] * ab[1] + ap[2] * ab[2]) * inv
    np.clip(t, f32(0.0), f32(1.0), out=t)
    d2 = np.zeros_like(t)
    for i in range(3):
        d = ap[i] - t * ab[i]
        d2 += d * d
    return np.sqrt(d2)


def taper(gap_m, reach_m=REACH_M):
    """Weight of a part at ``gap_m``: (1 - gap/reach)^2, zero beyond ``reach_m``."""
    g = np.asarray(gap_m)
    g = g if g.dtype.kind == "f" else g.astype(float)  # keeps single precision when given
    w = np.clip(1.0 - g / g.dtype.type(reach_m), 0.0, 1.0)
    return w * w


def antenna_body_capacitance_f(points_m, ends_m, radii_m, wire_radius_m=WIRE_RADIUS_M,
                               contact_gap_m=CONTACT_GAP_M, reach_m=REACH_M, groups=None):
    """Capacitance between a polyline antenna and the body, F.

    ``points_m`` (n, K, 3) antenna polyline vertices; ``ends_m`` (n, M, 2, 3)
    and ``radii_m`` (n, M) the body capsules.  Each of the K-1 pieces is
    evaluated at its midpoint.  Returns (n,).
    """
    groups = GROUPS if groups is None else groups
    mid = 0.5 * (points_m[:, 1:] + points_m[:, :-1])
    step = [points_m[:, 1:, i] - points_m[:, :-1, i] for i in range(3)]
    length = np.sqrt(step[0] * step[0] + step[1] * step[1] + step[2] * step[2])  # (n, K-1)
    radii_m = np.asarray(radii_m, float)
    per_piece = np.zeros(length.shape)  # capacitance per unit length of each piece, F/m
    # Short time windows let _within_reach skip the parts that stay far away.
    for k in range(0, mid.shape[0], PRUNE_ROWS):
        w = slice(k, k + PRUNE_ROWS)
        per_piece[w] = _piece_capacitance_f_per_m(mid[w], ends_m[w], radii_m[w], wire_radius_m, contact_gap_m,
                                                  reach_m, groups)
    weighted = per_piece * length
    total = weighted[:, 0].copy()
    for k in range(1, weighted.shape[1]):  # fixed order: same result however time is blocked
        total += weighted[:, k]
    return total


PRUNE_ROWS = 128  # rows per pruning window: short enough to skip far parts, long enough to be cheap


def _piece_capacitance_f_per_m(mid, ends_m, radii_m, wire_radius_m, contact_gap_m, reach_m, groups):
    """Capacitance per unit length (n, K) of antenna pieces centred at ``mid`` (n, K, 3)."""
    out = np.zeros(mid.shape[:2])
    near = _within_reach(mid, ends_m, radii_m, reach_m + wire_radius_m)
    if not near.any():
        return out
    index = np.flatnonzero(near)
    axis_dist = point_capsule_distance_m(mid, ends_m[:, index])  # (M', n, K)
    radii = radii_m[:, index].T.astype(np.float32)[..., None]  # (M', n, 1)
    gap = axis_dist - radii - np.float32(wire_radius_m)
    # Clipped gap -> axis separation of the equivalent parallel cylinders.
    sep = np.maximum(gap, np.float32(contact_gap_m)) + radii + np.float32(wire_radius_m)
    c_per_m = _cylinders_f32(sep, wire_radius_m, radii) * taper(gap, reach_m)
    slot = {m: i for i, m in enumerate(index)}
    for members in groups.values():
        rows = [slot[m] for m in members if m in slot]
        if rows:  # within a group the strongest (nearest) part screens the others
            out += np.maximum.reduce(c_per_m[rows], axis=0) if len(rows) > 1 else c_per_m[rows[0]]
    return out


def _cylinders_f32(separation_m, radius_a_m, radius_b_m):
    """parallel_cylinders_capacitance_f_per_m in single precision (same formula)."""
    f32 = np.float32
    a = f32(radius_a_m)
    x = (separation_m * separation_m - a * a - radius_b_m * radius_b_m) / (f32(2.0) * a * radius_b_m)
    return f32(2.0 * np.pi * EPSILON_0_F_PER_M) / np.arccosh(x)


def _within_reach(points, ends, radii, reach_m):
    """Which capsules (M,) come within ``reach_m`` of any point at any time.

    Compares axis-aligned bounding boxes over the whole block; a skipped
    capsule would only have contributed zero (the taper), so this is exact.
    """
    lo_p, hi_p = points.min(axis=0).min(axis=0), points.max(axis=0).max(axis=0)  # (3,)
    pad = radii.max(axis=0)[:, None] + reach_m  # (M, 1)
    lo_c = ends.min(axis=0).min(axis=1) - pad  # (M, 3)
    hi_c = ends.max(axis=0).max(axis=1) + pad
    return np.all((lo_c <= hi_p) & (hi_c >= lo_p), axis=-1)
