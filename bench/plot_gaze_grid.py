"""Draw the gaze grid's precision curve from the CSV that bench_gaze_grid.py writes.

    python bench/bench_gaze_grid.py --csv grid.csv
    python bench/plot_gaze_grid.py grid.csv docs/gaze_grid.png

Left: RMS-S2S of the gaze error against the iris diameter; middle: pitch gain; right: fixation kappa against
the coders, with the detector's kappa on the noise-free truth (the ceiling at 30 Hz) in grey. One marker per
cell and gaze setting; H.264 CRF in the marker (23, 28, 33; MPEG-4 part 2 as "m").
"""
from __future__ import annotations

import sys


def main(argv=None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    if len(argv) != 2:
        print("usage: plot_gaze_grid.py GRID.csv OUT.png", file=sys.stderr)
        return 2
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    import pandas as pd

    d = pd.read_csv(argv[0])
    fig, axes = plt.subplots(1, 3, figsize=(12, 3.8))
    colours = {"limbus": "tab:blue", "fuse": "tab:orange"}
    for variant, g in d.groupby("variant"):
        for _, r in g.iterrows():
            tag = "m" if r["codec"] == "mpeg4" else str(int(r["crf"]))
            for ax, col in zip(axes, ("rms_s2s_deg", "pitch_gain", "kappa")):
                ax.scatter(r["iris_px"], r[col], color=colours.get(variant, "k"), s=18)
                ax.annotate(tag, (r["iris_px"], r[col]), fontsize=6, xytext=(3, 2), textcoords="offset points")
    axes[2].scatter(d["iris_px"], d["kappa_truth"], color="0.6", marker="_", s=80, label="truth at 30 Hz")
    for ax, title in zip(axes, ("RMS-S2S of the error, deg", "pitch gain", "fixation kappa vs coders")):
        ax.set_xlabel("iris diameter, px")
        ax.set_title(title, fontsize=10)
        ax.grid(alpha=0.3)
    axes[0].axhline(1.5, color="0.5", ls=":", lw=1)
    axes[0].axhline(3.0, color="0.5", ls=":", lw=1)
    axes[1].axhspan(0.85, 1.15, color="0.9", zorder=0)
    axes[2].axhline(0.5, color="0.5", ls=":", lw=1)
    for v, c in colours.items():
        axes[0].scatter([], [], color=c, label=v)
    axes[0].legend(fontsize=8)
    axes[2].legend(fontsize=8)
    fig.tight_layout()
    fig.savefig(argv[1], dpi=110)
    return 0


if __name__ == "__main__":
    sys.exit(main())
