"""The take file: a recording of one wearer's session, human-readable and written as it goes.

    #drape-take 1
    #meta {"rate_hz": 100.0, "channels": [...], "wearer": "...", "session": "...", ...}
    t_s,left_sleeve,right_sleeve,...
    0.0000,181234.0,...
    #label {"start_s": 3.2, "end_s": 4.5, "label": "raise_right"}
    #void {"start_s": 3.2, "end_s": 4.5, "label": "raise_right"}
    #skip {"label": "bow"}
    #cut {"reason": "SIGINT", "step": "...", "prompts_left": {"bow": 2}, "ordinary_left_s": 180.0, ...}

Lines starting with '#' carry metadata and labels (labels may come anywhere, appended as
gestures end); the rest is CSV that spreadsheet tools read with '#' as comment. The writer
flushes at least once a second, so a crash loses at most the last second. A ``#void`` line
withdraws an earlier label with the same start, end and name (guided capture writes one when
the wearer asks to redo a take: the file stays append-only). A ``#cut`` line, written last,
says the capture was cut short, where, and what it did not record; readers that do not know
it skip it as they skip every '#' line they do not know. A process killed outright writes no
``#cut`` line; so a guided capture states its plan in the header (``"plan"``: the prompts,
label: count, and the ordinary movement after them, s) and writes a ``#skip`` line for each
prompt the wearer skips, and a take that holds less than its plan is read as cut short
(``ENDS_UNSAID``). The full description of the format, version 1, is in docs/acquisition.md.
"""

from __future__ import annotations

import json
import math
import os
import time
from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

MAGIC = "#drape-take 1"


class RecordingError(ValueError):
    """A take file that cannot be read, naming the file and line."""


@dataclass(frozen=True)
class Label:
    start_s: float
    end_s: float
    label: str


ENDS_MID_LINE = "the file ends mid-line"   # a CutShort reason: cut off outside any capture
# a CutShort reason: a take holding less than the plan in its header, and no #cut line
ENDS_UNSAID = "it ended without saying so: killed, power lost or disk full"


@dataclass(frozen=True)
class CutShort:
    """A capture stopped before its end (a ``#cut`` line): why, where, and what is not in the take."""

    reason: str                     # "SIGINT", "q pressed", "garment gone", ...
    step: str                       # where it stood, e.g. "the countdown to prompt 6 of 45 (bow)"
    prompts_left: tuple = ()        # ((label, count), ...) prompts never recorded
    ordinary_left_s: float = 0.0    # ordinary movement not recorded, s
    ordinary_planned_s: float = 0.0  # ordinary movement the capture meant to record, s

    def missing(self) -> str:
        """What the take lacks, e.g. "2 × bow, 1 × raise_left; all 180 s of ordinary movement"."""
        parts = [", ".join(f"{n} × {label}" for label, n in self.prompts_left)] if self.prompts_left else []
        if self.ordinary_left_s > 0:
            parts.append(f"all {self.ordinary_planned_s:.0f} s of ordinary movement (none recorded)"
                         if self.ordinary_left_s >= self.ordinary_planned_s - 0.05
                         else f"{self.ordinary_left_s:.0f} s of the {self.ordinary_planned_s:.0f} s of ordinary movement")
        return "; ".join(parts) or "nothing planned (it stopped at the very end)"

    def to_json(self) -> str:
        return json.dumps({"reason": self.reason, "step": self.step, "prompts_left": dict(self.prompts_left),
                           "ordinary_left_s": round(self.ordinary_left_s, 3),
                           "ordinary_planned_s": round(self.ordinary_planned_s, 3)})

    @classmethod
    def from_json(cls, text: str) -> "CutShort":
        """From a ``#cut`` line's JSON; an unreadable one still marks the take as cut short."""
        try:
            d = json.loads(text)
            return cls(str(d.get("reason", "")), str(d.get("step", "")),
                       tuple((str(k), int(v)) for k, v in dict(d.get("prompts_left", {})).items()),
                       float(d.get("ordinary_left_s", 0.0)), float(d.get("ordinary_planned_s", 0.0)))
        except (json.JSONDecodeError, AttributeError, TypeError, ValueError):
            return cls("unknown", "unknown (its #cut line is unreadable)")


@dataclass
class Recording:
    rate_hz: float
    channel_names: tuple[str, ...]
    t_s: np.ndarray
    freq_hz: np.ndarray
    intervals: tuple[Label, ...] = ()
    wearer: str = ""
    session: str = ""
    layout: str = ""
    kinds: dict = field(default_factory=dict)
    cut_short: CutShort | None = None   # set when its capture stopped before the end
    check_in: bool = False              # a short take recorded after dressing for a show (capture --check-in)

    @classmethod
    def from_take(cls, take, kinds: dict | None = None, layout: str = "default") -> "Recording":
        """From a simulated take (bridge.garment.Take) or anything with the same fields."""
        return cls(take.rate_hz, tuple(take.channel_names), np.asarray(take.t_s), np.asarray(take.freq_hz),
                   tuple(Label(i.start_s, i.end_s, i.label) for i in take.intervals),
                   str(take.wearer), str(take.session), layout, dict(kinds or {}))

    def fingerprint(self) -> str:
        """A short digest of the samples (rate, channels, frequencies): the same take read
        again gives the same one, so a model can name the takes it was fitted on."""
        import hashlib
        h = hashlib.sha256(json.dumps([self.rate_hz, list(self.channel_names)]).encode())
        h.update(np.ascontiguousarray(self.freq_hz, dtype="<f8").tobytes())
        return h.hexdigest()[:16]


class TakeWriteError(OSError):
    """The take could not be written (disk full, medium gone). What was on disk is kept,
    cut back to its last whole line so it stays readable; ``kept_bytes`` says how much."""

    def __init__(self, path: Path, cause: OSError, kept_bytes: int):
        super().__init__(cause.errno, f"cannot write {path}: {cause.strerror or cause}; "
                                      f"the take so far is kept ({kept_bytes} bytes)")
        self.path, self.cause, self.kept_bytes = path, cause, kept_bytes


class RecordingWriter:
    """Appends samples and labels to a take file, flushing at least every ``flush_s``.

    Lines are gathered in memory and written whole with unbuffered writes, so the writer
    always knows how many bytes reached the file. When a write fails (ENOSPC: the disk is
    full) the file is cut back to its last complete line, every later call raises
    ``TakeWriteError`` at once, and ``close`` does not raise: the take so far stays readable.
    """

    MAX_PENDING = 1 << 16  # bytes gathered before writing even within flush_s

    def __init__(self, path: str | Path, rate_hz: float, channel_names, wearer: str = "", session: str = "",
                 layout: str = "", kinds: dict | None = None, flush_s: float = 1.0, check_in: bool = False,
                 plan: dict | None = None):
        self.path = Path(path)
        self.fh = open(self.path, "wb", buffering=0)
        self.flush_s = flush_s
        self.written_bytes = 0          # bytes on disk, all of them whole lines
        self.failed: TakeWriteError | None = None
        self._pending: list[bytes] = []
        self._pending_bytes = 0
        self._last_flush = time.monotonic()
        meta = {"rate_hz": rate_hz, "channels": list(channel_names), "wearer": wearer, "session": session,
                "layout": layout, "kinds": kinds or {}}
        if check_in:   # named only when set: every other take's header stays as it was
            meta["check_in"] = True
        if plan is not None:   # a guided capture's plan: {"prompts": {label: count}, "ordinary_s": s}
            meta["plan"] = {"prompts": {str(k): int(v) for k, v in dict(plan["prompts"]).items()},
                            "ordinary_s": round(float(plan["ordinary_s"]), 3)}
        self._add(f"{MAGIC}\n#meta {json.dumps(meta)}\n" + ",".join(["t_s", *channel_names]) + "\n")
        self.flush()

    def samples(self, t_s: np.ndarray, freq_hz: np.ndarray) -> None:
        rows = np.column_stack([t_s, freq_hz])
        self._add("".join(f"{r[0]:.4f}," + ",".join(f"{v:.2f}" for v in r[1:]) + "\n" for r in rows))
        self._maybe_flush()

    def label(self, start_s: float, end_s: float, label: str) -> None:
        self._add(f"#label {json.dumps({'start_s': round(start_s, 4), 'end_s': round(end_s, 4), 'label': label})}\n")
        self._maybe_flush()

    def void(self, start_s: float, end_s: float, label: str) -> None:
        """Withdraw a label written earlier (same start, end and name)."""
        self._add(f"#void {json.dumps({'start_s': round(start_s, 4), 'end_s': round(end_s, 4), 'label': label})}\n")
        self._maybe_flush()

    def skip(self, label: str) -> None:
        """A planned prompt the wearer skipped: not recorded on purpose, so not missing."""
        self._add(f"#skip {json.dumps({'label': label})}\n")
        self._maybe_flush()

    def cut(self, cut: CutShort) -> None:
        """Mark the take as cut short (call last, before ``close``)."""
        self._add(f"#cut {cut.to_json()}\n")
        self.flush()

    def _add(self, text: str) -> None:
        if self.failed is not None:
            raise self.failed
        data = text.encode("utf-8")
        self._pending.append(data)
        self._pending_bytes += len(data)

    def _maybe_flush(self) -> None:
        now = time.monotonic()
        if now - self._last_flush >= self.flush_s or self._pending_bytes >= self.MAX_PENDING:
            self.flush()

    def flush(self) -> None:
        """Write what is gathered. On failure keep only whole lines and raise TakeWriteError."""
        if self.failed is not None:
            raise self.failed
        data = b"".join(self._pending)
        self._pending, self._pending_bytes = [], 0
        self._last_flush = time.monotonic()
        done = 0
        try:
            while done < len(data):
                n = self.fh.write(data[done:])
                if not n:  # the file system took nothing and said nothing: treat as full
                    raise OSError(28, os.strerror(28))
                done += n
        except OSError as exc:
            # Part of the data may be on disk, ending mid-line: cut back to the last whole line
            # (truncating frees space, so it works on a full disk) so readers never meet a torn line.
            whole = data[:done].rfind(b"\n") + 1
            self.written_bytes += whole
            try:
                self.fh.truncate(self.written_bytes)
            except OSError:
                pass  # the reader drops a cut last line anyway
            self.failed = TakeWriteError(self.path, exc, self.written_bytes)
            raise self.failed from None
        self.written_bytes += len(data)

    def close(self) -> None:
        """Write what is left and close; never raises for a failed write (see ``failed``)."""
        if self.fh.closed:
            return
        try:
            if self.failed is None and self._pending:
                self.flush()
        except TakeWriteError:
            pass
        finally:
            self.fh.close()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()


def write_recording(path: str | Path, rec: Recording) -> Path:
    with RecordingWriter(path, rec.rate_hz, rec.channel_names, rec.wearer, rec.session, rec.layout, rec.kinds,
                         check_in=rec.check_in) as w:
        w.samples(rec.t_s, rec.freq_hz)
        for iv in rec.intervals:
            w.label(iv.start_s, iv.end_s, iv.label)
        if rec.cut_short is not None:
            w.cut(rec.cut_short)
    return Path(path)


def describe_incomplete(rec: Recording, path) -> str:
    """A warning naming the take when its capture was cut short ("" when it was not), for
    the verbs that learn from or score takes: fit, evaluate, tune."""
    c = rec.cut_short
    if c is None:
        return ""
    if c.reason == ENDS_MID_LINE:   # a file cut off (crash, full disk, interrupted copy), not a capture stopped
        return (f"{path} ends mid-line: the file was cut off (a crash, a full disk or an interrupted copy); its "
                "samples up to there are read, and any labels written after them are lost; copy it again if you can")
    lacks = []
    if c.prompts_left:
        lacks.append("few examples of some gestures")
    if c.ordinary_left_s > 0:
        lacks.append("too little ordinary movement to learn to stay silent on")
    return (f"{path} is an incomplete take: its capture was cut short ({c.reason}) during {c.step}; "
            f"not recorded: {c.missing()}"
            + (f". On its own it gives {' and '.join(lacks)}: capture again or add complete takes" if lacks else ""))


def warn_incomplete(paths, recs, stream=None) -> int:
    """Print ``describe_incomplete`` for each take that has something to say (to stderr);
    return how many were incomplete."""
    import sys
    stream = sys.stderr if stream is None else stream
    n = 0
    for path, rec in zip(paths, recs):
        note = describe_incomplete(rec, path)
        if note:
            print(f"drape: {note}", file=stream, flush=True)
            n += 1
    return n


def _plan(meta: dict):
    """(prompts Counter, ordinary_s) of a header's ``plan``, or None when it has none (a take
    not from a guided capture, or from drape before plans) or an unreadable one: such a take
    is read as before."""
    plan = meta.get("plan")
    try:
        prompts = Counter({str(k): int(v) for k, v in dict(plan["prompts"]).items()})
        ordinary_s = float(plan["ordinary_s"])
    except (KeyError, TypeError, ValueError):
        return None
    if not math.isfinite(ordinary_s) or ordinary_s < 0 or any(v < 0 for v in prompts.values()):
        return None
    return prompts, ordinary_s


def short_of_plan(plan, labels, skips: Counter, length_s: float) -> CutShort | None:
    """The take as cut short (``ENDS_UNSAID``) when it holds less than its capture's ``plan``
    ((prompts, ordinary_s), see ``_plan``), else None. Prompts: each planned one is a label
    or a ``#skip``. Ordinary movement: after the last label the capture rested, then recorded
    ordinary_s, so a take shorter than the last label's end + ordinary_s lacks the difference
    (a kill within the last rest's few seconds goes unseen: the take then holds the ordinary
    movement planned, counted from the last label)."""
    prompts, ordinary_s = plan
    left = prompts - (Counter(iv.label for iv in labels) + skips)
    total = sum(prompts.values()) - sum(min(n, prompts[k]) for k, n in skips.items())
    if left:
        done = total - sum(left.values())
        step = (f"the prompts ({done} of {total} recorded)" if done else
                "the lead-in or the first prompt (none of them recorded)")
        return CutShort(ENDS_UNSAID, step, tuple(left.items()), ordinary_s, ordinary_s)
    last_end = max((iv.end_s for iv in labels), default=0.0)
    missing_s = last_end + ordinary_s - length_s
    if ordinary_s <= 0 or missing_s <= 1e-6:
        return None
    missing_s = min(missing_s, ordinary_s)
    return CutShort(ENDS_UNSAID, f"the ordinary movement after the prompts ({ordinary_s - missing_s:.0f} s of "
                                 f"{ordinary_s:.0f} s)", (), missing_s, ordinary_s)


def read_recording(path: str | Path) -> Recording:
    """Read a take file; a truncated last line (crash while writing, disk full, a copy cut
    short) is dropped, not an error, and the take is marked cut short (``ENDS_MID_LINE``) so
    that the verbs reading it say so."""
    path = Path(path)
    try:
        lines = path.read_text(encoding="utf-8").split("\n")
    except FileNotFoundError:
        raise RecordingError(f"{path}: no such take file") from None
    except UnicodeDecodeError:
        raise RecordingError(f"{path}: not a drape take file (binary; a model or an archive?)") from None
    except OSError as exc:
        raise RecordingError(f"{path}: cannot read ({exc})") from None
    if not lines or lines[0].strip() != MAGIC:
        raise RecordingError(f"{path}:1: not a drape take file (first line should be {MAGIC!r})")
    meta = None
    cut = None
    labels, rows = [], []
    skips: Counter = Counter()
    n_cols = None
    last_no = max((i for i, l in enumerate(lines, start=1) if l.strip()), default=0)  # the last non-empty line
    for no, line in enumerate(lines[1:], start=2):
        s = line.strip()
        if not s:
            continue
        if s.startswith("#meta "):
            try:
                meta = json.loads(s[6:])
                channels = tuple(str(c) for c in meta["channels"])
                rate = float(meta["rate_hz"])
            except (json.JSONDecodeError, KeyError, TypeError, ValueError) as exc:
                raise RecordingError(f"{path}:{no}: metadata line unreadable ({exc})") from None
            if not channels or not (0 < rate < 1e5):
                raise RecordingError(f"{path}:{no}: metadata needs channels and a positive rate_hz")
            n_cols = len(channels) + 1
            continue
        if s.startswith("#label ") or s.startswith("#void "):
            void = s.startswith("#void ")
            try:
                d = json.loads(s[6:] if void else s[7:])
                lab = Label(float(d["start_s"]), float(d["end_s"]), str(d["label"]))
            except (json.JSONDecodeError, KeyError, TypeError, ValueError) as exc:
                if no == len(lines) or all(not l.strip() for l in lines[no:]):
                    break  # a label cut by a crash or a full disk: the take up to it stands
                raise RecordingError(f"{path}:{no}: label line unreadable ({exc})") from None
            if not (math.isfinite(lab.start_s) and lab.end_s > lab.start_s):
                raise RecordingError(f"{path}:{no}: label needs start_s < end_s")
            if void:
                if lab not in labels:
                    raise RecordingError(f"{path}:{no}: #void names no earlier label")
                labels.remove(lab)
            else:
                labels.append(lab)
            continue
        if s.startswith("#cut "):
            cut = CutShort.from_json(s[5:])
            continue
        if s.startswith("#skip "):
            try:
                skips[str(json.loads(s[6:])["label"])] += 1
            except (json.JSONDecodeError, KeyError, TypeError):
                if all(not l.strip() for l in lines[no:]):
                    break  # cut by a crash, as a label line may be
                raise RecordingError(f"{path}:{no}: skip line unreadable") from None
            continue
        if s.startswith("#") or s.startswith("t_s"):
            continue
        if n_cols is None:
            raise RecordingError(f"{path}:{no}: samples before the #meta line")
        parts = s.split(",")
        last = no >= last_no  # once, above: slicing the rest here made long takes quadratic
        try:
            row = [float(p) for p in parts]
        except ValueError:
            if last:
                break
            raise RecordingError(f"{path}:{no}: not numbers") from None
        if len(row) != n_cols:
            if last:
                break
            raise RecordingError(f"{path}:{no}: {len(row)} columns where {n_cols} were expected")
        rows.append(row)
    if meta is None:
        raise RecordingError(f"{path}: no #meta line")
    arr = np.array(rows, dtype=float).reshape(-1, n_cols)
    plan = _plan(meta) if cut is None else None
    if plan is not None:   # no #cut line: a capture killed outright says nothing, its plan does
        cut = short_of_plan(plan, labels, skips, (arr.shape[0]) / rate)
    if lines[-1].strip() and cut is None:   # drape writes whole lines only: something else cut this file
        cut = CutShort(ENDS_MID_LINE, "its last line")
    return Recording(rate, channels, arr[:, 0], arr[:, 1:], tuple(labels), str(meta.get("wearer", "")),
                     str(meta.get("session", "")), str(meta.get("layout", "")), dict(meta.get("kinds", {})), cut,
                     meta.get("check_in") is True)
