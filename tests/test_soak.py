"""Soak, suite-sized: a few simulated minutes through the live loop (the code path of
`drape bench --soak`), compared event for event with an offline replay of the captured take."""

from collections import Counter
from types import SimpleNamespace

import numpy as np

from bridge.evaluation.soak import SoakSource, compare_events, event_key, soak
from bridge.recognition import load_model


def test_live_events_equal_replay_and_memory_stays_flat(second_model_file, tmp_path):
    model = load_model(second_model_file)
    r = soak(4 / 60, model=model, warmup_s=60.0, out_dir=tmp_path, heap=True, report=lambda t: None)
    c = r.comparison
    assert r.events > 5, "the soak should decide some events in four minutes of performance"
    assert c["matched"] == c["live"] == c["replay"] == r.events
    assert c["only_live"] == c["only_replay"] == c["doubled_live"] == 0 and c["in_order"]
    assert r.samples == int(round(4 * 60 * model.rate_hz)), "every sample reached the pipeline"
    assert r.dropped == 0 and r.sent > 0 and r.received == r.sent, "every OSC message arrived on loopback"
    # Generous bounds, so scheduling noise cannot make this flaky: the soak target is < 5 MB
    # over hours (`drape bench --soak 2`); three minutes must stay far below 20 MB.
    assert r.rss_growth_mb < 20.0
    assert r.heap_growth_mb is not None and r.heap_growth_mb < 5.0
    assert (tmp_path / "soak-take.csv").stat().st_size > 0


def test_comparison_counts_lost_and_doubled_events():
    live = [(1.0, "bow", "gesture"), (2.0, "bow", "gesture"), (2.0, "bow", "gesture"), (3.5, "arms_crossed", "entered")]
    replay = [(1.0, "bow", "gesture"), (2.0, "bow", "gesture"), (4.0, "arms_crossed", "entered")]
    c = compare_events(live, replay)
    assert (c["matched"], c["only_live"], c["only_replay"], c["doubled_live"]) == (2, 2, 1, 1)
    assert not c["in_order"]
    assert event_key(SimpleNamespace(t_s=1.23456789, gesture="bow", kind="gesture")) == (1.2346, "bow", "gesture")


def test_soak_source_streams_in_live_sized_blocks_and_writes_every_sample():
    rows = []
    w = SimpleNamespace(samples=lambda t, f: rows.append((t.copy(), f.copy())))
    src = SoakSource(130.0, seed=3, block_s=(0.01, 0.05), writer=w)
    sizes = Counter()
    total = 0
    while not src.ended:
        b = src.read()
        sizes[len(b)] += 1
        total += len(b)
        assert len(b) == 0 or np.all(np.diff(b.t_s) > 0)
    assert total == 13000 == sum(len(t) for t, _ in rows)
    assert min(sizes) >= 1 and max(sizes) <= 5  # 10 to 50 ms at 100 Hz
    assert len(sizes) == 5
    t = np.concatenate([t for t, _ in rows])
    np.testing.assert_allclose(t, np.arange(13000) / 100.0)
    # after 130 s only the chunks needed so far were rendered, not the whole soak
    assert src._f.shape[0] < 200 * 100
