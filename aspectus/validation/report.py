"""Validation reports: PNG figures and one self-contained HTML file, written for a reader.

The HTML embeds its figures as base64 PNG and its full tables as CSV downloads
(data URIs: no external files, no JavaScript); the same files are written
beside it. Features are named in words with their units
(:func:`aspectus.schema.feature_label`); the main table is compact (feature,
n, both means, r, ICC and bias with their intervals) and shows no statistics
below :data:`aspectus.validation.windows.MIN_PAIRS` pairs, saying why and how
to get more. The page fits 1366 px wide screens and A4 paper (tests open it in
headless Chromium). No figure shows a video frame, so no face needs blurring.
Figures are drawn with matplotlib's Agg canvas directly (no pyplot, no global
backend state), with plain tick labels (no "1e-17" offsets).
"""
from __future__ import annotations

import base64
import html
import io

import numpy as np
import pandas as pd

from aspectus import __version__
from aspectus.schema import human_label
from aspectus.validation.agreement import ICC_FORM_TEXT
from aspectus.validation.align import method_text
from aspectus.validation.windows import MIN_PAIRS, overlap_text

WEBCAM_COLOUR = "#c0392b"
REFERENCE_COLOUR = "#1f5f8b"


def feature_label(name: str, *, scope: str | None = None) -> str:
    """The schema's label with its unit; counts say what they count in: ``"Fixations (per window)"``."""
    text = human_label(name)
    return f"{text} (per {scope})" if scope and name.endswith("_count") else text


def _label(f: str) -> str:
    return feature_label(f, scope="window")


def _plain_axes(ax, *, min_span: float | None = None) -> None:
    """Tick labels as plain numbers: no offset or power above the axis (a constant series drew "1e-17")."""
    from matplotlib.ticker import ScalarFormatter

    for axis in (ax.xaxis, ax.yaxis):
        fmt = ScalarFormatter(useOffset=False)
        fmt.set_scientific(False)
        axis.set_major_formatter(fmt)
    if min_span is not None:
        lo, hi = ax.get_ylim()
        if hi - lo < min_span:
            mid = 0.5 * (lo + hi)
            ax.set_ylim(mid - min_span / 2, mid + min_span / 2)


def _sentence(text: str) -> str:
    """``text`` with its first letter in capitals, to open a sentence."""
    return text[:1].upper() + text[1:]


def _fmt(v, nd=2) -> str:
    try:
        v = float(v)
    except (TypeError, ValueError):
        return "n/a"
    if not np.isfinite(v):
        return "n/a"
    s = f"{v:.{nd}f}"
    return s[1:] if s.startswith("-") and float(s) == 0 else s  # "-0.00" reads as a negative number: "0.00"


def _figure(w_in: float, h_in: float):
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(w_in, h_in), dpi=100)
    FigureCanvasAgg(fig)
    return fig


def _png(fig) -> bytes:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=100, metadata={"Software": f"aspectus {__version__}"})
    return buf.getvalue()


def _grid(n: int) -> tuple[int, int]:
    cols = min(3, max(1, n))
    return int(np.ceil(n / cols)), cols


def _window_pairs(pairs: pd.DataFrame) -> pd.DataFrame:
    if not len(pairs):
        return pairs
    return pairs[(pairs["scope"] == "window") & pairs["paired"]]


def scatter_figure(pairs: pd.DataFrame, features, *, title: str, groups: pd.Series | None = None) -> bytes:
    """Webcam against reference per feature, with the identity line."""
    feats = [f for f in features if f"{f}_webcam" in pairs.columns]
    rows, cols = _grid(len(feats))
    fig = _figure(4.0 * cols, 3.6 * rows)
    for i, f in enumerate(feats):
        ax = fig.add_subplot(rows, cols, i + 1)
        x, y = pairs[f"{f}_reference"].to_numpy(float), pairs[f"{f}_webcam"].to_numpy(float)
        ok = np.isfinite(x) & np.isfinite(y)
        if groups is not None:
            for g in pd.unique(groups[ok]):
                m = ok & (groups.to_numpy() == g)
                ax.scatter(x[m], y[m], s=16, alpha=0.75, label=str(g))
            if len(pd.unique(groups)) <= 12:
                ax.legend(fontsize=6, loc="upper left")
        else:
            ax.scatter(x[ok], y[ok], s=16, color=WEBCAM_COLOUR, alpha=0.75)
        if ok.any():
            lo, hi = float(min(x[ok].min(), y[ok].min())), float(max(x[ok].max(), y[ok].max()))
            pad = 0.05 * (hi - lo or 1.0)
            ax.plot([lo - pad, hi + pad], [lo - pad, hi + pad], color="0.4", lw=1, ls="--", label="_identity")
        ax.set_xlabel("lab tracker", fontsize=8)
        ax.set_ylabel("webcam", fontsize=8)
        ax.set_title(f"{_label(f)}, n = {int(ok.sum())}", fontsize=9)
        ax.tick_params(labelsize=7)
        _plain_axes(ax)
    fig.suptitle(title, fontsize=11)
    fig.tight_layout()
    return _png(fig)


def bland_altman_figure(pairs: pd.DataFrame, agreement: pd.DataFrame, features, *, title: str) -> bytes:
    """Difference (webcam - reference) against the mean of both, with bias and limits of agreement."""
    feats = [f for f in features if f"{f}_webcam" in pairs.columns]
    rows, cols = _grid(len(feats))
    fig = _figure(4.0 * cols, 3.4 * rows)
    ag = agreement[agreement["scope"] == "window"].set_index("feature") if len(agreement) else None
    for i, f in enumerate(feats):
        ax = fig.add_subplot(rows, cols, i + 1)
        a, b = pairs[f"{f}_webcam"].to_numpy(float), pairs[f"{f}_reference"].to_numpy(float)
        ok = np.isfinite(a) & np.isfinite(b)
        ax.scatter((a[ok] + b[ok]) / 2, a[ok] - b[ok], s=14, color=REFERENCE_COLOUR, alpha=0.75)
        if ag is not None and f in ag.index and np.isfinite(ag.loc[f, "ba_bias"]) and ag.loc[f, "n"] >= MIN_PAIRS:
            r = ag.loc[f]
            for v, ls, lab in ((r["ba_bias"], "-", "bias"), (r["ba_loa_low"], "--", "limits"),  # noqa: B007
                               (r["ba_loa_high"], "--", None)):
                ax.axhline(v, color="0.25", ls=ls, lw=1)
            for lo, hi in ((r["ba_loa_low_ci_low"], r["ba_loa_low_ci_high"]),
                           (r["ba_loa_high_ci_low"], r["ba_loa_high_ci_high"]),
                           (r["ba_bias_ci_low"], r["ba_bias_ci_high"])):
                ax.axhspan(lo, hi, color="0.5", alpha=0.15, lw=0)
            # limits for several windows per participant (Bland & Altman 2007), where the study has them
            if "ba_rm_loa_low" in r.index and np.isfinite(r["ba_rm_loa_low"]):
                for v in (r["ba_rm_loa_low"], r["ba_rm_loa_high"]):
                    ax.axhline(v, color=WEBCAM_COLOUR, ls=":", lw=1.2)
        ax.axhline(0, color="0.7", lw=0.8)
        ax.set_xlabel("mean of webcam and lab tracker", fontsize=8)
        ax.set_ylabel("webcam minus lab tracker", fontsize=8)
        ax.set_title(_label(f), fontsize=9)
        ax.tick_params(labelsize=7)
        _plain_axes(ax, min_span=1e-6 + 0.1 * max(1.0, float(np.nanmax(np.abs((a[ok] + b[ok]) / 2)))
                                                  if ok.any() else 1.0))
    fig.suptitle(title, fontsize=11)
    fig.tight_layout()
    return _png(fig)


def _bands(ax, events: pd.DataFrame, lo: float, hi: float, y0: float, y1: float, colour: str):
    if events is None or not len(events):
        return
    fx = events[(events["type"] == "fixation") & (events["offset_s"] > lo) & (events["onset_s"] < hi)]
    for on, off in zip(fx["onset_s"], fx["offset_s"]):
        ax.axvspan(max(on, lo), min(off, hi), ymin=y0, ymax=y1, color=colour, alpha=0.18, lw=0)


def timeseries_figure(result, *, max_span_s: float = 40.0) -> bytes:
    """Both sides' gaze on the clip clock after alignment, fixations as bands (webcam top, reference bottom)."""
    cam, ref = result.webcam, result.reference
    tw, tr = cam["t_s"].to_numpy(float), ref["t_s"].to_numpy(float)
    lo = max(tw[0], tr[0])
    hi = min(tw[-1], tr[-1], lo + max_span_s)
    fig = _figure(11.0, 5.6)
    for k, (col, name) in enumerate((("yaw_deg", "yaw (deg)"), ("pitch_deg", "pitch (deg)"))):
        ax = fig.add_subplot(2, 1, k + 1)
        mw = (tw >= lo) & (tw <= hi)
        mr = (tr >= lo) & (tr <= hi)
        yw = cam[col].to_numpy(float)
        yr = ref[col].to_numpy(float)
        shift = np.nanmedian(yr[mr]) - np.nanmedian(yw[mw]) if mw.any() and mr.any() else 0.0
        ax.plot(tr[mr], yr[mr], color=REFERENCE_COLOUR, lw=0.7, label="lab tracker")
        ax.plot(tw[mw], yw[mw] + shift, color=WEBCAM_COLOUR, lw=0.9,
                label=f"webcam (moved by {shift:+.1f} deg onto the lab tracker's median)")
        _bands(ax, result.webcam_analysis.events, lo, hi, 0.5, 1.0, WEBCAM_COLOUR)
        _bands(ax, result.reference_analysis.events, lo, hi, 0.0, 0.5, REFERENCE_COLOUR)
        ax.set_xlim(lo, hi)
        ax.set_ylabel(name, fontsize=8)
        ax.tick_params(labelsize=7)
        _plain_axes(ax)
        # above the plot, not over the traces; each angle says its own shift
        ax.legend(fontsize=7, loc="lower right", bbox_to_anchor=(1.0, 1.0), ncol=2, frameon=False,
                  borderaxespad=0.1)
    fig.suptitle(f"Aligned gaze, clip time {lo:.1f}-{hi:.1f} s; fixations as bands: webcam in the upper half, lab "
                 "tracker in the lower", fontsize=9)
    ax.set_xlabel("clip time (s)", fontsize=8)
    fig.tight_layout()
    return _png(fig)


def offset_figure(alignment) -> bytes:
    """The correlation against candidate offset over the whole searched range, with the chosen offset marked."""
    fig = _figure(8.0, 3.0)
    ax = fig.add_subplot(1, 1, 1)
    if alignment.curve is not None and len(alignment.curve):
        ax.plot(alignment.curve["offset_s"], alignment.curve["corr"], color="0.2", lw=0.8)
        ax.set_ylabel("correlation", fontsize=8)
    ax.axvline(alignment.offset_s, color=WEBCAM_COLOUR, lw=1.2)
    rng = getattr(alignment, "search_range_s", None)
    if rng is not None and np.isfinite(rng) and rng > 0 and alignment.method not in ("user",):
        lo, hi = min(-rng, float(alignment.offset_s)), max(rng, float(alignment.offset_s))
        if alignment.curve is not None and len(alignment.curve):
            c_lo, c_hi = float(alignment.curve["offset_s"].min()), float(alignment.curve["offset_s"].max())
            for a, b in ((lo, c_lo), (c_hi, hi)):
                if b - a > 0.01 * (hi - lo):
                    ax.axvspan(a, b, color="0.85", lw=0)
            if c_lo - lo > 0.01 * (hi - lo) or hi - c_hi > 0.01 * (hi - lo):
                ax.text(0.01, 0.97, "grey: searched, too little overlap to score", transform=ax.transAxes,
                        fontsize=7, va="top", color="0.3")
        ax.set_xlim(lo, hi)
    ax.set_xlabel("offset: clip time of the lab tracker's first sample (s)", fontsize=8)
    ax.set_title(f"Clock offset {alignment.offset_s:+.3f} s; confidence {alignment.confidence:.2f} on a 0-1 scale",
                 fontsize=9)
    ax.tick_params(labelsize=7)
    _plain_axes(ax)
    fig.tight_layout()
    return _png(fig)


def render_pair_figures(result) -> dict[str, bytes]:
    """PNG bytes of every figure of a pair report, keyed by file stem."""
    feats = list(result.meta["params"]["features"])
    pw = _window_pairs(result.pairs)
    out = {}
    if len(pw):
        out["scatter_windows"] = scatter_figure(pw, feats, title="Webcam against lab tracker, per window")
        out["bland_altman_windows"] = bland_altman_figure(pw, result.agreement, feats,
                                                          title="Differences against means, per window")
    out["aligned_timeseries"] = timeseries_figure(result)
    out["offset"] = offset_figure(result.alignment)
    return out


def _verbal_r(r: float) -> str:
    a = abs(r)
    return ("very strong" if a >= 0.9 else "strong" if a >= 0.7 else "moderate" if a >= 0.5 else
            "weak" if a >= 0.3 else "little or no")


#: how the alignment's confidence reads (aspectus.validation.align.Alignment.confidence)
CONFIDENCE_SCALE = ("Confidence = (height of the correlation peak - height of the best competing peak at least 1 s "
                    "away) / height of the peak, on a scale from 0 (another offset fits as well) to 1 (no other "
                    "offset correlates at all). 0.5 or more: clear; 0.25 to 0.5: probable - check that the two "
                    "traces below move together; below 0.25: uncertain - give the offset yourself (--offset-s, in "
                    "the app: Offset known). The figure does not say how accurate the offset is: a clear peak "
                    "is usually right to within a sample.")


def confidence_words(conf: float) -> str:
    """``clear`` / ``probable`` / ``uncertain`` on the scale of :data:`CONFIDENCE_SCALE`."""
    if not np.isfinite(conf):
        return "not estimated"
    return "clear" if conf >= 0.5 else ("probable" if conf >= 0.25 else "uncertain")


def withheld_reason(n: int, what: str = "windows", *, min_pairs: int = MIN_PAIRS, pooled: bool = False) -> str:
    """Why statistics are not shown below ``min_pairs`` pairs, and how to get more pairs (``pooled``: the windows
    of a whole study, which comparing several clips together cannot add to)."""
    if what == "segments":  # a recording has the segments it has: the windows are the figures to read
        more = (f"at least {min_pairs} task segments; until then read the fixed windows' figures, which pair the "
                "same recording in more places")
    elif what != "windows":
        more = f"at least {min_pairs} {what}"
    elif pooled:
        more = ("shorter windows (in the app: Feature window length; aspectus validate: --window-s), or more or "
                "longer recordings with a lab tracker")
    else:
        more = ("shorter windows (--window-s; in the app: Feature window length), longer recordings, or several "
                "clips compared together (aspectus validate with a folder or manifest; in the app: Compare all "
                "clips)")
    shown = what.removesuffix("s") if n == 1 else what
    return (f"Only {n} {shown} could be paired. With fewer than {min_pairs}, correlations, ICCs and limits of "
            f"agreement are too uncertain to mean anything (their 95 % intervals span most of the possible range), "
            f"so they are not shown; the full table (download) still has them. To get them: {more}.")


#: the reference's format and the detector, named in words in the report's "What was compared"
_FORMAT_TEXT = {"BIDS eyetrack": "BIDS eye-tracking recording", "table": "table read with a column mapping"}
_DETECTOR_TEXT = {"idt": "I-DT (dispersion threshold)", "ivt": "I-VT (velocity threshold)",
                  "i2mc": "I2MC (two-means clustering)"}


def _plural(n: int, word: str) -> str:
    return f"{n} {word}" + ("" if n == 1 else "s")


def own_check_sentence(verdict: dict | None) -> str | None:
    """What the webcam clip's own precision check said (run.json's verdict, :func:`aspectus.validation.pair.
    webcam_verdict`), where it did not trust fixation measures: a comparison then shows how far off they are,
    not whether the webcam can measure them. None where it trusted them or there is no check.

    >>> text = own_check_sentence({"precision_tier": "coarse", "verdict": "Partly usable: ...", "noise_sd_deg": 1.09})
    >>> "too imprecise for fixation counts and durations (Partly usable; its samples spread 1.09 deg" in text
    True
    >>> own_check_sentence({"precision_tier": "events", "verdict": "Usable: ..."}) is None
    True
    """
    if not verdict or verdict.get("precision_tier") in (None, "events"):
        return None
    head = str(verdict.get("verdict") or "").split(":", 1)[0].strip() or "not usable for fixation measures"
    sd = verdict.get("noise_sd_deg")
    spread = (f"; its samples spread {sd:.2f} deg about each fixation's centre"
              if isinstance(sd, (int, float)) and np.isfinite(sd) else "")
    return ("The webcam clip's own precision check had already rated it too imprecise for fixation counts and "
            f"durations ({head}{spread}), so the fixation figures here show how far off such a clip is.")


def plain_reading(result) -> str:
    """A short, careful reading of the agreement in plain words."""
    ag = result.agreement
    al = result.alignment
    parts = []
    if al.method == "user":
        parts.append(f"The clocks were aligned with the offset given by the user ({al.offset_s:+.3f} s).")
    elif al.method.startswith("marker"):
        parts.append(f"The clocks were aligned on a shared marker ({al.offset_s:+.3f} s).")
    else:
        word = {"clear": "clearly", "probable": "probably"}.get(confidence_words(al.confidence), "only uncertainly")
        parts.append(f"The clocks were {word} aligned by cross-correlation: the lab tracker started "
                     f"{abs(al.offset_s):.2f} s {'before' if al.offset_s < 0 else 'after'} the webcam "
                     f"(confidence {al.confidence:.2f} on a scale from 0 to 1).")
    w = ag[ag["scope"] == "window"].set_index("feature") if len(ag) else pd.DataFrame()
    n_fc = int(w.loc["fixation_count", "n"]) if "fixation_count" in w.index else 0
    if "fixation_count" in w.index and n_fc < MIN_PAIRS:
        parts.append(f"Only {n_fc} windows could be paired - fewer than the {MIN_PAIRS} agreement statistics need, "
                     "so none are given; use shorter windows or compare several clips together.")
    elif "fixation_count" in w.index and np.isfinite(w.loc["fixation_count", "pearson_r"]):
        r = w.loc["fixation_count"]
        form = str(r.get("icc_form", "ICC(2,1)"))  # the form the user chose (--icc-form), named as computed
        kind = "absolute agreement" if form.startswith("ICC(2") else (
            "consistency" if form.startswith("ICC(3") else "agreement")
        bias = _fmt(abs(r["ba_bias"]), 1)
        same = bias == _fmt(0.0, 1)
        parts.append(
            f"Across {int(r['n'])} windows, the webcam's fixation counts showed {_verbal_r(r['pearson_r'])} "
            f"correlation with the lab tracker's (r = {_fmt(r['pearson_r'])}, 95 % CI {_fmt(r['pearson_ci_low'])} to "
            f"{_fmt(r['pearson_ci_high'])}); {kind} {form} = {_fmt(r['icc'])}. "
            + ("On average the webcam counted as many fixations per window as the lab tracker" if same else
               f"On average the webcam counted {bias} {'more' if r['ba_bias'] > 0 else 'fewer'} fixations per "
               "window")
            + f", and for 95 % of windows the difference would be expected between {_fmt(r['ba_loa_low'], 1)} and "
            f"{_fmt(r['ba_loa_high'], 1)}.")
    elif len(w):
        parts.append("Window-level agreement of fixation counts could not be estimated (too few usable windows).")
    k = result.events.get("kappa")
    if k is not None and np.isfinite(k):
        f1 = result.events.get("f1")
        parts.append(f"Sample by sample, fixation labels agreed with kappa = {_fmt(k)} and fixation onsets were "
                     f"matched with F1 = {_fmt(f1)}; for comparison, two expert human coders agree at about 0.74-0.93 "
                     "on 500 Hz lab data (Andersson et al. 2017).")
    own = own_check_sentence((getattr(result, "meta", None) or {}).get("webcam_verdict"))
    if own:
        parts.append(own)
    parts.append("These figures describe this recording only; they do not show that the webcam can replace the lab "
                 "tracker, and correlation alone does not mean the two measure on the same scale - the limits of "
                 "agreement say how far single values may differ.")
    small = [n for n in result.notes if "uncertain" in n or "not meaningful" in n
             or ("wide" in n and n_fc >= MIN_PAIRS)]
    if small:
        parts.append("Caution: " + " ".join(small))
    return " ".join(parts)


# ------------------------------------------------------------------------------------------ tables
def _digits(feature: str) -> int:
    if feature.endswith("_ms"):
        return 0
    if feature.endswith("_per_min"):  # 186.0 per minute, not 186.00: a tenth of an event a minute is detail enough
        return 1
    if feature.endswith("_frac") or feature.endswith("_deg"):
        return 2
    return 1 if feature.endswith("_count") else 2


def _ci(est, lo, hi, nd: int, sep: str = ", ") -> str:
    if _fmt(est, nd) == "n/a":
        return "n/a"
    return f"{_fmt(est, nd)} [{_fmt(lo, nd)}{sep}{_fmt(hi, nd)}]"


#: columns of the compact agreement table (reports and the app's validation view)
COMPACT_COLUMNS = ("Feature", "n", "Webcam mean", "Lab tracker mean", "r [95 % CI]", "ICC [95 % CI]",
                   "Bias [95 % limits]")


def compact_agreement(agreement: pd.DataFrame, scope: str = "window", *, min_pairs: int = MIN_PAIRS) -> pd.DataFrame:
    """One row per feature: name and unit in words, n, both means, r, ICC and bias with intervals, as text.

    Below ``min_pairs`` pairs the statistics read "not shown" (see :func:`withheld_reason`); the means stay.
    """
    rows = []
    if agreement is None or not len(agreement):
        return pd.DataFrame(columns=list(COMPACT_COLUMNS))
    ag = agreement[agreement["scope"] == scope] if "scope" in agreement else agreement
    for _, r in ag.iterrows():
        f = str(r["feature"])
        nd = _digits(f)
        n = int(r["n"]) if np.isfinite(float(r["n"])) else 0
        row = {"Feature": feature_label(f, scope=scope), "n": str(n), "Webcam mean": _fmt(r.get("mean_webcam"), nd),
               "Lab tracker mean": _fmt(r.get("mean_reference"), nd)}
        if n < min_pairs:
            row.update({"r [95 % CI]": "not shown", "ICC [95 % CI]": "not shown", "Bias [95 % limits]": "not shown"})
        else:
            row.update({"r [95 % CI]": _ci(r.get("pearson_r"), r.get("pearson_ci_low"), r.get("pearson_ci_high"), 2),
                        "ICC [95 % CI]": _ci(r.get("icc"), r.get("icc_ci_low"), r.get("icc_ci_high"), 2),
                        "Bias [95 % limits]": _ci(r.get("ba_bias"), r.get("ba_loa_low"), r.get("ba_loa_high"), nd,
                                                  sep=" to ")})
        rows.append(row)
    return pd.DataFrame(rows, columns=list(COMPACT_COLUMNS))


def _cell(v) -> str:
    """A table cell; an estimate with an interval breaks before its interval so that columns stay narrow."""
    s = "" if v is None or (isinstance(v, float) and np.isnan(v)) else str(v)
    if " [" in s and s.endswith("]"):
        est, ci = s.split(" [", 1)
        return f"{html.escape(est)}<span class='ci'>[{html.escape(ci)}</span>"
    return html.escape(s)


def _table_html(df: pd.DataFrame, cols=None, nd: int = 3, *, cls: str = "") -> str:
    if df is None or not len(df):
        return "<p><em>none</em></p>"
    cols = cols or list(df.columns)
    head = "".join(f"<th>{html.escape(str(c))}</th>" for c in cols)
    body = []
    for _, r in df.iterrows():
        cells = []
        for j, c in enumerate(cols):
            v = r.get(c)
            if isinstance(v, (float, np.floating)):
                v = _fmt(v, nd)
            klass = " class='num'" if j > 0 and _looks_numeric(v) else ""
            cells.append(f"<td{klass}>{_cell(v)}</td>")
        body.append("<tr>" + "".join(cells) + "</tr>")
    c = f" class='{cls}'" if cls else ""
    return f"<table{c}><thead><tr>{head}</tr></thead><tbody>{''.join(body)}</tbody></table>"


def _looks_numeric(v) -> bool:
    s = str(v).split(" [")[0].replace("-", "").replace("+", "").replace(".", "").replace("n/a", "0")
    return s.isdigit()


def _download(filename: str, df: pd.DataFrame, text: str) -> str:
    """A link that saves ``df`` as ``filename`` (CSV inside the page: works offline, no second file needed)."""
    data = base64.b64encode(df.to_csv(index=False).encode("utf-8")).decode("ascii")
    return (f"<a class='dl' download='{html.escape(filename)}' href='data:text/csv;base64,{data}'>"
            f"{html.escape(text)}</a>")


_CSS = """*{box-sizing:border-box}
body{font-family:system-ui,-apple-system,'Segoe UI',sans-serif;max-width:1100px;margin:1.5em auto;padding:0 1em;
color:#222;line-height:1.45;font-size:15px}
h1{font-size:1.5em}h2{font-size:1.2em;margin-top:1.6em;border-bottom:1px solid #ddd}
table{border-collapse:collapse;font-size:0.87em;margin:0.5em 0 1.2em;max-width:100%}
th,td{border:1px solid #ccc;padding:3px 6px;text-align:left;vertical-align:top;overflow-wrap:break-word}
table.facts td,table.compact td:last-child{overflow-wrap:anywhere}
th{background:#f2f2f2;font-weight:600}td.num{text-align:right;white-space:nowrap}
.ci{display:block;color:#555;font-size:0.85em;white-space:nowrap}
table.facts td:first-child{white-space:nowrap;color:#444}
img{max-width:100%;height:auto;display:block}figure{margin:1em 0}figcaption{font-size:0.87em;color:#444}
.note{background:#fff6e0;border-left:4px solid #e0a800;padding:0.5em 1em;margin:1em 0}
.reading{background:#eef5fb;border-left:4px solid #1f5f8b;padding:0.6em 1em}
.small{font-size:0.87em;color:#444}code{background:#f4f4f4;padding:0 3px;overflow-wrap:anywhere}
a.dl{display:inline-block;margin:0 1em 0.3em 0}
@media print{@page{size:A4;margin:14mm}body{max-width:none;margin:0;padding:0;font-size:11px}
h2{break-after:avoid}figure,tr{break-inside:avoid}a.dl{color:#222}}"""


def _img(name: str, data: bytes, alt: str) -> str:
    b64 = base64.b64encode(data).decode("ascii")
    return f'<figure><img alt="{html.escape(alt)}" src="data:image/png;base64,{b64}"><figcaption>' \
           f'{html.escape(alt)} ({html.escape(name)}.png)</figcaption></figure>'


AGREEMENT_COLS = ["scope", "feature", "n", "mean_webcam", "mean_reference", "pearson_r", "pearson_ci_low",
                  "pearson_ci_high", "spearman_rho", "ccc", "ccc_ci_low", "ccc_ci_high", "icc", "icc_ci_low",
                  "icc_ci_high", "ba_bias", "ba_bias_ci_low", "ba_bias_ci_high", "ba_loa_low", "ba_loa_high", "notes"]


def _facts(items) -> str:
    return "<table class='facts'><tbody>" + "".join(
        f"<tr><td>{html.escape(k)}</td><td>{html.escape(str(v))}</td></tr>" for k, v in items) + "</tbody></table>"


def _agreement_section(agreement: pd.DataFrame, scope: str, what: str, *, pooled: bool = False) -> str:
    table = compact_agreement(agreement, scope)
    if not len(table):
        return ""
    n_max = int(pd.to_numeric(table["n"]).max())
    out = _table_html(table, cls="compact")
    if n_max < MIN_PAIRS:
        out = f"<p class='note'>{html.escape(withheld_reason(n_max, what, pooled=pooled))}</p>" + out
    elif (pd.to_numeric(table["n"]) < MIN_PAIRS).any():
        out += (f"<p class='small'>\"not shown\": fewer than {MIN_PAIRS} pairs for that feature (windows where it "
                "could not be measured on one side are left out).</p>")
    return out


def _events_in_words(ev: dict) -> str:
    """What the rows of "Fixations sample by sample" mean, for a reader without the statistics' definitions, with
    each side's measurement error as the gains took it into account."""
    text = ("Kappa: how well the two agree on which samples belong to a fixation, beyond what chance would give "
            "(0: no better than chance, 1: complete agreement). F1: how many onsets the two found at the same moment "
            "(precision: the share of the webcam's onsets the lab tracker also has; recall: the share of the lab "
            "tracker's onsets the webcam found). Gain: how many degrees the webcam measures for each degree the lab "
            "tracker measures (1: the same scale; below 1 the webcam reads eye movements smaller).")
    gain = ev.get("gain") or {}
    sd_ax, rho_ax = gain.get("fixation_mean_error_sd_per_axis_deg") or {}, gain.get("error_lag1_correlation_per_axis") or {}
    sd, rho = gain.get("fixation_mean_error_sd_deg") or {}, gain.get("error_lag1_correlation") or {}

    def ok(*v):
        return all(x is not None and np.isfinite(float(x)) for x in v)

    sides = []
    for key, name in (("webcam", "webcam"), ("reference", "lab tracker")):
        a, r = sd_ax.get(key) or {}, rho_ax.get(key) or {}
        if ok(a.get("yaw"), a.get("pitch"), r.get("yaw"), r.get("pitch")):
            sides.append(f"{name} {_fmt(a['yaw'])} deg across (yaw; successive errors correlated {_fmt(r['yaw'])}) "
                         f"and {_fmt(a['pitch'])} deg up-down (pitch; {_fmt(r['pitch'])})")
        elif ok(sd.get(key), rho.get(key)):  # a file written before the per-axis figures
            sides.append(f"{name} {_fmt(sd[key])} deg (successive errors correlated {_fmt(rho[key])})")
    if sides:
        text += (" The gains allow for each side's own measurement error (Deming regression):"
                 " the uncertainty of a fixation's mean position on each axis, from that axis's noise and how much of "
                 "it carries over from one sample to the next - " + ", ".join(sides) + ".")
    return text


def render_pair_report(result, pngs: dict[str, bytes]) -> str:
    """The HTML report of one pair (self-contained)."""
    m = result.meta
    al = result.alignment
    ev = result.events
    p = m["params"]
    title = "Webcam against lab eye tracker"
    if m.get("participant"):
        title += f": {m['participant']}" + (f", {m['session']}" if m.get("session") else "")
    parts = [f"<!doctype html><html><head><meta charset='utf-8'>"
             f"<meta name='viewport' content='width=device-width, initial-scale=1'><title>{html.escape(title)}</title>"
             f"<style>{_CSS}</style></head><body><h1>{html.escape(title)}</h1>",
             f"<p class='reading'>{html.escape(result.reading)}</p>"]
    if result.notes:
        parts.append("<div class='note'><strong>Warnings</strong><ul>" +
                     "".join(f"<li>{html.escape(n)}</li>" for n in result.notes) + "</ul></div>")
    parts.append("<h2>What was compared</h2>" + _facts((
        ("webcam", m["webcam"]),
        ("lab tracker", f"{m['reference']} ({_FORMAT_TEXT.get(m['reference_format'], m['reference_format'])})"),
        ("webcam rate", f"{_fmt(m['webcam_rate_hz'], 1)} Hz"),
        ("lab tracker measured at", m["reference_measured_at"]),
        ("detector, both sides", _DETECTOR_TEXT.get(p["analysis"].get("detector"), p["analysis"].get("detector"))),
        ("time both recorded", f"{overlap_text(m['overlap_s'])} (after alignment)"),
        ("windows", f"{m['windows']} of {p['window_s']:g} s, one every {p['step_s']:g} s"),
        ("task segments", m["segments"]), ("ICC reported", m["icc_form"]),
        ("aspectus version", m["aspectus"]))))
    if m.get("window_choice"):
        parts.append(f"<p class='small'>{html.escape(m['window_choice'])}</p>")

    parts.append("<h2>Agreement per window</h2>" + _agreement_section(result.agreement, "window", "windows"))
    parts.append(f"<p class='small'>Each row compares the feature measured in the same windows by the webcam and "
                 f"the lab tracker. n: paired windows. r: Pearson correlation with its Fisher-z interval. ICC: "
                 f"{html.escape(m['icc_form'])} (Shrout &amp; Fleiss 1979). Bias: mean of webcam minus lab tracker, "
                 "with the 95 % limits of agreement (Bland &amp; Altman 1999) - where the difference of a single "
                 "window is expected to lie. Intervals are 95 %.</p>")
    parts.append("<p>" + _download("agreement.csv", result.agreement, "Full table (agreement.csv: Spearman, Lin's "
                                   "concordance, every interval)")
                 + _download("pairs.csv", result.pairs, "Paired values per window (pairs.csv)") + "</p>")
    if (result.agreement["scope"] == "segment").any() if len(result.agreement) else False:
        parts.append("<h2>Agreement per task segment</h2>"
                     + _agreement_section(result.agreement, "segment", "segments"))
    for key, alt in (("scatter_windows", "Webcam against lab tracker per window; dashed: identity (equal values)"),
                     ("bland_altman_windows", "Differences against means per window; solid: bias, dashed: 95 % "
                                              "limits of agreement, shaded: their 95 % intervals")):
        if key in pngs:
            parts.append(_img(key, pngs[key], alt))

    parts.append("<h2>Fixations sample by sample</h2>")
    rows = [{"Measure": "Kappa, fixation or not, per sample",
             "Value": _ci(ev["kappa"], ev["kappa_ci_low"], ev["kappa_ci_high"], 2), "n": ev["kappa_n_samples"]},
            {"Measure": "Kappa, all labels", "Value": _fmt(ev["kappa_all_labels"]), "n": ""}]
    for t, mm in ev["matching"].items():
        rows.append({"Measure": f"{t.capitalize()} onsets matched within {mm['tolerance_s']:g} s: F1 (precision, recall)",
                     "Value": f"{_fmt(mm['f1'])} ({_fmt(mm['precision'])}, {_fmt(mm['recall'])})",
                     "n": f"{mm['n_matched']} of {mm['n_webcam']} webcam / {mm['n_reference']} lab tracker"})
    for k, g in ev["gain"].items():
        if isinstance(g, dict) and "estimate" in g:
            rows.append({"Measure": f"Gain (webcam / lab tracker), {k.replace('_', ' ')}",
                         "Value": _ci(g["estimate"], g["ci_low"], g["ci_high"], 2), "n": g["n"]})
    parts.append(_table_html(pd.DataFrame(rows), ["Measure", "Value", "n"]))
    parts.append(f"<p>{html.escape(_events_in_words(ev))}</p>")
    parts.append(f"<p class='small'>{html.escape(_sentence(ev['method']['kappa']))}. "
                 f"{html.escape(_sentence(ev['method']['matching']))}. "
                 f"Gain: {html.escape(ev['gain']['method'])}.</p>")

    parts.append("<h2>Time alignment</h2>")
    how = method_text(al.method)
    text = (f"The lab tracker's first sample is at {al.offset_s:+.3f} s on the webcam clip's clock (negative: the "
            f"lab tracker started first); found by {how}.")
    if not al.method == "user" and not al.method.startswith("marker"):
        text += (f" Offsets from -{al.search_range_s:g} to +{al.search_range_s:g} s were searched. Confidence "
                 f"{al.confidence:.2f}: {confidence_words(al.confidence)}. Correlation at the chosen offset "
                 f"{_fmt(al.peak_corr)}, at the best other offset {_fmt(al.second_peak_corr)}.")
    parts.append(f"<p>{html.escape(text)}</p>")
    if not al.method == "user" and not al.method.startswith("marker"):
        parts.append(f"<p class='small'>{html.escape(CONFIDENCE_SCALE)}</p>")
    if "offset" in pngs:
        parts.append(_img("offset", pngs["offset"], "Correlation of the two gaze signals against the clock offset; "
                                                   "red: the offset used"))
    if "aligned_timeseries" in pngs:
        parts.append(_img("aligned_timeseries", pngs["aligned_timeseries"], "Both recordings after alignment"))
    parts.append("<p class='small'>Research estimates only - not a diagnostic, disciplinary or surveillance "
                 "instrument. The numbers are also in agreement.csv, pairs.csv, alignment.json and "
                 "events_agreement.json beside this report.</p></body></html>")
    return "\n".join(parts)


def summary_caption(icc_form: str = "2,1") -> str:
    """The caption of the study summary to paste (summary.md, summary.html): which figure treats windows as
    independent and which does not, named as :func:`readable_summary` heads its columns."""
    icc = ICC_FORM_TEXT.get(icc_form, icc_form)
    name, _, what = icc.partition(": ")
    return ("Agreement of webcam and lab-tracker features over paired windows of all participants. Estimates with "
            "95 % CIs in brackets; differences are webcam minus lab tracker. Windows taken as independent: r "
            f"(Pearson), {name}{f' ({what})' if what else ''}, Lin's CCC (concordance), bias and 95 % limits of agreement "
            "(Bland-Altman); their intervals are too narrow when participants differ. Allowing for several windows "
            "per participant: rmcorr with its df (repeated-measures correlation, the within-participant "
            "association; Bakdash & Marusich 2017), and the bias and 95 % limits for repeated windows (interval "
            "of the bias from the between- and within-participant variance; limits for a single window, Bland & "
            "Altman 2007, true value varying); r of participant means correlates the participants' means, one "
            "point per participant. summary.csv holds the same table with column names for scripts.")


#: the summary's columns (:func:`aspectus.validation.summary.study_summary`) as the pasted table heads them
SUMMARY_HEADERS = {"feature": "Feature", "participants": "Participants", "windows": "Windows",
                   "mean_webcam": "Webcam mean", "mean_reference": "Lab tracker mean", "pearson_r": "r [95 % CI]",
                   "ccc": "Lin's CCC [95 % CI]", "ba_bias": "Bias [95 % CI]",
                   "ba_loa": "95 % limits of agreement", "rmcorr": "rmcorr [95 % CI]", "rmcorr_df": "rmcorr df",
                   "ba_bias_repeated": "Bias, repeated windows [95 % CI]",
                   "ba_loa_repeated": "95 % limits, repeated windows",
                   "participant_means_r": "r of participant means [95 % CI]"}


def readable_summary(summary: pd.DataFrame) -> pd.DataFrame:
    """The study summary with its columns and features named for a reader (summary.md and summary.html; summary.csv
    keeps the column names scripts use): e.g. ``icc_2_1`` -> "ICC(2,1) [95 % CI]", ``fixation_count`` ->
    "Fixations (per window)"."""
    def head(c: str) -> str:
        if c.startswith("icc_"):
            return f"ICC({c.removeprefix('icc_').replace('_', ',')}) [95 % CI]"
        return SUMMARY_HEADERS.get(c, c)

    out = summary.copy()
    if "feature" in out:
        out["feature"] = [_label(str(f)) for f in out["feature"]]
    return out.rename(columns={c: head(str(c)) for c in out.columns})


def summary_markdown(summary: pd.DataFrame, *, icc_form: str = "2,1") -> str:
    """The study summary as a Markdown table (to paste), with a caption line."""
    if not len(summary):
        return "_no features could be compared_\n"
    shown = readable_summary(summary)
    cols = list(shown.columns)
    lines = ["| " + " | ".join(cols) + " |", "| " + " | ".join("---" for _ in cols) + " |"]
    for _, r in shown.iterrows():
        lines.append("| " + " | ".join(str(r[c]) for c in cols) + " |")
    return summary_caption(icc_form) + "\n\n" + "\n".join(lines) + "\n"


def summary_html(summary: pd.DataFrame, *, icc_form: str = "2,1") -> str:
    """The study summary as a small standalone HTML table (to paste)."""
    cap = html.escape(summary_caption(icc_form))
    return (f"<!doctype html><html><head><meta charset='utf-8'><style>{_CSS}</style></head><body>"
            f"<p>{cap}</p>{_table_html(readable_summary(summary))}</body></html>\n")


REPEATED_COLS = ["scope", "feature", "participants", "n", "rmcorr", "rmcorr_ci_low", "rmcorr_ci_high", "rmcorr_df",
                 "rmcorr_p", "ba_rm_bias", "ba_rm_bias_ci_low", "ba_rm_bias_ci_high", "ba_rm_sd_within",
                 "ba_rm_sd_between", "ba_rm_sd", "ba_rm_loa_low", "ba_rm_loa_high", "repeated_notes"]
MEANS_COLS = ["scope", "feature", "means_n", "means_pearson_r", "means_pearson_ci_low", "means_pearson_ci_high",
              "means_icc", "means_icc_ci_low", "means_icc_ci_high", "means_ba_bias", "means_ba_loa_low",
              "means_ba_loa_high"]


def _getter(row):
    def g(col):
        return row.get(col, np.nan)
    return g


def _limits(lo, hi, nd: int) -> str:
    """"lo to hi"; a single "n/a" where neither end could be computed (not "n/a to n/a")."""
    a, b = _fmt(lo, nd), _fmt(hi, nd)
    return "n/a" if a == b == "n/a" else f"{a} to {b}"


def compact_repeated(pooled: pd.DataFrame, *, min_pairs: int = MIN_PAIRS) -> pd.DataFrame:
    """Repeated-measures figures per feature (windows), compact: rmcorr, bias and limits for one window."""
    rows = []
    for _, r in pooled[pooled["scope"] == "window"].iterrows() if len(pooled) else []:
        f = str(r["feature"])
        nd = _digits(f)
        n = int(r["n"]) if np.isfinite(float(r["n"])) else 0
        g = _getter(r)  # repeated-measures columns may be absent
        df = g("rmcorr_df")
        ok = n >= min_pairs
        rows.append({"Feature": feature_label(f, scope="window"), "Participants": _fmt(g("participants"), 0),
                     "Windows": str(n),
                     "rmcorr [95 % CI]": _ci(g("rmcorr"), g("rmcorr_ci_low"), g("rmcorr_ci_high"), 2)
                     if ok else "not shown",
                     "df": _fmt(df, 0) if ok and np.isfinite(float(df)) and df >= 1 else "",
                     "Bias [95 % CI]": _ci(g("ba_rm_bias"), g("ba_rm_bias_ci_low"), g("ba_rm_bias_ci_high"), nd)
                     if ok else "not shown",
                     "Limits for one window": _limits(g("ba_rm_loa_low"), g("ba_rm_loa_high"), nd)
                     if ok else "not shown"})
    return pd.DataFrame(rows)


def compact_means(pooled: pd.DataFrame, *, min_pairs: int = MIN_PAIRS) -> pd.DataFrame:
    """Participants' means compared, one point per participant, compact."""
    rows = []
    for _, r in pooled[pooled["scope"] == "window"].iterrows() if len(pooled) else []:
        f = str(r["feature"])
        nd = _digits(f)
        g = _getter(r)
        n = int(g("means_n")) if np.isfinite(float(g("means_n"))) else 0
        ok = n >= min_pairs
        rows.append({"Feature": feature_label(f, scope="window"), "Participants": str(n),
                     "r [95 % CI]": _ci(g("means_pearson_r"), g("means_pearson_ci_low"), g("means_pearson_ci_high"),
                                        2) if ok else "not shown",
                     "ICC [95 % CI]": _ci(g("means_icc"), g("means_icc_ci_low"), g("means_icc_ci_high"), 2)
                     if ok else "not shown",
                     "Bias [95 % limits]": _ci(g("means_ba_bias"), g("means_ba_loa_low"), g("means_ba_loa_high"), nd,
                                               sep=" to ") if ok else "not shown"})
    return pd.DataFrame(rows)


def compact_participants(per: pd.DataFrame) -> pd.DataFrame:
    """One row per pair: labels, status, windows, overlap, offset with its confidence, fixation-count r, kappa, and
    the webcam clip's own precision check ("Usable", "Partly usable", "Not usable": its verdict's opening)."""
    rows = []
    for _, r in per.iterrows() if len(per) else []:
        g = _getter(r)
        who = " ".join(str(v) for v in (g("participant"), g("session"), g("task"), g("run"))
                       if isinstance(v, str) and v) or str(g("key"))
        ok = g("status") == "ok"
        rows.append({"Pair": who, "Status": str(g("status")),
                     "Windows": _fmt(g("windows_paired"), 0) if ok else "",
                     "Overlap (s)": _fmt(g("overlap_s"), 1) if ok else "",
                     "Offset (s), confidence": f"{_fmt(g('offset_s'), 3)}, {_fmt(g('offset_confidence'))}"
                     if ok else "",
                     "Fixations per window, r": (_fmt(g("fixation_count_r")) if _fmt(g("windows_paired"), 0) != "n/a"
                                     and float(g("windows_paired")) >= MIN_PAIRS else "not shown") if ok else "",
                     "kappa": _fmt(g("kappa")) if ok else "",
                     "Webcam clip's own check": (g("webcam_verdict") or "") if ok and isinstance(
                         g("webcam_verdict"), str) else "",
                     "Notes": "" if (isinstance(g("notes"), float) or g("notes") is None) else str(g("notes"))})
    return pd.DataFrame(rows)


def compact_target_quality(per: pd.DataFrame) -> pd.DataFrame:
    """One row per pair with a known-target check: accuracy, precision, loss, gains, verdict (labels by schema)."""
    cols = ["target_accuracy_offset_gain_deg", "target_accuracy_noise_floor_deg", "target_precision_rms_s2s_deg",
            "target_precision_sd_deg", "target_loss_frac", "target_gain_yaw", "target_gain_pitch",
            "target_pursuit_gain"]
    rows = []
    for _, r in per.iterrows() if len(per) else []:
        g = _getter(r)
        if g("status") != "ok":
            continue
        who = " ".join(str(v) for v in (g("participant"), g("session"), g("task"), g("run"))
                       if isinstance(v, str) and v) or str(g("key"))
        has = g("target_n_fixation_targets") is not None and np.isfinite(float(g("target_n_fixation_targets")))
        row = {"Pair": who}
        for c in cols:
            row[human_label(c)] = _fmt(g(c), 1 if c.endswith("_frac") else 2) if has else ""
            lo, hi = (g(f"{c}_ci_{end}") for end in ("low", "high"))
            if has and c.startswith("target_gain_") and _fmt(lo) != "n/a" and _fmt(hi) != "n/a":
                row[human_label(c)] += f" ({_fmt(lo)} to {_fmt(hi)})"
        ex = g("target_excluded")
        row["Excluded"] = ("yes: " + str(g("target_exclusion_reasons")) if ex else "no") if has else "no check"
        rows.append(row)
    return pd.DataFrame(rows)


def target_quality_section(per: pd.DataFrame, rule=None) -> str:
    """The report's section on the known-target check: the figures per pair and the exclusion rule in words."""
    if rule is None:
        from aspectus.targets.study import ExclusionRule

        rule = ExclusionRule()
    return ("<h2>Gaze quality on the known-target sequence</h2>"
            "<p>Measured on the webcam alone, without the lab tracker (<code>aspectus targets check</code>): per-person "
            "offset and gain fitted on the still dots (each gain with its 95 % confidence interval in brackets; "
            "with 5-15 dots it is often wide); accuracy is the mean angle between each still dot and the "
            "median gaze on it after the fit, precision the RMS sample-to-sample step and the SD on each dot, data "
            "loss the share of the sequence's frames without valid gaze (Holmqvist, Nystroem &amp; Mulvey 2012). "
            "Pairs without a check: \"no check\".</p>"
            + _table_html(compact_target_quality(per), cls="compact")
            + f"<p><strong>Exclusion rule</strong>: {html.escape(rule.text())}</p>"
            "<p class='small'>The verdict does not remove any pair from the figures above; the columns target_* of "
            "participants.csv hold every figure.</p>")


def render_study_report(per: pd.DataFrame, pooled: pd.DataFrame, summary: pd.DataFrame, all_pairs: pd.DataFrame,
                        results: dict, failures: dict, params, *, figures: bool = True,
                        participant_means: pd.DataFrame | None = None, unpaired=(),
                        target_rule=None) -> tuple[str, dict]:
    """The HTML report of a study (per participant, pooled, repeated measures, summary table, the gaze quality
    on the known-target sequence when pairs have it) and its PNG figures."""
    feats = list(params.features)
    parts = [f"<!doctype html><html><head><meta charset='utf-8'>"
             f"<meta name='viewport' content='width=device-width, initial-scale=1'><title>Validation study</title>"
             f"<style>{_CSS}</style></head><body><h1>Webcam against lab eye tracker: study</h1>",
             f"<p>{_plural(len(results), 'pair')} validated, {len(failures)} failed. Same detector and parameters "
             f"on both sides ({html.escape(_DETECTOR_TEXT.get(params.analysis.detector, str(params.analysis.detector)))}"
             f"); windows of {params.window_length_s:g} s.</p>"]
    if failures:
        parts.append("<div class='note'><strong>Failed pairs</strong><ul>" + "".join(
            f"<li>{html.escape(k)}: {html.escape(v)}</li>" for k, v in failures.items()) + "</ul></div>")
    if unpaired:
        parts.append("<div class='note'><strong>Not paired (not in any figure below)</strong><ul>" + "".join(
            f"<li>{html.escape(m)}</li>" for m in unpaired) + "</ul>The pairing is in pairing.csv.</div>")
    parts.append("<h2>Summary: all windows of all participants</h2>"
                 + _agreement_section(pooled, "window", "windows", pooled=True))
    parts.append("<p class='small'>Windows taken as independent: every paired window of every participant is one point (see \"Which "
                 "figure is which\" below: these intervals are too narrow when participants differ). r: Pearson "
                 f"correlation; ICC: {html.escape(ICC_FORM_TEXT.get(params.icc_form, params.icc_form))}; bias: mean "
                 "of webcam minus lab tracker with the 95 % limits of agreement. The summary table to paste "
                 "(summary.csv, .md, .html) has these and the figures allowing for several windows per participant, "
                 "with their column names explained in its caption.</p>")
    downloads = [("summary.csv", summary, "Summary table to paste (summary.csv)"),
                 ("pooled_agreement.csv", pooled, "Full pooled table (pooled_agreement.csv)"),
                 ("participants.csv", per, "Per participant (participants.csv)"),
                 ("pooled_pairs.csv", all_pairs, "Paired values (pooled_pairs.csv)")]
    if participant_means is not None:
        downloads.append(("participant_means.csv", participant_means, "Participant means (participant_means.csv)"))
    parts.append("<p>" + "".join(_download(*d) for d in downloads) + "</p>")
    parts.append(
        "<h2>Which figure is which</h2><ul>"
        "<li><strong>Pooled, windows taken as independent</strong> (the summary above): every paired window of every "
        "participant is one point. Windows of one participant share that participant's face, seat, light and "
        "reading speed, so they are not independent: these intervals are too narrow, and a correlation across "
        "participants' different levels can look strong although the webcam does not follow changes within a "
        "participant.</li>"
        "<li><strong>Repeated-measures correlation</strong> (rmcorr, Bakdash &amp; Marusich 2017): the common "
        "within-participant association - does the webcam go up when the lab tracker goes up, for the same "
        "participant? Each participant keeps their own level; df = windows - participants - 1.</li>"
        "<li><strong>Limits of agreement for repeated windows</strong> (Bland &amp; Altman 2007, the case where the "
        "true value varies): the SD of a single window's difference is split by a one-way ANOVA of the differences "
        "by participant into a between-participant part (participants' biases differ) and a within-participant "
        "part; the limits use both, so they say where one window of a new participant is expected to lie. Dotted "
        "lines in the Bland-Altman plots; dashed: the pooled limits.</li>"
        "<li><strong>Participant means</strong>: one point per participant (mean over their windows), compared with "
        "Pearson r, ICC and Bland-Altman - how well the webcam ranks and measures participants; those limits are "
        "for a participant's mean, not a single window.</li></ul>")
    if len(pooled) and "rmcorr" in pooled.columns:
        parts.append("<h2>Allowing for several windows per participant</h2>"
                     + _table_html(compact_repeated(pooled), cls="compact"))
        parts.append("<p class='small'>Interval of rmcorr: Fisher z with df in place of n. Interval of the bias: from "
                     "the between- and within-participant variance of the differences, t on participants - 1 df. No "
                     "interval is computed for the repeated-measures limits. n/a: not computable - the bias and the limits "
                     "need windows of at least two participants.</p>")
    if len(pooled) and "means_n" in pooled.columns:
        means = compact_means(pooled)
        parts.append("<h2>Participant means compared</h2>")
        if len(means) and (pd.to_numeric(means["Participants"]) < MIN_PAIRS).all():
            parts.append(f"<p class='note'>{html.escape(withheld_reason(int(pd.to_numeric(means['Participants']).max()), 'participants'))}</p>")
        parts.append(_table_html(means, cls="compact"))
    parts.append("<h2>Per participant</h2>" + _table_html(compact_participants(per), cls="compact"))
    if "target_excluded" in per.columns:
        parts.append(target_quality_section(per, target_rule))
    pw = _window_pairs(all_pairs)
    pngs = {}
    if figures and len(pw):
        pngs["study_scatter"] = scatter_figure(pw, feats, title="Webcam against lab tracker, all windows",
                                               groups=pw["participant"])
        pngs["study_bland_altman"] = bland_altman_figure(pw, pooled, feats,
                                                         title="Differences against means, all windows")
        parts.append(_img("study_scatter", pngs["study_scatter"],
                          "Webcam against lab tracker, coloured by participant"))
        parts.append(_img("study_bland_altman", pngs["study_bland_altman"],
                          "Bland-Altman plots, all windows; dashed: pooled limits, dotted: limits for repeated "
                          "windows (Bland & Altman 2007)"))
    parts.append("<p class='small'>Each participant's folder holds its own report.html. Research estimates only."
                 "</p></body></html>")
    return "\n".join(parts), pngs
