"""Samples to events and features: one code path for webcam and reference data.

:func:`run_analysis` cleans a samples table (:mod:`aspectus.events.cleanup`), runs
the chosen detector (:mod:`aspectus.events.detect`), post-processes its fixation
candidates into fixations, saccades, blinks and data-loss events, labels every
sample, and computes features per clip, per fixed window and per task
segment (:mod:`aspectus.events.features`). :func:`write_analysis` exports the
results; :func:`analyse_table` does all of it for any delimited gaze table.

Default detector: I-DT (Salvucci & Goldberg 2000) with a noise-adaptive
dispersion threshold, ``max(1.5 deg, 3.5 x RMS-S2S noise, 1.2 x the
dispersion the noise reaches over the samples of a 60 ms window)``, the
noise read over 33 ms steps (the RMS-S2S at 30 Hz; per sample, an error that
changes over tens of milliseconds reads smaller at higher rates), a 60 ms
duration threshold, edge samples trimmed only where they differ measurably
from the fixation (by speed at 100 Hz and above, by position at the 10 % level
at every rate), merging within
75 ms and max(0.5 deg, 0.5 x RMS-S2S) or when the two mean positions do not
differ at the 5 % level given the within-fixation noise, and a 60 ms minimum
fixation. Chosen on the hand-coded
recordings of Andersson et al. (2017) at their own rate and degraded to
15-60 Hz with 0.5-2 deg noise (``bench/compare_detectors.py``): on webcam-like
data it beat I2MC and I-VT on count, duration and count correlation, and it
meets the 500 Hz floor.
"""
from __future__ import annotations

import dataclasses
import platform
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from aspectus import __version__
from aspectus.events.cleanup import CleanedSamples, clean_samples
from aspectus.events.detect import DETECTORS, build_events
from aspectus.errors import ParameterError
from aspectus.events.features import FEATURE_COLUMNS, DegenerateWindowWarning, compute_features
from aspectus.events.segments import check_segments, fixed_windows, read_segments

__all__ = ["AnalysisParams", "AnalysisResult", "DegenerateWindowWarning", "FEATURE_COLUMNS", "TableRun", "analyse_table", "run_analysis",
           "write_analysis", "read_segments", "analysis_sidecar"]


@dataclass
class AnalysisParams:
    """Every parameter of clean-up, detection, post-processing and features.

    Fields prefixed ``idt_``, ``ivt_`` or ``i2mc_`` go to that detector
    (prefix removed); see :func:`aspectus.events.detect.detect_idt`,
    :func:`~aspectus.events.detect.detect_ivt`, :func:`~aspectus.events.detect.detect_i2mc`.

    Parameters
    ----------
    detector : {"idt", "i2mc", "ivt"}, default "idt"
        Fixation detector.
    gap_fill_max_ms : float, default 75
        Gaps up to this long are interpolated; longer ones are data loss, ms.
    interpolation : {"steffen", "linear"}, default "steffen"
        Gap filling method.
    smoothing : {None, "median", "savgol"}, default None
        Optional centred smoothing (lag 0 ms) before detection. The
        precision figures (``noise_rms_s2s_deg``, ``noise_rms_s2s_33ms_deg``,
        ``noise_sd_deg``, and with them the precision tier) are read from the
        samples before it; the thresholds' robust noise figures from the
        samples after it.
    smoothing_window_ms : float, default 100
        Smoothing window, ms.
    merge_gap_ms : float, default 75
        Fixations at most this far apart in time (and ``merge_distance_deg``
        in space) are merged, ms.
    merge_distance_deg : float, default 0.5
        See ``merge_gap_ms``, deg.
    merge_noise_factor : float, default 0.5
        If > 0 the merge distance grows with the clip's noise, to
        ``max(merge_distance_deg, merge_noise_factor x RMS-S2S)``, the
        RMS-S2S read over 33 ms steps (``noise_rms_s2s_33ms_deg``).
    merge_alpha : float, default 0.05
        If > 0, neighbours within ``merge_gap_ms`` are also merged when their
        mean positions do not differ significantly at this level, given the
        pooled within-fixation noise (chi-square test of the difference of
        two means, 2 degrees of freedom;
        :func:`aspectus.events.detect.postprocess.means_indistinguishable`); 0 disables.
    min_fixation_ms : float, default 60
        Shorter fixations are dropped after merging, ms.
    saccade_max_ms : float, default 150
        Longest interval between two fixations called a saccade, ms.
    edge_alpha : float, default 0.1
        Fixation edge samples that differ from their inner neighbours by more
        than the noise allows at this level are trimmed (0 disables); see
        :mod:`aspectus.events.detect.postprocess`.
    edge_window_ms : float, default 20
        Inner neighbours the edge samples are compared with, ms (at least 2).
    edge_speed_factor : float, default 1.75
        Where the sample interval is at most ``edge_velocity_window_ms`` (100 Hz
        and above by default), fixation edges faster than this many times the
        recording's median gaze speed are trimmed too (0 disables); at lower
        rates the derivative window reaches into the saccade and it is not
        applied.
    edge_speed_low_rates : bool, default False
        Apply the trimming by speed at every rate (the behaviour before
        version 0.2). Off by default: on eye movements without post-saccadic
        oscillations it shortens fixations by 64-73 ms at 30 Hz and 25 ms at
        60 Hz (bench/scan_path_rates.py); it comes nearer coders who label the
        oscillation as not fixation only by removing the sample beside every
        saccade (docs/notes/lund-30hz-limits.md).
    edge_velocity_window_ms : float, default 10
        Derivative window for that speed, ms (at least 3 samples).
    idt_dispersion_deg : float or None, default None
        I-DT dispersion threshold, deg; None adapts it to the clip's noise.
    idt_noise_factor : float, default 3.5
        Adaptive I-DT threshold in units of the clip's RMS-S2S noise (the
        larger of it per sample and over steps of ``idt_min_duration_ms``:
        :mod:`aspectus.events.detect.idt`).
    idt_min_dispersion_deg : float, default 1.5
        Floor of the adaptive I-DT threshold, deg.
    idt_min_duration_ms : float, default 60
        I-DT duration threshold (initial window), ms.
    idt_noise_range_factor : float, default 1.2
        The adaptive I-DT threshold is at least this many times the
        dispersion the noise is expected to reach over the samples of the
        duration-threshold window (0: ignore the sample count); see
        :mod:`aspectus.events.detect.idt`.
    ivt_method : {"ek2003", "nh2010"}, default "ek2003"
        Data-driven velocity threshold rule.
    ivt_velocity_window_ms : float, default 20
        Savitzky-Golay derivative window, ms (at least 3 samples).
    ivt_initial_threshold_deg_s : float, default 200
        Start of the nh2010 iteration, deg/s.
    ivt_sd_factor, ivt_onset_sd_factor : float, default 6, 3
        nh2010 peak and onset thresholds, SDs above the mean velocity.
    ivt_ek_lambda : float, default 6
        ek2003 multiplier of the median-based velocity SD.
    i2mc_window_ms : float, default 200
        I2MC moving window, ms.
    i2mc_step_ms : float, default 20
        I2MC window step, ms.
    i2mc_downsamples : tuple of int, default (2, 5, 10)
        I2MC downsampling factors.
    i2mc_min_window_samples : int, default 4
        Fewest samples per (downsampled) I2MC window.
    i2mc_cutoff_sd : float, default 2.0
        I2MC weight cut-off, mean + this many SDs.
    i2mc_onoffset_mad : float, default 3.0
        I2MC edge trimming, in MADs of the distance to the fixation's median.
    i2mc_chebyshev_order : int, default 8
        Order of the anti-alias filter.
    i2mc_kmeans_iterations : int, default 10
        Lloyd iterations per window.
    window_s : float, default 10
        Fixed feature window length, s.
    step_s : float, default 10
        Step between fixed windows, s.
    """

    detector: str = "idt"
    gap_fill_max_ms: float = 75.0
    interpolation: str = "steffen"
    smoothing: str | None = None
    smoothing_window_ms: float = 100.0
    merge_gap_ms: float = 75.0
    merge_distance_deg: float = 0.5
    merge_noise_factor: float = 0.5
    merge_alpha: float = 0.05
    min_fixation_ms: float = 60.0
    saccade_max_ms: float = 150.0
    edge_alpha: float = 0.1
    edge_window_ms: float = 20.0
    edge_speed_factor: float = 1.75
    edge_speed_low_rates: bool = False
    edge_velocity_window_ms: float = 10.0
    idt_dispersion_deg: float | None = None
    idt_noise_factor: float = 3.5
    idt_min_dispersion_deg: float = 1.5
    idt_min_duration_ms: float = 60.0
    idt_noise_range_factor: float = 1.2
    ivt_method: str = "ek2003"
    ivt_velocity_window_ms: float = 20.0
    ivt_initial_threshold_deg_s: float = 200.0
    ivt_sd_factor: float = 6.0
    ivt_onset_sd_factor: float = 3.0
    ivt_ek_lambda: float = 6.0
    i2mc_window_ms: float = 200.0
    i2mc_step_ms: float = 20.0
    i2mc_downsamples: tuple = (2, 5, 10)
    i2mc_min_window_samples: int = 4
    i2mc_cutoff_sd: float = 2.0
    i2mc_onoffset_mad: float = 3.0
    i2mc_chebyshev_order: int = 8
    i2mc_kmeans_iterations: int = 10
    window_s: float = 10.0
    step_s: float = 10.0

    def __post_init__(self):
        if self.detector not in DETECTORS:
            raise ParameterError(f"unknown detector {self.detector!r}; choose one of {', '.join(DETECTORS)}")
        ds = self.i2mc_downsamples
        if isinstance(ds, str):  # "2,5,10" from a command line
            ds = [p for p in ds.replace(" ", ",").split(",") if p]
        try:
            self.i2mc_downsamples = tuple(int(f) for f in ds)
        except (TypeError, ValueError):
            raise ParameterError(f"i2mc_downsamples must be whole numbers, got {ds!r}") from None
        for name in ("merge_gap_ms", "merge_distance_deg", "min_fixation_ms", "saccade_max_ms"):
            v = getattr(self, name)
            if not (isinstance(v, (int, float)) and np.isfinite(v) and v >= 0):
                raise ParameterError(f"{name} must be a number >= 0, got {v!r}")
        v = self.edge_speed_low_rates
        if isinstance(v, str) and v.strip().lower() in ("true", "false", "1", "0", "yes", "no"):
            self.edge_speed_low_rates = v.strip().lower() in ("true", "1", "yes")
        elif not isinstance(v, (bool, np.bool_)):
            raise ParameterError(f"edge_speed_low_rates must be true or false, got {v!r}")
        for name in ("merge_alpha", "edge_alpha"):
            a = getattr(self, name)
            if not (isinstance(a, (int, float)) and np.isfinite(a) and 0 <= a < 1):
                raise ParameterError(f"{name} must be a level 0 <= alpha < 1 (0 disables), got {a!r}")
        for name in ("window_s", "step_s"):
            v = getattr(self, name)
            if not (isinstance(v, (int, float)) and np.isfinite(v) and v > 0):
                raise ParameterError(f"{name} must be a number of seconds > 0, got {v!r}")
        if self.step_s * MAX_WINDOWS_PER_WINDOW_LENGTH < self.window_s:
            raise ParameterError(
                f"step_s {self.step_s!r} s is less than 1/{MAX_WINDOWS_PER_WINDOW_LENGTH} of window_s "
                f"{self.window_s!r} s: every moment would lie in more than {MAX_WINDOWS_PER_WINDOW_LENGTH} windows",
                hint="choose a step of at least window_s / 1000 (e.g. --window-s 10 --step-s 1)")

    def to_dict(self) -> dict:
        d = dataclasses.asdict(self)
        d["i2mc_downsamples"] = list(self.i2mc_downsamples)
        return d

    @classmethod
    def from_dict(cls, d: dict) -> AnalysisParams:
        names = {f.name for f in dataclasses.fields(cls)}
        unknown = sorted(set(d) - names)
        if unknown:
            raise ParameterError(f"unknown analysis parameter(s): {', '.join(unknown)}")
        return cls(**d)

    def detector_kwargs(self) -> dict:
        """Parameters of the chosen detector, prefix removed."""
        prefix = f"{self.detector}_"
        return {k[len(prefix):]: v for k, v in self.to_dict().items() if k.startswith(prefix)}


#: windows that may overlap any one moment (window_s / step_s); more is a mistyped step, not an analysis
MAX_WINDOWS_PER_WINDOW_LENGTH = 1000


@dataclass
class AnalysisResult:
    """What :func:`run_analysis` returns.

    Attributes
    ----------
    events : pandas.DataFrame
        :data:`aspectus.schema.EVENT_COLUMNS`, sorted by onset.
    labels : ndarray of str
        One label per input sample: fixation, saccade, blink, loss, unclassified.
    features : pandas.DataFrame
        One row per scope (clip, window, segment), see :mod:`aspectus.events.features`.
    quality : dict
        noise_rms_s2s_deg (within fixations, the same figure as the clip's
        feature), noise_rms_s2s_33ms_deg (the same over 33 ms steps, the
        clip's feature: equal at 30 fps, comparable across frame rates; it
        sets the precision tier), noise_sd_deg (the SD of samples about
        their fixation's mean, the clip's feature; it sets the tier too),
        noise_rms_s2s_robust_deg (all valid steps, median-based),
        noise_rms_s2s_33ms_robust_deg (the same over 33 ms steps; it adapts the
        thresholds, so that they do not shrink at higher frame rates), valid_frac, loss_frac, blink_frac,
        filled_frac (fractions of the recorded time; holes in the time axis
        count as missing), time_holes, sample_rate_hz, n_samples, duration_s,
        the detector's thresholds and warnings.
    params : dict
        :meth:`AnalysisParams.to_dict` of the run.
    source : str
        Name of the input.
    """

    events: pd.DataFrame
    labels: np.ndarray
    features: pd.DataFrame
    quality: dict
    params: dict
    source: str = "samples"
    cleaned: CleanedSamples | None = field(default=None, repr=False)


def _scopes(cleaned: CleanedSamples, params: AnalysisParams, segments: pd.DataFrame | None) -> pd.DataFrame:
    t = cleaned.t_s
    parts = []
    if len(t):
        start = float(cleaned.lo_s[0])
        end = float(cleaned.hi_s[-1])
        parts.append(pd.DataFrame({"scope": ["clip"], "label": ["clip"], "start_s": [start], "end_s": [end]}))
        w = fixed_windows(start, end, window_s=params.window_s, step_s=params.step_s)
        if len(w):
            parts.append(w.assign(scope="window"))
    if segments is not None and len(segments):
        sg = segments.rename(columns={"onset_s": "start_s", "offset_s": "end_s"})
        parts.append(sg.assign(scope="segment")[["scope", "label", "start_s", "end_s"]])
    if not parts:
        return pd.DataFrame({"scope": [], "label": [], "start_s": [], "end_s": []})
    return pd.concat([p[["scope", "label", "start_s", "end_s"]] for p in parts], ignore_index=True)


def run_analysis(samples: pd.DataFrame, params: AnalysisParams | None = None, *,
                 segments: pd.DataFrame | None = None, source: str = "samples") -> AnalysisResult:
    """Events, per-sample labels, features and quality figures of a samples table.

    Parameters
    ----------
    samples : pandas.DataFrame
        A samples table (:data:`aspectus.schema.SAMPLE_COLUMNS`: t_s, valid,
        yaw_deg, pitch_deg; ``blink`` used when present).
    params : AnalysisParams, optional
        Defaults to ``AnalysisParams()``.
    segments : pandas.DataFrame, optional
        Task segments, columns label, onset_s, offset_s (s, on the samples'
        clock); features are computed for each.
    source : str
        Name of the input, for error messages.

    Returns
    -------
    AnalysisResult

    Warns
    -----
    DegenerateWindowWarning
        A window or segment without valid samples (its features are NaN).

    Examples
    --------
    Three seconds at 30 Hz with one 8-degree gaze shift half-way. Each sample
    stands for half an interval either side of it, so both fixations last
    their true 1.5 s; the saccade fell between two samples and runs from the
    last sample of one fixation to the first of the next (one interval):

    >>> import numpy as np, pandas as pd
    >>> t = np.arange(90) / 30.0
    >>> samples = pd.DataFrame({"t_s": t, "valid": True, "yaw_deg": np.where(t < 1.5, 0.0, 8.0),
    ...                         "pitch_deg": 0.0})
    >>> result = run_analysis(samples)
    >>> result.events[["type", "onset_s", "duration_ms", "amplitude_deg"]].round(3)
           type  onset_s  duration_ms  amplitude_deg
    0  fixation   -0.017     1500.000            NaN
    1   saccade    1.467       33.333            8.0
    2  fixation    1.483     1500.000            NaN
    >>> result.features.loc[0, ["scope", "fixation_count", "fixation_duration_mean_ms"]].tolist()
    ['clip', 2.0, 1500.0]
    """
    params = params or AnalysisParams()
    if segments is not None:
        segments = check_segments(segments, source=f"{source} segments")
    cl = clean_samples(samples, gap_fill_max_ms=params.gap_fill_max_ms, interpolation=params.interpolation,
                       smoothing=params.smoothing, smoothing_window_ms=params.smoothing_window_ms, source=source)
    det = DETECTORS[params.detector]
    # the thresholds adapt to the noise read over 33 ms steps: per sample, an error that changes over tens of
    # milliseconds reads smaller at higher rates and shrank the thresholds with it (noise.REFERENCE_INTERVAL_S)
    cand = det(cl.t_s, cl.yaw_deg, cl.pitch_deg, cl.usable, noise_rms_s2s_deg=cl.noise_rms_s2s_33ms_deg,
               noise_rms_s2s_1sample_deg=cl.noise_rms_s2s_deg,
               **params.detector_kwargs())
    events, labels_all = build_events(cl.t_s, cl.yaw_deg, cl.pitch_deg, cl.usable, cl.blink, cl.loss, cand,
                                      merge_gap_ms=params.merge_gap_ms, merge_distance_deg=params.merge_distance_deg,
                                      min_fixation_ms=params.min_fixation_ms, saccade_max_ms=params.saccade_max_ms,
                                      edge_speed_factor=params.edge_speed_factor,
                                      edge_velocity_window_ms=params.edge_velocity_window_ms,
                                      edge_alpha=params.edge_alpha, edge_window_ms=params.edge_window_ms,
                                      edge_speed_low_rates=params.edge_speed_low_rates,
                                      merge_noise_factor=params.merge_noise_factor, merge_alpha=params.merge_alpha,
                                      noise_rms_s2s_deg=cl.noise_rms_s2s_33ms_deg,
                                      noise_rms_s2s_1sample_deg=cl.noise_rms_s2s_deg, lo_s=cl.lo_s, hi_s=cl.hi_s,
                                      inserted=cl.inserted)
    # the precision figures (noise_*) describe the recording: read from the samples before any smoothing, inside
    # the fixations found on the smoothed ones (a filter lowers them, the sample-to-sample ones most)
    raw_yaw, raw_pitch = cl.unsmoothed
    features = compute_features(events, t_s=cl.t_s, valid=cl.valid_in, yaw_deg=raw_yaw, pitch_deg=raw_pitch,
                                labels=labels_all, scopes=_scopes(cl, params, segments),
                                sample_interval_s=cl.sample_interval_s, lo_s=cl.lo_s, hi_s=cl.hi_s,
                                inserted=cl.inserted)
    labels = labels_all[cl.row_index]
    n = cl.n
    n_in = len(cl.row_index)
    clip_row = features[features["scope"] == "clip"]
    noise_fix = float(clip_row["noise_rms_s2s_deg"].iloc[0]) if len(clip_row) else float("nan")
    noise_33 = float(clip_row["noise_rms_s2s_33ms_deg"].iloc[0]) if len(clip_row) else float("nan")
    noise_sd = float(clip_row["noise_sd_deg"].iloc[0]) if len(clip_row) else float("nan")
    quality = {
        "n_samples": n_in,
        "duration_s": float(cl.hi_s[-1] - cl.lo_s[0]) if n else 0.0,
        "sample_rate_hz": cl.rate_hz if n > 1 else float("nan"),
        # one meaning everywhere: within fixations, as the features' noise_rms_s2s_deg
        "noise_rms_s2s_deg": noise_fix,
        "noise_rms_s2s_fixation_deg": noise_fix,
        "noise_rms_s2s_33ms_deg": noise_33,
        "noise_sd_deg": noise_sd,
        "noise_rms_s2s_robust_deg": cl.noise_rms_s2s_deg,
        "noise_rms_s2s_33ms_robust_deg": cl.noise_rms_s2s_33ms_deg,
        "noise_rms_s2s_all_steps_deg": cl.noise_rms_s2s_plain_deg,
        "noise_definitions": {
            "noise_rms_s2s_deg": "RMS of sample-to-sample distances between consecutive valid samples of the same "
                                 "fixation (Holmqvist, Nystrom & Mulvey 2012), before any smoothing; = the clip's "
                                 "feature",
            "noise_rms_s2s_33ms_deg": "RMS of the distances between valid samples of the same fixation 33 ms apart "
                                      "(the nearest whole number of sample intervals), before any smoothing: "
                                      "noise_rms_s2s_deg at 30 fps, "
                                      "comparable across frame rates; sets the precision tier with noise_sd_deg; = "
                                      "the clip's feature",
            "noise_sd_deg": "sqrt(sd_yaw^2 + sd_pitch^2) of the valid samples about their fixation's mean, pooled "
                            "over the fixations, before any smoothing (Holmqvist, Nystrom & Mulvey 2012): noise_rms_s2s_deg / sqrt(2) for "
                            "white noise, higher for an error that wanders slowly, which filtering leaves; sets the "
                            "precision tier with noise_rms_s2s_33ms_deg; = the clip's feature",
            "noise_rms_s2s_robust_deg": "median sample-to-sample distance x 2 / sqrt(4 ln 2) over all valid steps "
                                        "of the samples the detectors read, after any smoothing (equals RMS-S2S "
                                        "for white noise)",
            "noise_rms_s2s_33ms_robust_deg": "the same over all valid steps 33 ms long (the nearest whole number of "
                                             "sample intervals), after any smoothing: noise_rms_s2s_robust_deg at "
                                             "30 fps, comparable across frame rates; adapts the detectors' "
                                             "thresholds",
            "noise_rms_s2s_all_steps_deg": "RMS of all valid sample-to-sample distances, saccades included, after "
                                           "any smoothing"},
        # fractions of the recorded time: holes in the time axis count as missing
        "valid_frac": cl.time_frac(cl.valid_in),
        "filled_frac": cl.time_frac(cl.filled),
        "loss_frac": cl.time_frac(cl.loss),
        "blink_frac": cl.time_frac(cl.blink),
        "time_holes": int(cl.holes),
        "fixation_count": int((events["type"] == "fixation").sum()),
        "smoothing": cl.smoothing,
        "detector_thresholds": cand.info,
        "warnings": list(cand.info.get("warnings", [])),
    }
    return AnalysisResult(events=events, labels=labels, features=features, quality=quality,
                          params=params.to_dict(), source=source, cleaned=cl)


def analysis_sidecar(result: AnalysisResult, *, meta: dict | None = None) -> dict:
    """The JSON sidecar of a run: detector, every parameter, versions, quality, plus ``meta``."""
    import scipy

    from aspectus.events.detect import DETECTOR_DOCS
    from aspectus.schema import EVENT_COLUMNS, FEATURE_COLUMNS, column_table

    side = {
        "software": {"aspectus": __version__, "numpy": np.__version__, "scipy": scipy.__version__,
                     "pandas": pd.__version__, "python": platform.python_version()},
        "detector": result.params.get("detector"),
        "detector_method": DETECTOR_DOCS.get(result.params.get("detector"), ""),
        "params": result.params,
        "source": result.source,
        "quality": result.quality,
        "counts": {k: int(v) for k, v in result.events["type"].value_counts().items()},
        "units": {"time": "s", "angle": "deg", "duration": "ms"},
        "event_columns": column_table(EVENT_COLUMNS),
        "feature_columns": column_table(FEATURE_COLUMNS),
    }
    if meta:
        side.update(meta)
    return side


def write_analysis(result: AnalysisResult, out_dir, *, meta: dict | None = None,
                   sidecar_name: str | None = None) -> dict[str, Path]:
    """Write events.csv/.parquet and features.csv/.parquet atomically (and a sidecar if named).

    Parameters
    ----------
    result : AnalysisResult
    out_dir : path-like
        Folder to write into (created if needed).
    meta : dict, optional
        Extra sidecar entries (e.g. ``{"input": {"path": ..., "sha256": ...}}``);
        stored in the Parquet files' metadata too.
    sidecar_name : str, optional
        If given (e.g. ``"events.json"``), also write the JSON sidecar there,
        last.

    Returns
    -------
    dict
        Names (events_csv, events_parquet, features_csv, features_parquet,
        sidecar) to paths.
    """
    from aspectus.atomic import write_csv, write_json, write_parquet

    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    side = analysis_sidecar(result, meta=meta)
    pmeta = {"params": result.params, "software": side["software"], **(meta or {})}
    paths = {
        "events_csv": write_csv(out / "events.csv", result.events),
        "events_parquet": write_parquet(out / "events.parquet", result.events, metadata=pmeta),
        "features_csv": write_csv(out / "features.csv", result.features),
        "features_parquet": write_parquet(out / "features.parquet", result.features, metadata=pmeta),
    }
    if sidecar_name:
        paths["sidecar"] = write_json(out / sidecar_name, side)
    return paths


@dataclass
class TableRun:
    """What :func:`analyse_table` did: the analysis and the files written."""

    result: AnalysisResult
    paths: dict
    input_path: Path
    input_kind: str  # "samples" (a aspectus samples table) or "gaze table" (mapped columns)


def _read_samples_file(path: Path) -> pd.DataFrame | None:
    """A aspectus samples table (parquet, or CSV with t_s/valid/yaw_deg/pitch_deg); None if not one."""
    from aspectus.errors import AspectusInputError
    from aspectus.schema import REQUIRED_SAMPLE_COLUMNS

    if path.suffix.lower() == ".parquet":
        try:
            df = pd.read_parquet(path)
        except Exception as exc:  # pyarrow raises several error kinds
            first = (str(exc).strip().splitlines() or [type(exc).__name__])[0]  # pyarrow's messages run to lines
            raise AspectusInputError(f"cannot read as Parquet ({first})", path=path,
                                     hint="the file is damaged or not Parquet; write it again") from None
        return df
    try:
        head = pd.read_csv(path, nrows=0, sep=None, engine="python")
    except Exception:
        return None
    cols = [str(c).strip() for c in head.columns]
    if all(c in cols for c in REQUIRED_SAMPLE_COLUMNS):
        return pd.read_csv(path, sep=None, engine="python", na_values=["", "n/a", "NA", "NaN", "nan"])
    return None


def analyse_table(path, out_dir, *, time_col: str | None = None, time_unit: str = "s", x_col: str | None = None,
                  y_col: str | None = None, units: str = "deg", screen=None, validity_col: str | None = None,
                  delimiter: str | None = None, mapping=None, params: AnalysisParams | None = None,
                  segments=None) -> TableRun:
    """Detect events in any gaze table and write events and features.

    The table is either a aspectus samples table (``samples.parquet`` or
    ``samples.csv`` from ``aspectus process``; no column options needed) or
    any delimited text table with a time column and x/y gaze columns, in
    degrees or in screen pixels (then ``screen`` gives size in mm, resolution
    in px and distance in mm). Delimiter detected; empty cells and ``n/a``
    are missing data. Event times stay on the table's own time axis, in s.

    Parameters
    ----------
    path : path-like
        The table.
    out_dir : path-like
        Output folder; gets events.csv/.parquet, features.csv/.parquet and
        the JSON sidecar events.json (written last).
    time_col, x_col, y_col : str, optional
        Column names (for a gaze table).
    time_unit : {"s", "ms", "us"}, default "s"
        Unit of the time column.
    units : {"deg", "px"}, default "deg"
        Unit of x/y (``"mm"`` and ``"norm"`` are accepted too).
    screen : aspectus.reference.screen.ScreenGeometry, optional
        Needed for pixels.
    validity_col : str, optional
        Column saying whether a sample is valid.
    delimiter : str, optional
        Field delimiter; detected by default.
    mapping : aspectus.reference.table.TableMapping, optional
        A full column mapping instead of the column options.
    params : AnalysisParams, optional
        Detection and feature parameters (default: the documented default).
    segments : path-like or pandas.DataFrame, optional
        Task segments (label, onset_s, offset_s) for per-segment features.

    Returns
    -------
    TableRun

    Examples
    --------
    The demo lab tracker's plain CSV export, read with its saved column mapping:

    >>> from aspectus.reference.table import TableMapping
    >>> lab = sample_clips / "lab_tracker"
    >>> run = analyse_table(lab / "p01_s01_labtracker.csv", tmp / "lab",
    ...                     mapping=TableMapping.load(lab / "p01_s01_labtracker_mapping.json"))
    >>> sorted(p.name for p in (tmp / "lab").iterdir())
    ['events.csv', 'events.json', 'events.parquet', 'features.csv', 'features.parquet']
    >>> run.result.events["type"].value_counts().to_dict()
    {'fixation': 75, 'saccade': 69, 'blink': 4}
    """
    from aspectus.atomic import full_paths_wanted, recorded_path, sha256_file
    from aspectus.errors import AspectusInputError

    path = Path(path)
    if not path.is_file():
        raise AspectusInputError("table not found", path=path,
                                 hint="check the file's name and folder")
    params = params or AnalysisParams()
    samples = None
    kind = "gaze table"
    if mapping is None and time_col is None:
        samples = _read_samples_file(path)
        if samples is None:
            raise AspectusInputError("not a samples table from aspectus process (no t_s, valid, yaw_deg, pitch_deg columns)",
                                    path=path, hint="name the columns: --time-col T --x-col X --y-col Y "
                                    "[--units deg|px ...]")
        kind = "samples"
    if samples is None:
        from aspectus.reference.table import TableMapping, read_gaze_table

        if mapping is None:
            if not x_col or not y_col:
                raise AspectusInputError("a gaze table needs --x-col and --y-col as well as --time-col", path=path)
            mapping = TableMapping(time_col=time_col, time_unit=time_unit, x_col=x_col, y_col=y_col, units=units,
                                   screen=screen, validity_col=validity_col, delimiter=delimiter,
                                   zero_time=False)
        if mapping.zero_time:  # events stay on the table's own time axis
            mapping = dataclasses.replace(mapping, zero_time=False)
        samples = read_gaze_table(path, mapping)
    seg_df = read_segments(segments) if isinstance(segments, (str, Path)) else segments
    result = run_analysis(samples, params, segments=seg_df, source=path.name)
    # paths relative to the output folder (absolute ones name users and students), identity by SHA-256
    meta = {"input": {"path": recorded_path(path, out_dir), "sha256": sha256_file(path), "kind": kind,
                      "mapping": mapping.to_dict() if mapping is not None else None}}
    if full_paths_wanted():
        meta["input"]["path_resolved"] = str(path.resolve())
    if isinstance(segments, (str, Path)):
        meta["segments"] = {"path": recorded_path(segments, out_dir), "sha256": sha256_file(segments)}
    paths = write_analysis(result, out_dir, meta=meta, sidecar_name="events.json")
    return TableRun(result=result, paths=paths, input_path=path, input_kind=kind)
