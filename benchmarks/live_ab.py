"""`drape bench --live` for this tree and an earlier commit, in turns, under the same load.

    python benchmarks/live_ab.py --base c093e39 [--seconds 60] [--pairs 2] [--garments 4]

The earlier commit is exported (git archive) to a temporary folder and its daemon is run
from there; the bench itself (writer, listener, figures) is this tree's, so both daemons
are measured the same way. The base needs `drape start --timings` (c093e39 or later).
Runs alternate base, this, base, this, ... so a change of load hits both; compare the
pairs, and the CPU figures before the wall-clock ones.
"""

from __future__ import annotations

import argparse
import subprocess
import sys
import tempfile
from pathlib import Path

from bridge.evaluation.livebench import bench_live

ROOT = Path(__file__).resolve().parents[1]


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--base", required=True, help="the earlier commit")
    ap.add_argument("--seconds", type=float, default=60.0)
    ap.add_argument("--pairs", type=int, default=2)
    ap.add_argument("--garments", type=int, default=4)
    a = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        archive = subprocess.run(["git", "-C", str(ROOT), "archive", a.base], check=True, capture_output=True).stdout
        subprocess.run(["tar", "-x", "-C", tmp], input=archive, check=True)
        runner = f"import sys; sys.path.insert(0, {tmp!r}); from bridge.cli import main; sys.exit(main(sys.argv[1:]))"
        daemons = {"base": [sys.executable, "-c", runner], "this": None}
        rows = []
        for pair in range(a.pairs):
            for name, daemon in daemons.items():
                r = bench_live(a.seconds, print_fn=None, garments=a.garments, daemon=daemon)
                s = r["arrival_to_send"]
                rows.append(f"{pair + 1}  {name:>4}  CPU {r['cpu_percent_of_core']:5.1f} % of a core "
                            f"({r['cpu_us_per_sample']:6.1f} µs per sample)  arrival → send median {s['median_ms']} ms "
                            f"p99 {s['p99_ms']} ms (p99 − median {s['jitter_ms']} ms, {s['n']} events)  "
                            f"load {r['load_before']} → {r['load_after']}")
                print(rows[-1], flush=True)


if __name__ == "__main__":
    main()
