"""Plot a few seconds of every channel of the simulated jacket for two gestures (a PNG).

    pip install ".[plot]"
    python examples/plot_gestures.py                 # writes docs/simulated_channels.png

Each panel is one cable's counted frequency, relative to its resting value, while the
simulated wearer stands, taps the left sleeve, stands, holds a hand on the heart, and
stands again.
"""

import argparse
import sys
from pathlib import Path

import numpy as np


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--out", default=str(Path(__file__).resolve().parent.parent / "docs" / "simulated_channels.png"))
    p.add_argument("--seed", type=int, default=1)
    p.add_argument("--wearer", type=int, default=0)
    a = p.parse_args(argv)
    try:
        import matplotlib
        matplotlib.use("Agg")
        import matplotlib.pyplot as plt
    except ImportError:
        print("needs matplotlib: pip install '.[plot]'", file=sys.stderr)
        return 2
    from bridge.garment import Jacket

    jacket = Jacket(seed=a.seed, wearer=a.wearer)
    take = jacket.perform([("standing", 1.5), ("tap_left_sleeve", 1.8), ("standing", 1.5), ("hand_on_heart", 3.5),
                           ("standing", 1.5)])
    rel = (take.freq_hz / np.array(take.centre_hz) - 1.0) * 100.0
    fig, axes = plt.subplots(len(take.channel_names), 1, sharex=True, figsize=(8, 6))
    for ax, name, col, centre in zip(axes, take.channel_names, rel.T, take.centre_hz):
        ax.plot(take.t_s, col, lw=1.0, color="0.2")
        for iv in take.intervals:
            ax.axvspan(iv.start_s, iv.end_s, color="0.85")
        ax.set_ylabel(f"{name}\n{centre / 1e3:.0f} kHz", fontsize=8)
        ax.grid(alpha=0.3)
    for iv in take.intervals:
        axes[0].text((iv.start_s + iv.end_s) / 2, axes[0].get_ylim()[1], iv.label, ha="center", va="bottom", fontsize=8)
    axes[-1].set_xlabel("time, s")
    fig.suptitle("Simulated jacket: frequency change of each cable, % of its resting frequency", fontsize=10)
    fig.tight_layout()
    Path(a.out).parent.mkdir(parents=True, exist_ok=True)
    fig.savefig(a.out, dpi=90)
    print(a.out)
    return 0


if __name__ == "__main__":
    sys.exit(main())
