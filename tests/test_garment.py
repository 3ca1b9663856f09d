"""Tests of the simulated jacket (bridge.garment).

External facts are checked against the source named beside each check.
"""

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from bridge.garment import (
    DEFAULT_RATE_HZ,
    GESTURES,
    NULL_ACTIVITIES,
    Jacket,
    simulate_take,
    training_script,
)
from bridge.garment.body import neutral_pose
from bridge.garment.coupling import (
    EPSILON_0_F_PER_M,
    parallel_cylinders_capacitance_f_per_m,
    series_capacitance_f,
    wire_over_plane_capacitance_f_per_m,
)
from bridge.garment.oscillator import (
    count_cycles,
    frequency_ratio_for_capacitance_change,
    inductance_for_frequency_h,
    relative_capacitance_change,
    resonant_frequency_hz,
)
from bridge.garment.vocabulary import GESTURE_RANGE_S, POSTURE_HOLD_S, POSTURE_MOVE_S


@pytest.fixture(scope="module")
def jacket_take():
    """One short standing take per module; rendering is the slow part."""
    return simulate_take(seed=3, wearer=1, session=0, script=[("standing", 4.0), ("raise_left", None),
                                                             ("walking", 3.0)])


# ----- LC oscillator -------------------------------------------------------------------

def test_lc_resonance_handbook_value():
    # f = 1 / (2 pi sqrt(L C)), any electronics handbook: 1 mH with 100 pF -> 503.29 kHz.
    assert resonant_frequency_hz(1e-3, 100e-12) == pytest.approx(503_292.12, rel=1e-6)


def test_inductance_for_frequency_inverts_resonance():
    # Same handbook formula solved for L.
    assert inductance_for_frequency_h(503_292.12, 100e-12) == pytest.approx(1e-3, rel=1e-6)


def test_relative_capacitance_change_round_trips():
    # C is proportional to 1/f^2 at fixed L (from f = 1/(2 pi sqrt(LC))), so dC/C0 = (f0/f)^2 - 1.
    c0, dc = 80e-12, 0.9e-12
    f0 = resonant_frequency_hz(4e-3, c0)
    f = resonant_frequency_hz(4e-3, c0 + dc)
    assert relative_capacitance_change(f0, f) == pytest.approx(dc / c0, rel=1e-9)


def test_relative_capacitance_change_round_trips_with_jacket_capacitance():
    # Same relation, applied to the jacket's own tank capacitance for two poses.
    jacket = Jacket(seed=0, wearer=0, session=0)
    near, far = jacket.touch_poses("left_sleeve")
    poses = np.concatenate([near, far])
    c = jacket.capacitance_f(jacket.static_coupling_f(poses))[:, 0]
    f = jacket.static_frequencies_hz(poses)[:, 0]
    assert relative_capacitance_change(f[1], f[0]) == pytest.approx(c[0] / c[1] - 1.0, rel=1e-9)


@pytest.mark.parametrize("dc_over_c", [1e-4, 1e-3, 5e-3])
def test_small_change_sensitivity(dc_over_c):
    # First-order sensitivity df/f = -dC/(2C) (differentiate f ~ C^(-1/2)); the Taylor
    # remainder of (1 + x)^(-1/2) is 3x^2/8 + ..., so the error is below x^2.
    exact = frequency_ratio_for_capacitance_change(dc_over_c) - 1.0
    assert abs(exact - (-dc_over_c / 2.0)) < dc_over_c**2
    assert exact == pytest.approx(-dc_over_c / 2.0 + 3.0 * dc_over_c**2 / 8.0, rel=1e-3)


# ----- coupling formulas ---------------------------------------------------------------

def test_vacuum_permittivity():
    # CODATA 2018 value of epsilon_0.
    assert EPSILON_0_F_PER_M == pytest.approx(8.8541878128e-12, rel=1e-10)


def test_two_wire_line_capacitance_hand_computed():
    # Two-wire line of equal radii a at centre spacing D: C' = pi eps0 / arccosh(D / 2a)
    # (transmission-line handbooks).  Worked by hand for D = 10 mm, a = 1 mm:
    # arccosh(5) = ln(5 + sqrt(24)) = 2.29243; pi * 8.8541878e-12 / 2.29243 = 12.134 pF/m.
    c = parallel_cylinders_capacitance_f_per_m(10e-3, 1e-3, 1e-3)
    assert c == pytest.approx(12.134e-12, rel=1e-4)


def test_wire_over_plane_hand_computed_and_image_rule():
    # Wire over ground plane: C' = 2 pi eps0 / arccosh(h / a) (handbook).  For h/a = 10:
    # arccosh(10) = ln(10 + sqrt(99)) = 2.99322; 55.6325 pF/m / 2.99322 = 18.586 pF/m.
    assert wire_over_plane_capacitance_f_per_m(10e-3, 1e-3) == pytest.approx(18.586e-12, rel=1e-4)
    # Method of images: the wire and its image form a two-wire line of spacing 2h with the
    # same charge on half the voltage, so C'_plane(h) = 2 C'_two-wire(2h).
    for h in (2e-3, 7e-3, 40e-3):
        assert wire_over_plane_capacitance_f_per_m(h, 0.5e-3) == pytest.approx(
            2.0 * parallel_cylinders_capacitance_f_per_m(2 * h, 0.5e-3, 0.5e-3), rel=1e-12)


def test_unequal_cylinders_reduce_to_wire_over_plane_for_huge_body():
    # A cylinder of very large radius looks like a plane to a thin wire (gap h - a fixed);
    # the unequal-radius formula must approach the wire-over-plane one (handbook limit).
    a, h = 0.75e-3, 5e-3
    big = 1e3
    c_cyl = parallel_cylinders_capacitance_f_per_m(big + h, a, big)
    assert c_cyl == pytest.approx(wire_over_plane_capacitance_f_per_m(h, a), rel=1e-4)


def test_series_capacitance():
    # Capacitors in series: 1/C = 1/C1 + 1/C2 (any circuit textbook).
    assert series_capacitance_f(100e-12, 10e-12) == pytest.approx(1e-9 / 110.0, rel=1e-12)


# ----- counter ---------------------------------------------------------------------------

def test_counter_reports_multiples_of_rate(jacket_take):
    # Counts over a gate of 1/rate_hz give counts * rate_hz (definition of a gated counter).
    counts = jacket_take.freq_hz / jacket_take.rate_hz
    assert np.array_equal(counts, np.round(counts))
    assert jacket_take.freq_hz.dtype == np.float64


def test_counter_error_never_accumulates():
    # Carrying the fractional cycle means the total count over N gates is within one count of
    # f * N * gate (common practice for reciprocal-free frequency counters, no source).
    f = np.full((1000, 2), [173_456.789, 431_111.5])
    counts, _ = count_cycles(f, 0.01, np.zeros(2, np.int64))
    assert np.all(np.abs(counts.sum(0) - f[0] * 1000 * 0.01) <= 1.0)
    assert set(np.unique(counts[:, 0])) <= {1734, 1735}


@settings(max_examples=25, deadline=None)
@given(st.lists(st.integers(min_value=1, max_value=40), min_size=1, max_size=6))
def test_counter_in_pieces_equals_whole(pieces):
    rng = np.random.default_rng(1)
    f = rng.uniform(150e3, 500e3, (sum(pieces), 3))
    whole, _ = count_cycles(f, 0.01, np.array([5, 0, 2**23]))
    phase, parts, k = np.array([5, 0, 2**23]), [], 0
    for n in pieces:
        c, phase = count_cycles(f[k:k + n], 0.01, phase)
        parts.append(c)
        k += n
    assert np.array_equal(np.concatenate(parts), whole)


# ----- the jacket -------------------------------------------------------------------------

def test_take_shape_and_time(jacket_take):
    t = jacket_take
    assert t.channel_names == ("left_sleeve", "right_sleeve", "left_front", "right_front")
    assert t.freq_hz.shape == (t.t_s.size, 4)
    assert t.rate_hz == DEFAULT_RATE_HZ
    assert np.allclose(np.diff(t.t_s), 1.0 / t.rate_hz)
    assert (t.wearer, t.session) == ("wearer1", "session0")


def test_centres_spread_over_band():
    j = Jacket(seed=0)
    centre = np.array(j.centre_hz)
    assert np.all((centre > 150e3) & (centre < 500e3))
    assert np.all(centre[1:] / centre[:-1] > 1.15)  # kept apart


def test_standing_stays_near_centre(jacket_take):
    rel = jacket_take.freq_hz[:400] / np.array(jacket_take.centre_hz) - 1.0
    assert np.all(np.abs(rel.mean(0)) < 0.003)


def test_same_seed_is_bit_identical():
    script = [("standing", 1.0), ("tap_left_sleeve", None), ("fidgeting", 2.0)]
    a = simulate_take(seed=5, wearer=2, session=1, script=script)
    b = simulate_take(seed=5, wearer=2, session=1, script=script)
    assert np.array_equal(a.freq_hz, b.freq_hz)
    assert np.array_equal(a.t_s, b.t_s)
    assert a.intervals == b.intervals


def test_chunked_rendering_equals_one_call():
    script = [("standing", 1.5), ("bow", None), ("walking", 2.0), ("hand_on_heart", 3.0), ("standing", 0.73)]
    whole = Jacket(seed=2, wearer=1).perform(script)
    j = Jacket(seed=2, wearer=1)
    parts = [j.perform(script[:2]), j.perform(script[2:3]), j.perform(script[3:])]
    assert np.array_equal(np.concatenate([p.freq_hz for p in parts]), whole.freq_hz)
    assert np.array_equal(np.concatenate([p.t_s for p in parts]), whole.t_s)
    assert parts[1].t_s[0] == parts[0].t_s[-1] + 0.01
    assert sum((p.intervals for p in parts), ()) == whole.intervals


def test_wearers_differ():
    a, b = Jacket(seed=0, wearer=0), Jacket(seed=0, wearer=1)
    assert a.wearer != b.wearer
    script = [("standing", 2.0)]
    assert not np.array_equal(a.perform(script).freq_hz, b.perform(script).freq_hz)
    assert 1.55 <= a.wearer.height_m <= 1.95


def test_session_shifts_resting_baseline():
    centres = np.array([Jacket(seed=0, wearer=0, session=s).centre_hz for s in range(3)])
    rel = np.abs(centres[1:] / centres[0] - 1.0)
    # A refit moves cables by mm-cm; the baseline moves by more than one count (100 Hz).
    assert np.all(np.max(np.abs(centres[1:] - centres[0]), axis=1) > 100.0)
    assert np.all(rel < 0.02)


def test_touching_a_sleeve_shifts_frequency_by_documented_amount():
    # Documented in Jacket.touch_shift: a hand coming from 30 cm to touching the cable lowers a
    # sleeve channel by about 1.3-1.8 % and a front channel by about 0.9-1.2 %.
    for wearer in (0, 3):
        j = Jacket(seed=0, wearer=wearer, session=wearer)
        for name in j.channel_names:
            shift = j.touch_shift(name)
            low, high = (-0.02, -0.012) if "sleeve" in name else (-0.013, -0.008)
            assert low < shift < high, (wearer, name, shift)


def test_tap_shows_on_the_tapped_sleeve():
    j = Jacket(seed=0, wearer=0)
    take = j.perform([("standing", 1.0), ("tap_left_sleeve", 1.8), ("standing", 1.0)])
    rel = take.freq_hz / np.array(take.centre_hz) - 1.0
    during = rel[100:280, 0]
    assert during.min() < -0.005  # the body coming near lowers the frequency
    assert np.abs(rel[:90, 0]).max() < 0.005


def test_static_frequency_at_rest_is_centre():
    j = Jacket(seed=4, wearer=2, session=3, n_antennas=6)
    assert len(j.channel_names) == 6
    assert np.allclose(j.static_frequencies_hz(neutral_pose(1))[0], j.centre_hz, rtol=1e-12)


def test_unknown_label_rejected():
    with pytest.raises(ValueError):
        Jacket().perform([("moonwalk", 1.0)])
    with pytest.raises(ValueError):
        Jacket().perform([("standing", -1.0)])


# ----- scripts and labels ------------------------------------------------------------------

def test_vocabulary():
    assert len(GESTURES) >= 8
    assert set(GESTURES.values()) == {"gesture", "posture"}
    assert NULL_ACTIVITIES == ("standing", "walking", "fidgeting")


def test_training_script_labels_and_durations():
    rng = np.random.default_rng(7)
    script = training_script(rng, repetitions=2)
    assert {label for label, _ in script if label in NULL_ACTIVITIES} == set(NULL_ACTIVITIES)
    j = Jacket(seed=1, wearer=2)
    take = j.perform(script)
    labels = [iv.label for iv in take.intervals]
    for name in GESTURES:
        assert labels.count(name) == 2
    speed = j.wearer.speed
    gate = 1.0 / take.rate_hz
    for iv in take.intervals:
        length = iv.end_s - iv.start_s
        if GESTURES[iv.label] == "gesture":
            assert GESTURE_RANGE_S[0] - gate <= length <= GESTURE_RANGE_S[1] + gate
        else:
            low = POSTURE_HOLD_S[0] + 2 * POSTURE_MOVE_S[0] / speed
            high = POSTURE_HOLD_S[1] + 2 * POSTURE_MOVE_S[1] / speed
            assert low - gate <= length <= high + gate
    # Intervals follow the script: starts are the running sum of the items before them.
    assert take.intervals[0].start_s == pytest.approx(script[0][1], abs=gate)


def test_given_durations_are_kept():
    take = Jacket().perform([("walking", 2.5), ("push_forward", 1.25), ("standing", 1.0),
                             ("arms_crossed", 4.0)])
    assert [(iv.label, iv.start_s, iv.end_s) for iv in take.intervals] == [
        ("push_forward", 2.5, 3.75), ("arms_crossed", 4.75, 8.75)]
    assert take.t_s.size == 875
    assert math.isclose(take.t_s[-1], 8.74)
