"""The `drape` command line: verbs, their options, and the dispatch to one function per verb."""

from __future__ import annotations

import argparse
import math
import sys
import time

from .data import cmd_capture, cmd_check, cmd_range, cmd_replay, cmd_simulate
from .live import cmd_demo, cmd_ports, cmd_send, cmd_start, cmd_watch
from .models import cmd_evaluate, cmd_fit, cmd_tune
from .tools import cmd_bench

VERBS = {
    "demo": "run the whole live chain on the built-in simulated jacket, sending OSC",
    "start": "run the live chain from a garment on a serial port, as a foreground daemon",
    "fit": "train a model from take files",
    "replay": "run a take through the live chain as fast as possible and list its events",
    "simulate": "write takes of the simulated jacket, or serve it as a serial port (no hardware needed)",
    "check": "validate a mapping file against a model and print its rules",
    "evaluate": "estimate accuracy on new sessions or unseen wearers, or score a model on held-out data",
    "tune": "choose each class's threshold, debounce and re-arm on takes the model was not fitted on; "
            "report the held-out figure; store them in the model",
    "bench": "print speed figures: classifier hops, replay speed, fit time, a continuous control's latency and jitter",
    "range": "capture a wearer's level range (relaxed, then closest) for continuous controls",
    "ports": "list serial ports with their USB ids and serial numbers",
    "capture": "record a new wearer: prompts each gesture in turn and saves a labelled take as it goes",
    "watch": "a live terminal view of a running daemon, from its status stream",
    "send": "send a command to a running daemon's control port (arm, disarm, panic, layer, ...)",
}

# What `drape send` can ask of the single-garment loop (its answers: runner.run's command).
LISTEN_HELP = ("take control messages here (arm, disarm, panic, layer, reload, rebaseline, status: see drape send); "
               "loopback only, and they never press keys")


def _checked(convert, ok, what: str):
    """An argparse type: ``convert`` the text, then refuse it unless ``ok(value)``, saying ``what``."""
    def parse(text: str):
        try:
            value = convert(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"must be {what}, got {text!r}") from None
        if not ok(value):
            raise argparse.ArgumentTypeError(f"must be {what}, got {text!r}")
        return value
    parse.__name__ = what   # argparse names the type in some messages
    return parse


_POSITIVE = _checked(float, lambda v: math.isfinite(v) and v > 0, "a number above 0")
_NON_NEGATIVE = _checked(float, lambda v: math.isfinite(v) and v >= 0, "a number, 0 or more")
_COUNT = _checked(int, lambda v: v >= 1, "a whole number, 1 or more")
_NON_NEGATIVE_INT = _checked(int, lambda v: v >= 0, "a whole number, 0 or more")
_PORT = _checked(int, lambda v: 1 <= v <= 65535, "a UDP port, 1 to 65535")


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="drape", description="Postures and gestures from textile antennas, as live control messages.")
    sub = p.add_subparsers(dest="verb", metavar="VERB")
    d = sub.add_parser("demo", help=VERBS["demo"], description=VERBS["demo"])
    d.add_argument("--for", dest="for_s", type=_POSITIVE, default=None, metavar="SECONDS", help="stop after this many seconds")
    d.add_argument("--mapping", help="mapping file (default: mappings/demo.toml in the current folder, else the "
                   "demo mapping installed with drape)")
    d.add_argument("--seed", type=_NON_NEGATIVE_INT, default=1)
    d.add_argument("--wearer", type=_NON_NEGATIVE_INT, default=0)
    d.add_argument("--fast", action="store_true", help="run as fast as possible instead of in real time")
    d.add_argument("--listen", metavar="HOST:PORT", help=LISTEN_HELP)
    d.add_argument("--model", help="use this model of the simulated jacket instead of training one first")
    d.add_argument("--pid-file", metavar="FILE", help="write the process id here (for kill -USR1 \"$(cat FILE)\")")
    d.set_defaults(func=cmd_demo)
    s = sub.add_parser("start", help=VERBS["start"], description=VERBS["start"])
    s.add_argument("--config", required=True, help="daemon config file (TOML)")
    s.add_argument("--listen", metavar="HOST:PORT", help=LISTEN_HELP)
    s.add_argument("--pid-file", metavar="FILE", help="write the process id here (for kill -USR1 \"$(cat FILE)\")")
    s.add_argument("--log-level", default="info", choices=("debug", "info", "warning", "error"),
                   help="with [[garment]] configs: how much to log to stderr")
    s.add_argument("--timings", metavar="FILE.npz",
                   help="with [[garment]] configs: keep each delivery's sample arrival and send times, written "
                        "to FILE.npz when the daemon stops (what `drape bench --live` reads); an existing "
                        "file is kept unless --overwrite")
    s.add_argument("--overwrite", action="store_true", help="replace an existing --timings file")
    s.set_defaults(func=cmd_start)
    w = sub.add_parser("watch", help=VERBS["watch"], description=VERBS["watch"] +
                       ". Add this address to the daemon's [status] to = [...] list.")
    w.add_argument("--port", type=_PORT, default=9200, help="UDP port the status stream comes to (default 9200)")
    w.add_argument("--host", default="127.0.0.1", help="address to listen on (default 127.0.0.1)")
    w.add_argument("--once", action="store_true", help="print one plain frame once every garment was heard, then exit")
    w.add_argument("--wait-s", type=_POSITIVE, default=5.0, help="--once: give up after this long, s")
    w.set_defaults(func=cmd_watch)
    n = sub.add_parser("send", help=VERBS["send"], description=VERBS["send"] +
                       ". Network commands never press keys. Exits 0 when done, 3 when done on some garments "
                       "only (the answer says which), 1 when refused or not answered.")
    n.add_argument("what", choices=("arm", "disarm", "panic", "layer", "reload", "rebaseline", "status"))
    n.add_argument("layer", nargs="?", help="layer: the layer's name")
    n.add_argument("--garment", default="", help="only this garment (default: every garment)")
    n.add_argument("--to", default="127.0.0.1:9100", help="the daemon's control port (default 127.0.0.1:9100)")
    n.add_argument("--port", type=_PORT, help="shorthand for --to 127.0.0.1:PORT")
    n.add_argument("--token", default="", help="the shared token, when the daemon's port has one (other users can "
                   "see it in the process list: prefer DRAPE_TOKEN or --token-file)")
    n.add_argument("--token-file", metavar="FILE", help="read the token from this file")
    n.add_argument("--wait-s", type=_POSITIVE, default=1.0, help="how long to wait for the daemon's answer, s (default 1)")
    n.set_defaults(func=cmd_send)
    from ..recognition.classifiers import CLASSIFIERS, DEFAULT_CLASSIFIER
    f = sub.add_parser("fit", help=VERBS["fit"], description=VERBS["fit"])
    f.add_argument("recordings", nargs="*", metavar="TAKE")
    f.add_argument("--ts", metavar="TRAIN.ts", help="train on the cases of a .ts file instead of takes")
    f.add_argument("--classifier", choices=tuple(CLASSIFIERS), default=DEFAULT_CLASSIFIER,
                   help="minirocket (default: convolution features, trained against false cues), "
                        "linear (tiny) or dtw (few-shot templates)")
    f.add_argument("-o", "--output", required=True, help="model file to write (.npz)")
    f.add_argument("--overwrite", action="store_true", help="replace an existing model file")
    f.add_argument("--window-s", type=_POSITIVE, default=None,
                   help="window length, s (default: room for the labelled gestures, at least 2 s)")
    f.add_argument("--hop-s", type=_POSITIVE, default=0.1, help="hop between windows, s")
    f.add_argument("--band-hz", type=_POSITIVE, nargs=2, metavar=("LOW", "HIGH"),
                   help="band-pass edges, Hz (default 1 to 10 Hz, the upper edge lowered to 0.4 × the rate "
                        "for slow sources); stored in the model")
    f.add_argument("--ordinary", metavar="TAKE", nargs="+", action="extend", default=[],
                   help="a take of ordinary movement only (no labels), from this wearer or others, added to "
                        "the null class (one or more, repeatable); minirocket and dtw")
    f.add_argument("--no-simulated-others", action="store_true",
                   help="minirocket on takes of the built-in simulated jacket: do not add the ordinary movement "
                        "of 6 simulated people, and their performances of the same gestures, when no --ordinary "
                        "takes are given (both are added by default)")
    f.add_argument("--band", type=float, metavar="FRACTION",
                   help="dtw: warping band as a fraction of the window (0 = no warping, 1 = unconstrained; default 0.1)")
    f.add_argument("--no-rejection", action="store_true",
                   help="dtw: always name the nearest class, never null for lack of a near template")
    f.add_argument("--edges", choices=("alternate", "valid"),
                   help="minirocket: 'valid' pools over unpadded positions only (default for takes: a stream's "
                        "window edges are arbitrary), 'alternate' is the published method's alternating zero padding (default for --ts)")
    f.set_defaults(func=cmd_fit)
    e = sub.add_parser("evaluate", help=VERBS["evaluate"], description=VERBS["evaluate"])
    e.add_argument("recordings", nargs="*", metavar="TAKE")
    e.add_argument("--scheme", choices=("leave-session-out", "leave-wearer-out"),
                   help="hold out each session (new recordings of known wearers) or each wearer (unseen wearers)")
    e.add_argument("--classifier", choices=tuple(CLASSIFIERS), default=DEFAULT_CLASSIFIER)
    e.add_argument("--no-simulated-others", action="store_true",
                   help="--scheme with minirocket on the built-in simulated jacket's takes: fit each fold "
                        "without the 6 simulated people drape fit adds")
    e.add_argument("--model", help="score this model on held-out takes or --ts cases instead")
    e.add_argument("--ts", metavar="TEST.ts", help="cases to score --model on (resampled to its window)")
    e.add_argument("--json", action="store_true", help="print a machine-readable summary")
    e.add_argument("--report", metavar="DIR", help="write an HTML report with pictures into DIR (needs matplotlib; "
                   "an earlier report there is kept unless --overwrite)")
    e.add_argument("--overwrite", action="store_true", help="replace an earlier report in --report DIR")
    e.add_argument("--window-s", type=_POSITIVE, default=None, help="window length, s (as drape fit)")
    e.add_argument("--hop-s", type=_POSITIVE, default=0.1, help="hop between windows, s")
    e.add_argument("--band-hz", type=_POSITIVE, nargs=2, metavar=("LOW", "HIGH"),
                   help="band-pass edges, Hz (as drape fit)")
    e.set_defaults(func=cmd_evaluate)
    b = sub.add_parser("bench", help=VERBS["bench"], description=VERBS["bench"])
    b.add_argument("--channels", type=_COUNT, nargs="+", default=[4, 8])
    b.add_argument("--hops", type=_COUNT, default=200, help="hops timed per classifier and channel count")
    b.add_argument("--replay-s", type=_NON_NEGATIVE, default=300.0, help="length of the replayed take, s (0 to skip)")
    b.add_argument("--fit-minutes", type=_NON_NEGATIVE, default=30.0, help="minutes of 4-channel data to time fitting on (0 to skip)")
    b.add_argument("--classifier", action="append", choices=tuple(CLASSIFIERS), help="only this one (repeatable)")
    b.add_argument("--continuous-only", action="store_true", help="only the continuous-control figures")
    b.add_argument("--compare", action="store_true",
                   help="also time the reference implementations in the same run and print ratios "
                        "(the numba MiniRocket needs the compare extra)")
    b.add_argument("--batch-windows", type=_NON_NEGATIVE_INT, default=1000,
                   help="windows of the batch minirocket transform figure (0 to skip)")
    b.add_argument("--live", action="store_true",
                   help="end to end instead: simulated garments through ptys into `drape start`, out to loopback OSC "
                        "(arrival → send overhead, jitter, daemon CPU and memory)")
    b.add_argument("--live-s", type=_POSITIVE, default=30.0, help="--live: seconds of stream (the target is for 600)")
    b.add_argument("--live-garments", type=_COUNT, default=4, help="--live: garments in the one daemon (default 4)")
    b.add_argument("--soak", type=_POSITIVE, metavar="HOURS",
                   help="soak instead: HOURS of simulated performance through the live loop, memory and replay check")
    b.add_argument("--soak-model", metavar="MODEL", help="--soak: a model of simulated wearer 1 (default: train one)")
    b.add_argument("--soak-out", metavar="DIR", help="--soak: keep the captured take and live events in DIR")
    b.add_argument("--soak-heap", action="store_true", help="--soak: also trace Python heap growth (slower)")
    b.add_argument("--spotting", action="store_true",
                   help="the spotting protocol: fit, tune and score sessions of a simulated troupe, every firing counted")
    b.add_argument("--spotting-wearers", type=int, default=6, help="--spotting: simulated wearers (default 6)")
    b.add_argument("--spotting-score-min", type=float, default=60.0,
                   help="--spotting: minutes of ordinary movement in each scored session (default 60)")
    b.add_argument("--spotting-seed", type=_NON_NEGATIVE_INT, default=1)
    b.add_argument("--spotting-prior", type=int, default=6, metavar="N",
                   help="--spotting: add 10 minutes of ordinary movement of each of N other simulated people to "
                        "every minirocket fit (default 6: at the default seed, the very people drape fit adds to "
                        "the built-in jacket's takes; 0 for none)")
    b.add_argument("--spotting-prior-cues", type=int, default=6, metavar="N",
                   help="--spotting: N other simulated people perform every gesture, added to every minirocket fit "
                        "as drape fit adds them (default 6, the same people; 0 for none)")
    b.add_argument("--spotting-prior-reps", type=int, default=1, metavar="R",
                   help="--spotting: how often each of those people performs every gesture (default 1; 0 for none)")
    b.add_argument("--spotting-layout", metavar="FILE",
                   help="--spotting: the wearers' garment as a cable layout (TOML, see examples/layouts), with "
                        "how steadily each cable sits between dressings (turn_spread_deg, gap_spread_mm, "
                        "slide_spread_mm); default: the built-in jacket")
    b.add_argument("--spotting-checkin", type=int, default=0, metavar="R",
                   help="--spotting: each wearer, dressed for the scored session, first records a check-in take "
                        "(every gesture R times + --spotting-checkin-s of ordinary movement) that every fit of "
                        "that wearer adds; the leave-wearer-out model adds the new wearer's (default 0: none)")
    b.add_argument("--spotting-checkin-s", type=float, default=180.0, metavar="S",
                   help="--spotting-checkin: seconds of ordinary movement in the check-in take (default 180)")
    b.add_argument("--spotting-three-dressings", action="store_true",
                   help="--spotting: fit each wearer's third session too, as a third dressing, instead of tuning on it "
                        "(no tuned rows; kept hops named three-dressings)")
    b.add_argument("--spotting-unseen", type=int, default=1, metavar="N",
                   help="--spotting: leave-wearer-out for the last N wearers, each held out in turn (default 1; "
                        "each adds a fit of the others, a tune and an hour scored)")
    b.add_argument("--spotting-development", action="store_true",
                   help="--spotting: instead of tune and score, count each wearer's default fit on a development "
                        "session (3 repetitions + 30 min) that the protocol never scores: where changes are chosen")
    b.add_argument("--spotting-cache", metavar="DIR", help="--spotting: folder for the rendered takes (kept for reruns) and each scored session's hop probabilities")
    b.add_argument("--spotting-json", metavar="FILE", help="--spotting: also write the full result as JSON")
    b.add_argument("--fuzz", type=_COUNT, metavar="N", help="fuzz instead: N mutated inputs into each parser")
    b.add_argument("--fuzz-target", action="append", choices=("text", "frames", "osc", "control", "mapping", "model"),
                   help="--fuzz: only this parser (repeatable)")
    b.add_argument("--fuzz-seed", type=_NON_NEGATIVE_INT, default=1, help="--fuzz: mutator seed (same seed, same inputs)")
    b.add_argument("--fuzz-crashes", metavar="DIR", help="--fuzz: save the first input of each crash kind here")
    b.add_argument("--fuzz-limit-s", type=_POSITIVE, metavar="S", help="--fuzz: stop each target after S seconds")
    b.add_argument("--overwrite", action="store_true",
                   help="replace an existing --spotting-json file, the files of an earlier --soak-out run or the "
                        "crash files an earlier --fuzz-crashes run left for the same targets")
    b.set_defaults(func=cmd_bench)
    r = sub.add_parser("replay", help=VERBS["replay"], description=VERBS["replay"])
    r.add_argument("recording", metavar="TAKE")
    r.add_argument("--model", required=True)
    r.add_argument("--mapping")
    r.set_defaults(func=cmd_replay)
    m = sub.add_parser("simulate", help=VERBS["simulate"], description=VERBS["simulate"])
    m.add_argument("--out", help="take file to write (a folder with --wearers/--sessions)")
    m.add_argument("--overwrite", action="store_true",
                   help="replace an existing take file (with a folder --out: the takes already there)")
    m.add_argument("--duration-s", type=_POSITIVE, default=None,
                   help="length of a random performance, s (default 120 when nothing else is asked for)")
    m.add_argument("--repetitions", type=_NON_NEGATIVE_INT, default=None,
                   help="each gesture this many times first (a training take; 3 per session in a troupe)")
    m.add_argument("--null-s", type=_NON_NEGATIVE, default=0.0, help="then this long of ordinary movement (standing, walking, fidgeting), s")
    m.add_argument("--seed", type=_NON_NEGATIVE_INT, default=0)
    m.add_argument("--wearer", type=_NON_NEGATIVE_INT, default=0)
    m.add_argument("--session", type=_NON_NEGATIVE_INT, default=0)
    m.add_argument("--wearers", type=_COUNT, help="write a troupe: this many wearers (into the folder --out)")
    m.add_argument("--sessions", type=_COUNT, help="troupe: sessions per wearer (the jacket put on anew each time)")
    m.add_argument("--layout", metavar="FILE", help="cable layout (TOML, see examples/layouts); default: built-in four cables")
    m.add_argument("--vocabulary", choices=("demo", "full"),
                   help="demo: the 9 of mappings/demo.toml; full: 15 gestures and postures, 8 null kinds "
                        "(default: full for a troupe, demo otherwise)")
    m.add_argument("--rate-hz", type=_POSITIVE, default=100.0, help="counter gates per second (sample rate)")
    m.add_argument("--serve", action="store_true",
                   help="act as a garment on a pseudo-terminal in real time; prints its path first")
    m.add_argument("--for", dest="for_s", type=_POSITIVE, default=None, metavar="SECONDS", help="--serve: stop after this long")
    m.add_argument("--no-drops", action="store_true", help="--serve: never drop or delay a sample")
    m.add_argument("--ordinary-people", type=_COUNT, metavar="N",
                   help="write N takes (into the folder --out), each one simulated person's ordinary movement "
                        "of all 8 kinds and no cue: for drape fit --ordinary")
    m.add_argument("--ordinary-s", type=_POSITIVE, default=600.0, help="--ordinary-people: seconds of each (default 600)")
    m.set_defaults(func=cmd_simulate)
    c = sub.add_parser("check", help=VERBS["check"], description=VERBS["check"])
    c.add_argument("file", metavar="MAPPING")
    c.add_argument("--model")
    c.set_defaults(func=cmd_check)
    t = sub.add_parser("tune", help=VERBS["tune"], description=VERBS["tune"])
    t.add_argument("recordings", nargs="+", metavar="TAKE", help="held-out labelled takes (not used to fit the model)")
    t.add_argument("--model", required=True)
    t.add_argument("--max-false-per-hour", type=_NON_NEGATIVE, default=1.0, help="false-trigger budget (default 1); on takes too short to show it "
                        "(3.7 h at 1 per hour) no class is given looser settings than the model's")
    t.add_argument("-o", "--output", help="write the tuned model here (default: update MODEL in place)")
    t.add_argument("--overwrite", action="store_true",
                   help="replace an existing file given as -o (storing into MODEL itself needs no flag)")
    t.add_argument("--store-anyway", action="store_true",
                   help="store the settings even when the false-firing budget is missed (exit 0)")
    t.set_defaults(func=cmd_tune)
    g = sub.add_parser("range", help=VERBS["range"], description=VERBS["range"] +
                       ". Without --port it runs on the simulated wearer, to try it out.")
    g.add_argument("--out", required=True, help="range file to write (JSON; an existing one is kept unless --overwrite)")
    g.add_argument("--overwrite", action="store_true", help="replace an existing range file")
    g.add_argument("--port", help="the garment's serial device")
    g.add_argument("--model", help="model of this garment (channel names and rate); needed with --port")
    g.add_argument("--baud", type=_COUNT, default=115200)
    g.add_argument("--seconds", type=_POSITIVE, default=5.0, help="length of each capture, s")
    g.add_argument("--countdown-s", type=_NON_NEGATIVE, default=3.0, help="countdown before each capture, s (0: none)")
    g.add_argument("--leave-out-flat", action="store_true",
                   help="leave out of the range file the channels whose level did not rise in the second capture")
    g.add_argument("--seed", type=_NON_NEGATIVE_INT, default=1)
    g.add_argument("--wearer", type=_NON_NEGATIVE_INT, default=0)
    g.set_defaults(func=cmd_range)
    o = sub.add_parser("ports", help=VERBS["ports"], description=VERBS["ports"])
    o.set_defaults(func=cmd_ports)
    g = sub.add_parser("capture", help=VERBS["capture"], description=VERBS["capture"] +
                       ". Keys while it runs: r redo the last prompt, s skip, q finish; Ctrl-C stops and keeps the take.")
    g.add_argument("--port", help="the garment's serial port (path, usb:VID:PID[:SERIAL] or serial:SERIAL)")
    g.add_argument("--simulated", action="store_true", help="the built-in simulated jacket; its wearer follows the prompts")
    g.add_argument("--out", help="take file to write (default WEARER-SESSION.take)")
    g.add_argument("--overwrite", action="store_true", help="replace an existing take file")
    g.add_argument("--wearer", default="wearer1")
    g.add_argument("--session", default=time.strftime("%Y%m%d-%H%M"))
    g.add_argument("--yes", action="store_true", help="ask nothing: take wearer and session from the options")
    g.add_argument("--gestures", help="comma-separated names to prompt (default: the built-in vocabulary)")
    g.add_argument("--postures", help="which of the names are postures (held); built-in names know their kind")
    g.add_argument("--check-in", action="store_true",
                   help="a short take after dressing, before a show: each gesture 3 times and 3 min of ordinary "
                        "movement (unless --reps or --ordinary-s say otherwise), saved as WEARER-SESSION-checkin.take; "
                        "fit it together with your training takes, so the model knows how the garment sits today")
    g.add_argument("--reps", type=_COUNT, help="repetitions of each gesture (default 5; 3 with --check-in)")
    g.add_argument("--countdown-s", type=_NON_NEGATIVE, default=3.0)
    g.add_argument("--window-s", type=_POSITIVE, default=3.0, help="time given to perform a gesture, s")
    g.add_argument("--hold-s", type=_POSITIVE, default=5.0, help="time a posture is held, s")
    g.add_argument("--rest-s", type=_NON_NEGATIVE, default=2.0, help="shortest rest between prompts, s (up to twice this)")
    g.add_argument("--lead-s", type=_NON_NEGATIVE, default=4.0, help="null activity recorded before the first prompt, s")
    g.add_argument("--ordinary-s", type=_NON_NEGATIVE, default=180.0,
                   help="ordinary movement recorded after the last prompt, s (default 180, with --check-in too: the "
                        "model learns from it to stay silent when no gesture is meant)")
    g.add_argument("--seed", type=_NON_NEGATIVE_INT, default=0, help="seeds the prompt order (and the simulated jacket)")
    g.add_argument("--fast", action="store_true", help="simulated: run as fast as possible")
    g.add_argument("--sim-wearer", type=_NON_NEGATIVE_INT, default=0)
    g.add_argument("--sim-session", type=_NON_NEGATIVE_INT, default=0)
    g.add_argument("--no-keys", action="store_true", help="ignore standard input")
    g.add_argument("--protocol", choices=("auto", "text", "frames"), default="auto")
    g.add_argument("--channels", type=_COUNT, help="channels per sample (default: detect)")
    g.add_argument("--timestamp", choices=("yes", "no"), help="text lines start with the device time (default: detect)")
    g.add_argument("--rate-hz", type=_POSITIVE, default=100.0, help="sample rate to record at, Hz")
    g.add_argument("--baud", type=_COUNT, default=115200)
    g.add_argument("--layout", default="", help="garment or antenna layout, kept in the take")
    g.add_argument("--wait-s", type=_POSITIVE, default=5.0, help="give up when the port sends nothing for this long, s")
    g.set_defaults(func=cmd_capture)
    return p


def main(argv=None) -> int:
    parser = build_parser()
    a = parser.parse_args(argv)
    if not getattr(a, "func", None):
        parser.print_help()
        return 2
    try:
        return a.func(a)
    except BrokenPipeError:   # the reader went away (`| head`); the live loops keep going on their own
        from .models import _stdout_to_devnull
        _stdout_to_devnull()
        print("drape: standard output was closed; stopped", file=sys.stderr)
        return 141            # 128 + SIGPIPE, as a shell reports a command a closed pipe stopped
    except KeyboardInterrupt:  # Ctrl-C in a fit, a tune, a bench (live verbs stop on their own signal handlers)
        print(f"\ndrape: interrupted; {a.verb} stopped before it finished", file=sys.stderr)
        return 130            # 128 + SIGINT
