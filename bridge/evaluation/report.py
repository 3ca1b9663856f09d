"""An evaluation as an HTML page with pictures, for reading before a show.

Pictures need matplotlib (the ``plot`` extra); without it ``write_report`` raises
ImportError saying what to install. The page is plain HTML with the PNGs beside it.
"""

from __future__ import annotations

import html
import json
from pathlib import Path

import numpy as np


def _plt():
    try:
        import matplotlib
    except ImportError:
        raise ImportError("the report's pictures need matplotlib: pip install 'drape-bridge[plot]'") from None
    matplotlib.use("Agg")  # files only, no display needed
    import matplotlib.pyplot as plt
    return plt


def confusion_png(result: dict, path: Path) -> None:
    plt = _plt()
    conf = np.array(result["confusion"], dtype=float)
    classes = result["classes"]
    share = conf / np.maximum(conf.sum(axis=1, keepdims=True), 1)
    fig, ax = plt.subplots(figsize=(1.0 + 0.6 * len(classes), 0.8 + 0.55 * len(classes)))
    im = ax.imshow(share, vmin=0, vmax=1, cmap="viridis")
    ax.set_xticks(range(len(classes)), classes, rotation=60, ha="right", fontsize=8)
    ax.set_yticks(range(len(classes)), classes, fontsize=8)
    ax.set_xlabel("decided"); ax.set_ylabel("performed")
    for i in range(len(classes)):
        for j in range(len(classes)):
            if conf[i, j]:
                ax.text(j, i, int(conf[i, j]), ha="center", va="center", fontsize=7,
                        color="black" if share[i, j] > 0.5 else "white")
    fig.colorbar(im, ax=ax, label="share of the row's windows")
    fig.tight_layout(); fig.savefig(path, dpi=110); plt.close(fig)


def per_class_png(result: dict, path: Path) -> None:
    plt = _plt()
    classes = result["classes"]
    x = np.arange(len(classes))
    fig, ax = plt.subplots(figsize=(1.5 + 0.6 * len(classes), 3.2))
    for k, (name, off) in enumerate((("precision", -0.27), ("recall", 0.0), ("f1", 0.27))):
        ax.bar(x + off, [result["per_class"][c][name] for c in classes], width=0.26, label=name)
    ax.set_xticks(x, classes, rotation=60, ha="right", fontsize=8)
    ax.set_ylim(0, 1.05); ax.set_title("window scores per class", fontsize=9)
    ax.legend(fontsize=8, loc="upper left", bbox_to_anchor=(1.01, 1.0), borderaxespad=0)  # beside the bars, never on them
    fig.tight_layout(); fig.savefig(path, dpi=110, bbox_inches="tight"); plt.close(fig)


def timeline_png(take: dict, model_rate_hz: float, path: Path, span_s: float = 600.0) -> float:
    """A take's channels, true gestures and decided events, from its start to ``span_s`` at most
    (the width stays readable); returns the seconds shown."""
    plt = _plt()
    rec = take["rec"]
    n = min(rec.freq_hz.shape[0], int(span_s * rec.rate_hz))
    t = np.arange(n) / rec.rate_hz
    f = rec.freq_hz[:n]
    rel = f / np.median(f, axis=0) - 1.0
    width = min(22.0, max(11.0, n / rec.rate_hz / 30.0))  # about 30 s per inch beyond 5.5 min
    fig, (a1, a2) = plt.subplots(2, 1, figsize=(width, 4.6), sharex=True, gridspec_kw={"height_ratios": [2, 1.3]})
    for c in range(rel.shape[1]):
        a1.plot(t, rel[:, c] * 100, lw=0.7, label=rec.channel_names[c])
    a1.set_ylabel("frequency change, %")
    a1.legend(fontsize=7, loc="upper left", bbox_to_anchor=(1.005, 1.0), borderaxespad=0)
    labels = sorted({s.label for s in take["truth"]} | {e.gesture for e in take["events"]})
    row = {l: i for i, l in enumerate(labels)}
    for s in take["truth"]:
        if s.start_s < t[-1]:
            a2.barh(row[s.label], s.end_s - s.start_s, left=s.start_s, height=0.6, color="tab:blue", alpha=0.5)
    for e in take["events"]:
        if e.t_s <= t[-1] and e.kind in ("gesture", "entered"):
            a2.plot(e.t_s, row[e.gesture], "v", color="tab:red", ms=6)
    a2.set_yticks(range(len(labels)), labels, fontsize=7)
    a2.set_xlabel("time, s"); a2.set_title("performed (bars) and decided (triangles)", fontsize=9)
    fig.tight_layout(); fig.savefig(path, dpi=100, bbox_inches="tight"); plt.close(fig)
    return n / rec.rate_hz


def latency_png(latency_s, path: Path) -> None:
    plt = _plt()
    from matplotlib.ticker import MaxNLocator
    fig, ax = plt.subplots(figsize=(5, 3))
    if len(latency_s):
        ax.hist(latency_s, bins=20, color="tab:green")
    ax.yaxis.set_major_locator(MaxNLocator(integer=True))  # counts of gestures: whole numbers
    ax.set_xlabel("gesture end → event, s"); ax.set_ylabel("gestures")
    fig.tight_layout(); fig.savefig(path, dpi=110); plt.close(fig)


def _get(d: dict, *keys):
    """The first of ``keys`` present in ``d`` (event summaries have had more than one vocabulary)."""
    for k in keys:
        if k in d and d[k] is not None:
            return d[k]
    return None


def _per_hour(r) -> str:
    if not isinstance(r, dict):
        return "n/a" if r is None else f"{r}"
    if r.get("per_hour") is None:
        return f"{r.get('count', 0)} (no time to count over)"
    interval = f" (95 % {r['low']:.2f}–{r['high']:.2f})" if "low" in r and "high" in r else ""
    return f"{r['per_hour']:.2f}{interval} over {r.get('hours', 0):.2f} h"


def show_figures(e: dict | None) -> list[tuple[str, str]]:
    """The event figures that matter for a show, as (what, value) rows: gestures performed,
    hits, misses, false firings (per hour) and latency. Empty without event figures."""
    if not e:
        return []
    rows = []
    performed, hits, missed = _get(e, "performed", "true_events"), _get(e, "hit", "true_correct"), \
        _get(e, "missed", "true_deleted")
    recall = _get(e, "recall", "event_recall")
    rows.append(("gestures performed", f"{performed}"))
    rows.append(("hits (recognised)", f"{hits}" + (f" (recall {recall:.3f})" if isinstance(recall, float) else "")))
    rows.append(("misses", f"{missed}"))
    false = _get(e, "false", "detected_inserted")
    kinds = [(k, w) for k, w in (("double", "double"), ("wrong_name", "wrong name"), ("ordinary", "in ordinary movement"))
             if k in e]
    detail = f" ({', '.join(f'{e[k]} {w}' for k, w in kinds)})" if kinds else ""
    rows.append(("false firings", f"{false}{detail}"))
    rates = e.get("rates") or {}
    if rates:
        rows.append(("false firings per hour of take", _per_hour(rates.get("false_per_take_hour"))))
        rows.append(("firings per hour of ordinary movement", _per_hour(rates.get("ordinary_per_ordinary_hour"))))
    else:
        hours = e.get("null_hours")
        over = f" over {hours:.2f} h" if isinstance(hours, (int, float)) else ""
        rows.append(("false firings per hour of ordinary movement", f"{e.get('false_triggers_per_null_hour')}{over}"))
    lat = e.get("latency_s") or {}
    if lat.get("median") is not None:
        rows.append(("latency, gesture end → cue", f"median {lat['median']:+.2f} s, 95th percentile {lat['p95']:+.2f} s"))
    short = (rates.get("false_per_take_hour") or {}).get("too_short") if rates else None
    if short:
        rows.append(("note", short))
    return rows


def show_table(e: dict | None) -> str:
    rows = show_figures(e)
    if not rows:
        return ""
    body = "".join(f"<tr><th>{html.escape(k)}</th><td>{html.escape(v)}</td></tr>" for k, v in rows)
    return f"<h2>For the show</h2><table class='show'>{body}</table>"


REPORT_FILES = ("index.html", "confusion.png", "per_class.png", "timeline.png", "latency.png")


def write_report(result: dict, out_dir: str | Path, title: str, command: str = "") -> Path:
    """Write index.html and its PNGs (at most ``REPORT_FILES``) into out_dir (created); returns
    the page's path."""
    _plt()
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    confusion_png(result, out / "confusion.png")
    per_class_png(result, out / "per_class.png")
    pictures = [("Confusion of windows", "confusion.png"), ("Scores per class", "per_class.png")]
    takes = result.get("takes") or []
    if takes:
        rec0 = takes[0]["rec"]
        shown_s = timeline_png(takes[0], rec0.rate_hz, out / "timeline.png")
        total_s = rec0.freq_hz.shape[0] / rec0.rate_hz
        lat = [x for t in takes for x in t["latency_s"]]
        latency_png(lat, out / "latency.png")
        how_much = (f"all {total_s:.0f} s" if shown_s >= total_s - 1e-9 else f"the first {shown_s:.0f} s of {total_s:.0f} s")
        others = f"; {len(takes) - 1} more held-out takes are not drawn" if len(takes) > 1 else ""
        pictures += [(f"Timeline of a held-out take (wearer {html.escape(str(rec0.wearer))}, session "
                      f"{html.escape(str(rec0.session))}): {how_much}{others}", "timeline.png"),
                     ("Decision latency", "latency.png")]
    summary = {k: v for k, v in result.items() if k not in ("takes", "per_class", "confusion", "confidence", "correct")}
    calibration = f", calibration error {result['calibration_error']:.3f}" if "calibration_error" in result else ""
    rows = "".join(f"<tr><td>{html.escape(c)}</td><td>{v['precision']:.3f}</td><td>{v['recall']:.3f}</td>"
                   f"<td>{v['f1']:.3f}</td><td>{v['support']}</td></tr>" for c, v in result["per_class"].items())
    figs = "".join(f"<h2>{h}</h2><img src='{p}' alt='{html.escape(h)}'>" for h, p in pictures)
    page = f"""<!doctype html><html><head><meta charset="utf-8"><title>{html.escape(title)}</title>
<style>body{{font-family:sans-serif;max-width:70em;margin:1em auto}}td,th{{padding:2px 8px;text-align:right}}
pre{{background:#f4f4f4;padding:8px;overflow:auto}}img{{max-width:100%}}
table.show th{{text-align:left}}table.show td{{text-align:left}}</style></head><body>
<h1>{html.escape(title)}</h1>
{show_table(result.get("events"))}
<p>Accuracy {result['accuracy']:.3f}, macro F1 {result['macro_f1']:.3f}{calibration} over {result.get('windows', 0)} windows.</p>
{f"<p>Command: <code>{html.escape(command)}</code></p>" if command else ""}
<table><tr><th>class</th><th>precision</th><th>recall</th><th>F1</th><th>windows</th></tr>{rows}</table>
{figs}
<h2>Summary</h2><pre>{html.escape(json.dumps(summary, indent=1, default=str))}</pre>
</body></html>"""
    page_path = out / "index.html"
    page_path.write_text(page, encoding="utf-8")
    return page_path
