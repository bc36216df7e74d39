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

import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from aspectus import __version__
from aspectus.validation.agreement import (DEFAULT_ICC_FORM, ICC_FORM_TEXT, AgreementWarning, deming_slope,
                                           feature_agreement)
from aspectus.validation.align import (Alignment, apply_alignment, estimate_offset, find_marker, marker_alignment,
                                       user_alignment)
from aspectus.errors import AspectusInputError, ParameterError
from aspectus.validation.event_agreement import label_kappa, match_events
from aspectus.reference import ReferenceRecording, TableMapping, read_reference
from aspectus.reference.screen import ScreenGeometry

#: features compared by default (columns of the features table)
DEFAULT_FEATURES = (
    "fixation_count", "fixation_rate_per_min", "fixation_duration_mean_ms", "fixation_duration_median_ms",
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
    force_agreement : bool
        Report the agreement figures even when the automatic alignment is
        uncertain (they are withheld by default then: a wrong offset pairs
        unrelated moments and can still give a high ICC).
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
    force_agreement: bool = False

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
        # the paired windows are these, not the analysis' own feature windows: record the ones used
        d["analysis"] = {**self.analysis.to_dict(), "window_s": d["window_s"], "step_s": d["step_s"]}
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
            from aspectus.run_record import missing_output

            problem, hint = missing_output(p, "samples.parquet")
            if read_run_json(p) is None:
                hint = "WEBCAM is a clip's output folder from `aspectus process` (or the clip)"
            raise AspectusInputError(problem, path=p, hint=hint)
        return load_samples(p), p, read_run_json(p) or {}
    if p.suffix == ".parquet" and p.exists():
        try:
            return pd.read_parquet(p), p.parent, read_run_json(p.parent) or {}
        except Exception as exc:  # noqa: BLE001 - pyarrow raises many kinds, over several lines
            first = (str(exc).strip().splitlines() or [type(exc).__name__])[0]
            raise AspectusInputError(f"cannot read as Parquet ({first})", path=p,
                                     hint="the file is damaged or not Parquet; process the clip again") from None
    if p.suffix == ".csv" and p.exists():
        from aspectus.schema import check_samples

        return check_samples(pd.read_csv(p), source=str(p)), p.parent, {}
    raise AspectusInputError("not a clip output folder or samples table", path=p,
                            hint="run `aspectus process CLIP -o OUT` and give OUT/<clip name>")


def is_clip(path) -> bool:
    """True for an existing file with a video extension aspectus reads."""
    from aspectus.webcam.video import is_video_file

    return is_video_file(path)


def _segments(segments, webcam_dir: Path | None, run: dict, notes: list[str] | None = None):
    """The task segments to compare: those given, else the file the clip was processed with (run.json records its
    path relative to the clip's output folder; an older run.json may hold it relative to where aspectus ran)."""
    from aspectus.events.segments import check_segments, read_segments

    if segments is None and run.get("segments"):
        rec = Path(run["segments"])
        cands = [rec] if rec.is_absolute() else [*([webcam_dir / rec] if webcam_dir is not None else []), rec]
        if run.get("segments_resolved"):
            cands.append(Path(run["segments_resolved"]))
        segments = next((c for c in cands if c.is_file()), None)
        if segments is None and notes is not None:
            notes.append(f"the clip was processed with task segments from {run['segments']} (relative to the clip's "
                         "output folder), but that file is no longer there: compared per window only - give the "
                         "segments file again (--segments) for per-segment agreement")
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


def reference_sample_counts(n_in_file: int, file_rate_hz: float, n_analysed: int,
                            resampled_to_hz: float | None) -> dict:
    """validation.json's ``reference_samples``: the reference's samples as read from its file (``n_in_file``, at
    ``file_rate_hz``) and as analysed (``n_analysed``: after ``--resample-reference-hz``, the samples nearest the
    ticks; the count ``reference_quality.n_samples`` gives), and ``text``, the report's line for them.

    >>> reference_sample_counts(10813, 250.0, 1298, 30.0)["text"]
    '30 Hz (resampled from 250 Hz: 1298 of its 10813 samples analysed, the one nearest each tick)'
    >>> reference_sample_counts(10813, 250.0, 10813, None)["text"]
    'its own rate (250 Hz: all 10813 samples analysed)'
    """
    out = {"n_in_file": int(n_in_file), "file_rate_hz": float(file_rate_hz), "n_analysed": int(n_analysed),
           "resampled_to_hz": float(resampled_to_hz) if resampled_to_hz else None}
    if resampled_to_hz:
        out["text"] = (f"{resampled_to_hz:g} Hz (resampled from {file_rate_hz:.0f} Hz: {n_analysed} of its "
                       f"{n_in_file} samples analysed, the one nearest each tick)")
    else:
        out["text"] = f"its own rate ({file_rate_hz:.0f} Hz: all {n_in_file} samples analysed)"
    return out


def _recorded_span(t: np.ndarray) -> tuple[float, float]:
    """The time a recording covers: each sample stands for half an interval either side of it (the rule of
    :func:`aspectus.events.cleanup.sample_spans`, as the clip's own feature windows use it), so 600 frames
    at 30 Hz cover 20 s, not the 19.97 s from the first sample to the last."""
    from aspectus.events.cleanup import sample_spans

    dt = float(np.median(np.diff(t))) if len(t) > 1 else float("nan")
    lo, hi = sample_spans(t, dt)
    return float(lo[0]), float(hi[-1])


def _common_span(tw: np.ndarray, tr: np.ndarray) -> tuple[float, float]:
    """Start and end (s, clip clock) of the time both recordings cover."""
    (lw, hw), (lr, hr) = _recorded_span(tw), _recorded_span(tr)
    return max(lw, lr), min(hw, hr)


def _common_windows(tw: np.ndarray, tr: np.ndarray, window_s: float, step_s: float) -> pd.DataFrame:
    from aspectus.events.segments import fixed_windows

    lo, hi = _common_span(tw, tr)
    return fixed_windows(lo, hi, window_s=window_s, step_s=step_s)


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


AXES = ("yaw", "pitch")


def _fixation_step_rms(samples: pd.DataFrame, labels, events: pd.DataFrame | None = None) -> dict | None:
    """RMS-S2S within fixations over steps of one and of two samples, per axis and in 2-D (deg), or None.

    ``{"yaw": (r1, r2), "pitch": (r1, r2), "2d": (r1, r2)}``: a step counts where every sample it spans is usable
    and in one fixation - one fixation event of ``events`` (:func:`aspectus.events.features.fixation_ids`, as the
    clip's precision features count steps), or without ``events`` one run of fixation labels. Two fixations side
    by side in the labels are a saccade that fell between two samples (common at 30 Hz): a step across them would
    weigh the jump twice in the two-sample steps and once in the one-sample ones, and read the correlation near
    its bound whatever the error's own. A per-axis figure is the RMS of that axis's component of the steps
    (``sqrt(2) s sqrt(1 - rho)`` for an AR(1) error of stationary SD ``s``; the 2-D figure is the root of the two
    axes' squares). The plain RMS rather than the median-based one: within fixations there are no saccades to
    shrug off, and near 1 the correlation is sensitive to the figures' ratio (the median's own scatter read an
    AR(1) error of 0.85 as 0.885 over 30 000 samples, the RMS's as 0.853).
    """
    from aspectus.events.features import fixation_ids

    if labels is None or not {"yaw_deg", "pitch_deg"} <= set(samples.columns) or len(labels) != len(samples):
        return None
    labels = np.asarray(labels)
    yaw, pitch = samples["yaw_deg"].to_numpy(float), samples["pitch_deg"].to_numpy(float)
    fix = labels == "fixation"
    if events is not None and len(events) and "t_s" in samples.columns:
        fx = events[events["type"] == "fixation"].sort_values("onset_s", kind="stable")
        fid = fixation_ids(samples["t_s"].to_numpy(float), fx["onset_s"].to_numpy(float),
                           fx["offset_s"].to_numpy(float), labels)
    else:
        fid = np.where(fix, np.cumsum(np.r_[True, fix[1:] != fix[:-1]]), -1)
    ok = (fid >= 0) & np.isfinite(yaw) & np.isfinite(pitch)
    # runs of usable samples of one fixation: a step counts where both its ends are in one run
    run = np.where(ok, np.cumsum(np.r_[True, (fid[1:] != fid[:-1]) | ~ok[1:] | ~ok[:-1]]), -1)

    def ms(v, lag):
        same = (run[lag:] == run[:-lag]) & (run[lag:] >= 0) if len(run) > lag else np.zeros(0, bool)
        return float(np.mean((v[lag:] - v[:-lag])[same] ** 2)) if same.any() else float("nan")

    out = {axis: (ms(v, 1), ms(v, 2)) for axis, v in zip(AXES, (yaw, pitch))}
    out["2d"] = tuple(out["yaw"][k] + out["pitch"][k] for k in range(2))
    return {k: tuple(float(np.sqrt(m)) for m in v) for k, v in out.items()}


def _error_correlation(samples: pd.DataFrame, labels, events: pd.DataFrame | None = None,
                       axis: str = "2d") -> float:
    """The lag-1 autocorrelation of a side's error within its fixations (0 where it cannot be read).

    Read as an AR(1) error's from the RMS-S2S over steps of one and of two samples within fixations
    (:func:`_fixation_step_rms`, :func:`aspectus.events.detect.noise.step_correlation`): of one axis's component of
    the steps (``axis`` ``"yaw"`` or ``"pitch"``) or of their 2-D length (``"2d"``, the two axes pooled, which
    follows the axis with the larger steps). Webcam gaze error changes slowly (0.6-0.9 on rendered clips), and a
    lab tracker's filtered signal is correlated from sample to sample too.
    """
    from aspectus.events.detect.noise import step_correlation

    rms = _fixation_step_rms(samples, labels, events)
    return 0.0 if rms is None else step_correlation(*rms[axis])


def _side_error(samples: pd.DataFrame, labels, events: pd.DataFrame | None = None) -> dict:
    """One side's error within fixations, per axis: ``{"noise_rms_s2s_deg": {axis: r1}, "rho": {axis: rho}}``
    (the one-sample RMS-S2S of the axis's component of the steps, and its lag-1 correlation; NaN and 0 where they
    cannot be read), plus the pooled 2-D reading of the correlation under ``"rho"["2d"]``."""
    from aspectus.events.detect.noise import step_correlation

    rms = _fixation_step_rms(samples, labels, events)
    if rms is None:
        return {"noise_rms_s2s_deg": {a: float("nan") for a in AXES}, "rho": {a: 0.0 for a in (*AXES, "2d")}}
    return {"noise_rms_s2s_deg": {a: rms[a][0] for a in AXES},
            "rho": {a: step_correlation(*rms[a]) for a in (*AXES, "2d")}}


def _mean_error_sd(ev: pd.DataFrame, noise_rms_s2s_deg, rho: float = 0.0, *, axes: int = 2) -> float | None:
    """Error SD (deg, per axis) of a fixation's mean position from the measured noise and its lag-1 correlation.

    ``noise_rms_s2s_deg`` is the 2-D RMS-S2S (``axes=2``, the two axes pooled) or one axis's (``axes=1``, the RMS
    of that axis's component of the steps). RMS-S2S is ``sqrt(2 axes) s sqrt(1 - rho)`` for an AR(1) error of
    per-axis stationary SD ``s`` and lag-1 correlation ``rho`` (``2 s`` in 2-D for white noise: Holmqvist, Nystrom
    & Mulvey 2012), and a mean of ``n`` consecutive samples has the variance ``s^2 / n`` times
    :func:`aspectus.events.detect.noise.mean_variance_factor` (1 for white noise: the ``1 / sqrt(n)`` of
    independent samples); ``n`` is the median sample count of the side's fixations. A slowly changing error
    averages out over far fewer independent looks than samples.
    """
    from aspectus.events.detect.noise import mean_variance_factor

    fx = ev[ev["type"] == "fixation"] if len(ev) else ev
    if noise_rms_s2s_deg is None or not np.isfinite(noise_rms_s2s_deg) or noise_rms_s2s_deg <= 0 or not len(fx) \
            or "n_samples" not in fx.columns:
        return None
    n = max(float(np.median(fx["n_samples"])), 1.0)
    rho = float(rho) if rho is not None and np.isfinite(rho) else 0.0
    s2 = float(noise_rms_s2s_deg) ** 2 / (2.0 * axes) / (1.0 - rho)
    return float(np.sqrt(s2 / n * mean_variance_factor(rho, n)))


def _saccade_cos2(ev: pd.DataFrame, idx) -> np.ndarray:
    """``cos^2`` of the direction (from the yaw axis) of the saccades ``ev[ev.type == "saccade"].iloc[idx]``, read
    off the fixations either side (the pair of consecutive fixations whose means are the saccade's amplitude
    apart, the detector's rule); NaN where no such pair is found (e.g. a reference's own events)."""
    sac = ev[ev["type"] == "saccade"].reset_index(drop=True).iloc[np.asarray(idx, dtype=int)]
    out = np.full(len(sac), np.nan)
    need = {"onset_s", "yaw_deg", "pitch_deg"}
    if not len(sac) or not need <= set(ev.columns) or "amplitude_deg" not in sac.columns:
        return out
    fx = ev[ev["type"] == "fixation"].sort_values("onset_s", kind="stable")
    on, x, y = (fx[c].to_numpy(float) for c in ("onset_s", "yaw_deg", "pitch_deg"))
    k = np.searchsorted(on, sac["onset_s"].to_numpy(float), side="right") - 1  # the fixation the saccade leaves
    fine = (k >= 0) & (k + 1 < len(on))
    k = np.clip(k, 0, max(len(on) - 2, 0))
    if len(on) < 2:
        return out
    dx, dy = x[k + 1] - x[k], y[k + 1] - y[k]
    amp = np.hypot(dx, dy)
    fine &= np.isclose(amp, sac["amplitude_deg"].to_numpy(float), rtol=1e-6, atol=1e-9) & (amp > 0)
    with np.errstate(invalid="ignore", divide="ignore"):
        out[fine] = (dx[fine] / amp[fine]) ** 2
    return out


def _amplitude_error_sd(sd_yaw: float | None, sd_pitch: float | None, cos2) -> float | None:
    """Error SD (deg) of a saccade amplitude, the 2-D distance of two fixation means of per-axis error SDs
    ``sd_yaw`` and ``sd_pitch``, over saccades whose directions have ``cos^2`` ``cos2`` (NaN: unknown).

    Derivation (first-order Taylor expansion, the delta method - common practice): ``A = sqrt(dx^2 + dy^2)`` with
    ``dx``, ``dy`` the differences of the two means per axis; each difference of two independent means has the error variance ``2 sd_axis^2``, and
    ``dA/d(dx) = dx / A = cos(theta)``, ``dA/d(dy) = sin(theta)``, so
    ``Var(A) = 2 (cos^2(theta) sd_yaw^2 + sin^2(theta) sd_pitch^2)``. Deming regression takes one error variance per
    side for all pairs, so that of the saccades' mean ``cos^2`` (1/2 where no direction is known: directions spread
    evenly, ``Var(A) = sd_yaw^2 + sd_pitch^2``). For equal per-axis SDs ``s`` it is ``2 s^2`` whatever the directions:
    both sides ``sqrt(2)`` times their fixation-mean SD, the variance ratio and the slope as with ``s`` itself.
    Left out: the correlation of the two means' errors (a slowly changing error shared by neighbouring fixations
    makes the difference's error smaller), the second-order term of the error across the movement
    (``(2 sd_perp^2)^2 / (2 A^2)`` more variance) and the upward bias of a length it brings
    (``E[A] ~ A + sd_perp^2 / A``): small for saccades several times longer than the error of the difference.
    """
    if sd_yaw is None or sd_pitch is None or not (np.isfinite(sd_yaw) and np.isfinite(sd_pitch)):
        return None
    c = np.asarray(cos2, dtype=float)
    c = c[np.isfinite(c)]
    c2 = float(np.mean(c)) if len(c) else 0.5
    return float(np.sqrt(2.0 * (c2 * sd_yaw ** 2 + (1.0 - c2) * sd_pitch ** 2)))


def _gain(ev_w: pd.DataFrame, ev_r: pd.DataFrame, tol: float, confidence: float, *, noise_w=None,
          noise_r=None, err_w: dict | None = None, err_r: dict | None = None) -> dict:
    """Deming slopes with each side's measured error, per axis; ratio 1 where one side's is unknown.

    Deming regression with a known error-variance ratio (:func:`aspectus.validation.agreement.deming_slope`:
    Cornbleet & Gochman 1979, Linnet 1990) is unbiased only with the ratio of the errors of the values it fits.

    Each fixation slope (``fixation_yaw``, ``fixation_pitch``) weighs the two sides by the error SD of their
    fixation means on that axis (:func:`_mean_error_sd` from the axis's own RMS-S2S and lag-1 correlation within
    fixations, :func:`_side_error` as ``err_w`` / ``err_r``); the saccade amplitude slope by the error SD of a 2-D
    distance of two fixation means (:func:`_amplitude_error_sd`). ``noise_w`` / ``noise_r`` (each side's 2-D
    RMS-S2S within fixations, the clip's precision figure) give the pooled figures kept for reading
    (``fixation_mean_error_sd_deg``, ``error_lag1_correlation``).
    """
    out = {}
    err = {"webcam": err_w, "reference": err_r}
    evs = {"webcam": ev_w, "reference": ev_r}
    sd_axis = {side: {a: (None if e is None else _mean_error_sd(evs[side], e["noise_rms_s2s_deg"][a], e["rho"][a],
                                                                axes=1)) for a in AXES}
               for side, e in err.items()}
    rho_pool = {side: (0.0 if e is None else float(e["rho"]["2d"])) for side, e in err.items()}
    sd_pool = {"webcam": _mean_error_sd(ev_w, noise_w, rho_pool["webcam"]),
               "reference": _mean_error_sd(ev_r, noise_r, rho_pool["reference"])}
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", AgreementWarning)
        sac = match_events(ev_w, ev_r, event_type="saccade", tolerance_s=tol)
        amp_w = ev_w[ev_w["type"] == "saccade"].reset_index(drop=True)
        amp_r = ev_r[ev_r["type"] == "saccade"].reset_index(drop=True)
        if sac.n_matched and "amplitude_deg" in amp_w.columns and "amplitude_deg" in amp_r.columns:
            iw, ir = sac.pairs["webcam_index"].to_numpy(int), sac.pairs["reference_index"].to_numpy(int)
            a = amp_w["amplitude_deg"].to_numpy(float)[iw]
            b = amp_r["amplitude_deg"].to_numpy(float)[ir]
            # the movement's direction from the reference's fixations (the more precise), else the webcam's
            cos2 = _saccade_cos2(ev_r, ir)
            cos2 = np.where(np.isfinite(cos2), cos2, _saccade_cos2(ev_w, iw))
        else:
            a = b = cos2 = np.empty(0)
        sd_amp = {side: _amplitude_error_sd(sd_axis[side]["yaw"], sd_axis[side]["pitch"], cos2) for side in err}
        out["saccade_amplitude"] = deming_slope(b, a, confidence=confidence, error_sd_reference=sd_amp["reference"],
                                                error_sd_test=sd_amp["webcam"]).to_dict()
        fix = match_events(ev_w, ev_r, event_type="fixation", tolerance_s=tol)
        fw = ev_w[ev_w["type"] == "fixation"].reset_index(drop=True)
        fr = ev_r[ev_r["type"] == "fixation"].reset_index(drop=True)
        for axis in AXES:
            col = f"{axis}_deg"
            if fix.n_matched and col in fw.columns and col in fr.columns:
                a = fw[col].to_numpy(float)[fix.pairs["webcam_index"].to_numpy(int)]
                b = fr[col].to_numpy(float)[fix.pairs["reference_index"].to_numpy(int)]
            else:
                a = b = np.empty(0)
            out[f"fixation_{axis}"] = deming_slope(b, a, confidence=confidence,
                                                   error_sd_reference=sd_axis["reference"][axis],
                                                   error_sd_test=sd_axis["webcam"][axis]).to_dict()
    out["notes"] = sorted({str(w.message) for w in caught})

    def r(v, nd=4):
        return None if v is None or not np.isfinite(v) else round(float(v), nd)

    out["fixation_mean_error_sd_deg"] = {side: r(sd_pool[side]) for side in err}
    out["error_lag1_correlation"] = {side: round(rho_pool[side], 3) for side in err}
    out["fixation_mean_error_sd_per_axis_deg"] = {side: {a: r(sd_axis[side][a]) for a in AXES} for side in err}
    out["error_lag1_correlation_per_axis"] = {side: {a: (None if e is None else round(float(e["rho"][a]), 3))
                                                     for a in AXES} for side, e in err.items()}
    out["noise_rms_s2s_per_axis_deg"] = {side: {a: (None if e is None else r(e["noise_rms_s2s_deg"][a]))
                                                for a in AXES} for side, e in err.items()}
    out["saccade_amplitude_error_sd_deg"] = {side: r(sd_amp[side]) for side in err}
    out["method"] = ("Deming regression of webcam on reference, over events matched by onset; each fixation "
                     "slope with the error variance ratio of the two sides' fixation means on its own axis (the "
                     "axis's RMS-S2S within fixations, its lag-1 correlation and the fixation length), the saccade "
                     "amplitude slope with that of a 2-D distance of two fixation means (2 (cos^2 sd_yaw^2 + "
                     "sin^2 sd_pitch^2) over the saccades' directions); ratio 1 where one side's is unknown; "
                     "slope = gain, the intercept absorbs the webcam's constant angle offset")
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

    Examples
    --------
    Any BIDS eye-tracking recording is a reference - also a clip's own BIDS
    export, which therefore agrees perfectly with the clip (the tutorial
    "validate a pilot" uses the demo's lab recording):

    >>> from aspectus.studies.bids_export import export_bids
    >>> ex = export_bids(batch_folder, tmp / "bids")
    >>> res = validate_pair(batch_folder / "linden_brook_p01_s01", ex.recordings[0].physio, tmp / "val",
    ...                     params=ValidateParams(window_s=2.0, step_s=2.0), figures=False)
    >>> res.alignment.offset_s
    0.0
    >>> res.agreement.query("scope == 'window'").set_index("feature").loc[
    ...     ["fixation_count", "fixation_duration_mean_ms"], ["n", "pearson_r", "icc", "ba_bias"]]
                               n  pearson_r  icc  ba_bias
    feature
    fixation_count             4        1.0  1.0      0.0
    fixation_duration_mean_ms  4        1.0  1.0      0.0
    """
    params = params or ValidateParams()
    if write and out_dir is None:
        raise ParameterError("validate_pair needs out_dir to write its results")
    cam, cam_dir, run = load_webcam(webcam)
    notes: list[str] = []
    segs = _segments(segments, cam_dir, run, notes)
    ref = read_reference(reference, mapping, screen=screen)
    try:
        alignment = _align(cam, ref, params, segs)
    except AspectusInputError as exc:
        if exc.path is not None:
            raise
        raise AspectusInputError(exc.problem, path=ref.path, where=exc.where, hint=exc.hint) from None
    notes += alignment.notes
    ref_aligned = apply_alignment(ref.samples, alignment)
    if params.resample_reference_hz:
        ref_aligned = resample_samples(ref_aligned, params.resample_reference_hz)
    ref_counts = reference_sample_counts(len(ref.samples), ref.rate_hz, len(ref_aligned),
                                         params.resample_reference_hz)
    tw, tr = cam["t_s"].to_numpy(float), ref_aligned["t_s"].to_numpy(float)
    lo, hi = _common_span(tw, tr)
    overlap = hi - lo
    if min(tw[-1], tr[-1]) <= max(tw[0], tr[0]):
        raise AspectusInputError(
            f"after alignment (offset {alignment.offset_s:.3f} s) the recordings do not overlap "
            f"(webcam {tw[0]:.1f}-{tw[-1]:.1f} s, reference {tr[0]:.1f}-{tr[-1]:.1f} s on the clip clock)",
            path=reference, hint="check the offset, the marker or the pairing of files")
    from dataclasses import replace

    from aspectus.validation.windows import MIN_PAIRS, choose_window_s, overlap_text

    choice = choose_window_s(overlap, params.window_length_s, given=params.window_s is not None)
    if params.window_s is None:
        params = replace(params, window_s=choice.window_s, step_s=params.step_s or choice.window_s)
    windows = _common_windows(tw, tr, params.window_length_s, params.window_step_s)
    if len(windows) < MIN_PAIRS:
        notes.append(f"the recordings overlap for {overlap_text(overlap)}, giving only {len(windows)} windows of "
                     f"{params.window_length_s:g} s: too few for window-level agreement statistics (at least "
                     f"{MIN_PAIRS}) - use shorter windows (--window-s) or compare several clips together")
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
    gain = _gain(res_w.events, ref_events, params.match_tolerance_s, params.confidence,
                 noise_w=res_w.quality.get("noise_rms_s2s_deg"), noise_r=res_r.quality.get("noise_rms_s2s_deg"),
                 err_w=_side_error(cam, res_w.labels, res_w.events),
                 err_r=_side_error(ref_aligned, res_r.labels, res_r.events))
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
    withheld = alignment_uncertain(alignment) and not params.force_agreement
    if withheld:  # a wrong offset pairs unrelated moments: the figures would mislead, so they are not given
        agreement, events = _withhold(agreement, events)
        notes.insert(0, WITHHELD_NOTE.format(conf=alignment.confidence, peak=alignment.peak_corr))
    elif alignment_uncertain(alignment):
        notes.insert(0, "THE ALIGNMENT IS UNCERTAIN: the agreement figures are shown because --force-agreement was "
                        "given; they are only as good as the offset")
    from aspectus.validation.report import plain_reading

    meta = {
        "aspectus": __version__, "participant": participant, "session": session,
        # paths relative to the output folder (absolute ones name users and students); identity by SHA-256
        "webcam": _recorded(cam_dir, out_dir), "reference": _recorded(ref.path, out_dir),
        "reference_sha256": _sha_or_none(ref.path), "reference_format": ref.meta.get("format"),
        "reference_rate_hz": ref.rate_hz, "reference_screen": ref.screen.to_dict() if ref.screen else None,
        "webcam_rate_hz": res_w.quality.get("sample_rate_hz"), "overlap_s": float(overlap),
        "windows": int(len(windows)), "segments": int(0 if segs is None else len(segs)),
        "window_choice": choice.reason,
        "params": params.to_dict(), "icc_form": ICC_FORM_TEXT[params.icc_form.replace(" ", "").lower()],
        "webcam_quality": res_w.quality, "reference_quality": res_r.quality,
        "reference_measured_at": ref_counts.pop("text"), "reference_samples": ref_counts,
        "agreement_withheld": bool(withheld),
        "webcam_verdict": webcam_verdict(run),
    }
    result = ValidationResult(agreement=agreement, pairs=pairs, alignment=alignment, events=events, webcam=cam,
                              reference=ref_aligned, webcam_analysis=res_w, reference_analysis=res_r, notes=notes,
                              reading="", meta=meta)
    result.reading = plain_reading(result)
    if write:
        write_validation(result, out_dir, figures=figures)
    return result


def webcam_verdict(run: dict) -> dict | None:
    """The webcam clip's own precision check as its run.json gives it (``quality``: ``precision_tier``, ``usable``,
    ``verdict``), or None for a clip processed without one (e.g. a samples table from elsewhere)."""
    q = (run or {}).get("quality") or {}
    if not q.get("precision_tier"):
        return None
    return {"precision_tier": q["precision_tier"], "usable": q.get("usable"), "verdict": q.get("verdict"),
            "noise_sd_deg": q.get("noise_sd_deg"), "noise_rms_s2s_deg": q.get("noise_rms_s2s_deg")}


#: the first note of a validation whose automatic alignment is uncertain
WITHHELD_NOTE = ("THE ALIGNMENT IS UNCERTAIN (confidence {conf:.2f}, peak correlation {peak:.2f}): the agreement "
                 "figures are withheld, because a wrong offset pairs unrelated moments and can still give high "
                 "figures - check the offset in the time-series figure, give --offset-s or a shared marker, or add "
                 "--force-agreement to see the figures anyway")


#: a correlation peak this high is trusted even when another offset competes (common practice)
TRUSTED_PEAK_CORR = 0.8


def alignment_uncertain(alignment) -> bool:
    """Whether an automatic (cross-correlation) alignment is too uncertain to trust (aspectus.validation.align)."""
    from aspectus.validation.align import LOW_CONFIDENCE

    if not str(alignment.method).startswith("cross-correlation"):
        return False  # a marker or the user's offset
    peak = alignment.peak_corr
    if not (peak == peak) or peak < 0.2:
        return True
    # a competing offset fits nearly as well - unless the peak itself is a near-perfect match (a recording
    # against its own export): no unrelated pairing correlates 0.8 or more
    return bool(alignment.confidence < LOW_CONFIDENCE and peak < TRUSTED_PEAK_CORR)


def _withhold(agreement: pd.DataFrame, events: dict) -> tuple[pd.DataFrame, dict]:
    """The agreement table and event figures with every agreement figure blanked (counts kept)."""
    ag = agreement.copy()
    for c in ag.columns:
        keep = c in ("scope", "label", "feature", "n", "confidence") or c.startswith(("mean_", "sd_"))
        if not keep and pd.api.types.is_float_dtype(ag[c]):
            ag[c] = np.nan
    ev = dict(events)
    for k in ("kappa", "kappa_ci_low", "kappa_ci_high", "f1", "precision", "recall", "kappa_all_labels"):
        if k in ev:
            ev[k] = float("nan")
    nan = float("nan")
    ev["matching"] = {t: dict(m, f1=nan, precision=nan, recall=nan) if isinstance(m, dict) else m
                      for t, m in (ev.get("matching") or {}).items()}
    ev["gain"] = {k: (dict(g, estimate=nan, ci_low=nan, ci_high=nan) if isinstance(g, dict) and "estimate" in g else g)
                  for k, g in (ev.get("gain") or {}).items()}
    ev["withheld"] = True
    return ag, ev


def _recorded(path, out_dir) -> str:
    """``path`` as outputs record it: relative to ``out_dir``; absolute only with ASPECTUS_FULL_PATHS=1."""
    from aspectus.atomic import full_paths_wanted, recorded_path

    if full_paths_wanted():
        return str(Path(path).resolve())
    return recorded_path(path, out_dir) if out_dir is not None else Path(path).name


def _sha_or_none(path) -> str | None:
    from aspectus.atomic import sha256_file

    try:
        return sha256_file(path) if Path(path).is_file() else None
    except (OSError, AspectusInputError):
        return None


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
