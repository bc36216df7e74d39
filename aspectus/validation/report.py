"""Validation reports: PNG figures and one self-contained HTML file.

The HTML embeds its figures as base64 PNG (no external files, no
JavaScript); the same PNGs are written beside it. No figure shows a video
frame, so no face needs blurring. Figures are drawn with matplotlib's Agg
canvas directly (no pyplot, no global backend state).
"""
from __future__ import annotations

import base64
import html
import io

import numpy as np
import pandas as pd

from aspectus import __version__
from aspectus.validation.agreement import ICC_FORM_TEXT

WEBCAM_COLOUR = "#c0392b"
REFERENCE_COLOUR = "#1f5f8b"
LABELS = {
    "fixation_count": "fixations per window", "fixation_rate_per_s": "fixation rate (1/s)",
    "fixation_duration_mean_ms": "mean fixation duration (ms)",
    "fixation_duration_median_ms": "median fixation duration (ms)", "fixation_time_frac": "time in fixations (share)",
    "saccade_count": "saccades per window", "saccade_amplitude_mean_deg": "mean saccade amplitude (deg)",
    "blink_count": "blinks per window", "blink_rate_per_min": "blink rate (1/min)",
}


def _fmt(v, nd=2) -> str:
    try:
        v = float(v)
    except (TypeError, ValueError):
        return "n/a"
    return "n/a" if not np.isfinite(v) else f"{v:.{nd}f}"


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
        ax.set_xlabel(f"reference: {LABELS.get(f, f)}", fontsize=8)
        ax.set_ylabel("webcam", fontsize=8)
        ax.set_title(f"{LABELS.get(f, f)} (n={int(ok.sum())})", fontsize=9)
        ax.tick_params(labelsize=7)
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
        if ag is not None and f in ag.index and np.isfinite(ag.loc[f, "ba_bias"]):
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
        ax.set_xlabel("mean of webcam and reference", fontsize=8)
        ax.set_ylabel("webcam - reference", fontsize=8)
        ax.set_title(LABELS.get(f, f), fontsize=9)
        ax.tick_params(labelsize=7)
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
    fig = _figure(11.0, 5.2)
    for k, (col, name) in enumerate((("yaw_deg", "yaw (deg)"), ("pitch_deg", "pitch (deg)"))):
        ax = fig.add_subplot(2, 1, k + 1)
        mw = (tw >= lo) & (tw <= hi)
        mr = (tr >= lo) & (tr <= hi)
        yw = cam[col].to_numpy(float)
        yr = ref[col].to_numpy(float)
        shift = np.nanmedian(yr[mr]) - np.nanmedian(yw[mw]) if mw.any() and mr.any() else 0.0
        ax.plot(tr[mr], yr[mr], color=REFERENCE_COLOUR, lw=0.7, label="reference")
        ax.plot(tw[mw], yw[mw] + shift, color=WEBCAM_COLOUR, lw=0.9,
                label=f"webcam (shifted by {shift:+.1f} deg to the reference's median)")
        _bands(ax, result.webcam_analysis.events, lo, hi, 0.5, 1.0, WEBCAM_COLOUR)
        _bands(ax, result.reference_analysis.events, lo, hi, 0.0, 0.5, REFERENCE_COLOUR)
        ax.set_xlim(lo, hi)
        ax.set_ylabel(name, fontsize=8)
        ax.tick_params(labelsize=7)
        if k == 0:
            ax.legend(fontsize=7, loc="upper right")
            ax.set_title(f"Aligned gaze, clip time {lo:.1f}-{hi:.1f} s (offset {result.alignment.offset_s:+.3f} s); "
                         "fixations: webcam bands above, reference below", fontsize=9)
    ax.set_xlabel("clip time (s)", fontsize=8)
    fig.tight_layout()
    return _png(fig)


def offset_figure(alignment) -> bytes:
    """The correlation against candidate offset, with the chosen offset marked."""
    fig = _figure(8.0, 3.0)
    ax = fig.add_subplot(1, 1, 1)
    if alignment.curve is not None and len(alignment.curve):
        ax.plot(alignment.curve["offset_s"], alignment.curve["corr"], color="0.2", lw=0.8)
        ax.set_ylabel("normalised correlation", fontsize=8)
    ax.axvline(alignment.offset_s, color=WEBCAM_COLOUR, lw=1.2)
    ax.set_xlabel("offset: clip time of the reference's first sample (s)", fontsize=8)
    ax.set_title(f"Clock offset {alignment.offset_s:+.3f} s by {alignment.method}, confidence "
                 f"{alignment.confidence:.2f}", fontsize=9)
    ax.tick_params(labelsize=7)
    fig.tight_layout()
    return _png(fig)


def render_pair_figures(result) -> dict[str, bytes]:
    """PNG bytes of every figure of a pair report, keyed by file stem."""
    feats = list(result.meta["params"]["features"])
    pw = _window_pairs(result.pairs)
    out = {}
    if len(pw):
        out["scatter_windows"] = scatter_figure(pw, feats, title="Webcam against reference, per window")
        out["bland_altman_windows"] = bland_altman_figure(pw, result.agreement, feats,
                                                          title="Differences against means, per window")
    out["aligned_timeseries"] = timeseries_figure(result)
    out["offset"] = offset_figure(result.alignment)
    return out


def _verbal_r(r: float) -> str:
    a = abs(r)
    return ("very strong" if a >= 0.9 else "strong" if a >= 0.7 else "moderate" if a >= 0.5 else
            "weak" if a >= 0.3 else "little or no")


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
        word = "clearly" if al.confidence >= 0.5 else ("probably" if al.confidence >= 0.25 else "only uncertainly")
        parts.append(f"The clocks were {word} aligned by cross-correlation: the reference started "
                     f"{abs(al.offset_s):.2f} s {'before' if al.offset_s < 0 else 'after'} the webcam "
                     f"(confidence {al.confidence:.2f}).")
    w = ag[ag["scope"] == "window"].set_index("feature") if len(ag) else pd.DataFrame()
    if "fixation_count" in w.index and np.isfinite(w.loc["fixation_count", "pearson_r"]):
        r = w.loc["fixation_count"]
        parts.append(
            f"Across {int(r['n'])} windows, the webcam's fixation counts showed {_verbal_r(r['pearson_r'])} "
            f"correlation with the reference (r = {_fmt(r['pearson_r'])}, 95 % CI {_fmt(r['pearson_ci_low'])} to "
            f"{_fmt(r['pearson_ci_high'])}); absolute agreement ICC(2,1) = {_fmt(r['icc'])}. On average the webcam "
            f"counted {_fmt(abs(r['ba_bias']), 1)} {'more' if r['ba_bias'] > 0 else 'fewer'} fixations per window, "
            f"and for 95 % of windows the difference would be expected between {_fmt(r['ba_loa_low'], 1)} and "
            f"{_fmt(r['ba_loa_high'], 1)}.")
    elif len(w):
        parts.append("Window-level agreement of fixation counts could not be estimated (too few usable windows).")
    k = result.events.get("kappa")
    if k is not None and np.isfinite(k):
        f1 = result.events.get("f1")
        parts.append(f"Sample by sample, fixation labels agreed with kappa = {_fmt(k)} and fixation onsets were "
                     f"matched with F1 = {_fmt(f1)}; for comparison, two expert human coders agree at about 0.74-0.93 "
                     "on 500 Hz lab data (Andersson et al. 2017).")
    parts.append("These figures describe this recording only; they do not show that the webcam can replace the lab "
                 "tracker, and correlation alone does not mean the two measure on the same scale - the limits of "
                 "agreement say how far single values may differ.")
    small = [n for n in result.notes if "wide" in n or "uncertain" in n or "not meaningful" in n]
    if small:
        parts.append("Caution: " + " ".join(small))
    return " ".join(parts)


def _table_html(df: pd.DataFrame, cols=None, nd: int = 3) -> str:
    if df is None or not len(df):
        return "<p><em>none</em></p>"
    cols = cols or list(df.columns)
    head = "".join(f"<th>{html.escape(str(c))}</th>" for c in cols)
    body = []
    for _, r in df.iterrows():
        cells = []
        for c in cols:
            v = r.get(c)
            if isinstance(v, (float, np.floating)):
                s = _fmt(v, nd)
            else:
                s = "" if v is None or (isinstance(v, float) and np.isnan(v)) else str(v)
            cells.append(f"<td>{html.escape(s)}</td>")
        body.append("<tr>" + "".join(cells) + "</tr>")
    return f"<table><thead><tr>{head}</tr></thead><tbody>{''.join(body)}</tbody></table>"


_CSS = """body{font-family:system-ui,sans-serif;max-width:1150px;margin:2em auto;padding:0 1em;color:#222}
table{border-collapse:collapse;font-size:12px;margin:0.5em 0 1.5em}th,td{border:1px solid #ccc;padding:3px 6px;
text-align:right}th{background:#f2f2f2}td:first-child,th:first-child{text-align:left}img{max-width:100%}
.note{background:#fff6e0;border-left:4px solid #e0a800;padding:0.5em 1em}.reading{background:#eef5fb;
border-left:4px solid #1f5f8b;padding:0.6em 1em}code{background:#f4f4f4;padding:0 3px}"""


def _img(name: str, data: bytes, alt: str) -> str:
    b64 = base64.b64encode(data).decode("ascii")
    return f'<figure><img alt="{html.escape(alt)}" src="data:image/png;base64,{b64}"><figcaption>' \
           f'{html.escape(alt)} ({html.escape(name)}.png)</figcaption></figure>'


AGREEMENT_COLS = ["scope", "feature", "n", "mean_webcam", "mean_reference", "pearson_r", "pearson_ci_low",
                  "pearson_ci_high", "spearman_rho", "ccc", "ccc_ci_low", "ccc_ci_high", "icc", "icc_ci_low",
                  "icc_ci_high", "ba_bias", "ba_bias_ci_low", "ba_bias_ci_high", "ba_loa_low", "ba_loa_high", "notes"]


def render_pair_report(result, pngs: dict[str, bytes]) -> str:
    """The HTML report of one pair (self-contained)."""
    m = result.meta
    al = result.alignment
    ev = result.events
    title = "Webcam against lab tracker"
    if m.get("participant"):
        title += f": {m['participant']}" + (f", {m['session']}" if m.get("session") else "")
    parts = [f"<!doctype html><html><head><meta charset='utf-8'><title>{html.escape(title)}</title>"
             f"<style>{_CSS}</style></head><body><h1>{html.escape(title)}</h1>",
             f"<p class='reading'>{html.escape(result.reading)}</p>"]
    if result.notes:
        parts.append("<div class='note'><strong>Warnings</strong><ul>" +
                     "".join(f"<li>{html.escape(n)}</li>" for n in result.notes) + "</ul></div>")
    parts.append("<h2>Inputs</h2><table><tbody>" + "".join(
        f"<tr><td>{html.escape(k)}</td><td>{html.escape(str(v))}</td></tr>" for k, v in (
            ("webcam", m["webcam"]), ("reference", f"{m['reference']} ({m['reference_format']})"),
            ("webcam rate", f"{_fmt(m['webcam_rate_hz'], 1)} Hz"),
            ("reference measured at", m["reference_measured_at"]),
            ("detector (both sides)", m["params"]["analysis"].get("detector")),
            ("overlap", f"{m['overlap_s']:.1f} s"), ("windows", f"{m['windows']} of {m['params']['window_s']:g} s "
                                                                 f"(step {m['params']['step_s']:g} s)"),
            ("task segments", m["segments"]), ("ICC reported", m["icc_form"]),
            ("aspectus", m["aspectus"]))) + "</tbody></table>")
    parts.append("<h2>Time alignment</h2>" + _table_html(pd.DataFrame([al.to_dict()]), [
        "offset_s", "confidence", "method", "search_range_s", "peak_corr", "second_peak_corr", "overlap_s",
        "drift_ppm"], nd=3))
    parts.append("<p><code>offset_s</code> is the clip time of the reference's first sample (negative: the reference "
                 "started first). Confidence is the share of the correlation peak's height that stands above the "
                 "best competing peak.</p>")
    if "offset" in pngs:
        parts.append(_img("offset", pngs["offset"], "Correlation of the two gaze signals against the clock offset"))
    if "aligned_timeseries" in pngs:
        parts.append(_img("aligned_timeseries", pngs["aligned_timeseries"], "Both recordings after alignment"))
    parts.append("<h2>Feature agreement</h2><p>Webcam minus reference for Bland-Altman; intervals are 95 % unless "
                 f"stated. ICC: {html.escape(m['icc_form'])} (Shrout &amp; Fleiss 1979). Pearson r with Fisher-z "
                 "interval, Lin's concordance (Lin 1989), Bland-Altman limits with the approximate intervals of "
                 "Bland &amp; Altman (1999).</p>")
    parts.append(_table_html(result.agreement, [c for c in AGREEMENT_COLS if c in result.agreement.columns]))
    for key, alt in (("scatter_windows", "Webcam against reference per window; dashed: identity"),
                     ("bland_altman_windows", "Bland-Altman plots per window; shaded: 95 % intervals")):
        if key in pngs:
            parts.append(_img(key, pngs[key], alt))
    parts.append("<h2>Event agreement</h2>")
    rows = [{"measure": "kappa, fixation vs other (per sample)", "value": ev["kappa"], "ci_low": ev["kappa_ci_low"],
             "ci_high": ev["kappa_ci_high"], "n": ev["kappa_n_samples"]},
            {"measure": "kappa, all labels", "value": ev["kappa_all_labels"]}]
    for t, mm in ev["matching"].items():
        rows.append({"measure": f"{t} onsets matched within {mm['tolerance_s']:g} s: F1", "value": mm["f1"],
                     "n": f"{mm['n_matched']} of {mm['n_webcam']} webcam / {mm['n_reference']} reference"})
        rows.append({"measure": f"{t}: precision / recall", "value": mm["precision"], "ci_low": mm["recall"]})
    for k, g in ev["gain"].items():
        if isinstance(g, dict) and "estimate" in g:
            rows.append({"measure": f"gain (webcam / reference), {k.replace('_', ' ')}", "value": g["estimate"],
                         "ci_low": g["ci_low"], "ci_high": g["ci_high"], "n": g["n"]})
    parts.append(_table_html(pd.DataFrame(rows), ["measure", "value", "ci_low", "ci_high", "n"]))
    parts.append(f"<p>{html.escape(ev['method']['kappa'])}. {html.escape(ev['method']['matching'])}. Gain: "
                 f"{html.escape(ev['gain']['method'])}. In the precision / recall rows the second number is the "
                 "recall.</p>")
    parts.append("<h2>Paired windows</h2>" + _table_html(result.pairs))
    parts.append("<p>Research estimates only - not a diagnostic, disciplinary or surveillance instrument. The same "
                 "numbers are in agreement.csv, pairs.csv, alignment.json and events_agreement.json.</p>"
                 "</body></html>")
    return "\n".join(parts)


def summary_caption(icc_form: str = "2,1") -> str:
    """The caption of the study summary: which figure treats windows as independent and which does not."""
    return ("Agreement of webcam and lab-tracker features over paired windows of all participants. Estimates with "
            "95 % CIs in brackets; differences are webcam minus reference. Windows taken as independent: pearson_r, "
            f"{ICC_FORM_TEXT.get(icc_form, icc_form)}, ccc (Lin's concordance), ba_bias and ba_loa (Bland-Altman "
            "bias and 95 % limits of agreement); their intervals are too narrow when participants differ. Allowing "
            "for several windows per participant: rmcorr with its df (repeated-measures correlation, the "
            "within-participant association; Bakdash & Marusich 2017), ba_bias_repeated (interval from the "
            "between- and within-participant variance) and ba_loa_repeated (95 % limits for a single window, "
            "Bland & Altman 2007, true value varying); participant_means_r correlates the participants' means, one "
            "point per participant.")


def summary_markdown(summary: pd.DataFrame, *, icc_form: str = "2,1") -> str:
    """The study summary as a Markdown table (to paste), with a caption line."""
    if not len(summary):
        return "_no features could be compared_\n"
    cols = list(summary.columns)
    lines = ["| " + " | ".join(cols) + " |", "| " + " | ".join("---" for _ in cols) + " |"]
    for _, r in summary.iterrows():
        lines.append("| " + " | ".join(str(r[c]) for c in cols) + " |")
    return summary_caption(icc_form) + "\n\n" + "\n".join(lines) + "\n"


def summary_html(summary: pd.DataFrame, *, icc_form: str = "2,1") -> str:
    """The study summary as a small standalone HTML table (to paste)."""
    cap = html.escape(summary_caption(icc_form))
    return (f"<!doctype html><html><head><meta charset='utf-8'><style>{_CSS}</style></head><body>"
            f"<p>{cap}</p>{_table_html(summary)}</body></html>\n")


REPEATED_COLS = ["scope", "feature", "participants", "n", "rmcorr", "rmcorr_ci_low", "rmcorr_ci_high", "rmcorr_df",
                 "rmcorr_p", "ba_rm_bias", "ba_rm_bias_ci_low", "ba_rm_bias_ci_high", "ba_rm_sd_within",
                 "ba_rm_sd_between", "ba_rm_sd", "ba_rm_loa_low", "ba_rm_loa_high", "repeated_notes"]
MEANS_COLS = ["scope", "feature", "means_n", "means_pearson_r", "means_pearson_ci_low", "means_pearson_ci_high",
              "means_icc", "means_icc_ci_low", "means_icc_ci_high", "means_ba_bias", "means_ba_loa_low",
              "means_ba_loa_high"]


def render_study_report(per: pd.DataFrame, pooled: pd.DataFrame, summary: pd.DataFrame, all_pairs: pd.DataFrame,
                        results: dict, failures: dict, params, *, figures: bool = True,
                        participant_means: pd.DataFrame | None = None, unpaired=()) -> tuple[str, dict]:
    """The HTML report of a study (per participant, pooled, repeated measures, summary table) and its PNG figures."""
    feats = list(params.features)
    parts = [f"<!doctype html><html><head><meta charset='utf-8'><title>Validation study</title><style>{_CSS}"
             "</style></head><body><h1>Webcam against lab tracker: study</h1>",
             f"<p>{len(results)} pair(s) validated, {len(failures)} failed. Same detector and parameters on both "
             f"sides ({html.escape(str(params.analysis.detector))}); windows of {params.window_length_s:g} s.</p>"]
    if failures:
        parts.append("<div class='note'><strong>Failed pairs</strong><ul>" + "".join(
            f"<li>{html.escape(k)}: {html.escape(v)}</li>" for k, v in failures.items()) + "</ul></div>")
    if unpaired:
        parts.append("<div class='note'><strong>Not paired (not in any figure below)</strong><ul>" + "".join(
            f"<li>{html.escape(m)}</li>" for m in unpaired) + "</ul>The pairing is in pairing.csv.</div>")
    parts.append("<h2>Summary</h2>" + _table_html(summary))
    parts.append("<p>" + html.escape(summary_caption(params.icc_form)) + "</p>")
    parts.append(
        "<h2>Which figure is which</h2><ul>"
        "<li><strong>Pooled, windows taken as independent</strong> (<code>pearson_r</code>, ICC, <code>ccc</code>, "
        "<code>ba_bias</code>, <code>ba_loa</code>): every paired window of every participant is one point. Windows of "
        "one participant share that participant's face, seat, light and reading speed, so they are not independent: "
        "these intervals are too narrow, and a correlation across participants' different levels can look strong "
        "although the webcam does not follow changes within a participant.</li>"
        "<li><strong>Repeated-measures correlation</strong> (<code>rmcorr</code>, Bakdash &amp; Marusich 2017): "
        "the common within-participant association - does the webcam go up when the reference goes up, for the same "
        "participant? Each participant keeps their own level; df = windows - participants - 1.</li>"
        "<li><strong>Limits of agreement for repeated windows</strong> (<code>ba_rm_*</code>, "
        "<code>ba_loa_repeated</code>; Bland &amp; Altman 2007, the case where the true value varies): the SD of a "
        "single window's difference is split by a one-way ANOVA of the differences by participant into a "
        "between-participant part (participants' biases differ) and a within-participant part; the limits use both, "
        "so they say where one window of a new participant is expected to lie. Dotted lines in the Bland-Altman "
        "plots; dashed: the pooled limits.</li>"
        "<li><strong>Participant means</strong> (<code>means_*</code>): one point per participant (mean over their "
        "windows), compared with Pearson r, ICC and Bland-Altman - how well the webcam ranks and measures "
        "participants; those limits are for a participant's mean, not a single window.</li></ul>")
    parts.append("<h2>Per participant</h2>" + _table_html(per))
    parts.append("<h2>Pooled agreement (windows taken as independent)</h2>"
                 + _table_html(pooled, [c for c in AGREEMENT_COLS if c in pooled.columns]))
    if len(pooled) and "rmcorr" in pooled.columns:
        parts.append("<h2>Allowing for several windows per participant</h2>"
                     + _table_html(pooled, [c for c in REPEATED_COLS if c in pooled.columns]))
        parts.append("<p>Interval of rmcorr: Fisher z with df in place of n. Interval of ba_rm_bias: from the "
                     "between- and within-participant variance of the differences, t on participants - 1 df. No "
                     "interval is computed for the repeated-measures limits.</p>")
        parts.append("<h2>Participant means compared</h2>"
                     + _table_html(pooled, [c for c in MEANS_COLS if c in pooled.columns]))
    if participant_means is not None and len(participant_means):
        pm = participant_means[participant_means["scope"] == "window"]
        parts.append("<h3>One row per participant and feature (windows)</h3>" + _table_html(pm))
    pw = _window_pairs(all_pairs)
    pngs = {}
    if figures and len(pw):
        pngs["study_scatter"] = scatter_figure(pw, feats, title="Webcam against reference, all windows",
                                               groups=pw["participant"])
        pngs["study_bland_altman"] = bland_altman_figure(pw, pooled, feats,
                                                         title="Differences against means, all windows")
        parts.append(_img("study_scatter", pngs["study_scatter"], "Webcam against reference, coloured by participant"))
        parts.append(_img("study_bland_altman", pngs["study_bland_altman"],
                          "Bland-Altman plots, all windows; dashed: pooled limits, dotted: limits for repeated "
                          "windows (Bland & Altman 2007)"))
    parts.append("<p>Each participant's folder holds its own report.html. Research estimates only.</p></body></html>")
    return "\n".join(parts), pngs
