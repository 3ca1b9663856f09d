"""What every verb shares: errors and notices, event lines, signals, outputs, progress, take reading."""

from __future__ import annotations

import signal
import sys


def _err(msg: str) -> int:
    print(f"drape: {msg}", file=sys.stderr)
    return 2


def _shipped_example_hint(path) -> str:
    """For a mapping file that is not there but is named like one drape ships: where the
    shipped one is (a pip install has no mappings/ folder), else ""."""
    from pathlib import Path
    from ..examples_data import NAMES, example_path
    path = Path(path)
    if path.exists() or path.name not in NAMES:
        return ""
    return (f"\ndrape ships an example of that name, with its cautions: {example_path(path.name)}\n"
            f"copy it to {path} and read and edit the copy before you use it")


def _output_problem(path, inputs=(), model: bool = False, replace: bool = True, option: str = "--out") -> str:
    """Why ``path`` cannot be written ("" when it can), checked before any work is done: a
    folder, a folder that does not exist or cannot be written, one of the ``inputs`` (a take
    written over is lost), with ``model`` an existing file that is not a model (.npz) or a
    new one not named .npz, and without ``replace`` any existing file (--overwrite replaces
    one; ``option`` is the verb's output option, named in the message)."""
    import os
    from pathlib import Path
    out = Path(path)
    if out.is_dir():
        return f"{out} is a folder; give a file name"
    parent = out.parent if str(out.parent) else Path(".")
    if not parent.is_dir():
        return f"cannot write {out}: the folder {parent} does not exist"
    if not os.access(parent, os.W_OK):
        return f"cannot write {out}: the folder {parent} is not writable"
    for given in inputs:
        try:
            same = Path(given).exists() and out.exists() and out.samefile(given)
        except OSError:
            same = False
        if same:
            return f"{out} is one of the files read; writing there would replace it: give another name"
    if model and out.is_file():
        try:
            with open(out, "rb") as f:
                head = f.read(2)
        except OSError as exc:
            return f"cannot write {out}: {exc.strerror}"
        if head and head != b"PK":   # a model is a .npz, a zip archive
            return f"{out} exists and is not a model file; give another name"
    if out.exists() and not replace:   # asked after the refusals --overwrite would not lift
        return f"{out} exists; choose another {option} or pass --overwrite"
    if model and not out.exists() and out.suffix.lower() != ".npz":   # a new model is named for what it is
        return f"a model file is a .npz archive: name it {out.with_suffix('.npz').name}, not {out.name}"
    return ""


def _folder_problem(folder, names, replace: bool = False, option: str = "--out") -> str:
    """Why the files ``names`` cannot be written into ``folder`` ("" when they can), checked
    before any is written: a file where the folder should be, or, without ``replace``, any of
    them already there (a run written over another is lost, or mixed with it); ``option`` is
    the verb's folder option, named in the message."""
    from pathlib import Path
    folder = Path(folder)
    if folder.exists() and not folder.is_dir():
        return f"{folder} is a file; {option} names a folder here"
    there = [folder / n for n in names if (folder / n).exists()]
    if not there or replace:
        return ""
    shown = ", ".join(str(p) for p in there[:3]) + (f" and {len(there) - 3} more" if len(there) > 3 else "")
    verb = "exists" if len(there) == 1 else "exist"
    return (f"{_plural(len(there), 'file')} this would write {verb} already: {shown}; "
            f"choose another {option} or pass --overwrite")


def _stop_on_signals(flag, reload: bool = False):
    """Every signal that ends the process only sets the flag: the loop then lets go of
    every key and note and puts lights to their safe look before it exits. SIGHUP (a
    closed terminal, a dropped SSH session) reloads the mapping with ``reload``, and
    stops cleanly otherwise; SIGUSR1 panics."""
    def handler(signum, _frame):
        flag.set(signal.Signals(signum).name)
    ending = ["SIGINT", "SIGTERM", "SIGQUIT"] + ([] if reload else ["SIGHUP"])
    for name in ending:
        if hasattr(signal, name):
            signal.signal(getattr(signal, name), handler)
    if reload and hasattr(signal, "SIGHUP"):
        signal.signal(signal.SIGHUP, lambda *_: flag.request_reload())
    if hasattr(signal, "SIGUSR1"):  # panic: releases every output (see also `drape send panic`)
        signal.signal(signal.SIGUSR1, lambda *_: flag.request_panic())


def _report(text: str) -> None:
    try:
        print(f"drape: {text}", file=sys.stderr, flush=True)
    except (OSError, ValueError):  # stderr gone too (a closed terminal): keep running
        pass


def _plural(n: int, word: str, plural: str = "") -> str:
    """'1 take', '3 takes'; ``plural`` for words that do not add an s ('1 person', '2 people')."""
    return f"{n} {word if n == 1 else plural or word + 's'}"


def replay_events(rec, model, mapping=None, block_s: float = 0.1, settle=None):
    """Events the live chain decides over a whole take (see ``bridge.service.replay_events``)."""
    from ..service import replay_events as replay
    return replay(rec, model, mapping, block_s, settle)


# What a model's summary lists of take fingerprints say about a take: figures on it are in-sample.
LEARNT_FROM = {"fitted_on": "fitted on", "tuned_on": "tuned on (its decision settings were chosen on it)"}


def _in_sample(model, paths, recs) -> dict[str, list[str]]:
    """{take path: the summary lists naming it, "fitted_on" and/or "tuned_on"} for each take
    the model learnt from. A model from before a list was kept names no take in it."""
    seen = {key: set(model.summary.get(key) or ()) for key in LEARNT_FROM}
    found = {}
    for path, r in zip(paths, recs):
        fingerprint = r.fingerprint()
        how = [key for key, prints in seen.items() if fingerprint in prints]
        if how:
            found[str(path)] = how
    return found


def _say_in_sample(model_path, found: dict) -> None:
    """One line on stderr for each take of ``_in_sample``."""
    for path, how in found.items():
        print(f"drape: {path} is one of the takes {model_path} was {' and '.join(LEARNT_FROM[k] for k in how)}: "
              "figures on it are in-sample, not what to expect live; give a take the model never saw",
              file=sys.stderr)

