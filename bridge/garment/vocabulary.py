"""What the simulated dancer does: gestures, held postures and null activity.

Every movement is a pose trajectory (see ``body.POSE_FIELDS``).  Gestures and
postures are *key poses* at fractions of their duration, blended from and back
to the wearer's ongoing base pose with minimum-jerk steps; key poses that put
a hand on the body are solved per wearer (``body.solve_reach``), the others
are fixed joint angles scaled by the wearer's amplitude.  Null activity is the
base pose itself (standing: postural sway and breathing), plus arm swing,
bobbing and turning (walking) or brief reaches to the jacket (fidgeting).

State that carries from one script item to the next (the sway filter, the
stride phase, the heading) lives in ``MotionState`` and is passed in and out.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np
from scipy import signal

from .antennas import LAYOUTS, Fit, SleeveLayout, antenna_points_local
from .body import (
    POSE,
    Dimensions,
    Wearer,
    arm_columns,
    neutral_pose,
    pose_body,
    solve_reach,
    torso_surface_local,
)

GESTURES: dict[str, str] = {
    "raise_right": "gesture",
    "raise_left": "gesture",
    "sweep_across": "gesture",
    "tap_left_sleeve": "gesture",
    "push_forward": "gesture",
    "bow": "gesture",
    "arms_crossed": "posture",
    "hands_on_hips": "posture",
    "hand_on_heart": "posture",
}
"""The demo vocabulary (the one ``mappings/demo.toml`` maps): 6 gestures, 3 postures."""

NULL_ACTIVITIES: tuple[str, ...] = ("standing", "walking", "fidgeting")
"""The demo's null activity: what the wearer does between cues."""

FULL_GESTURES: dict[str, str] = {
    **GESTURES,
    "tap_right_sleeve": "gesture",
    "clap": "gesture",
    "open_arms": "gesture",
    "wave_right": "gesture",
    "arms_up": "posture",
    "hands_clasped": "posture",
}
"""Everything the simulated wearer can perform on cue: 10 gestures, 5 postures."""

SURROUNDINGS: tuple[str, ...] = ("partner_near", "metal_near", "leaning_on_table")
"""Null activities that bring something else near the jacket (see ``coupling.surroundings_capacitance_f``)."""

FULL_NULL_ACTIVITIES: tuple[str, ...] = NULL_ACTIVITIES + ("talking", "sitting") + SURROUNDINGS
"""All null kinds: standing, walking, adjusting the jacket (fidgeting), talking with the
hands, sitting down on a chair, and the disturbances met on stage: a second person coming
close, a grounded metal stand, a table leaned on."""

# Typical length of each dynamic gesture for a wearer of speed 1, s.
GESTURE_BASE_S = {
    "raise_right": 1.4,
    "raise_left": 1.4,
    "sweep_across": 1.6,
    "tap_left_sleeve": 1.7,
    "push_forward": 1.5,
    "bow": 1.8,
    "tap_right_sleeve": 1.7,
    "clap": 1.3,
    "open_arms": 1.7,
    "wave_right": 1.9,
}
GESTURE_RANGE_S = (0.8, 2.0)  # every drawn dynamic gesture lasts within this range
POSTURE_HOLD_S = (2.0, 6.0)  # how long a posture is held
POSTURE_MOVE_S = (0.5, 0.8)  # moving into, and out of, a posture (each)
NULL_DEFAULT_S = (2.0, 6.0)  # drawn length of a null activity given without a duration

SWAY_CUTOFF_HZ = 0.5
# Standard deviation of postural sway per pose column, for sway_scale 1 (rad or m).
SWAY_STD = {
    "lean_rad": 0.01,
    "twist_rad": 0.015,
    "shift_m": 0.006,
    "left_elevation_rad": 0.025,
    "right_elevation_rad": 0.025,
    "left_rotation_rad": 0.03,
    "right_rotation_rad": 0.03,
    "left_elbow_rad": 0.03,
    "right_elbow_rad": 0.03,
}
BREATH_DEPTH = 0.008  # relative change of chest radius over a breath


def _arm(side: str, plane: float, elevation: float, rotation: float, elbow: float) -> dict[int, float]:
    return dict(zip(arm_columns(side), (plane, elevation, rotation, elbow)))


def _both(*angles: float) -> dict[int, float]:
    return {**_arm("left", *angles), **_arm("right", *angles)}


@dataclass(frozen=True)
class Key:
    """A key pose at fraction ``at`` of a movement.

    ``values`` maps pose columns to values; ``None`` means "back on the base
    pose".  Columns missing from a key hold their previous key value.
    ``contact`` keys come from reach solutions and are not amplitude-scaled.
    """

    at: float
    values: dict[int, float] | None
    contact: bool = False


@dataclass(frozen=True)
class MotionState:
    """Movement state carried between script items."""

    sway_state: np.ndarray  # (2, len(SWAY_STD)) low-pass filter state
    stride_phase_rad: float
    heading_rad: float


def min_jerk(s):
    """Minimum-jerk blend 10 s^3 - 15 s^4 + 6 s^5 from 0 to 1 over s in [0, 1]."""
    s = np.clip(s, 0.0, 1.0)
    return s * s * s * (10.0 - 15.0 * s + 6.0 * s * s)


def render_keys(base: np.ndarray, keys: list[Key]) -> np.ndarray:
    """Blend key poses onto a base trajectory (n, N_POSE); first and last sample stay on base."""
    n = base.shape[0]
    out = base.copy()
    if n < 2:
        return out
    tau = np.arange(n) / (n - 1)
    times = np.array([k.at for k in keys])
    seg = np.clip(np.searchsorted(times, tau, side="right") - 1, 0, len(keys) - 2)
    width = np.maximum(times[seg + 1] - times[seg], 1e-9)
    h = min_jerk((tau - times[seg]) / width)
    cols = sorted({c for k in keys if k.values for c in k.values})
    for c in cols:
        vals = np.full(len(keys), np.nan)  # NaN: the column is on base at this key
        last = np.nan
        for i, k in enumerate(keys):
            last = np.nan if k.values is None else k.values.get(c, last)
            vals[i] = last
        left, right = vals[seg], vals[seg + 1]
        on_left, on_right = ~np.isnan(left), ~np.isnan(right)
        # Blending from or to base, the target is the one key value of the span.
        left, right = np.where(on_left, left, right), np.where(on_right, right, left)
        target = np.nan_to_num(left + (right - left) * h)
        w = on_left + (on_right.astype(float) - on_left) * h
        out[:, c] = base[:, c] + w * (target - base[:, c])
    return out


def _noise_gain(b, a, rate_hz: float) -> float:
    """Output std of filter (b, a) for unit white noise: the impulse response's norm."""
    impulse = np.zeros(int(20.0 * rate_hz / SWAY_CUTOFF_HZ))
    impulse[0] = 1.0
    return float(np.sqrt(np.sum(signal.lfilter(b, a, impulse) ** 2)))


def _jitter_times(rng: np.random.Generator, times: list[float], jitter_frac: float) -> list[float]:
    """Jitter key times by stretching the gaps between them; keeps the order."""
    gaps = np.diff(times) * np.exp(rng.normal(0.0, 2.0 * jitter_frac, len(times) - 1))
    return list(np.concatenate([[0.0], np.cumsum(gaps) / np.sum(gaps)]))


class Repertoire:
    """One wearer's way of performing the vocabulary in one jacket fit.

    Holds the wearer's solved reach poses (hands on the body) and turns a
    script label into a pose trajectory.  Immutable after construction.
    """

    def __init__(self, wearer: Wearer, dims: Dimensions, fits: dict[str, Fit], rate_hz: float, cables=None):
        self.wearer = wearer
        # Touch targets use the jacket's own cables where it has them, else the built-in places.
        self.cables = dict(LAYOUTS if cables is None else cables)
        self.rate_hz = rate_hz
        self._sway_filter = signal.butter(2, min(SWAY_CUTOFF_HZ, 0.4 * rate_hz), fs=rate_hz)
        self._sway_gain = _noise_gain(*self._sway_filter, rate_hz)
        self.dims = dims
        self.fits = fits
        self.neutral = neutral_pose(1)[0]
        self.reach = self._solve_reaches()
        self._extra: dict[str, dict[int, float]] = {}  # reaches of the full vocabulary, solved when first used

    # ----- reach poses -------------------------------------------------------------
    def _torso_target(self, height_frac: float, azimuth_rad: float, standoff_m: float) -> np.ndarray:
        d = self.dims
        z = d.torso_low_z_m + height_frac * (d.torso_high_z_m - d.torso_low_z_m)
        point, direction = torso_surface_local(z, azimuth_rad, d)
        return point + direction * (standoff_m + d.hand_radius_m)

    def tap_arm(self, side: str) -> dict[int, float]:
        """Arm held with the forearm across the belly, offered for a tap on its sleeve."""
        return _arm(side, 0.25, 0.7, 1.0, 1.45)

    def sleeve_touch_target(self, side: str, standoff_m: float) -> np.ndarray:
        """Hand-centre target on the middle of ``side``'s forearm cable, arm in tap pose."""
        pose = self.neutral.copy()
        for c, v in self.tap_arm(side).items():
            pose[c] = v
        geo = pose_body(pose[None], self.dims)
        name = f"{side}_sleeve"
        cable = self.cables[name] if isinstance(self.cables.get(name), SleeveLayout) and self.cables[name].fore_fracs \
            else LAYOUTS[name]
        points, normals = antenna_points_local(cable, self.fits.get(name, Fit(0.0, 0.0, 0.0)), geo, self.dims,
                                               self.wearer)
        k = points.shape[1] - 3  # middle of the forearm run
        return points[0, k] + normals[0, k] * (self.dims.hand_radius_m + standoff_m)

    def panel_touch_target(self, name: str, standoff_m: float) -> np.ndarray:
        """Hand-centre target on the middle of a torso cable, body neutral."""
        geo = pose_body(self.neutral[None], self.dims)
        points, normals = antenna_points_local(self.cables.get(name, name), self.fits.get(name, Fit(0.0, 0.0, 0.0)),
                                               geo, self.dims, self.wearer)
        k = points.shape[1] // 2
        return points[0, k] + normals[0, k] * (self.dims.hand_radius_m + standoff_m)

    def _solve(self, side: str, target, guess, base=None) -> dict[int, float]:
        angles = solve_reach(target, side, self.dims, guess, base_pose=base)
        return dict(zip(arm_columns(side), (float(a) for a in angles)))

    def _solve_reaches(self) -> dict[str, dict[int, float]]:
        d = self.dims
        s = self.wearer.scale
        sh = d.shoulder_z_m
        tap_base = self.neutral.copy()
        for c, v in self.tap_arm("left").items():
            tap_base[c] = v
        half_width = d.torso_y_m + d.torso_radius_m
        r = {
            "heart": self._solve("right", self._torso_target(0.78, 0.5, 0.02), (-0.4, 0.5, 1.0, 2.2)),
            "sweep_start": self._solve("right", self._torso_target(0.75, -0.45, 0.07), (0.0, 0.5, 0.6, 1.9)),
            "sweep_end": self._solve("right", self._torso_target(0.72, 0.6, 0.05), (-0.5, 0.6, 1.1, 2.1)),
            "tap_touch": self._solve("right", self.sleeve_touch_target("left", 0.002), (-0.3, 0.5, 0.9, 1.8),
                                     tap_base),
            "tap_hover": self._solve("right", self.sleeve_touch_target("left", 0.07), (-0.3, 0.5, 0.9, 1.8),
                                     tap_base),
            "crossed_right": self._solve("right", (0.15 * s, 0.21 * s, sh - 0.20 * s), (0.3, 0.5, 1.3, 2.0)),
            "crossed_left": self._solve("left", (0.12 * s, -0.21 * s, sh - 0.25 * s), (0.3, 0.5, 1.3, 2.0)),
        }
        for side, sign in (("left", 1.0), ("right", -1.0)):
            hip = (0.0, sign * (half_width + d.hand_radius_m + 0.015), d.torso_low_z_m + 0.2 * (
                d.torso_high_z_m - d.torso_low_z_m))
            r[f"hip_{side}"] = self._solve(side, hip, (1.5, 0.6, 1.4, 1.8))
        # Fidgeting: brief reaches to the zip, pockets, collar and lapel.
        r["fidget_zip"] = self._solve("right", self._torso_target(0.5, 0.0, 0.045), (-0.2, 0.4, 0.8, 1.9))
        r["fidget_pocket_left"] = self._solve("left", self._torso_target(0.1, 1.0, 0.05), (0.2, 0.3, 0.6, 1.2))
        r["fidget_pocket_right"] = self._solve("right", self._torso_target(0.1, -1.0, 0.05), (0.2, 0.3, 0.6, 1.2))
        r["fidget_collar"] = self._solve("right", self._torso_target(1.0, -0.1, 0.04), (-0.3, 0.8, 1.0, 2.3))
        r["fidget_lapel"] = self._solve("left", self._torso_target(0.85, -0.5, 0.04), (-0.4, 0.5, 1.0, 2.2))
        return r

    def _reach(self, name: str) -> dict[int, float]:
        """A reach pose of the full vocabulary, solved on first use (deterministic, no randomness)."""
        if name not in self._extra:
            self._extra[name] = self._solve_extra(name)
        return self._extra[name]

    def _solve_extra(self, name: str) -> dict[int, float]:
        d, s = self.dims, self.wearer.scale
        sh = d.shoulder_z_m
        if name.startswith("tap_"):  # the left hand taps the right sleeve
            base = self.neutral.copy()
            for c, v in self.tap_arm("right").items():
                base[c] = v
            standoff = 0.002 if name == "tap_touch_right" else 0.07
            return self._solve("left", self.sleeve_touch_target("right", standoff), (-0.3, 0.5, 0.9, 1.8), base)
        if name.startswith("clap_"):
            _, where, side = name.split("_")
            sign = 1.0 if side == "left" else -1.0
            y = sign * (d.hand_radius_m + 0.005 if where == "meet" else 0.14 * s)
            return self._solve(side, (0.33 * s, y, sh - 0.22 * s), (0.2, 0.9, 0.9, 1.6))
        if name.startswith("clasp_"):
            sign = 1.0 if name.endswith("left") else -1.0
            z = d.torso_low_z_m + 0.3 * (d.torso_high_z_m - d.torso_low_z_m)
            x = d.torso_radius_m + d.hand_radius_m + 0.06
            return self._solve(name.split("_")[1], (x, sign * (d.hand_radius_m + 0.01), z), (0.1, 0.5, 1.0, 1.6))
        if name.startswith("thigh_"):  # seated: hands rest on the thighs, in front of the hips
            sign = 1.0 if name.endswith("left") else -1.0
            z = d.torso_low_z_m - 0.02 * s
            return self._solve(name.split("_")[1], (0.26 * s, sign * 0.11 * s, z), (0.3, 0.5, 0.5, 1.2),
                               self._seated_base())
        if name.startswith("table_"):  # leaning: hands flat on a table top in front
            sign = 1.0 if name.endswith("left") else -1.0
            return self._solve(name.split("_")[1], self._table_hand_local(sign), (0.2, 0.9, 0.4, 0.3),
                               self._leaning_base())
        raise ValueError(f"no reach {name!r}")

    # ----- planning -----------------------------------------------------------------
    def draw_duration_s(self, label: str, rng: np.random.Generator) -> float:
        """A drawn length for ``label`` when the script gives none, s."""
        if label in FULL_NULL_ACTIVITIES:
            return float(rng.uniform(*NULL_DEFAULT_S))
        if FULL_GESTURES[label] == "posture":
            move = rng.uniform(*POSTURE_MOVE_S, 2) / self.wearer.speed
            return float(np.sum(move) + rng.uniform(*POSTURE_HOLD_S))
        base = GESTURE_BASE_S[label] / self.wearer.speed * rng.uniform(0.88, 1.12)
        return float(np.clip(base, *GESTURE_RANGE_S))

    def keys(self, label: str, duration_s: float, rng: np.random.Generator) -> list[Key]:
        """Key poses of one performance of gesture or posture ``label``."""
        if FULL_GESTURES[label] == "posture":
            return self._posture_keys(label, duration_s, rng)
        keys = self._gesture_keys(label)
        times = _jitter_times(rng, [k.at for k in keys], self.wearer.jitter_frac)
        amp = self.wearer.amplitude * rng.uniform(0.92, 1.08)
        out = []
        for k, t in zip(keys, times):
            out.append(Key(t, self._vary(k, amp, rng), k.contact))
        return out

    def _vary(self, key: Key, amp: float, rng: np.random.Generator) -> dict[int, float] | None:
        if key.values is None:
            return None
        if key.contact:  # aim at the body: small scatter around the solved angles
            return {c: v + rng.normal(0.0, 0.03) for c, v in key.values.items()}
        return {c: self.neutral[c] + amp * (v - self.neutral[c]) for c, v in key.values.items()}

    def _gesture_keys(self, label: str) -> list[Key]:
        r = self.reach
        if label in ("raise_right", "raise_left"):
            side = label.split("_")[1]
            up = _arm(side, 1.15, 2.75, 0.2, 0.15)
            return [Key(0.0, None), Key(0.42, up), Key(0.58, up), Key(1.0, None)]
        if label == "sweep_across":
            a, b = r["sweep_start"], r["sweep_end"]
            return [Key(0.0, None), Key(0.25, a, True), Key(0.5, b, True), Key(0.72, a, True), Key(1.0, None)]
        if label == "tap_left_sleeve":
            hover, touch = r["tap_hover"], r["tap_touch"]
            first = {**self.tap_arm("left"), **hover}
            return [Key(0.0, None), Key(0.22, first, True), Key(0.36, touch, True), Key(0.48, hover, True),
                    Key(0.6, touch, True), Key(0.74, hover, True), Key(1.0, None)]
        if label == "push_forward":
            chest = _both(0.2, 0.7, 0.3, 2.1)
            out = _both(0.15, 1.45, 0.1, 0.15)
            return [Key(0.0, None), Key(0.28, chest), Key(0.52, out), Key(0.62, out), Key(0.82, chest),
                    Key(1.0, None)]
        if label == "bow":
            down = {**_both(0.0, 0.5, 0.35, 0.25), POSE["lean_rad"]: 0.55}
            return [Key(0.0, None), Key(0.4, down), Key(0.6, down), Key(1.0, None)]
        if label == "tap_right_sleeve":
            hover, touch = self._reach("tap_hover_right"), self._reach("tap_touch_right")
            first = {**self.tap_arm("right"), **hover}
            return [Key(0.0, None), Key(0.22, first, True), Key(0.36, touch, True), Key(0.48, hover, True),
                    Key(0.6, touch, True), Key(0.74, hover, True), Key(1.0, None)]
        if label == "clap":
            apart = {**self._reach("clap_apart_left"), **self._reach("clap_apart_right")}
            meet = {**self._reach("clap_meet_left"), **self._reach("clap_meet_right")}
            return [Key(0.0, None), Key(0.3, apart, True), Key(0.42, meet, True), Key(0.54, apart, True),
                    Key(0.66, meet, True), Key(0.78, apart, True), Key(1.0, None)]
        if label == "open_arms":
            wide = _both(1.45, 1.35, 0.0, 0.25)
            return [Key(0.0, None), Key(0.4, wide), Key(0.62, wide), Key(1.0, None)]
        if label == "wave_right":
            a, b = _arm("right", 1.1, 1.55, -0.9, 1.0), _arm("right", 1.35, 1.6, -0.9, 1.7)
            return [Key(0.0, None), Key(0.25, a), Key(0.37, b), Key(0.49, a), Key(0.61, b), Key(0.73, a),
                    Key(1.0, None)]
        raise ValueError(f"no key poses for {label!r}")

    def _posture_keys(self, label: str, duration_s: float, rng: np.random.Generator) -> list[Key]:
        r = self.reach
        if label == "arms_up":
            held = _both(1.25, 2.55, 0.2, 0.25)
        elif label == "hands_clasped":
            held = {**self._reach("clasp_left"), **self._reach("clasp_right")}
        else:
            held = {
                "arms_crossed": {**r["crossed_left"], **r["crossed_right"]},
                "hands_on_hips": {**r["hip_left"], **r["hip_right"]},
                "hand_on_heart": r["heart"],
            }[label]
        held = self._vary(Key(0.0, held, True), 1.0, rng)
        move_in, move_out = rng.uniform(*POSTURE_MOVE_S, 2) / self.wearer.speed
        # Moves take at most a third of the posture each when the script forces it short.
        a = min(move_in / duration_s, 1.0 / 3.0)
        b = min(move_out / duration_s, 1.0 / 3.0)
        return [Key(0.0, None), Key(a, held, True), Key(1.0 - b, held, True), Key(1.0, None)]

    # ----- rendering ------------------------------------------------------------------
    def initial_state(self) -> MotionState:
        return MotionState(np.zeros((2, len(SWAY_STD))), 0.0, 0.0)

    def base_pose(self, t_s: np.ndarray, rng: np.random.Generator, state: MotionState):
        """Neutral pose plus postural sway and breathing; returns (pose (n, N_POSE), state)."""
        n = t_s.shape[0]
        pose = np.repeat(self.neutral[None], n, 0)
        b, a = self._sway_filter
        white = rng.normal(0.0, 1.0, (n, len(SWAY_STD)))
        sway, zi = signal.lfilter(b, a, white, axis=0, zi=state.sway_state)
        gain = self._sway_gain  # so the sway std does not depend on the rate
        for j, (name, std) in enumerate(SWAY_STD.items()):
            pose[:, POSE[name]] += sway[:, j] * (std * self.wearer.sway_scale / gain)
        pose[:, POSE["chest_expansion"]] = BREATH_DEPTH * np.sin(2.0 * np.pi * self.wearer.breath_hz * t_s)
        pose[:, POSE["heading_rad"]] = state.heading_rad
        return pose, replace(state, sway_state=zi)

    def render(self, label: str, duration_s: float, t_s: np.ndarray, rng: np.random.Generator, state: MotionState):
        """Pose trajectory of one script item; returns (pose (n, N_POSE), new state)."""
        pose, _, state = self.render_scene(label, duration_s, t_s, rng, state)
        return pose, state

    def render_scene(self, label: str, duration_s: float, t_s: np.ndarray, rng: np.random.Generator,
                     state: MotionState):
        """Pose and surroundings of one script item.

        Returns (pose (n, N_POSE), scene (n, N_SCENE) or None when nothing is near, new state).
        """
        if label in SURROUNDINGS:
            return self._surroundings(label, t_s, rng, state)
        pose, state = self._render(label, duration_s, t_s, rng, state)
        return pose, None, state

    def _render(self, label, duration_s, t_s, rng, state):
        if label in FULL_GESTURES:
            keys = self.keys(label, duration_s, rng)
            base, state = self.base_pose(t_s, rng, state)
            return render_keys(base, keys), state
        if label == "standing":
            return self.base_pose(t_s, rng, state)
        if label == "walking":
            return self._walk(t_s, rng, state)
        if label == "fidgeting":
            return self._fidget(t_s, rng, state)
        if label == "talking":
            return self._talk(t_s, rng, state)
        if label == "sitting":
            return self._sit(t_s, rng, state)
        raise ValueError(f"unknown activity {label!r}")

    def _envelope(self, n: int, rate_hz: float, ramp_s: float) -> np.ndarray:
        ramp = max(min(ramp_s * rate_hz, n / 2.0), 1.0)
        k = np.arange(n)
        return min_jerk(k / ramp) * min_jerk((n - 1 - k) / ramp)

    def _walk(self, t_s, rng, state: MotionState):
        n, rate_hz = t_s.shape[0], self.rate_hz
        pose, state = self.base_pose(t_s, rng, state)
        w = self.wearer
        env = self._envelope(n, rate_hz, 0.8)
        stride_hz = w.step_hz / 2.0  # one arm swing per two steps
        phase = state.stride_phase_rad + 2.0 * np.pi * stride_hz * (np.arange(n) + 1) / rate_hz
        swing = 0.3 * w.amplitude * env * np.sin(phase)
        for side, sign in (("left", 1.0), ("right", -1.0)):
            p, e = pose[:, POSE[f"{side}_plane_rad"]], pose[:, POSE[f"{side}_elevation_rad"]]
            flex = e * np.cos(p) + sign * swing  # arms swing in opposition
            abd = e * np.sin(p)
            pose[:, POSE[f"{side}_plane_rad"]] = np.arctan2(abd, flex)
            pose[:, POSE[f"{side}_elevation_rad"]] = np.hypot(abd, flex)
            pose[:, POSE[f"{side}_elbow_rad"]] += env * (0.25 + 0.1 * sign * np.sin(phase))
        pose[:, POSE["bob_m"]] += 0.02 * env * np.cos(2.0 * phase)  # one bob per step
        pose[:, POSE["shift_m"]] += 0.02 * env * np.sin(phase)
        pose[:, POSE["twist_rad"]] += 0.07 * env * np.sin(phase)
        turn = rng.normal(0.0, 0.8)  # walking about the stage changes heading
        pose[:, POSE["heading_rad"]] = state.heading_rad + turn * min_jerk(np.arange(n) / max(n - 1, 1))
        new = replace(state, stride_phase_rad=float(np.mod(phase[-1], 2 * np.pi)) if n else state.stride_phase_rad,
                      heading_rad=state.heading_rad + turn)
        return pose, new

    def _fidget(self, t_s, rng, state: MotionState):
        n, rate_hz = t_s.shape[0], self.rate_hz
        pose, state = self.base_pose(t_s, rng, state)
        names = [k for k in self.reach if k.startswith("fidget_")]
        k = int(rng.uniform(0.2, 0.6) * rate_hz)
        while True:
            length = int(rng.uniform(0.7, 1.4) / self.wearer.speed * rate_hz)
            if k + length >= n:
                break
            target = self.reach[names[rng.integers(len(names))]]
            held = {c: v + rng.normal(0.0, 0.06) for c, v in target.items()}
            keys = [Key(0.0, None), Key(0.4, held), Key(0.65, held), Key(1.0, None)]
            pose[k:k + length] = render_keys(pose[k:k + length], keys)
            k += length + int(rng.uniform(0.2, 1.0) * rate_hz)
        return pose, state

    # ----- more null activity: talking, sitting, surroundings ------------------------
    def _talk(self, t_s, rng, state: MotionState):
        """Talking with the hands: forearms come up in front and move in small random beats."""
        n, rate_hz = t_s.shape[0], self.rate_hz
        pose, state = self.base_pose(t_s, rng, state)
        k = int(rng.uniform(0.2, 0.6) * rate_hz)
        while True:
            length = int(rng.uniform(0.6, 1.4) / self.wearer.speed * rate_hz)
            if k + length >= n:
                break
            held: dict[int, float] = {}
            for side in [("left",), ("right",), ("left", "right")][int(rng.integers(3))]:
                held.update(_arm(side, rng.uniform(0.0, 0.7), rng.uniform(0.25, 0.6), rng.uniform(0.3, 0.8),
                                 rng.uniform(0.8, 1.5)))
            keys = [Key(0.0, None), Key(0.35, held), Key(0.7, held), Key(1.0, None)]
            pose[k:k + length] = render_keys(pose[k:k + length], keys)
            k += length + int(rng.uniform(0.0, 0.5) * rate_hz)
        return pose, state

    def _seated_base(self) -> np.ndarray:
        pose = self.neutral.copy()
        pose[POSE["lean_rad"]] = 0.12
        pose[POSE["bob_m"]] = -0.42 * self.wearer.scale  # hips down onto a chair seat
        return pose

    def _leaning_base(self) -> np.ndarray:
        pose = self.neutral.copy()
        pose[POSE["lean_rad"]] = 0.35
        return pose

    def table_edge_x_m(self) -> float:
        """Where the table's front edge stands when the wearer leans on it, ahead of the body axis, m."""
        return self.dims.torso_radius_m + 0.06

    def _table_hand_local(self, sign: float) -> np.ndarray:
        """Hand target on the table top in torso-local axes, for the leaning base pose."""
        from .surroundings import TABLE_TOP_Z_M
        d = self.dims
        world = np.array([self.table_edge_x_m() + 0.1, sign * 0.2 * self.wearer.scale,
                          TABLE_TOP_Z_M + d.hand_radius_m])
        lean = self._leaning_base()[POSE["lean_rad"]]
        pivot = np.array([0.0, 0.0, d.hip_z_m])
        c, s = np.cos(lean), np.sin(lean)
        rot = np.array([[c, 0.0, s], [0.0, 1.0, 0.0], [-s, 0.0, c]])  # rotation_y(lean)
        return rot.T @ (world - pivot) + pivot

    def _sit(self, t_s, rng, state: MotionState):
        """Sitting down on a chair, resting the hands on the thighs, and standing up again.

        Legs and chair are not modelled: only the upper body's pose and the hands count.
        """
        n = t_s.shape[0]
        pose, state = self.base_pose(t_s, rng, state)
        seated = {POSE["lean_rad"]: 0.12 + rng.normal(0.0, 0.03), POSE["bob_m"]: -0.42 * self.wearer.scale,
                  **self._reach("thigh_left"), **self._reach("thigh_right")}
        seated = {c: v + (rng.normal(0.0, 0.03) if c not in (POSE["bob_m"], POSE["lean_rad"]) else 0.0)
                  for c, v in seated.items()}
        move = min(rng.uniform(0.9, 1.4) / self.wearer.speed / max(n / self.rate_hz, 1e-9), 1.0 / 3.0)
        keys = [Key(0.0, None), Key(move, seated), Key(1.0 - move, seated), Key(1.0, None)]
        return render_keys(pose, keys), state

    def _surroundings(self, label, t_s, rng, state: MotionState):
        """Standing (or leaning on a table) while something comes near; returns (pose, scene, state)."""
        from .surroundings import PARTNER_RADIUS_M, SCENE, STAND_RADIUS_M, empty_scene
        n = t_s.shape[0]
        d = self.dims
        pose, state = self.base_pose(t_s, rng, state)
        scene = empty_scene(n)
        come = min(rng.uniform(0.8, 1.5) / max(n / self.rate_hz, 1e-9), 1.0 / 3.0)
        tau = np.arange(n) / max(n - 1, 1)
        near = min_jerk(tau / come) * min_jerk((1.0 - tau) / come)  # 0 far .. 1 closest
        side = 1.0 if rng.random() < 0.5 else -1.0
        arm_side = d.shoulder_y_m + d.upper_arm_radius_m + 0.03  # outside of a hanging sleeve, roughly
        if label == "leaning_on_table":
            lean = {POSE["lean_rad"]: 0.35 + rng.normal(0.0, 0.03),
                    **{c: v + rng.normal(0.0, 0.03) for c, v in self._reach("table_left").items()},
                    **{c: v + rng.normal(0.0, 0.03) for c, v in self._reach("table_right").items()}}
            keys = [Key(0.0, None), Key(come, lean), Key(1.0 - come, lean), Key(1.0, None)]
            pose = render_keys(pose, keys)
            edge = self.table_edge_x_m() + rng.normal(0.0, 0.01)
            # The wearer steps up to the table: it comes from 1 m away, in the wearer's facing direction.
            x, y = edge + (1.0 - near) * 1.0, np.zeros(n)
            cols = None
        elif label == "partner_near":
            gap = rng.uniform(0.05, 0.35)  # between the other person and the wearer's sleeve
            x = np.full(n, rng.uniform(-0.1, 0.15))
            y = side * (arm_side + PARTNER_RADIUS_M + gap + (1.0 - near) * 1.5)
            cols = ("partner_x_m", "partner_y_m")
        elif label == "metal_near":
            gap = rng.uniform(0.02, 0.2)  # from the sleeve hanging at the side
            x = np.full(n, rng.uniform(-0.05, 0.1))
            y = side * (arm_side + STAND_RADIUS_M + gap + (1.0 - near) * 1.5)
            cols = ("stand_x_m", "stand_y_m")
        else:
            raise ValueError(f"unknown surroundings {label!r}")
        # Positions are given relative to where the wearer faces; the room frame turns with the heading.
        h = state.heading_rad
        if cols is None:
            scene[:, SCENE["table_edge_x_m"]] = x  # the table is met face on
            scene[:, SCENE["table_heading_rad"]] = h
        else:
            scene[:, SCENE[cols[0]]] = np.cos(h) * x - np.sin(h) * y
            scene[:, SCENE[cols[1]]] = np.sin(h) * x + np.cos(h) * y
        return pose, scene, state
