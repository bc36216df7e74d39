"""Draw the gaze grid's precision curve from the CSV that bench_gaze_grid.py writes.

    python bench/bench_gaze_grid.py --csv grid.csv
    python bench/plot_gaze_grid.py grid.csv docs/gaze_grid.png
    python bench/plot_gaze_grid.py grid_s0.csv grid_s1.csv ... docs/gaze_grid.png   # several draws (seeds)

With several CSVs (one per seed) only the default is drawn: each cell's draws as small grey dots, their median as
a black marker with a bar over their range.

Six panels against the iris diameter (px, the rendered truth): RMS-S2S of the gaze error, yaw and pitch r and
gain against the truth, and the fixation kappa against the coders with the detector's kappa on the noise-free
truth (the ceiling at 30 Hz) as grey dashes. Black: the default setting (filled circle where it took the
appearance estimate of the iris height, open square where it took the limbus fit); blue and orange, smaller:
``limbus`` and ``fuse``. H.264 CRF beside the default's markers (23, 28, 33; MPEG-4 part 2 as "m"; "@60" a
60 fps cell), with a letter for each further condition (:func:`_tag`: g glasses, s lids still, r the screen
mirrored by the corneas, l light irises, h hazel irises, e a 33 ms exposure).
Issue 15's floors in grey over the iris sizes they apply to (dotted lines, shaded gain band).
"""
from __future__ import annotations

import sys

#: (column, panel title, y label, floor) - floor: ("line", value, from_px, to_px) or ("band", lo, hi, from_px)
PANELS = [("rms_s2s_deg", "RMS-S2S of the gaze error", "deg", None),
          ("yaw_r", "yaw: r against the truth", "Pearson r", ("line", 0.95, 12.0, None)),
          ("yaw_gain", "yaw: gain against the truth", "slope (1 = true size)", ("band", 0.85, 1.15, 12.0)),
          ("kappa", "fixation agreement with the coders", "Cohen's kappa", ("line", 0.5, 12.0, None)),
          ("pitch_r", "pitch: r against the truth", "Pearson r", ("line", 0.95, 12.0, None)),
          ("pitch_gain", "pitch: gain against the truth", "slope (1 = true size)", ("band", 0.85, 1.15, 12.0))]
COMPARE = {"limbus": "tab:blue", "fuse": "tab:orange"}


#: one letter per condition beyond the grid's common ones, after the compression tag (e.g. "28r")
CONDITION_LETTERS = (("glasses", "g"), ("lid_follow", "s"), ("corneal_reflection", "r"), ("iris_colour", None),
                     ("exposure_ms", "e"))


def _flag(r, column) -> bool:
    v = r.get(column)
    if v is None or v != v:
        return False
    if column == "lid_follow":
        return float(v) == 0.0
    if column == "exposure_ms":
        return float(v) > 0
    return str(v) == "True"


def _tag(r) -> str:
    """The compression ("m": MPEG-4 part 2, else the CRF), the frame rate when it is not 30 fps ("28@60"), and a
    letter for each further condition: g glasses (and mirrored), s lids still, r the screen mirrored by the
    corneas, l light blue-grey irises, h hazel irises, e a 33 ms exposure."""
    tag = "m" if r["codec"] == "mpeg4" else str(int(r["crf"]))
    fps = r.get("fps", 30.0)
    if not (fps != fps or fps == 30.0):
        tag = f"{tag}@{fps:g}"
    for column, letter in CONDITION_LETTERS:
        if column == "iris_colour":
            colour = r.get(column)
            if isinstance(colour, str) and colour:
                tag += "l" if colour.startswith("light") else colour[0]
        elif _flag(r, column):
            tag += letter
    return tag


def _floor(ax, col, floor, xmax) -> None:
    """Issue 15's floor for the panel's column, in grey."""
    if col == "rms_s2s_deg":
        ax.hlines(1.5, 12.0, xmax, color="0.4", ls=":", lw=1.2, label="floor at >= 12 px")
        ax.hlines(3.0, 8.0, 9.0, color="0.4", ls="--", lw=1.2, label="floor at 8-9 px")
    elif floor and floor[0] == "line":
        ax.hlines(floor[1], floor[2], xmax, color="0.4", ls=":", lw=1.2, label="floor at >= 12 px")
    elif floor and floor[0] == "band":
        ax.fill_between([floor[3], xmax], floor[1], floor[2], color="0.88", zorder=0,
                        label="floor 0.85-1.15 at >= 12 px")


def _finish_panel(ax, panel, xmax, kappa_x, kappa_truth, kappa_size) -> None:
    """A panel's ceiling (the kappa panel: the detector on the true gaze at ``kappa_x``), floor, axes and legend."""
    col, title, ylabel, floor = panel
    if col == "kappa":
        ax.scatter(kappa_x, kappa_truth, color="0.55", marker="_", s=kappa_size, zorder=1,
                   label="detector on the true gaze")
    _floor(ax, col, floor, xmax)
    ax.set_xlim(7.0, xmax)
    ax.set_xlabel("iris diameter, px")
    ax.set_ylabel(ylabel)
    ax.set_title(title, fontsize=10)
    ax.grid(alpha=0.3)
    ax.legend(fontsize=7, loc="best")


#: the grid's basic set-up at each face size (H.264 CRF 28, dark irises), joined by a line in the figure of several draws
CURVE_CELLS = ("8px_crf28", "12px_crf28", "16px_crf28", "25px_crf28")


def _draws_figure(frames: list, out: str, plt) -> None:
    """The default over several draws: per cell the draws (grey), their median and range (black); the basic set-up
    (:data:`CURVE_CELLS`) at its iris size with its medians joined, the other cells of that size spread beside it so
    that their bars do not hide each other."""
    import numpy as np
    import pandas as pd

    d = pd.concat([f[f["variant"] == "default"] for f in frames], ignore_index=True)
    xmax = max(27.0, float(d["iris_px"].max()) + 1.5)
    cells = list(dict.fromkeys(d["name"]))
    size = {c: float(d.loc[d["name"] == c, "iris_px"].median()) for c in cells}
    groups: dict = {}
    for c in cells:
        groups.setdefault(round(size[c]), []).append(c)
    x_of = {}
    for members in groups.values():  # the basic set-up at its size, the other cells of that size beside it
        others = [c for c in members if c not in CURVE_CELLS]
        step = min(0.3, 1.5 / max(1, (len(others) + 1) // 2))
        x_of.update({c: size[c] for c in members if c in CURVE_CELLS})
        x_of.update({c: size[c] + step * (k // 2 + 1) * (1 if k % 2 == 0 else -1) for k, c in enumerate(others)})
    fig, axes = plt.subplots(2, 3, figsize=(13, 7.2))
    for ax, (col, title, ylabel, floor) in zip(axes.flat, PANELS):
        curve = []
        for c in cells:
            v = d.loc[d["name"] == c, col].astype(float)
            x, m = x_of[c], float(v.median())
            ax.scatter(np.full(len(v), x), v, color="0.65", s=8, zorder=2)
            ax.errorbar([x], [m], yerr=[[m - v.min()], [v.max() - m]], color="k", marker="o", ms=4, capsize=2, lw=0.8,
                        zorder=3)
            ax.annotate(_tag(d[d["name"] == c].iloc[0]), (x, m), fontsize=6.5, xytext=(3, 1),
                        textcoords="offset points")
            if c in CURVE_CELLS:
                curve.append((x, m))
        if len(curve) > 1:
            xs, ms = zip(*sorted(curve))
            ax.plot(xs, ms, color="k", lw=1.4, zorder=3, label="H.264 CRF 28, median")
        _finish_panel(ax, (col, title, ylabel, floor), xmax, d["name"].map(x_of), d["kappa_truth"], 60)
    handles = [plt.Line2D([], [], color="k", marker="o", ls="", label=f"default: median and range over {len(frames)} "
                          "draws"), plt.Line2D([], [], color="0.65", marker="o", ls="", ms=3, label="one draw")]
    fig.legend(handles=handles, loc="lower center", bbox_to_anchor=(0.5, 0.025), ncol=2, fontsize=9, frameon=False)
    fig.text(0.5, 0.008, "other set-ups of an iris size are drawn beside the CRF 28 one; beside the markers: H.264 CRF "
             "(m: MPEG-4 part 2), @60: 60 fps; g glasses and mirrored, s lids still, r screen mirrored by the corneas, "
             "l light irises, h hazel irises, e 33 ms exposure", ha="center", va="bottom", fontsize=8, color="0.3")
    fig.tight_layout(rect=(0, 0.075, 1, 1))
    fig.savefig(out, dpi=110)


def main(argv=None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    if len(argv) < 2:
        print("usage: plot_gaze_grid.py GRID.csv [GRID2.csv ...] OUT.png", file=sys.stderr)
        return 2
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    import pandas as pd

    frames = []
    for path in argv[:-1]:
        try:
            d = pd.read_csv(path)
        except (OSError, pd.errors.ParserError, pd.errors.EmptyDataError) as e:
            print(f"{path}: cannot read the grid's rows ({e})", file=sys.stderr)
            return 2
        missing = ({"name", "variant", "iris_px", "codec", "crf", "iris_estimate", "kappa_truth"}
                   | {c for c, *_ in PANELS}) - set(d.columns)
        if missing:
            print(f"{path}: columns {sorted(missing)} missing; write the CSV with bench/bench_gaze_grid.py --csv",
                  file=sys.stderr)
            return 2
        frames.append(d)
    if len(frames) > 1:
        _draws_figure(frames, argv[-1], plt)
        return 0
    d = frames[0]
    xmax = max(27.0, float(d["iris_px"].max()) + 1.0)
    fig, axes = plt.subplots(2, 3, figsize=(13, 7.2))
    for ax, (col, title, ylabel, floor) in zip(axes.flat, PANELS):
        for variant, colour in COMPARE.items():
            g = d[d["variant"] == variant]
            ax.scatter(g["iris_px"], g[col], color=colour, s=14, alpha=0.8, zorder=2)
        g = d[d["variant"] == "default"]
        app = g["iris_estimate"] == "appearance"
        ax.scatter(g.loc[app, "iris_px"], g.loc[app, col], color="k", s=30, zorder=3)
        ax.scatter(g.loc[~app, "iris_px"], g.loc[~app, col], facecolors="none", edgecolors="k", marker="s", s=34,
                   zorder=3)
        for _, r in g.iterrows():
            ax.annotate(_tag(r), (r["iris_px"], r[col]), fontsize=7, xytext=(4, 2), textcoords="offset points")
        _finish_panel(ax, (col, title, ylabel, floor), xmax, d["iris_px"], d["kappa_truth"], 90)
    handles = [plt.Line2D([], [], color="k", marker="o", ls="", label="default: appearance estimate"),
               plt.Line2D([], [], color="k", marker="s", mfc="none", ls="", label="default: limbus fit"),
               *[plt.Line2D([], [], color=c, marker="o", ls="", ms=4, label=v) for v, c in COMPARE.items()]]
    fig.legend(handles=handles, loc="lower center", bbox_to_anchor=(0.5, 0.025), ncol=4, fontsize=9, frameon=False)
    fig.text(0.5, 0.008, "beside the default's markers: H.264 CRF (m: MPEG-4 part 2), @60: 60 fps; g glasses and "
             "mirrored, s lids still, r screen mirrored by the corneas, l light irises, h hazel irises, "
             "e 33 ms exposure", ha="center", va="bottom", fontsize=8, color="0.3")
    fig.tight_layout(rect=(0, 0.075, 1, 1))
    fig.savefig(argv[1], dpi=110)
    return 0


if __name__ == "__main__":
    sys.exit(main())
