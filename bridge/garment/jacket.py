"""The simulated jacket: a wearer, the cables, the oscillators and the counter.

``Jacket`` owns everything that persists in a stream (time, the cloth's and
the sway's filter states, the counter phases, the temperature, the random
generator) and renders scripts of movements into counted frequencies.

Randomness is split into independent streams drawn from the integers
(seed, stream, wearer, session), so that:
  * ``seed`` picks the jacket's electronics and everything else;
  * ``wearer`` picks a person (body size, movement style) for that seed;
  * ``session`` picks how the jacket sits on that person this time, and the
    particular performance (sway, timing, noise);
  * ``take`` (optional) picks a further performance in that same dressing.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Iterable

import numpy as np
from scipy import signal

from .antennas import (
    SleeveLayout,
    antenna_points_local,
    draw_fit,
    lag_displacement,
    lag_filter,
    lag_initial_state,
)
from .body import arm_columns, dimensions, draw_wearer, neutral_pose, pose_body, solve_reach
from .coupling import antenna_body_capacitance_f, series_capacitance_f
from .oscillator import (
    PHASE_STEPS_PER_CYCLE,
    count_cycles,
    inductance_for_frequency_h,
    resonant_frequency_hz,
    spread_centres_hz,
    temperature_factor,
)
from .layout import GarmentLayout, default_layout
from .surroundings import FAR_M, empty_scene, surroundings_capacitance_f
from .vocabulary import FULL_GESTURES, FULL_NULL_ACTIVITIES, GESTURES, NULL_ACTIVITIES, Repertoire

DEFAULT_RATE_HZ = 100.0

# Random stream tags (see module docstring).
_HARDWARE, _WEARER, _FIT, _MOTION, _SCRIPT, _TEMPERATURE, _JITTER = 1, 2, 3, 4, 5, 6, 7

TUNING_CAPACITANCE_F = 68e-12  # fixed capacitor across each tank
SELF_CAPACITANCE_F = (12e-12, 25e-12)  # cable and input capacitance to circuit ground, drawn per channel
INDUCTOR_TOLERANCE = 0.02  # 1-sigma spread of the inductors' values
# Antenna-to-body capacitance the inductors were chosen for (average wearer, upright), F.
DESIGN_COUPLING_F = {"sleeve": 8e-12, "panel": 3e-12}
DESIGN_BODY_GROUND_F = 100e-12  # human-body-model value of ESD testing (JEDEC/ESDA JS-001)
TEMPCO_PER_C = (-40e-6, 12e-6)  # mean and spread of the tanks' frequency drift, from memory
REFERENCE_C = 22.0  # temperature at which centre_hz holds
WARM_C = 30.0  # the jacket warms toward this near the body
WARM_TIME_S = 400.0
WANDER_C = 0.3  # std of the slow temperature wander
WANDER_TIME_S = 120.0
JITTER = 3e-6  # relative white frequency noise per gate
CLOCK_ERROR = 30e-6  # counter time base error bound (crystal tolerance)
BLOCK = 2048  # physics steps computed at once: bounds memory, not results
PHYSICS_MAX_HZ = 50.0  # body, cloth and coupling are evaluated at most this often


@dataclass(frozen=True)
class Interval:
    """A labelled stretch of a take; time outside intervals is null activity."""

    start_s: float
    end_s: float
    label: str


@dataclass(frozen=True, eq=False)
class Take:
    """Counted frequencies of a rendered script, with their labels."""

    rate_hz: float
    channel_names: tuple[str, ...]
    t_s: np.ndarray  # (n,) device time of each gate's start, s
    freq_hz: np.ndarray  # (n, n_channels) counted frequencies, Hz
    intervals: tuple[Interval, ...]
    wearer: str
    session: str
    centre_hz: tuple[float, ...]  # resting frequency, wearer standing still, Hz


@dataclass(frozen=True)
class Hardware:
    """Electronics of one jacket: one LC tank per cable, one counter."""

    inductance_h: np.ndarray
    self_capacitance_f: np.ndarray
    tuning_capacitance_f: float
    tempco_per_c: np.ndarray
    clock_error: float


def _rng(seed: int, stream: int, *keys: int) -> np.random.Generator:
    return np.random.default_rng(np.random.SeedSequence([int(seed), stream, *(int(k) for k in keys)]))


def _kind(cable) -> str:
    return "sleeve" if isinstance(cable, SleeveLayout) else "panel"


def draw_hardware(rng: np.random.Generator, cables) -> Hardware:
    """Build the electronics: inductors chosen to spread the channels over 150-500 kHz.

    ``cables`` are the layouts of the cables in channel order.
    """
    n = len(cables)
    target_hz = spread_centres_hz(n)
    c_design = np.array([
        np.mean(SELF_CAPACITANCE_F) + TUNING_CAPACITANCE_F
        + series_capacitance_f(DESIGN_COUPLING_F[_kind(cable)], DESIGN_BODY_GROUND_F)
        for cable in cables
    ])
    tolerance = np.clip(rng.normal(0.0, INDUCTOR_TOLERANCE, n), -2 * INDUCTOR_TOLERANCE, 2 * INDUCTOR_TOLERANCE)
    return Hardware(
        inductance_h=inductance_for_frequency_h(target_hz, c_design) * (1.0 + tolerance),
        self_capacitance_f=rng.uniform(*SELF_CAPACITANCE_F, n),
        tuning_capacitance_f=TUNING_CAPACITANCE_F,
        tempco_per_c=rng.normal(TEMPCO_PER_C[0], TEMPCO_PER_C[1], n),
        clock_error=float(rng.uniform(-CLOCK_ERROR, CLOCK_ERROR)),
    )


class Jacket:
    """A simulated wearer in a simulated jacket with its counter; owns all its state."""

    def __init__(self, seed: int = 0, wearer: int = 0, session: int = 0, n_antennas: int = 4,
                 rate_hz: float = DEFAULT_RATE_HZ, layout: GarmentLayout | None = None, take: int | None = None):
        """``layout`` (see ``layout.load_layout``) places the cables; without it, the
        first ``n_antennas`` cables of the built-in jacket.

        ``session`` is one dressing: how each cable sits. ``take`` numbers further
        performances in that same dressing (a check-in take before a show): the cables
        sit as in ``take=None``, while the motion, room temperature and counter noise are
        drawn apart. ``take=None`` is the session's own performance."""
        if layout is None:
            layout = default_layout(n_antennas)
        n_antennas = len(layout.cables)
        if not rate_hz > 0:
            raise ValueError(f"rate_hz must be positive, got {rate_hz}")
        self.seed, self.wearer_id, self.session_id = int(seed), int(wearer), int(session)
        self.layout = layout
        self.cables = layout.as_dict()
        self.channel_names: tuple[str, ...] = layout.channel_names
        self.rate_hz = float(rate_hz)
        self.gate_s = 1.0 / self.rate_hz
        self.hardware = draw_hardware(_rng(seed, _HARDWARE), [self.cables[n] for n in self.channel_names])
        self.wearer = draw_wearer(_rng(seed, _WEARER, wearer))
        self.dims = dimensions(self.wearer)
        self.fits = draw_fit(_rng(seed, _FIT, wearer, session), self.channel_names, self.cables)
        self.repertoire = Repertoire(self.wearer, self.dims, self.fits, self.rate_hz, self.cables)
        # One generator per purpose, each drawn in stream order, so rendering a
        # script in pieces gives exactly the same stream as in one call.
        perf = (wearer, session) if take is None else (wearer, session, take)
        self.take_id = None if take is None else int(take)
        self._rng = _rng(seed, _MOTION, *perf)
        self._temperature_rng = _rng(seed, _TEMPERATURE, *perf)
        self._jitter_rng = _rng(seed, _JITTER, *perf)
        # Body motion is slow (< 10 Hz), so the geometry runs on every ``step``-th gate
        # and the coupling in between is interpolated (see _coupling_at).
        self.physics_step = max(1, int(round(self.rate_hz / PHYSICS_MAX_HZ)))
        physics_hz = self.rate_hz / self.physics_step
        self._filters = [lag_filter(self.cables[name].natural_hz, self.cables[name].damping, physics_hz)
                         for name in self.channel_names]
        # Stream state.
        self._index = 0
        self._motion = self.repertoire.initial_state()
        rest = neutral_pose(1)
        geo = pose_body(rest, self.dims)
        self._lag_state = []
        for name, (b, a) in zip(self.channel_names, self._filters):
            points, _ = antenna_points_local(self.cables[name], self.fits[name], geo, self.dims, self.wearer)
            self._lag_state.append(lag_initial_state(b, a, geo.to_world(points)[0]))
        rest_added = series_capacitance_f(self.static_coupling_f(rest)[0], self.wearer.body_ground_f)
        # Last two physics steps (index of the later one, added tank capacitance at both), for interpolation.
        self._tail = (-1, rest_added, rest_added)
        self._phase = self._jitter_rng.integers(0, PHASE_STEPS_PER_CYCLE, n_antennas)
        self._room_c = float(self._temperature_rng.uniform(18.0, 24.0))
        self._wander_c = float(self._temperature_rng.normal(0.0, WANDER_C))
        self.centre_hz: tuple[float, ...] = tuple(float(f) for f in self.static_frequencies_hz(rest)[0])

    # ----- physics without dynamics, drift or noise ----------------------------------
    def capacitance_f(self, coupling_f: np.ndarray) -> np.ndarray:
        """Tank capacitance (n, ch) for antenna-to-body capacitances (n, ch), F."""
        hw = self.hardware
        body = series_capacitance_f(coupling_f, self.wearer.body_ground_f)
        return hw.self_capacitance_f + hw.tuning_capacitance_f + body

    def static_coupling_f(self, pose: np.ndarray) -> np.ndarray:
        """Antenna-to-body capacitance (n, ch) for poses (n, N_POSE), cloth hanging still, F."""
        geo = pose_body(pose, self.dims)
        out = np.empty((geo.ends.shape[0], len(self.channel_names)))
        for j, name in enumerate(self.channel_names):
            points, _ = antenna_points_local(self.cables[name], self.fits[name], geo, self.dims, self.wearer)
            out[:, j] = antenna_body_capacitance_f(geo.to_world(points), geo.ends, geo.radii_m)
        return out

    def static_frequencies_hz(self, pose: np.ndarray) -> np.ndarray:
        """Frequencies (n, ch) the counter would report on average for poses (n, N_POSE), Hz.

        No cloth lag, temperature drift, noise or quantisation.
        """
        c = self.capacitance_f(self.static_coupling_f(np.atleast_2d(pose)))
        return resonant_frequency_hz(self.hardware.inductance_h, c) / (1.0 + self.hardware.clock_error)

    def touch_poses(self, channel: str, reach_m: float = 0.3) -> tuple[np.ndarray, np.ndarray]:
        """Two poses (each (1, N_POSE)): the free hand resting on the middle of ``channel``'s
        cable, and the same pose with that hand ``reach_m`` farther away along the cable's normal.

        Sleeves are offered in the tapping pose (forearm across the belly) and
        touched by the other hand; torso cables are touched with the wearer
        upright, by the hand of the other side.
        """
        rep = self.repertoire
        base = rep.neutral.copy()
        layout = self.cables[channel]
        if isinstance(layout, SleeveLayout):
            held = layout.side
            hand = "right" if held == "left" else "left"
            for c, v in rep.tap_arm(held).items():
                base[c] = v
            targets = [rep.sleeve_touch_target(held, s) for s in (0.0, reach_m)]
        else:
            hand = "right" if any(np.asarray(layout.azimuths_rad) > 0) else "left"
            targets = [rep.panel_touch_target(channel, s) for s in (0.0, reach_m)]
        poses = []
        guess = (-0.3, 0.5, 0.9, 1.8)
        for target in targets:
            p = base.copy()
            p[arm_columns(hand)] = solve_reach(target, hand, self.dims, guess, base_pose=p)
            poses.append(p[None])
        return poses[0], poses[1]

    def touch_shift(self, channel: str) -> float:
        """Relative frequency change Δf/f of ``channel`` when a hand comes from 30 cm to touching it.

        Measured with the default constants (seed 0, wearers 0-5, sessions
        0-1): sleeves -1.3 % to -1.8 %, front panels -0.9 % to -1.2 %.  The
        whole sleeve resting on a raised arm, or both forearms crossed over
        it, moves a sleeve channel further, up to about -8 %.
        """
        near, far = self.touch_poses(channel)
        j = self.channel_names.index(channel)
        f = self.static_frequencies_hz(np.concatenate([near, far]))[:, j]
        return float(f[0] / f[1] - 1.0)

    # ----- streaming ------------------------------------------------------------------
    def _check(self, script) -> list[tuple[str, float | None]]:
        items = []
        for item in script:
            label, duration_s = item
            if label not in FULL_GESTURES and label not in FULL_NULL_ACTIVITIES:
                raise ValueError(f"unknown label {label!r}; known: {sorted(FULL_GESTURES) + list(FULL_NULL_ACTIVITIES)}")
            if duration_s is not None:
                duration_s = float(duration_s)
                if not (np.isfinite(duration_s) and duration_s > 0):
                    raise ValueError(f"duration of {label!r} must be positive, got {duration_s}")
            items.append((label, duration_s))
        return items

    def _physics(self, pose: np.ndarray, scene: np.ndarray) -> np.ndarray:
        """Capacitance added to each tank (m, ch) at consecutive physics steps, F; advances the cloth.

        That is the antenna-to-body capacitance in series with body-to-ground, plus the
        capacitance to ground through anything in the ``scene`` (m, N_SCENE).
        """
        geo = pose_body(pose, self.dims)
        coupling = np.empty((pose.shape[0], len(self.channel_names)))
        direct = np.zeros_like(coupling)
        present = bool(np.any(scene < FAR_M))
        for j, name in enumerate(self.channel_names):
            points, _ = antenna_points_local(self.cables[name], self.fits[name], geo, self.dims, self.wearer)
            world = geo.to_world(points)
            b, a = self._filters[j]
            lag, self._lag_state[j] = lag_displacement(world, b, a, self._lag_state[j])
            coupling[:, j] = antenna_body_capacitance_f(world + lag, geo.ends, geo.radii_m)
            if present:
                direct[:, j] = surroundings_capacitance_f(world + lag, scene)
        return series_capacitance_f(coupling, self.wearer.body_ground_f) + direct

    def _coupling_at(self, pose: np.ndarray, scene: np.ndarray, first: int) -> np.ndarray:
        """Added tank capacitance (n, ch) for gates first .. first+n-1 with poses ``pose`` (n, N_POSE)
        and surroundings ``scene`` (n, N_SCENE).

        Physics runs on gates that are multiples of ``physics_step``; gate i
        takes the value interpolated between physics steps m-1 and m, with
        m = i // step, i.e. the coupling lags the pose by one physics step
        (20 ms at 100 Hz).  Causal, so chunked rendering gives the same stream.
        """
        k = self.physics_step
        n = pose.shape[0]
        grid = np.arange(-(-first // k) * k, first + n, k)  # physics gates in this chunk
        values = [self._physics(pose[g - first], scene[g - first]) for g in np.array_split(grid, max(1, -(-grid.size // BLOCK)))
                  if g.size]
        m_last, before, last = self._tail
        table = np.concatenate([before[None], last[None]] + values)  # rows for m_last-1, m_last, new ...
        m = (first + np.arange(n)) // k
        row = m - (m_last - 1)
        frac = ((first + np.arange(n)) - m * k)[:, None] / k
        out = table[row - 1] + (table[row] - table[row - 1]) * frac
        if grid.size:
            self._tail = (int(grid[-1] // k), table[-2], table[-1])
        return out

    def _count(self, added_f: np.ndarray, t_s: np.ndarray) -> np.ndarray:
        """Counted frequencies (n, ch) for added tank capacitance (n, ch); advances temperature and counter."""
        hw = self.hardware
        n = added_f.shape[0]
        freq = resonant_frequency_hz(hw.inductance_h, hw.self_capacitance_f + hw.tuning_capacitance_f + added_f)
        # Temperature: warming toward body heat plus a slow random wander (AR(1)).
        rho = np.exp(-self.gate_s / WANDER_TIME_S)
        shocks = self._temperature_rng.normal(0.0, WANDER_C * np.sqrt(1.0 - rho * rho), n)
        wander, _ = signal.lfilter([1.0], [1.0, -rho], shocks, zi=[rho * self._wander_c])
        self._wander_c = float(wander[-1])
        temp_c = WARM_C + (self._room_c - WARM_C) * np.exp(-t_s / WARM_TIME_S) + wander
        freq = freq * temperature_factor(temp_c, hw.tempco_per_c, REFERENCE_C)
        freq = freq * (1.0 + JITTER * self._jitter_rng.normal(0.0, 1.0, freq.shape))
        counts, self._phase = count_cycles(freq, self.gate_s, self._phase, hw.clock_error)
        return counts * self.rate_hz

    def perform(self, script: Iterable[tuple[str, float | None]]) -> Take:
        """Render a script: a sequence of (label, duration_s) where label is a GESTURES name
        or a NULL_ACTIVITIES name; duration_s None means the gesture's own drawn duration.
        Successive calls continue the same stream (time, drift, sway, pose carry over), so
        a live source can call it chunk by chunk. Returned t_s continues from the previous call."""
        items = self._check(script)
        start = self._index
        poses, scenes, intervals = [], [], []
        for label, duration_s in items:
            if duration_s is None:
                duration_s = self.repertoire.draw_duration_s(label, self._rng)
            n = max(int(round(duration_s * self.rate_hz)), 1)
            t_s = (self._index + np.arange(n)) / self.rate_hz
            pose, scene, self._motion = self.repertoire.render_scene(label, n / self.rate_hz, t_s, self._rng,
                                                                     self._motion)
            poses.append(pose)
            scenes.append(empty_scene(n) if scene is None else scene)
            if label in FULL_GESTURES:
                intervals.append(Interval(self._index / self.rate_hz, (self._index + n) / self.rate_hz, label))
            self._index += n
        t_all = (start + np.arange(self._index - start)) / self.rate_hz
        if poses:
            freq_all = self._count(self._coupling_at(np.concatenate(poses), np.concatenate(scenes), start), t_all)
        else:
            freq_all = np.empty((0, len(self.channel_names)))
        return Take(self.rate_hz, self.channel_names, t_all, freq_all, tuple(intervals),
                    f"wearer{self.wearer_id}",
                    f"session{self.session_id}" + ("" if self.take_id is None else f"-take{self.take_id}"),
                    self.centre_hz)


def _script_parts(gestures, null_activities) -> tuple[list[str], list[str]]:
    """Checked gesture and null-activity lists for a script (default: the demo vocabulary)."""
    gestures = list(GESTURES) if gestures is None else list(gestures)
    for g in gestures:
        if g not in FULL_GESTURES:
            raise ValueError(f"unknown gesture {g!r}")
    nulls = list(null_activities)
    if not nulls:
        raise ValueError("need at least one null activity")
    return gestures, nulls


def random_script(rng: np.random.Generator, duration_s: float, gestures=None, idle_s=(2.0, 6.0),
                  null_activities=NULL_ACTIVITIES) -> list[tuple[str, float | None]]:
    """Gestures at random between idle stretches of null activity, about duration_s long."""
    gestures, nulls = _script_parts(gestures, null_activities)
    typical_s = {"gesture": 1.4, "posture": 5.5}  # rough lengths, only to budget the script
    script: list[tuple[str, float | None]] = []
    total = 0.0
    while total < duration_s:
        idle = float(rng.uniform(*idle_s))
        idle = min(idle, duration_s - total) if duration_s - total > 0.5 else idle
        script.append((nulls[int(rng.integers(len(nulls)))], idle))
        total += idle
        if not gestures or total >= duration_s:
            break
        g = gestures[int(rng.integers(len(gestures)))]
        if total + typical_s[FULL_GESTURES[g]] + idle_s[0] > duration_s:
            continue
        script.append((g, None))
        total += typical_s[FULL_GESTURES[g]]
    return script


def training_script(rng: np.random.Generator, repetitions: int = 10, gestures=None,
                    idle_s=(2.0, 4.0), null_activities=NULL_ACTIVITIES) -> list[tuple[str, float | None]]:
    """Each gesture `repetitions` times in shuffled order, separated by null activity (every kind)."""
    gestures, nulls = _script_parts(gestures, null_activities)
    order = [g for g in gestures for _ in range(repetitions)]
    rng.shuffle(order)
    n_null = len(order) + 1
    kinds = [nulls[i % len(nulls)] for i in range(n_null)]
    rng.shuffle(kinds)
    script: list[tuple[str, float | None]] = [(kinds[0], float(rng.uniform(*idle_s)))]
    for g, kind in zip(order, kinds[1:]):
        script.append((g, None))
        script.append((kind, float(rng.uniform(*idle_s))))
    return script


def tour_script(rng: np.random.Generator, gestures=None, lead_s: float = 3.0, idle_s=(2.0, 3.0),
                hold_s: float = 4.0) -> list[tuple[str, float | None]]:
    """Each gesture once, in shuffled order, with standing between: a short guided tour of a vocabulary.

    lead_s: standing before the first gesture (the chain settles), s; idle_s: range of the
    standing between gestures, s; hold_s: how long each posture is held, s. With the demo
    vocabulary (6 gestures, 3 postures) the tour lasts about 45-55 s.
    """
    gestures, _ = _script_parts(gestures, NULL_ACTIVITIES)
    order = list(gestures)
    rng.shuffle(order)
    script: list[tuple[str, float | None]] = [("standing", lead_s)]
    for g in order:
        script.append((g, hold_s if FULL_GESTURES[g] == "posture" else None))
        script.append(("standing", float(rng.uniform(*idle_s))))
    return script


def simulate_take(seed: int = 0, wearer: int = 0, session: int = 0, script=None, duration_s: float = 60.0,
                  n_antennas: int = 4, rate_hz: float = DEFAULT_RATE_HZ, layout: GarmentLayout | None = None) -> Take:
    """Render one take; without a script, a random one about ``duration_s`` long."""
    if script is None:
        script = random_script(_rng(seed, _SCRIPT, wearer, session), duration_s)
    return Jacket(seed, wearer, session, n_antennas, rate_hz, layout).perform(script)
