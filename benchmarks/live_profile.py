"""Where the live daemon spends its CPU: `drape bench --live` with the daemon profiled.

    python benchmarks/live_profile.py [--seconds 60] [--garments 4] [--top 25]

Every thread of the daemon (the loop, one reader per garment, the output queues) gets its
own cProfile, timed by that thread's CPU time (``time.thread_time``), so time spent waiting
for a port, a queue or the GIL is not counted; the profiles are added up and printed by
internal time, and by cumulative time for the functions the loop and the readers run.
The profiler slows the daemon (about 2× here), so read shares, not the bench's figures.
"""

from __future__ import annotations

import argparse
import cProfile
import io
import pstats
import sys
import threading
import time


def run_daemon_profiled(out_path: str, argv: list[str]) -> int:
    profiles: list[cProfile.Profile] = []

    def start_thread_profile(*_):
        prof = cProfile.Profile(time.thread_time)
        profiles.append(prof)
        prof.enable()  # replaces this hook for the thread

    threading.setprofile(start_thread_profile)
    main = cProfile.Profile(time.thread_time)
    profiles.append(main)
    from bridge.cli import main as drape
    main.enable()
    try:
        code = drape(argv)
    finally:
        main.disable()
        threading.setprofile(None)
        stats = pstats.Stats(profiles[0])
        for p in profiles[1:]:
            try:
                stats.add(p)
            except TypeError:  # a thread that never ran a Python function
                pass
        stats.dump_stats(out_path)
    return code or 0


def main() -> None:
    if len(sys.argv) > 2 and sys.argv[1] == "--daemon":
        sys.exit(run_daemon_profiled(sys.argv[2], sys.argv[3:]))
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seconds", type=float, default=60.0)
    ap.add_argument("--garments", type=int, default=4)
    ap.add_argument("--top", type=int, default=25)
    ap.add_argument("--out", default="live-profile.pstats")
    a = ap.parse_args()
    from bridge.evaluation.livebench import bench_live
    bench_live(a.seconds, garments=a.garments, daemon=[sys.executable, __file__, "--daemon", a.out])
    stats = pstats.Stats(a.out)
    total = stats.total_tt
    print(f"\nprofile of the daemon, {a.garments} garments, {a.seconds:g} s: {total:.2f} s of thread CPU time")
    for key in ("tottime", "cumulative"):
        buf = io.StringIO()
        pstats.Stats(a.out, stream=buf).sort_stats(key).print_stats(a.top)
        print(buf.getvalue().split("\n", 6)[-1] if key == "tottime" else buf.getvalue().split("\n", 6)[-1])
    busy = sum(ct for (file, _, fn), (_, _, _, ct, _) in stats.stats.items()
               if fn in ("serve", "run", "_work") and file.endswith(("daemon.py", "queued.py")))
    print(f"streaming (the loop's serve, the readers' run, the outputs' queues): {busy:.2f} s")
    for label, file_end, fn in SHARES:
        ct = sum(v[3] for (file, _, name), v in stats.stats.items() if name == fn and file.endswith(file_end))
        print(f"{label:>42}: {ct:7.2f} s cumulative, {100 * ct / busy:5.1f} % of streaming")


SHARES = [("Service.take (a block, all stages)", "daemon.py", "take"),
          ("Conditioner.process", "conditioning.py", "process"),
          ("plausible_rows", "conditioning.py", "plausible_rows"),
          ("SerialSource.read", "serialport.py", "read"),
          ("queue hand-off: put (queue.Queue)", "queue.py", "put"),
          ("queue hand-off: put_nowait (queue.Queue)", "queue.py", "put_nowait"),
          ("queue hand-off: get (queue.Queue)", "queue.py", "get"),
          ("queue hand-off: get_nowait (queue.Queue)", "queue.py", "get_nowait"),
          ("queue hand-off: put_nowait (Handoff)", "daemon.py", "put_nowait"),
          ("queue hand-off: get (Handoff)", "daemon.py", "get"),
          ("queue hand-off: take_all (Handoff)", "daemon.py", "take_all"),
          ("queue hand-off: join_blocks", "daemon.py", "join_blocks"),
          ("Service.housekeeping", "daemon.py", "housekeeping"),
          ("Service.deliver", "daemon.py", "deliver"),
          ("outputs' queue threads", "queued.py", "_work")]


if __name__ == "__main__":
    main()
