"""Validation mode: webcam features against a lab eye tracker's recording of the same session.

One pair (:func:`validate_pair`):

1. read the webcam samples (a clip's output folder from ``aspectus process``)
   and the reference recording (BIDS or a mapped table);
2. align the clocks (user offset, shared marker, or cross-correlation);
3. run the *same* clean-up, detector and parameters on both sides (the
   reference at its own rate by default, or resampled to the webcam's rate
   first with ``resample_reference_hz``);
4. pair features per common window (and per task segment) and compute the
   agreement statistics of :mod:`aspectus.validation.agreement` for each feature;
5. event level: sample-by-sample Cohen's kappa of fixation labels and
   one-to-one matching of fixation onsets (precision, recall, F1);
6. a calibration-free gain: Deming slope of webcam against reference for the
   amplitudes of matched saccades and the positions of matched fixations.

Everything is computed first; only then are the files written (each one
atomically, ``validation.json`` last), so a failure never leaves a mix of
old and new results.

Study mode (:func:`validate_study`): many pairs from a manifest or two folders
(:mod:`aspectus.validation.pairing`), results per participant, pooled agreement over all
windows, statistics that allow for windows nested in participants
(repeated-measures correlation, Bland & Altman 2007 limits, participant
means), and a summary table to paste.
"""
from __future__ import annotations

import io
import re
import warnings
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np
import pandas as pd

from aspectus import __version__
from aspectus.validation.agreement import DEFAULT_ICC_FORM, ICC_FORM_TEXT, AgreementWarning, deming_slope, feature_agreement
from aspectus.validation.align import Alignment, apply_alignment, estimate_offset, find_marker, marker_alignment, user_alignment
from aspectus.errors import AspectusInputError, ParameterError
from aspectus.validation.event_agreement import label_kappa, match_events
from aspectus.reference import ReferenceRecording, TableMapping, read_reference
from aspectus.reference.screen import ScreenGeometry

#: features compared by default (columns of the features table)
DEFAULT_FEATURES = (
    "fixation_count", "fixation_rate_per_s", "fixation_duration_mean_ms", "fixation_duration_median_ms",
    "fixation_time_frac", "saccade_count", "saccade_amplitude_mean_deg", "blink_count", "blink_rate_per_min",
)
#: fewer pairs than this make the report warn that the intervals are wide
SMALL_N = 10


@dataclass
class ValidateParams:
    """Parameters of a validation run.

    Parameters
    ----------
    analysis : AnalysisParams, optional
        Clean-up, detector and feature parameters, applied alike to both
        sides (default: aspectus's documented default).
    window_s, step_s : float, optional
        Length and step of the paired feature windows, s (default: those of
        ``analysis``).
    offset_s : float, optional
        Clip time of the reference's first sample, s; overrides the automatic
        alignment.
    marker : str, optional
        Align on a shared marker: a reference message/event label, matched on
        the webcam side with the onset of the task segment of the same label
        (or ``webcam_marker_s``).
    webcam_marker_s : float, optional
        Clip time of the marker, s (instead of a segment onset).
    search_range_s : float
        Offsets searched by the automatic alignment, +- s.
    align_rate_hz : float
        Common rate of the cross-correlation, Hz.
    align_signal : {"both", "angle", "speed"}
        Signals correlated (see :func:`aspectus.validation.align.estimate_offset`).
    estimate_drift : bool
        Also fit a linear clock drift.
    resample_reference_hz : float, optional
        Resample the reference to this rate (Hz) before detection, e.g. the
        webcam's 30 Hz, to compare the detector at equal rates. Default: the
        reference is measured at its own rate.
    reference_events : {"detect", "own"}
        ``detect``: the reference's samples go through the same detector as the
        webcam (default, both sides measured alike); ``own``: event-level
        agreement uses the events stored in the reference file (features are
        still detected from its samples).
    features : tuple of str
        Features compared.
    min_valid_frac : float
        Windows where either side has less valid data than this (0-1) are not paired.
    match_tolerance_s : float
        Largest onset difference of matched events, s.
    icc_form : str
        Shrout & Fleiss form reported as ``icc`` (default ``"2,1"``).
    confidence : float
        Confidence level of every interval.
    """

    analysis: object = None
    window_s: float | None = None
    step_s: float | None = None
    offset_s: float | None = None
    marker: str | None = None
    webcam_marker_s: float | None = None
    search_range_s: float = 30.0
    align_rate_hz: float = 60.0
    align_signal: str = "both"
    estimate_drift: bool = False
    resample_reference_hz: float | None = None
    reference_events: str = "detect"
    features: tuple[str, ...] = DEFAULT_FEATURES
    min_valid_frac: float = 0.5
    match_tolerance_s: float = 0.1
    icc_form: str = DEFAULT_ICC_FORM
    confidence: float = 0.95

    def __post_init__(self):
        if self.analysis is None:
            from aspectus.events.analysis import AnalysisParams

            self.analysis = AnalysisParams()
        if self.reference_events not in ("detect", "own"):
            raise ParameterError(f"reference_events must be 'detect' or 'own', got {self.reference_events!r}")
        if not (0.0 <= self.min_valid_frac <= 1.0):
            raise ParameterError(f"min_valid_frac must be 0-1, got {self.min_valid_frac!r}")
        if self.resample_reference_hz is not None and not self.resample_reference_hz > 0:
            raise ParameterError("resample_reference_hz must be positive")
        key = self.icc_form.replace(" ", "").lower()
        if key not in ICC_FORM_TEXT:
            raise ParameterError(f"ICC form {self.icc_form!r} is not one of {', '.join(ICC_FORM_TEXT)}")
        self.features = tuple(self.features)

    @property
    def window_length_s(self) -> float:
        return float(self.window_s if self.window_s is not None else self.analysis.window_s)

    @property
    def window_step_s(self) -> float:
        return float(self.step_s if self.step_s is not None else (
            self.window_s if self.window_s is not None else self.analysis.step_s))

    def to_dict(self) -> dict:
        d = {k: getattr(self, k) for k in self.__dataclass_fields__ if k != "analysis"}
        d["features"] = list(self.features)
        d["window_s"], d["step_s"] = self.window_length_s, self.window_step_s
        d["analysis"] = self.analysis.to_dict()
        return d


@dataclass
class ValidationResult:
    """Everything one validation run computed (and, after writing, where it went)."""

    agreement: pd.DataFrame
    pairs: pd.DataFrame
    alignment: Alignment
    events: dict
    webcam: pd.DataFrame
    reference: pd.DataFrame
    webcam_analysis: object
    reference_analysis: object
    notes: list[str]
    reading: str
    meta: dict
    paths: dict = field(default_factory=dict)


# ----------------------------------------------------------------------------- inputs


def load_webcam(path) -> tuple[pd.DataFrame, Path, dict]:
    """Webcam samples from a clip's output folder (or its samples.parquet / samples.csv)."""
    from aspectus.webcam.pipeline import load_samples, read_run_json

    p = Path(path)
    if p.is_dir():
        if not (p / "samples.parquet").exists():
            raise AspectusInputError("no samples.parquet in this folder", path=p,
                                    hint="WEBCAM is a clip's output folder from `aspectus process` (or the clip)")
        return load_samples(p), p, read_run_json(p) or {}
    if p.suffix == ".parquet" and p.exists():
        return pd.read_parquet(p), p.parent, read_run_json(p.parent) or {}
    if p.suffix == ".csv" and p.exists():
        from aspectus.schema import check_samples

        return check_samples(pd.read_csv(p), source=str(p)), p.parent, {}
    raise AspectusInputError("not a clip output folder or samples table", path=p,
                            hint="run `aspectus process CLIP -o OUT` and give OUT/<clip name>")


def is_clip(path) -> bool:
    from aspectus.studies.clips import VIDEO_EXTENSIONS

    p = Path(path)
    return p.is_file() and p.suffix.lower() in {e.lower() for e in VIDEO_EXTENSIONS}


def _segments(segments, webcam_dir: Path | None, run: dict):
    from aspectus.events.segments import check_segments, read_segments

    if segments is None and run.get("segments"):
        cand = Path(run["segments"])
        if cand.exists():
            segments = cand
    if segments is None:
        return None
    if isinstance(segments, pd.DataFrame):
        return check_segments(segments)
    return read_segments(segments)


def resample_samples(samples: pd.DataFrame, rate_hz: float) -> pd.DataFrame:
    """Resample a samples table to ``rate_hz`` by taking the sample nearest each tick (no averaging)."""
    t = samples["t_s"].to_numpy(float)
    ticks = np.arange(t[0], t[-1] + 1e-12, 1.0 / rate_hz)
    j = np.clip(np.searchsorted(t, ticks), 1, len(t) - 1)
    j = np.where(np.abs(t[j - 1] - ticks) <= np.abs(t[j] - ticks), j - 1, j)
    j = np.unique(j)
    return samples.iloc[j].reset_index(drop=True)


def _common_windows(tw: np.ndarray, tr: np.ndarray, window_s: float, step_s: float) -> pd.DataFrame:
    from aspectus.events.segments import fixed_windows

    lo, hi = max(tw[0], tr[0]), min(tw[-1], tr[-1])
    return fixed_windows(float(lo), float(hi), window_s=window_s, step_s=step_s)


def _analyse(samples, params, scopes, source):
    from aspectus.events.analysis import run_analysis

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        res = run_analysis(samples, params, segments=scopes, source=source)
    msgs = [str(w.message) for w in caught if issubclass(w.category, UserWarning)]
    return res, msgs


# ----------------------------------------------------------------------------- core


def _align(webcam, ref: ReferenceRecording, params: ValidateParams, segments) -> Alignment:
    if params.offset_s is not None:
        return user_alignment(params.offset_s)
    if params.marker:
        t_ref = find_marker(ref.messages, params.marker, source=str(ref.path))
        if params.webcam_marker_s is not None:
            t_cam = float(params.webcam_marker_s)
        else:
            if segments is None or not len(segments):
                raise AspectusInputError(f"--marker {params.marker!r} needs the webcam's time of the marker",
                                        hint="give a segments file with a segment of that label, or "
                                        "--webcam-marker-s")
            hit = segments[segments["label"].str.lower() == params.marker.lower()]
            if not len(hit):
                raise AspectusInputError(f"no segment labelled {params.marker!r} on the webcam side",
                                        hint="segments there: " + ", ".join(segments["label"].astype(str)))
            t_cam = float(hit["onset_s"].iloc[0])
        return marker_alignment(webcam_marker_s=t_cam, reference_marker_s=t_ref, label=params.marker)
    return estimate_offset(webcam, ref.samples, search_range_s=params.search_range_s, rate_hz=params.align_rate_hz,
                           signal=params.align_signal, estimate_drift=params.estimate_drift)


def _pair_features(fw: pd.DataFrame, fr: pd.DataFrame, scope: str, features, min_valid: float):
    a = fw[fw["scope"] == "segment"].set_index("label")
    b = fr[fr["scope"] == "segment"].set_index("label")
    prefix = "w:" if scope == "window" else "s:"
    labels = [lab for lab in a.index if lab in b.index and str(lab).startswith(prefix)]
    rows = []
    for lab in labels:
        ra, rb = a.loc[lab], b.loc[lab]
        if isinstance(ra, pd.DataFrame):
            ra, rb = ra.iloc[0], rb.iloc[0]
        ok = (ra.get("valid_frac", 1.0) >= min_valid) and (rb.get("valid_frac", 1.0) >= min_valid)
        row = {"scope": scope, "label": str(lab)[2:], "start_s": ra["start_s"],
               "end_s": ra["end_s"], "paired": bool(ok)}
        for f in features:
            row[f"{f}_webcam"] = float(ra[f]) if f in ra.index else np.nan
            row[f"{f}_reference"] = float(rb[f]) if f in rb.index else np.nan
        row["valid_frac_webcam"] = float(ra.get("valid_frac", np.nan))
        row["valid_frac_reference"] = float(rb.get("valid_frac", np.nan))
        rows.append(row)
    return pd.DataFrame(rows)


def _paired_features(pairs: pd.DataFrame, features):
    """``(scope, feature, rows)`` for every scope with paired rows and every feature they carry."""
    for scope in ("window", "segment"):
        p = pairs[(pairs["scope"] == scope) & pairs["paired"]] if len(pairs) else pairs
        if not len(p):
            continue
        for f in features:
            if f"{f}_webcam" in p.columns:
                yield scope, f, p


def agreement_table(pairs: pd.DataFrame, features, *, icc_form: str = DEFAULT_ICC_FORM,
                    confidence: float = 0.95) -> pd.DataFrame:
    """One row per (scope, feature) of paired windows/segments: n, means, r, rho, CCC, ICC, Bland-Altman."""
    rows = []
    for scope, f, p in _paired_features(pairs, features):
        fa = feature_agreement(p[f"{f}_webcam"], p[f"{f}_reference"], feature=f, icc_form=icc_form,
                               confidence=confidence)
        notes = list(fa.notes)
        if 3 <= fa.n < SMALL_N:
            notes.append(f"only {fa.n} pairs: intervals are wide")
        row = {"scope": scope, **fa.to_row()}
        row["notes"] = "; ".join(notes)
        rows.append(row)
    cols = ["scope", "feature", "n"]
    df = pd.DataFrame(rows)
    return df[cols + [c for c in df.columns if c not in cols]] if len(df) else pd.DataFrame(columns=cols)


def _gain(ev_w: pd.DataFrame, ev_r: pd.DataFrame, tol: float, confidence: float) -> dict:
    out = {}
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", AgreementWarning)
        sac = match_events(ev_w, ev_r, event_type="saccade", tolerance_s=tol)
        amp_w = ev_w[ev_w["type"] == "saccade"].reset_index(drop=True)
        amp_r = ev_r[ev_r["type"] == "saccade"].reset_index(drop=True)
        if sac.n_matched and "amplitude_deg" in amp_w.columns and "amplitude_deg" in amp_r.columns:
            a = amp_w["amplitude_deg"].to_numpy(float)[sac.pairs["webcam_index"].to_numpy(int)]
            b = amp_r["amplitude_deg"].to_numpy(float)[sac.pairs["reference_index"].to_numpy(int)]
        else:
            a = b = np.empty(0)
        out["saccade_amplitude"] = deming_slope(b, a, confidence=confidence).to_dict()
        fix = match_events(ev_w, ev_r, event_type="fixation", tolerance_s=tol)
        fw = ev_w[ev_w["type"] == "fixation"].reset_index(drop=True)
        fr = ev_r[ev_r["type"] == "fixation"].reset_index(drop=True)
        for axis in ("yaw", "pitch"):
            col = f"{axis}_deg"
            if fix.n_matched and col in fw.columns and col in fr.columns:
                a = fw[col].to_numpy(float)[fix.pairs["webcam_index"].to_numpy(int)]
                b = fr[col].to_numpy(float)[fix.pairs["reference_index"].to_numpy(int)]
            else:
                a = b = np.empty(0)
            out[f"fixation_{axis}"] = deming_slope(b, a, confidence=confidence).to_dict()
    out["notes"] = sorted({str(w.message) for w in caught})
    out["method"] = ("Deming regression (error variance ratio 1) of webcam on reference, over events matched by "
                     "onset; slope = gain, the intercept absorbs the webcam's constant angle offset")
    return out


def validate_pair(webcam, reference, out_dir=None, *, mapping: TableMapping | None = None,
                  screen: ScreenGeometry | None = None, params: ValidateParams | None = None, segments=None,
                  participant: str | None = None, session: str | None = None, write: bool = True,
                  figures: bool = True) -> ValidationResult:
    """Validate one webcam recording against one reference recording.

    Parameters
    ----------
    webcam : path-like
        A clip's output folder from ``aspectus process`` (or its samples table).
    reference : path-like
        BIDS ``*_physio.tsv.gz`` (sidecars beside it) or a delimited table.
    out_dir : path-like, optional
        Where to write agreement.csv, pairs.csv, alignment.json,
        events_agreement.json, report.html, the PNG figures and
        validation.json (last). Required when ``write``.
    mapping : TableMapping, optional
        Column mapping for a table reference.
    screen : ScreenGeometry, optional
        Screen geometry for a BIDS file without ``StimulusPresentation``.
    params : ValidateParams, optional
    segments : path-like or DataFrame, optional
        Task segments on the clip's clock (label, onset_s, offset_s); default
        the segments the clip was processed with.
    participant, session : str, optional
        Labels for the report.
    write : bool
        Write the files (after all computation succeeded).
    figures : bool
        Render the PNG figures and embed them in the report.

    Returns
    -------
    ValidationResult
    """
    params = params or ValidateParams()
    if write and out_dir is None:
        raise ParameterError("validate_pair needs out_dir to write its results")
    cam, cam_dir, run = load_webcam(webcam)
    segs = _segments(segments, cam_dir, run)
    ref = read_reference(reference, mapping, screen=screen)
    notes: list[str] = []
    alignment = _align(cam, ref, params, segs)
    notes += alignment.notes
    ref_aligned = apply_alignment(ref.samples, alignment)
    if params.resample_reference_hz:
        ref_aligned = resample_samples(ref_aligned, params.resample_reference_hz)
    tw, tr = cam["t_s"].to_numpy(float), ref_aligned["t_s"].to_numpy(float)
    overlap = min(tw[-1], tr[-1]) - max(tw[0], tr[0])
    if overlap <= 0:
        raise AspectusInputError(
            f"after alignment (offset {alignment.offset_s:.3f} s) the recordings do not overlap "
            f"(webcam {tw[0]:.1f}-{tw[-1]:.1f} s, reference {tr[0]:.1f}-{tr[-1]:.1f} s on the clip clock)",
            path=reference, hint="check the offset, the marker or the pairing of files")
    windows = _common_windows(tw, tr, params.window_length_s, params.window_step_s)
    if len(windows) < 3:
        notes.append(f"the recordings overlap for {overlap:.1f} s, giving only {len(windows)} windows of "
                     f"{params.window_length_s:g} s; window-level agreement is not meaningful - use shorter "
                     "windows (--window-s)")
    scopes = windows.rename(columns={"start_s": "onset_s", "end_s": "offset_s"})
    scopes["label"] = "w:" + scopes["label"].astype(str)
    if segs is not None and len(segs):
        scopes = pd.concat([scopes, segs.assign(label="s:" + segs["label"].astype(str))], ignore_index=True)
    scopes = scopes[["label", "onset_s", "offset_s"]] if len(scopes) else None
    res_w, warn_w = _analyse(cam, params.analysis, scopes, source=str(cam_dir))
    res_r, warn_r = _analyse(ref_aligned, params.analysis, scopes, source=str(ref.path))
    for side, msgs in (("webcam", warn_w), ("reference", warn_r)):
        if msgs:
            notes.append(f"{side}: {len(msgs)} warning(s) during detection, e.g. {msgs[0]}")
    fw, fr = res_w.features, res_r.features
    pairs = pd.concat([_pair_features(fw, fr, "window", params.features, params.min_valid_frac),
                       _pair_features(fw, fr, "segment", params.features, params.min_valid_frac)],
                      ignore_index=True)
    if len(pairs):
        dropped = int((~pairs["paired"]).sum())
        if dropped:
            notes.append(f"{dropped} window(s)/segment(s) left out: less than {params.min_valid_frac:.0%} valid "
                         "data on one side")
    agreement = agreement_table(pairs, params.features, icc_form=params.icc_form, confidence=params.confidence)

    # --- event level (both on the clip clock now)
    ref_events = res_r.events
    if params.reference_events == "own":
        if ref.events is None:
            raise AspectusInputError("the reference has no events of its own", path=ref.path,
                                    hint="use --reference-events detect")
        ref_events = ref.events.assign(onset_s=alignment.to_clip_time(ref.events["onset_s"]),
                                       offset_s=alignment.to_clip_time(ref.events["offset_s"]))
        from aspectus.validation.event_agreement import labels_from_events

        ref_labels = labels_from_events(ref_aligned["t_s"], ref_events)
    else:
        ref_labels = res_r.labels
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", AgreementWarning)
        kap = label_kappa(cam["t_s"], res_w.labels, ref_aligned["t_s"], ref_labels, offset_s=0.0,
                          label="fixation", confidence=params.confidence)
        kap_all = label_kappa(cam["t_s"], res_w.labels, ref_aligned["t_s"], ref_labels, offset_s=0.0, label="*",
                              exclude=(), confidence=params.confidence)
        matches = {t: match_events(res_w.events, ref_events, event_type=t, tolerance_s=params.match_tolerance_s)
                   for t in ("fixation", "saccade", "blink")}
    ev_notes = sorted({str(w.message) for w in caught})
    gain = _gain(res_w.events, ref_events, params.match_tolerance_s, params.confidence)
    fm = matches["fixation"]
    events = {
        "kappa": kap.kappa, "kappa_ci_low": kap.ci_low, "kappa_ci_high": kap.ci_high, "kappa_n_samples": kap.n,
        "f1": fm.f1, "precision": fm.precision, "recall": fm.recall,
        "kappa_detail": kap.to_dict(), "kappa_all_labels": kap_all.kappa,
        "matching": {t: m.to_dict() for t, m in matches.items()},
        "gain": gain,
        "reference_events": params.reference_events,
        "method": {
            "kappa": "Cohen's kappa, fixation vs any other label, per webcam sample after alignment (reference label "
                     "at the nearest reference sample within 0.1 s); data-loss samples left out; interval: moving-block "
                     "bootstrap, 1 s blocks",
            "matching": f"fixation onsets matched one to one within {params.match_tolerance_s:g} s, closest first",
        },
        "notes": ev_notes,
    }
    notes += ev_notes
    small = agreement[(agreement["n"] < SMALL_N)] if len(agreement) else agreement
    if len(small) and (agreement["scope"] == "window").any():
        n_w = int(agreement.loc[agreement["scope"] == "window", "n"].max())
        if n_w < SMALL_N:
            notes.append(f"only {n_w} paired windows: every interval is wide; treat the figures as a first look")
    from aspectus.validation.report import plain_reading

    meta = {
        "aspectus": __version__, "participant": participant, "session": session,
        "webcam": str(cam_dir), "reference": str(ref.path), "reference_format": ref.meta.get("format"),
        "reference_rate_hz": ref.rate_hz, "reference_screen": ref.screen.to_dict() if ref.screen else None,
        "webcam_rate_hz": res_w.quality.get("sample_rate_hz"), "overlap_s": float(overlap),
        "windows": int(len(windows)), "segments": int(0 if segs is None else len(segs)),
        "params": params.to_dict(), "icc_form": ICC_FORM_TEXT[params.icc_form.replace(" ", "").lower()],
        "webcam_quality": res_w.quality, "reference_quality": res_r.quality,
        "reference_measured_at": (f"{params.resample_reference_hz:g} Hz (resampled)" if params.resample_reference_hz
                                  else f"its own rate ({ref.rate_hz:.0f} Hz)"),
    }
    result = ValidationResult(agreement=agreement, pairs=pairs, alignment=alignment, events=events, webcam=cam,
                              reference=ref_aligned, webcam_analysis=res_w, reference_analysis=res_r, notes=notes,
                              reading="", meta=meta)
    result.reading = plain_reading(result)
    if write:
        write_validation(result, out_dir, figures=figures)
    return result


def write_validation(result: ValidationResult, out_dir, *, figures: bool = True) -> dict[str, Path]:
    """Render the report, then write every file of a validation (each atomically, validation.json last)."""
    from aspectus.atomic import write_bytes, write_csv, write_json, write_text
    from aspectus.validation.report import render_pair_figures, render_pair_report

    out = Path(out_dir)
    pngs = render_pair_figures(result) if figures else {}
    html = render_pair_report(result, pngs)
    out.mkdir(parents=True, exist_ok=True)
    paths = {"agreement": write_csv(out / "agreement.csv", result.agreement),
             "pairs": write_csv(out / "pairs.csv", result.pairs),
             "alignment": write_json(out / "alignment.json", result.alignment.to_dict()),
             "events_agreement": write_json(out / "events_agreement.json", result.events)}
    if result.alignment.curve is not None:
        paths["alignment_curve"] = write_csv(out / "alignment_curve.csv", result.alignment.curve)
    for name, data in pngs.items():
        paths[name] = write_bytes(out / f"{name}.png", data)
    paths["report"] = write_text(out / "report.html", html)
    from aspectus.atomic import sha256_file

    side = dict(result.meta)
    side["notes"] = result.notes
    side["reading"] = result.reading
    side["outputs"] = {p.name: sha256_file(p) for p in paths.values()}
    paths["validation"] = write_json(out / "validation.json", side)
    result.paths = paths
    return paths


# ----------------------------------------------------------------------------- study


@dataclass
class StudyRow:
    """One line of a validation manifest (or one pair found in folder mode)."""

    webcam: Path
    reference: Path
    participant: str
    session: str | None = None
    mapping: Path | None = None
    segments: Path | None = None
    offset_s: float | None = None
    line: int = 0
    task: str | None = None
    run: str | None = None

    @property
    def key(self) -> str:
        """``participant[_session][_task][_run]``: the name of the pair's output folder."""
        return "_".join(v for v in (self.participant, self.session, self.task, self.run) if v)


def read_validation_manifest(path) -> list[StudyRow]:
    """Read a manifest CSV: webcam, reference, optional participant, session, task, run, mapping, segments, offset_s.

    Relative paths are relative to the manifest's folder. ``webcam`` is a
    clip's output folder (or the clip, processed on the way). Lines starting
    with ``#`` are comments; other columns are ignored.
    """
    path = Path(path)
    if not path.is_file():
        raise AspectusInputError("manifest not found", path=path)
    # only whole lines starting with "#" are comments: a "#" inside a path ("Class #3/") is part of it
    try:
        lines = path.read_text(encoding="utf-8-sig").splitlines()
    except (OSError, UnicodeDecodeError) as exc:
        raise AspectusInputError(f"cannot read the manifest ({exc})", path=path) from None
    kept = [(k + 1, ln) for k, ln in enumerate(lines) if ln.strip() and not ln.lstrip().startswith("#")]
    if not kept:
        raise AspectusInputError("the manifest is empty", path=path, hint="columns: webcam, reference, participant, "
                                "session, mapping")
    file_line = [k for k, _ in kept]  # file line number of each table row (header first)
    try:
        df = pd.read_csv(io.StringIO("\n".join(ln for _, ln in kept)), sep=None, engine="python", dtype=str,
                         keep_default_na=False)
    except Exception as exc:  # noqa: BLE001 - pandas raises several parser errors
        raise AspectusInputError(f"cannot read the manifest as a table ({exc})", path=path) from None
    df.columns = [c.strip().lower() for c in df.columns]
    for need in ("webcam", "reference"):
        if need not in df.columns:
            raise AspectusInputError(f"the manifest has no {need!r} column (it has {', '.join(df.columns)})",
                                    path=path, where="header",
                                    hint="columns: webcam, reference, participant, session, mapping")
    if not len(df):
        raise AspectusInputError("the manifest lists no pairs", path=path)
    base = path.parent
    rows, seen = [], set()
    for i, r in df.iterrows():
        line = file_line[int(i) + 1] if int(i) + 1 < len(file_line) else int(i) + 2

        def p(col):
            v = str(r.get(col, "")).strip()
            if not v:
                return None
            q = Path(v)
            return q if q.is_absolute() else base / q

        cam, ref = p("webcam"), p("reference")
        if cam is None or ref is None:
            raise AspectusInputError("webcam and reference must both be given", path=path, where=f"row {line}")
        for what, q in (("webcam", cam), ("reference", ref)):
            if not q.exists():
                raise AspectusInputError(f"{what} {q} does not exist", path=path, where=f"row {line}",
                                        hint="paths are relative to the manifest's folder")
        participant = str(r.get("participant", "")).strip() or _guess_participant(cam, ref) or f"row{line}"
        label = lambda col: str(r.get(col, "")).strip() or None  # noqa: E731
        off = str(r.get("offset_s", "")).strip()
        try:
            offset = float(off) if off else None
        except ValueError:
            raise AspectusInputError(f"offset_s {off!r} is not a number of seconds", path=path,
                                    where=f"row {line}") from None
        row = StudyRow(webcam=cam, reference=ref, participant=participant, session=label("session"),
                       mapping=p("mapping"), segments=p("segments"), offset_s=offset, line=line, task=label("task"),
                       run=label("run"))
        if row.key in seen:
            raise AspectusInputError(f"participant/session {row.key} appears twice", path=path, where=f"row {line}",
                                    hint="give the rows different session, task or run labels")
        seen.add(row.key)
        if not re.fullmatch(r"[A-Za-z0-9_.-]+", row.key):
            raise AspectusInputError(f"participant/session {row.key!r} must be letters, digits, _ . -",
                                    path=path, where=f"row {line}")
        rows.append(row)
    return rows


def _guess_participant(*paths) -> str | None:
    for q in paths:
        m = re.search(r"(?:sub-)?(p\d+)", Path(q).name)
        if m:
            return m.group(1)
    return None


@dataclass
class StudyResult:
    """Per-participant results, pooled agreement, repeated-measures statistics, and the summary table.

    ``pooled`` has one row per (scope, feature): the statistics over all
    windows taken as independent (``pearson_r`` ... ``ba_loa_high``) and
    those that allow for windows nested in participants (``rmcorr*``,
    ``ba_rm_*``, ``means_*``; see :func:`repeated_agreement_table`).
    ``participant_means`` has one row per (scope, feature, participant).
    ``pairing`` is the :class:`aspectus.validation.pairing.FolderPairing` of folder mode
    (None for a manifest); ``unpaired`` lists, one line each, the clips and
    references that were not paired.
    """

    per_participant: pd.DataFrame
    pooled: pd.DataFrame
    summary: pd.DataFrame
    results: dict
    failures: dict
    participant_means: pd.DataFrame = field(default_factory=pd.DataFrame)
    pairing: object = None
    unpaired: list = field(default_factory=list)
    paths: dict = field(default_factory=dict)


#: columns of :func:`repeated_agreement_table` after scope and feature
REPEATED_COLUMNS = (
    "participants", "rmcorr", "rmcorr_ci_low", "rmcorr_ci_high", "rmcorr_df", "rmcorr_p", "rmcorr_slope",
    "ba_rm_bias", "ba_rm_bias_ci_low", "ba_rm_bias_ci_high", "ba_rm_sd", "ba_rm_sd_within", "ba_rm_sd_between",
    "ba_rm_loa_low", "ba_rm_loa_high", "means_n", "means_pearson_r", "means_pearson_ci_low",
    "means_pearson_ci_high", "means_icc", "means_icc_ci_low", "means_icc_ci_high", "means_ba_bias",
    "means_ba_loa_low", "means_ba_loa_high", "repeated_notes")


def repeated_agreement_table(pairs: pd.DataFrame, features, *, subject: str = "participant",
                             icc_form: str = DEFAULT_ICC_FORM, confidence: float = 0.95
                             ) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Agreement that respects windows nested in participants, one row per (scope, feature).

    Returns
    -------
    table : DataFrame
        Per (scope, feature): ``participants``; the repeated-measures
        correlation ``rmcorr`` with its interval, ``rmcorr_df`` (N - k - 1),
        p value and common slope (Bakdash & Marusich 2017); the Bland-Altman
        bias (interval allowing for the clustering) and limits for a single
        window when each participant has several and their true value varies,
        ``ba_rm_*`` (Bland & Altman 2007); and the comparison of the
        participants' mean values, one point per participant, ``means_*``
        (Pearson r, ICC, Bland-Altman on the means - limits for a
        participant's mean, not for a single window).
    means : DataFrame
        One row per (scope, feature, participant): windows, mean webcam, mean
        reference, mean and SD of the differences.
    """
    from aspectus.validation.agreement import bland_altman, bland_altman_repeated, icc, pearson, rmcorr, subject_means

    rows, mrows = [], []
    for scope, f, p in _paired_features(pairs, features):
        a, b, s = p[f"{f}_webcam"].to_numpy(float), p[f"{f}_reference"].to_numpy(float), p[subject].to_numpy()
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always", AgreementWarning)
            rc = rmcorr(a, b, s, confidence=confidence)
            ba = bland_altman_repeated(a, b, s, confidence=confidence)
            means = subject_means(a, b, s)
            ma, mb = means["mean_a"].to_numpy(float), means["mean_b"].to_numpy(float)
            mp = pearson(ma, mb, confidence=confidence)
            mi = icc(np.column_stack([ma, mb]) if len(means) else np.empty((0, 2)), form=icc_form,
                     confidence=confidence)
            mba = bland_altman(ma, mb, confidence=confidence)
        notes = list(dict.fromkeys(str(w.message) for w in caught if issubclass(w.category, AgreementWarning)))
        rows.append({
            "scope": scope, "feature": f, "participants": rc.n_subjects,
            "rmcorr": rc.estimate, "rmcorr_ci_low": rc.ci_low, "rmcorr_ci_high": rc.ci_high, "rmcorr_df": rc.df,
            "rmcorr_p": rc.p_value, "rmcorr_slope": rc.slope,
            "ba_rm_bias": ba.bias, "ba_rm_bias_ci_low": ba.bias_ci_low, "ba_rm_bias_ci_high": ba.bias_ci_high,
            "ba_rm_sd": ba.sd, "ba_rm_sd_within": ba.sd_within, "ba_rm_sd_between": ba.sd_between,
            "ba_rm_loa_low": ba.loa_low, "ba_rm_loa_high": ba.loa_high,
            "means_n": int(len(means)), "means_pearson_r": mp.estimate, "means_pearson_ci_low": mp.ci_low,
            "means_pearson_ci_high": mp.ci_high, "means_icc": mi.estimate, "means_icc_ci_low": mi.ci_low,
            "means_icc_ci_high": mi.ci_high, "means_ba_bias": mba.bias, "means_ba_loa_low": mba.loa_low,
            "means_ba_loa_high": mba.loa_high, "repeated_notes": "; ".join(notes)})
        for _, m in means.iterrows():
            mrows.append({"scope": scope, "feature": f, "participant": m["subject"], "windows": int(m["n"]),
                          "mean_webcam": m["mean_a"], "mean_reference": m["mean_b"],
                          "mean_difference": m["mean_difference"], "sd_difference": m["sd_difference"]})
    table = pd.DataFrame(rows, columns=["scope", "feature", *REPEATED_COLUMNS])
    means = pd.DataFrame(mrows, columns=["scope", "feature", "participant", "windows", "mean_webcam",
                                         "mean_reference", "mean_difference", "sd_difference"])
    return table, means


def _study_rows(source, *, references=None, label_pattern=None, reference_glob=None, tables=False,
                save_manifest=None):
    """(rows, pairing) from a manifest, a pair of folders, or a FolderPairing."""
    from aspectus.validation.pairing import FolderPairing, pair_folders

    if isinstance(source, FolderPairing):
        pairing = source
    elif references is not None:
        src = Path(source)
        if not src.is_dir():
            raise AspectusInputError("folder mode needs the webcam side as a folder", path=src,
                                    hint="give the output folder of `aspectus batch`/`aspectus process`, or a manifest "
                                         "CSV without a reference folder")
        pairing = pair_folders(src, references, label_pattern=label_pattern, tables=tables,
                               reference_glob=reference_glob)
    else:
        if Path(source).is_dir():
            raise AspectusInputError("is a folder: folder mode needs the reference folder too", path=source,
                                    hint="aspectus validate WEBCAM_FOLDER REFERENCE_FOLDER -o OUT, or --manifest CSV")
        return read_validation_manifest(source), None
    written = pairing.write_manifest(save_manifest) if save_manifest is not None else None
    pairing.raise_if_ambiguous(written)
    if not pairing.pairs:
        raise AspectusInputError(
            "no clip could be paired with a reference: " + "; ".join(pairing.messages()[:6])
            + (" ..." if len(pairing.messages()) > 6 else ""), path=pairing.webcam_folder,
            hint="take participant/session labels from the names with --labels REGEX, or write a manifest CSV and "
                 "use --manifest")
    return pairing.rows(), pairing


def validate_study(source, out_dir, *, references=None, label_pattern: str | None = None,
                   reference_glob: str | None = None, save_manifest=None, params: ValidateParams | None = None,
                   screen: ScreenGeometry | None = None, mapping: TableMapping | None = None, figures: bool = True,
                   progress=None) -> StudyResult:
    """Validate every pair of a study; pool the windows of all participants.

    Parameters
    ----------
    source : path-like or FolderPairing
        A manifest CSV (:func:`read_validation_manifest`); or, with
        ``references``, the output folder of ``aspectus batch`` / ``aspectus
        process`` (folder mode, :func:`aspectus.validation.pairing.pair_folders`); or a
        pairing made beforehand.
    out_dir : path-like
        The study folder.
    references : path-like, optional
        Folder mode: the folder (or BIDS tree) of reference recordings.
    label_pattern, reference_glob : str, optional
        Folder mode: see :func:`aspectus.validation.pairing.pair_folders`. Plain tables
        are considered as references when ``mapping`` is given.
    save_manifest : path-like, optional
        Folder mode: write the pairs found as a manifest CSV (before any
        validation, and also when the pairing is ambiguous).
    params, screen, mapping, figures, progress
        As for :func:`validate_pair`; ``mapping`` is used for rows without one.

    Notes
    -----
    Each pair gets ``OUTDIR/<participant>[_<session>][_<task>][_<run>]/`` with
    the files of :func:`validate_pair`. The study folder gets
    ``pooled_agreement.csv`` (one row per scope and feature: the statistics
    over all paired windows taken as independent, and beside them the
    repeated-measures correlation, the Bland & Altman (2007) limits for
    several windows per participant and the comparison of participant means,
    :func:`repeated_agreement_table`), ``participant_means.csv``,
    ``participants.csv`` (one row per pair: offset, its confidence, kappa, F1,
    n windows, r and ICC of the fixation count; unpaired clips and references
    as rows too in folder mode), ``summary.csv`` / ``summary.md`` /
    ``summary.html`` (a table to paste into a paper), ``report.html``, in
    folder mode ``pairing.csv`` (every clip and reference with what happened
    to it), and ``study_validation.json`` last. A pair that fails is reported
    with its error and the others go on. Subjects of the repeated-measures
    statistics are participants: two sessions of one participant count as one
    subject.
    """
    from aspectus.atomic import write_bytes, write_csv, write_json, write_text
    from aspectus.validation.report import render_study_report, summary_html, summary_markdown

    params = params or ValidateParams()
    rows, pairing = _study_rows(source, references=references, label_pattern=label_pattern,
                                reference_glob=reference_glob, tables=mapping is not None, save_manifest=save_manifest)
    unpaired = pairing.messages() if pairing is not None else []
    out = Path(out_dir)
    results, failures, row_of = {}, {}, {}
    for k, row in enumerate(rows):
        if progress:
            progress(k / len(rows), f"validating {row.key}")
        row_of[row.key] = row
        m = TableMapping.load(row.mapping) if row.mapping else mapping
        p = replace(params, offset_s=row.offset_s) if row.offset_s is not None else params
        try:
            cam = row.webcam
            if is_clip(cam):
                from aspectus.webcam.pipeline import clip_output_dir, process_clip

                proc = clip_output_dir(out / "processed", cam)
                process_clip(cam, proc, segments=row.segments)
                cam = proc
            results[row.key] = validate_pair(cam, row.reference, out / row.key, mapping=m, screen=screen, params=p,
                                             segments=row.segments, participant=row.participant,
                                             session=row.session, figures=figures)
        except AspectusInputError as exc:
            failures[row.key] = str(exc)
    if not results:
        raise AspectusInputError("no pair of the study could be validated: "
                                + "; ".join(f"{k}: {v}" for k, v in failures.items()),
                                path=source if pairing is None else pairing.webcam_folder)
    per = []
    for key, r in results.items():
        fc = r.agreement[(r.agreement["scope"] == "window") & (r.agreement["feature"] == "fixation_count")]
        row = row_of[key]
        per.append({"participant": r.meta["participant"], "session": r.meta["session"], "task": row.task,
                    "run": row.run, "key": key,
                    "offset_s": r.alignment.offset_s, "offset_confidence": r.alignment.confidence,
                    "offset_method": r.alignment.method, "overlap_s": r.meta["overlap_s"],
                    "windows_paired": int(r.pairs[(r.pairs["scope"] == "window") & r.pairs["paired"]].shape[0])
                    if len(r.pairs) else 0,
                    "kappa": r.events["kappa"], "f1": r.events["f1"],
                    "fixation_count_r": float(fc["pearson_r"].iloc[0]) if len(fc) else np.nan,
                    "fixation_count_icc": float(fc["icc"].iloc[0]) if len(fc) else np.nan,
                    "status": "ok", "notes": "; ".join(r.notes)})
    for key, msg in failures.items():
        row = row_of[key]
        per.append({"participant": row.participant, "session": row.session, "task": row.task, "run": row.run,
                    "key": key, "status": "failed", "notes": msg})
    if pairing is not None:
        for c, why in pairing.clips_without_reference:
            per.append({"key": c.key, **{k: c.labels.get(k) for k in ("participant", "session", "task", "run")},
                        "status": "no reference", "notes": why})
        for ref in pairing.references_without_clip:
            per.append({**{k: ref.labels.get(k) for k in ("participant", "session", "task", "run")},
                        "key": "", "status": "no clip", "notes": f"reference {ref.rel}: no processed clip"})
        for key, why in pairing.not_processed:
            per.append({"key": key, "status": "not processed", "notes": why})
    per_df = pd.DataFrame(per)
    all_pairs = pd.concat([r.pairs.assign(participant=r.meta["participant"], key=k) for k, r in results.items()],
                          ignore_index=True)
    pooled = agreement_table(all_pairs, params.features, icc_form=params.icc_form, confidence=params.confidence)
    repeated, part_means = repeated_agreement_table(all_pairs, params.features, icc_form=params.icc_form,
                                                    confidence=params.confidence)
    if len(pooled):
        pooled = pooled.merge(repeated, on=["scope", "feature"], how="left")
    summary = study_summary(pooled, per_df, icc_form=params.icc_form)
    html, pngs = render_study_report(per_df, pooled, summary, all_pairs, results, failures, params,
                                     figures=figures, participant_means=part_means, unpaired=unpaired)
    paths = {f"{k}_png": write_bytes(out / f"{k}.png", v) for k, v in pngs.items()}
    paths |= {"participants": write_csv(out / "participants.csv", per_df),
              "pooled_agreement": write_csv(out / "pooled_agreement.csv", pooled),
              "participant_means": write_csv(out / "participant_means.csv", part_means),
              "pooled_pairs": write_csv(out / "pooled_pairs.csv", all_pairs),
              "summary_csv": write_csv(out / "summary.csv", summary),
              "summary_md": write_text(out / "summary.md", summary_markdown(summary, icc_form=params.icc_form)),
              "summary_html": write_text(out / "summary.html", summary_html(summary, icc_form=params.icc_form)),
              "report": write_text(out / "report.html", html)}
    if pairing is not None:
        paths["pairing"] = write_csv(out / "pairing.csv", pairing.table())
    paths["study"] = write_json(out / "study_validation.json", {
        "aspectus": __version__,
        "manifest": str(source) if pairing is None else None,
        "webcam_folder": str(pairing.webcam_folder) if pairing is not None else None,
        "reference_folder": str(pairing.reference_folder) if pairing is not None else None,
        "pairs": len(rows), "validated": len(results), "failed": failures, "unpaired": unpaired,
        "params": params.to_dict(),
        "pooling": {
            "pooled": "pearson_r ... ba_loa_high: all paired windows of all participants taken as independent "
                      "(clustering in participants ignored; intervals too narrow when participants differ)",
            "rmcorr": "repeated-measures correlation, Bakdash & Marusich (2017): within-participant association, "
                      "df = N - k - 1",
            "ba_rm": "Bland & Altman (2007), true value varies: limits for a single window with several windows "
                     "per participant, from a one-way ANOVA of the differences by participant",
            "means": "participants' mean values compared, one point per participant",
            "subject": "participant (sessions of one participant are one subject)"}})
    if progress:
        progress(1.0, "study done")
    return StudyResult(per_participant=per_df, pooled=pooled, summary=summary, results=results, failures=failures,
                       participant_means=part_means, pairing=pairing, unpaired=unpaired, paths=paths)


def _finite_at_least(v, lo) -> bool:
    try:
        return bool(np.isfinite(float(v)) and float(v) >= lo)
    except (TypeError, ValueError):
        return False


def _fmt(v, nd=2):
    try:
        v = float(v)
    except (TypeError, ValueError):
        return "n/a"
    return "n/a" if not np.isfinite(v) else f"{v:.{nd}f}"


def study_summary(pooled: pd.DataFrame, per: pd.DataFrame, *, icc_form: str = DEFAULT_ICC_FORM) -> pd.DataFrame:
    """The table to paste: one row per feature (window scope), estimates with 95 % intervals as text.

    ``pearson_r``, the ICC, ``ccc``, ``ba_bias`` and ``ba_loa`` take all
    windows as independent; ``rmcorr`` (with ``rmcorr_df``), ``ba_bias_repeated``
    and ``ba_loa_repeated`` allow for several windows per participant;
    ``participant_means_r`` correlates the participants' means (one point per
    participant).
    """
    rows = []
    ok = per[per.get("status", pd.Series(dtype=str)) == "ok"] if len(per) else per
    n_part = int(ok["participant"].nunique()) if len(ok) else 0
    for _, r in pooled[pooled["scope"] == "window"].iterrows() if len(pooled) else []:
        g = lambda c: r.get(c, np.nan)  # noqa: E731 - repeated-measures columns may be absent
        rows.append({
            "feature": r["feature"], "participants": n_part, "windows": int(r["n"]),
            "mean_webcam": _fmt(r["mean_webcam"]), "mean_reference": _fmt(r["mean_reference"]),
            "pearson_r": f"{_fmt(r['pearson_r'])} [{_fmt(r['pearson_ci_low'])}, {_fmt(r['pearson_ci_high'])}]",
            f"icc_{icc_form.replace(',', '_')}": f"{_fmt(r['icc'])} [{_fmt(r['icc_ci_low'])}, {_fmt(r['icc_ci_high'])}]",
            "ccc": f"{_fmt(r['ccc'])} [{_fmt(r['ccc_ci_low'])}, {_fmt(r['ccc_ci_high'])}]",
            "ba_bias": f"{_fmt(r['ba_bias'])} [{_fmt(r['ba_bias_ci_low'])}, {_fmt(r['ba_bias_ci_high'])}]",
            "ba_loa": f"{_fmt(r['ba_loa_low'])} to {_fmt(r['ba_loa_high'])}",
            "rmcorr": f"{_fmt(g('rmcorr'))} [{_fmt(g('rmcorr_ci_low'))}, {_fmt(g('rmcorr_ci_high'))}]",
            # N - k - 1 below 1 (one window per participant) means there is no estimate, not a negative df
            "rmcorr_df": _fmt(g("rmcorr_df") if _finite_at_least(g("rmcorr_df"), 1) else np.nan, 0),
            "ba_bias_repeated": f"{_fmt(g('ba_rm_bias'))} [{_fmt(g('ba_rm_bias_ci_low'))}, "
                                f"{_fmt(g('ba_rm_bias_ci_high'))}]",
            "ba_loa_repeated": f"{_fmt(g('ba_rm_loa_low'))} to {_fmt(g('ba_rm_loa_high'))}",
            "participant_means_r": f"{_fmt(g('means_pearson_r'))} [{_fmt(g('means_pearson_ci_low'))}, "
                                   f"{_fmt(g('means_pearson_ci_high'))}]",
        })
    return pd.DataFrame(rows)
