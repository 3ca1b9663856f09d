"""Upper body of a simulated wearer: capsules and spheres posed by joint angles.

Coordinates are metres in the wearer's standing frame: x forward, y to the
wearer's left, z up, origin on the floor between the feet.  Every function
works on whole time series at once: a pose is an array of shape ``(n, N_POSE)``
whose columns are named in ``POSE_FIELDS``.

Arm angles follow the usual shoulder convention of biomechanics (common
practice, no source): the *plane of elevation* says in which vertical plane
the arm is lifted (0 = straight forward, +pi/2 = out to the side, negative =
across the chest), the *elevation* how far it is lifted from hanging (0) to
overhead (pi), the *axial rotation* turns the upper arm about its own axis
(positive = inward, which turns the elbow's bending direction toward the
midline) and the *elbow flexion* bends the forearm (0 = straight).  Angles are
relative to the torso, so a bow carries the arms with it.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.optimize import least_squares

POSE_FIELDS: tuple[str, ...] = (
    "left_plane_rad",
    "left_elevation_rad",
    "left_rotation_rad",
    "left_elbow_rad",
    "right_plane_rad",
    "right_elevation_rad",
    "right_rotation_rad",
    "right_elbow_rad",
    "lean_rad",  # torso pitch about the hips, positive = forward
    "twist_rad",  # torso yaw relative to the hips, positive = toward the left
    "heading_rad",  # whole-body yaw in the room
    "bob_m",  # whole-body vertical displacement (walking)
    "shift_m",  # whole-body sideways displacement (weight shift, walking)
    "chest_expansion",  # relative change of torso radius (breathing)
)
POSE = {name: i for i, name in enumerate(POSE_FIELDS)}
N_POSE = len(POSE_FIELDS)

ARM_FIELDS = ("plane_rad", "elevation_rad", "rotation_rad", "elbow_rad")

CAPSULES: tuple[str, ...] = (
    "torso_left",
    "torso_right",
    "head",
    "left_upper_arm",
    "left_forearm",
    "left_hand",
    "right_upper_arm",
    "right_forearm",
    "right_hand",
)
CAPSULE = {name: i for i, name in enumerate(CAPSULES)}

# Conductor groups: the body is one conductor, but parts of one group screen
# each other, so the coupling model uses the nearest capsule of each group.
GROUPS: dict[str, tuple[int, ...]] = {
    "torso": (0, 1),
    "head": (2,),
    "left_arm": (3, 4, 5),
    "right_arm": (6, 7, 8),
}

# Arm side sign: +1 for the left arm (y > 0), -1 for the right arm.
SIDES = {"left": 1.0, "right": -1.0}


@dataclass(frozen=True)
class Wearer:
    """One simulated person: body size and movement style.

    Lengths follow body-segment proportions of stature as recalled from
    anthropometry tables (from memory: shoulder height ~0.82 H, upper arm
    ~0.186 H, forearm ~0.146 H, biacromial breadth ~0.23 H).
    """

    height_m: float  # stature, 1.55-1.95 m
    arm_scale: float  # arm length relative to the stature proportion
    girth_scale: float  # torso and limb thickness relative to average
    body_ground_f: float  # capacitance from body to room ground, F
    speed: float  # >1 moves faster: gesture durations are divided by it
    amplitude: float  # scale of gesture excursions from the neutral pose
    jitter_frac: float  # timing jitter of gesture key poses, fraction of duration
    sway_scale: float  # scale of small postural sway
    step_hz: float  # walking cadence, steps per second
    breath_hz: float  # breathing rate

    @property
    def scale(self) -> float:
        """Stature relative to a 1.75 m reference body."""
        return self.height_m / 1.75


def draw_wearer(rng: np.random.Generator) -> Wearer:
    """Draw a wearer's body and movement style from ``rng``."""
    return Wearer(
        height_m=float(rng.uniform(1.55, 1.95)),
        arm_scale=float(rng.uniform(0.95, 1.05)),
        girth_scale=float(rng.uniform(0.9, 1.15)),
        # Order of the 100 pF human-body model of ESD testing (JEDEC/ESDA JS-001);
        # varies with shoes and floor, so spread it.
        body_ground_f=float(rng.uniform(80e-12, 130e-12)),
        speed=float(rng.uniform(0.8, 1.25)),
        amplitude=float(rng.uniform(0.85, 1.1)),
        jitter_frac=float(rng.uniform(0.02, 0.06)),
        sway_scale=float(rng.uniform(0.6, 1.4)),
        step_hz=float(rng.uniform(1.6, 2.1)),
        breath_hz=float(rng.uniform(0.2, 0.33)),
    )


@dataclass(frozen=True)
class Dimensions:
    """Segment lengths and radii of one wearer, metres."""

    shoulder_z_m: float
    shoulder_y_m: float
    shoulder_x_m: float
    hip_z_m: float  # pivot of the torso lean
    torso_low_z_m: float  # lower end of the torso capsules' axes
    torso_high_z_m: float  # upper end of the torso capsules' axes
    torso_y_m: float  # lateral offset of each torso capsule's axis
    torso_radius_m: float
    head_z_m: float
    head_radius_m: float
    upper_arm_m: float
    upper_arm_radius_m: float
    forearm_m: float
    forearm_radius_m: float
    hand_offset_m: float  # wrist to hand centre
    hand_radius_m: float


def dimensions(wearer: Wearer) -> Dimensions:
    """Segment sizes of ``wearer`` from stature proportions (from memory, see Wearer)."""
    h = wearer.height_m
    s = wearer.scale
    g = wearer.girth_scale
    return Dimensions(
        shoulder_z_m=0.818 * h,
        shoulder_y_m=0.205 * s,
        shoulder_x_m=-0.01 * s,
        hip_z_m=0.53 * h,
        torso_low_z_m=0.52 * h,
        torso_high_z_m=0.79 * h,
        torso_y_m=0.055 * s,
        torso_radius_m=0.112 * s * g,
        head_z_m=0.925 * h,
        head_radius_m=0.095 * s,
        upper_arm_m=0.186 * h * wearer.arm_scale,
        upper_arm_radius_m=0.042 * s * g,
        forearm_m=0.146 * h * wearer.arm_scale,
        forearm_radius_m=0.035 * s * g,
        hand_offset_m=0.07 * s,
        hand_radius_m=0.047 * s,
    )


def neutral_pose(n: int = 1) -> np.ndarray:
    """Relaxed standing pose repeated ``n`` times, shape (n, N_POSE)."""
    pose = np.zeros((n, N_POSE))
    for side in ("left", "right"):
        pose[:, POSE[f"{side}_plane_rad"]] = np.pi / 2  # arms hang slightly out to the side
        pose[:, POSE[f"{side}_elevation_rad"]] = 0.12
        pose[:, POSE[f"{side}_rotation_rad"]] = 0.35
        pose[:, POSE[f"{side}_elbow_rad"]] = 0.2
    return pose


def _unit(v: np.ndarray) -> np.ndarray:
    return v / np.linalg.norm(v, axis=-1, keepdims=True)


def rotation_z(angle_rad: np.ndarray) -> np.ndarray:
    """Rotation matrices about z, shape (n, 3, 3)."""
    c, s = np.cos(angle_rad), np.sin(angle_rad)
    z, o = np.zeros_like(c), np.ones_like(c)
    return np.stack([np.stack([c, -s, z], -1), np.stack([s, c, z], -1), np.stack([z, z, o], -1)], -2)


def rotation_y(angle_rad: np.ndarray) -> np.ndarray:
    """Rotation matrices about y, shape (n, 3, 3); positive tips +z toward +x."""
    c, s = np.cos(angle_rad), np.sin(angle_rad)
    z, o = np.zeros_like(c), np.ones_like(c)
    return np.stack([np.stack([c, z, s], -1), np.stack([z, o, z], -1), np.stack([-s, z, c], -1)], -2)


@dataclass(frozen=True)
class ArmFrames:
    """One arm posed over time, torso-local coordinates, each array (n, 3)."""

    shoulder: np.ndarray
    elbow: np.ndarray
    wrist: np.ndarray
    hand: np.ndarray
    upper_axis: np.ndarray  # unit, shoulder -> elbow
    upper_front: np.ndarray  # unit, the side the elbow bends toward
    fore_axis: np.ndarray  # unit, elbow -> wrist
    fore_front: np.ndarray  # unit, the forearm's face on the inside of the bend
    medial: np.ndarray  # unit, normal of the bending plane, toward the midline at rest


def arm_frames(pose: np.ndarray, side: str, dims: Dimensions) -> ArmFrames:
    """Forward kinematics of one arm in torso-local coordinates."""
    sign = SIDES[side]
    plane = pose[:, POSE[f"{side}_plane_rad"]]
    elev = pose[:, POSE[f"{side}_elevation_rad"]]
    rot = pose[:, POSE[f"{side}_rotation_rad"]]
    elbow = pose[:, POSE[f"{side}_elbow_rad"]]
    n = pose.shape[0]
    zeros = np.zeros(n)
    # Horizontal direction of the elevation plane, mirrored so +pi/2 is outward.
    d = np.stack([np.cos(plane), sign * np.sin(plane), zeros], -1)
    ce, se = np.cos(elev)[:, None], np.sin(elev)[:, None]
    down = np.array([0.0, 0.0, -1.0])
    upper = down * ce + d * se
    # Bending direction at rest (arm hanging): forward, turned inward by the axial rotation.
    b0 = np.stack([np.cos(rot), -sign * np.sin(rot), zeros], -1)
    k = np.stack([d[:, 1], -d[:, 0], zeros], -1)  # d x z: rotation axis that lifts the arm
    kxb = np.cross(k, b0)
    kdb = np.sum(k * b0, -1, keepdims=True)
    front = b0 * ce + kxb * se + k * kdb * (1.0 - ce)
    cb, sb = np.cos(elbow)[:, None], np.sin(elbow)[:, None]
    fore = upper * cb + front * sb
    fore_front = -upper * sb + front * cb
    medial = sign * np.cross(upper, front)
    shoulder = np.broadcast_to(np.array([dims.shoulder_x_m, sign * dims.shoulder_y_m, dims.shoulder_z_m]), (n, 3))
    el = shoulder + dims.upper_arm_m * upper
    wr = el + dims.forearm_m * fore
    hand = wr + dims.hand_offset_m * fore
    return ArmFrames(np.array(shoulder), el, wr, hand, upper, front, fore, fore_front, medial)


@dataclass(frozen=True)
class BodyGeometry:
    """A posed body over n samples.

    ``ends`` (n, len(CAPSULES), 2, 3) are capsule axis end points in the world
    frame (a sphere has both ends equal), ``radii_m`` (n, len(CAPSULES)).
    ``rotation`` (n, 3, 3) and ``offset`` (n, 3) map torso-local points to the
    world: world = rotation @ (local - pivot) + pivot + offset.
    ``gravity_local`` (n, 3) is the unit gravity vector in torso-local axes.
    """

    ends: np.ndarray
    radii_m: np.ndarray
    rotation: np.ndarray
    offset: np.ndarray
    pivot: np.ndarray
    gravity_local: np.ndarray
    left: ArmFrames
    right: ArmFrames

    def to_world(self, local: np.ndarray) -> np.ndarray:
        """Map torso-local points (n, ..., 3) to the world frame."""
        return local_to_world(local, self.rotation, self.pivot, self.offset)


def local_to_world(local: np.ndarray, rotation: np.ndarray, pivot: np.ndarray, offset: np.ndarray) -> np.ndarray:
    """world = rotation @ (local - pivot) + pivot + offset, for points (n, ..., 3)."""
    shape = local.shape
    flat = local.reshape(shape[0], -1, 3) - pivot
    world = np.empty_like(flat)
    for i in range(3):  # explicit sums: faster than einsum for 3x3 matrices
        world[..., i] = (rotation[:, i, 0, None] * flat[..., 0] + rotation[:, i, 1, None] * flat[..., 1]
                         + rotation[:, i, 2, None] * flat[..., 2] + (pivot[i] + offset[:, i, None]))
    return world.reshape(shape)


def pose_body(pose: np.ndarray, dims: Dimensions) -> BodyGeometry:
    """Pose the body for every row of ``pose`` (n, N_POSE)."""
    pose = np.atleast_2d(pose)
    n = pose.shape[0]
    left = arm_frames(pose, "left", dims)
    right = arm_frames(pose, "right", dims)
    local = np.empty((n, len(CAPSULES), 2, 3))
    for i, sign in ((0, 1.0), (1, -1.0)):
        local[:, i, 0] = (0.0, sign * dims.torso_y_m, dims.torso_low_z_m)
        local[:, i, 1] = (0.0, sign * dims.torso_y_m, dims.torso_high_z_m)
    local[:, 2, :] = (0.0, 0.0, dims.head_z_m)
    for base, arm in ((3, left), (6, right)):
        local[:, base, 0], local[:, base, 1] = arm.shoulder, arm.elbow
        local[:, base + 1, 0], local[:, base + 1, 1] = arm.elbow, arm.wrist
        local[:, base + 2, 0] = local[:, base + 2, 1] = arm.hand
    radii = np.empty((n, len(CAPSULES)))
    radii[:, 0] = radii[:, 1] = dims.torso_radius_m * (1.0 + pose[:, POSE["chest_expansion"]])
    radii[:, 2] = dims.head_radius_m
    radii[:, [3, 6]] = dims.upper_arm_radius_m
    radii[:, [4, 7]] = dims.forearm_radius_m
    radii[:, [5, 8]] = dims.hand_radius_m
    rotation = rotation_z(pose[:, POSE["heading_rad"]]) @ rotation_y(pose[:, POSE["lean_rad"]]) @ rotation_z(
        pose[:, POSE["twist_rad"]]
    )
    offset = np.zeros((n, 3))
    offset[:, 1] = pose[:, POSE["shift_m"]]
    offset[:, 2] = pose[:, POSE["bob_m"]]
    pivot = np.array([0.0, 0.0, dims.hip_z_m])
    # Gravity seen from the torso: R^T g.
    gravity_local = np.einsum("nji,j->ni", rotation, np.array([0.0, 0.0, -1.0]))
    ends = local_to_world(local, rotation, pivot, offset)
    return BodyGeometry(ends, radii, rotation, offset, pivot, gravity_local, left, right)


def torso_surface_local(height_m: np.ndarray, azimuth_rad: np.ndarray, dims: Dimensions,
                        expansion: np.ndarray | float = 0.0) -> tuple[np.ndarray, np.ndarray]:
    """Points on the torso surface and their outward horizontal directions, torso-local.

    The torso cross-section is the union of two circles (the two torso
    capsules); a ray from the midline at ``azimuth_rad`` (0 = front, +pi/2 =
    left) leaves it at the farther of its two circle exits.
    Returns (points (..., 3), directions (..., 3)).
    """
    height_m, azimuth_rad = np.broadcast_arrays(np.asarray(height_m, float), np.asarray(azimuth_rad, float))
    r = dims.torso_radius_m * (1.0 + np.asarray(expansion))
    dx, dy = np.cos(azimuth_rad), np.sin(azimuth_rad)
    reach = np.zeros_like(dx)
    for cy in (dims.torso_y_m, -dims.torso_y_m):
        proj = dy * cy  # ray direction . circle centre
        reach = np.maximum(reach, proj + np.sqrt(np.maximum(proj**2 - cy**2 + r**2, 0.0)))
    direction = np.stack([dx, dy, np.zeros_like(dx)], -1)
    points = np.stack([reach * dx, reach * dy, height_m], -1)
    return points, direction


# Joint limits used when solving for a reach, radians (common practice, no source:
# rough ranges of a relaxed adult shoulder and elbow).
ARM_LOWER = np.array([-1.6, -0.8, -1.2, 0.0])
ARM_UPPER = np.array([2.2, 3.0, 1.8, 2.6])


def arm_columns(side: str) -> list[int]:
    """Pose columns of one arm, in ARM_FIELDS order."""
    return [POSE[f"{side}_{f}"] for f in ARM_FIELDS]


def solve_reach(target_local, side: str, dims: Dimensions, guess, base_pose=None,
                regularisation_m_per_rad: float = 0.02, clearance_m: float = 0.015) -> np.ndarray:
    """Arm angles that put one hand's centre at ``target_local`` (torso-local, m).

    An arm has four angles for three coordinates, so the solution nearest the
    ``guess`` (plane, elevation, rotation, elbow) is preferred, and the
    forearm is kept ``clearance_m`` outside the torso (the jacket is in
    between).  Returns the four angles (radians) in ARM_FIELDS order.
    """
    pose = neutral_pose(1) if base_pose is None else np.array(base_pose, float).reshape(1, N_POSE)
    cols = arm_columns(side)
    target = np.asarray(target_local, float)
    guess = np.clip(np.asarray(guess, float), ARM_LOWER, ARM_UPPER)
    along = np.linspace(0.0, 1.0, 6)[:, None]

    def residuals(angles):  # (m, 4) angle sets at once: one vectorised pass
        p = np.repeat(pose, angles.shape[0], 0)
        p[:, cols] = angles
        arm = arm_frames(p, side, dims)
        fore = arm.elbow[:, None] + along[None] * (arm.wrist - arm.elbow)[:, None]  # (m, 6, 3)
        # Distance to each torso capsule's vertical axis segment.
        z = np.clip(fore[..., 2], dims.torso_low_z_m, dims.torso_high_z_m)
        dist = np.minimum(*[np.sqrt(fore[..., 0] ** 2 + (fore[..., 1] - cy) ** 2 + (fore[..., 2] - z) ** 2)
                            for cy in (dims.torso_y_m, -dims.torso_y_m)])
        inside = np.maximum(dims.torso_radius_m + dims.forearm_radius_m + clearance_m - dist, 0.0)
        return np.concatenate([arm.hand - target, regularisation_m_per_rad * (angles - guess), inside], 1)

    def residual(angles):
        return residuals(angles[None])[0]

    def jacobian(angles):  # forward differences, all four columns in one pass
        h = 1e-6
        r = residuals(np.vstack([angles, angles + h * np.eye(4)]))
        return ((r[1:] - r[0]) / h).T

    return least_squares(residual, guess, jac=jacobian, bounds=(ARM_LOWER, ARM_UPPER), xtol=1e-10).x
