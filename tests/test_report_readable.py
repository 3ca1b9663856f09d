"""The evaluation page a person reads before a show: the show figures first, in a table;
pictures whose legends leave the bars visible, whole-number counts, and a timeline that
says how much of the take it shows."""

import re

import numpy as np
import pytest

pytest.importorskip("matplotlib", reason="the report's pictures need the plot extra (matplotlib)")

from bridge.decisions import Event  # noqa: E402
from bridge.evaluation import report  # noqa: E402
from bridge.evaluation.events import Span  # noqa: E402
from bridge.evaluation.heldout import classification_scores  # noqa: E402
from bridge.sources import Recording  # noqa: E402

# Event summaries in the two vocabularies drape has written (window-category counts, and the
# strict firing counts with rates): the table reads either.
CATEGORY_SUMMARY = {"true_events": 40, "true_correct": 31, "true_deleted": 9, "detections": 36,
                    "detected_inserted": 5, "event_recall": 0.775, "false_triggers_per_null_hour": 6.0,
                    "null_hours": 0.5, "latency_s": {"median": 0.31, "p95": 0.92, "count": 31}}
FIRING_SUMMARY = {"performed": 40, "hit": 31, "missed": 9, "double": 1, "wrong_name": 2, "ordinary": 3, "false": 6,
                  "recall": 0.775, "take_hours": 0.8, "ordinary_hours": 0.5,
                  "rates": {"false_per_take_hour": {"count": 6, "hours": 0.8, "per_hour": 7.5, "low": 2.75, "high": 16.3,
                                                    "too_short": "0.80 h cannot show ≤ 1 per hour"},
                            "ordinary_per_ordinary_hour": {"count": 3, "hours": 0.5, "per_hour": 6.0, "low": 1.24,
                                                           "high": 17.5}},
                  "latency_s": {"median": 0.31, "p95": 0.92, "count": 31}}


def a_result(seconds=30.0, events=None, scores=None):
    n = int(seconds * 100)
    rec = Recording(100.0, ("a", "b"), np.arange(n) / 100.0, 2e5 + np.random.default_rng(0).normal(0, 50, (n, 2)),
                    wearer="wearer0", session="session1")
    result = classification_scores(*(scores or ([0, 1, 1, 2], [0, 1, 2, 2])), ("null", "bow", "sweep_across"))
    result["takes"] = [{"rec": rec, "truth": [Span(5.0, 6.5, "bow")], "events": [Event(6.8, "bow", "gesture", 0.9)],
                        "latency_s": [0.3, 0.35, 0.5]}]
    result["events"] = events
    return result


@pytest.mark.parametrize("summary", [CATEGORY_SUMMARY, FIRING_SUMMARY], ids=["categories", "firings"])
def test_the_show_figures_are_a_table_at_the_top(tmp_path, summary):
    text = report.write_report(a_result(events=summary), tmp_path / "rep", "a show check").read_text()
    table = re.search(r"<table class='show'>(.*?)</table>", text, re.S)
    assert table and text.index("<table class='show'>") < text.index("<img")  # before any picture
    cells = dict(re.findall(r"<tr><th>(.*?)</th><td>(.*?)</td></tr>", table.group(1)))
    assert cells["gestures performed"] == "40" and cells["misses"] == "9"
    assert cells["hits (recognised)"].startswith("31 (recall 0.775")
    assert cells["false firings"].startswith(("5", "6"))
    assert any("per hour" in k for k in cells)
    assert "median +0.31 s" in cells["latency, gesture end → cue"]


def keep_figures(monkeypatch):
    """The figures report.py draws, kept open instead of closed after saving."""
    plt = report._plt()
    kept = []
    monkeypatch.setattr(plt, "close", lambda fig=None: kept.append(fig))
    return kept


def test_the_per_class_legend_leaves_every_bar_visible(tmp_path, monkeypatch):
    kept = keep_figures(monkeypatch)
    # Perfect scores: every bar reaches the top, where a legend inside the axes would sit on them.
    result = classification_scores([0, 1, 2] * 5, [0, 1, 2] * 5, ("null", "bow", "sweep_across"))
    report.per_class_png(result, tmp_path / "per_class.png")
    fig = kept[-1]
    fig.canvas.draw()
    ax = fig.axes[0]
    legend = ax.get_legend().get_window_extent()
    assert ax.patches and not any(legend.overlaps(p.get_window_extent()) for p in ax.patches)


def test_latency_histogram_counts_are_whole_numbers(tmp_path, monkeypatch):
    kept = keep_figures(monkeypatch)
    report.latency_png([0.3, 0.35, 0.5], tmp_path / "latency.png")
    ticks = kept[-1].axes[0].get_yticks()
    assert len(ticks) >= 2 and all(float(t).is_integer() for t in ticks)


@pytest.mark.parametrize("seconds, says", [(200.0, "all 200 s"), (900.0, "the first 600 s of 900 s")])
def test_the_timeline_says_how_much_of_the_take_it_shows(tmp_path, seconds, says):
    text = report.write_report(a_result(seconds), tmp_path / "rep", "t").read_text()
    heading = re.search(r"<h2>(Timeline of a held-out take[^<]*)</h2>", text).group(1)
    assert says in heading
