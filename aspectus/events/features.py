"""Eye-movement features per clip, per fixed window and per task segment.

Every column, with its unit and definition, is listed in
:data:`aspectus.schema.FEATURE_COLUMNS` (README and ``run.json`` take
them from there). Counting rule: a fixation, saccade, blink or loss belongs
to the scope its onset falls in (``start_s <= onset_s < end_s``); fractions
of time are clipped at the scope's edges and taken over the scope's recorded
time (the part the recording covers, holes in its time axis included, where
the samples are missing). Each sample stands for the time from half an
interval before it to half an interval after it
(:func:`aspectus.events.cleanup.sample_spans`). ``noise_rms_s2s_deg`` is the RMS
sample-to-sample distance over steps between two originally valid samples of
the same fixation (precision as in Holmqvist, Nystrom & Mulvey 2012, Proc.
ETRA); ``noise_rms_s2s_33ms_deg`` is the same over steps between valid samples of the same fixation 33 ms
apart (:data:`aspectus.events.detect.noise.REFERENCE_INTERVAL_S`; the nearest whole number of sample
intervals): at 30 fps the two are one figure, at other rates the second compares with 30 fps clips.
``noise_sd_deg`` is precision as the SD of the originally valid samples about their fixation's mean, pooled over
the scope's fixations (:func:`aspectus.events.detect.noise.fixation_sd_deg`; a fixation cut by the scope's edge
counts with its part inside): RMS-S2S / sqrt(2) for white noise, and unlike RMS-S2S barely lowered by filtering,
which removes the fast part of the error and leaves the slow wander.
A scope without a single valid sample is degenerate: all its features are NaN and a
:class:`DegenerateWindowWarning` is issued.
"""
from __future__ import annotations

import warnings

import numpy as np
import pandas as pd

from aspectus.errors import AspectusWarning
from aspectus.events.detect.noise import fixation_sd_deg, reference_lag
from aspectus.schema import FEATURE_COLUMN_NAMES

#: feature columns, in order; every name carries its unit (definitions: :data:`aspectus.schema.FEATURE_COLUMNS`)
FEATURE_COLUMNS = FEATURE_COLUMN_NAMES
SCOPE_COLUMNS = ("scope", "label", "start_s", "end_s")

#: saccade durations are features only at this rate or above (see aspectus.events.detect.postprocess)
SACCADE_DURATION_MIN_RATE_HZ = 200.0

__all__ = ["FEATURE_COLUMNS", "SCOPE_COLUMNS", "DegenerateWindowWarning", "compute_features"]


def fixation_ids(t_s, fixation_onset_s, fixation_offset_s, labels) -> np.ndarray:
    """Each sample's fixation: the index of the fixation (of those given, sorted by onset) whose span holds the
    sample's time, where the sample is labelled ``"fixation"``; -1 elsewhere. Two fixations side by side in the
    labels (a saccade that fell between two samples) get different ids, so that no step is counted across them.
    """
    t = np.asarray(t_s, dtype=float)
    on = np.asarray(fixation_onset_s, dtype=float)
    off = np.asarray(fixation_offset_s, dtype=float)
    fix_id = np.full(len(t), -1, dtype=np.int64)
    if len(on) and len(t):
        k = np.searchsorted(on, t, side="right") - 1
        inside = (k >= 0) & (t < off[np.clip(k, 0, None)])
        fix_id = np.where(inside & (np.asarray(labels) == "fixation"), k, -1)
    return fix_id


def _fixation_steps(valid, x, y, fix_id, lag: int):
    """Cumulative sums over the steps from each sample to the one ``lag`` samples on, counted where both are valid
    and in the same fixation: (lag, summed squared distances, step counts), each sum starting at 0."""
    if len(x) > lag:
        ok = valid[lag:] & valid[:-lag] & (fix_id[lag:] >= 0) & (fix_id[lag:] == fix_id[:-lag])
        d2 = np.nan_to_num(np.where(ok, (x[lag:] - x[:-lag]) ** 2 + (y[lag:] - y[:-lag]) ** 2, 0.0))
    else:
        ok, d2 = np.zeros(0, bool), np.zeros(0)
    return lag, np.concatenate([[0.0], np.cumsum(d2)]), np.concatenate([[0], np.cumsum(ok)])


def _step_rms(steps, i0: int, i1: int) -> float:
    """RMS distance of the counted steps with both ends among samples ``i0 .. i1 - 1`` (NaN without any)."""
    lag, cd2, cnd = steps
    m = int(i1) - lag - int(i0)
    if m <= 0:
        return np.nan
    k = int(cnd[i0 + m] - cnd[i0])
    return float(np.sqrt((cd2[i0 + m] - cd2[i0]) / k)) if k else np.nan


class DegenerateWindowWarning(AspectusWarning):
    """A feature scope (window or segment) holds no valid sample; its features are NaN."""


def _overlap_s(on: np.ndarray, off: np.ndarray, start: float, end: float) -> float:
    if not len(on):
        return 0.0
    return float(np.clip(np.minimum(off, end) - np.maximum(on, start), 0.0, None).sum())


def _stat(v: np.ndarray, fn) -> float:
    v = v[np.isfinite(v)]
    return float(fn(v)) if len(v) else np.nan


def compute_features(events: pd.DataFrame, *, t_s, valid, yaw_deg, pitch_deg, labels, scopes: pd.DataFrame,
                     sample_interval_s: float | None = None, lo_s=None, hi_s=None, inserted=None) -> pd.DataFrame:
    """Features for each scope.

    Parameters
    ----------
    events : pandas.DataFrame
        Events table (:data:`aspectus.schema.EVENT_COLUMNS`), in any order.
    t_s : array_like, shape (n,)
        Sample times, s.
    valid : array_like of bool, shape (n,)
        The input's own validity (before gap filling).
    yaw_deg, pitch_deg : array_like, shape (n,)
        Gaze angles, deg.
    labels : array_like of str, shape (n,)
        Per-sample labels (``"fixation"`` ...).
    scopes : pandas.DataFrame
        Columns scope, label, start_s, end_s (s).
    sample_interval_s : float, optional
        Median sample interval; computed if absent.
    lo_s, hi_s : array_like, optional
        Span of time each sample stands for (:func:`aspectus.events.cleanup.sample_spans`; computed if absent).
    inserted : array_like of bool, optional
        Rows that stand for holes in the time axis (not counted in ``n_samples``).

    Returns
    -------
    pandas.DataFrame
        One row per scope: :data:`SCOPE_COLUMNS`, :data:`FEATURE_COLUMNS`, n_samples.
    """
    from aspectus.events.cleanup import spans_and_real_counts

    t = np.asarray(t_s, dtype=float)
    n = len(t)
    valid = np.asarray(valid, dtype=bool)
    x = np.asarray(yaw_deg, dtype=float)
    y = np.asarray(pitch_deg, dtype=float)
    dt = (float(np.median(np.diff(t))) if n > 1 else 0.0) if sample_interval_s is None else float(sample_interval_s)
    lo_s, hi_s, creal = spans_and_real_counts(t, dt, lo_s, hi_s, inserted)
    cval = np.concatenate([[0], np.cumsum(valid)])
    rate_hz = 1.0 / dt if dt > 0 else np.nan

    ev = events.sort_values(["onset_s", "offset_s"], kind="stable") if len(events) else events

    def by_type(name):
        e = ev[ev["type"] == name]
        get = lambda c: e[c].to_numpy(dtype=float) if c in e.columns else np.full(len(e), np.nan)  # noqa: E731
        return {c: get(c) for c in ("onset_s", "offset_s", "duration_ms", "amplitude_deg", "dispersion_deg",
                                    "peak_velocity_deg_s")}

    fx, sc, bl, ls = by_type("fixation"), by_type("saccade"), by_type("blink"), by_type("loss")
    # steps count only between two samples of the same fixation (adjacent fixations share no step: the jump
    # between them is a saccade that fell between two samples)
    fix_id = fixation_ids(t, fx["onset_s"], fx["offset_s"], labels)
    # sample-to-sample steps, and steps of the reference interval (33 ms)
    lag = reference_lag(dt)
    steps = {k: _fixation_steps(valid, x, y, fix_id, k) for k in {1, lag}}
    rows = []
    degenerate: list[str] = []
    outside = False
    span = (float(lo_s[0]), float(hi_s[-1])) if n else None
    for scp in scopes.itertuples(index=False):
        start, end = float(scp.start_s), float(scp.end_s)
        # samples whose span overlaps the scope
        j0 = int(np.searchsorted(hi_s, start, side="right"))
        j1 = int(np.searchsorted(lo_s, end, side="left"))
        over = np.clip(np.minimum(hi_s[j0:j1], end) - np.maximum(lo_s[j0:j1], start), 0.0, None)
        recorded_s = float(over.sum())
        valid_s = float(over[valid[j0:j1]].sum())
        i0, i1 = np.searchsorted(t, [start, end], side="left")
        n_in = int(creal[i1] - creal[i0])
        nval = int(cval[i1] - cval[i0])
        row = {"scope": scp.scope, "label": scp.label, "start_s": start, "end_s": end}
        if nval == 0 or end - start <= 0 or recorded_s <= 0:
            what = f"{scp.scope} {str(scp.label)!r} ({start:g} to {end:g} s)"
            if span is not None and recorded_s <= 0 and end - start > 0 and (start >= span[1] or end <= span[0]):
                what += f" lies outside the recording ({span[0]:.2f} to {span[1]:.2f} s)"
                outside = outside or scp.scope == "segment"
            degenerate.append(what)
            row.update({c: np.nan for c in FEATURE_COLUMNS})
            row["valid_frac"] = 0.0 if (n_in or recorded_s > 0) else np.nan
            row["n_samples"] = n_in
            rows.append(row)
            continue
        per_min = 60.0 / recorded_s

        def sel(d, start=start, end=end):
            a, b = np.searchsorted(d["onset_s"], [start, end], side="left")
            return {k: v[a:b] for k, v in d.items()}

        f, s, b, lo = sel(fx), sel(sc), sel(bl), sel(ls)
        fov = (fx["offset_s"] > start) & (fx["onset_s"] < end)
        lov = (ls["offset_s"] > start) & (ls["onset_s"] < end)
        dur = f["duration_ms"]
        amp = s["amplitude_deg"]
        sac_dur = s["duration_ms"] if rate_hz >= SACCADE_DURATION_MIN_RATE_HZ else np.zeros(0)
        row.update({
            "fixation_count": float(len(dur)),
            "fixation_rate_per_s": len(dur) / recorded_s,
            "fixation_rate_per_min": len(dur) * per_min,
            "fixation_duration_mean_ms": _stat(dur, np.mean),
            "fixation_duration_median_ms": _stat(dur, np.median),
            "fixation_duration_sd_ms": float(np.std(dur, ddof=1)) if len(dur) > 1 else np.nan,
            "fixation_time_frac": _overlap_s(fx["onset_s"][fov], fx["offset_s"][fov], start, end) / recorded_s,
            "fixation_dispersion_mean_deg": _stat(f["dispersion_deg"], np.mean),
            "fixation_dispersion_median_deg": _stat(f["dispersion_deg"], np.median),
            "saccade_count": float(len(amp)),
            "saccade_rate_per_min": len(amp) * per_min,
            "saccade_amplitude_mean_deg": _stat(amp, np.mean),
            "saccade_amplitude_median_deg": _stat(amp, np.median),
            "saccade_amplitude_sd_deg": float(np.std(amp[np.isfinite(amp)], ddof=1)) if np.isfinite(amp).sum() > 1
            else np.nan,
            "saccade_duration_mean_ms": _stat(sac_dur, np.mean),
            "saccade_peak_velocity_mean_deg_s": _stat(s["peak_velocity_deg_s"], np.mean),
            "blink_count": float(len(b["onset_s"])),
            "blink_rate_per_min": len(b["onset_s"]) * per_min,
            "blink_duration_mean_ms": _stat(b["duration_ms"], np.mean),
            "loss_count": float(len(lo["onset_s"])),
            "loss_frac": _overlap_s(ls["onset_s"][lov], ls["offset_s"][lov], start, end) / recorded_s,
            "valid_frac": valid_s / recorded_s,
            "noise_rms_s2s_deg": _step_rms(steps[1], i0, i1),
            "noise_rms_s2s_33ms_deg": _step_rms(steps[lag], i0, i1),
            "noise_sd_deg": fixation_sd_deg(x[i0:i1], y[i0:i1], np.where(valid[i0:i1], fix_id[i0:i1], -1)),
            "n_samples": n_in,
        })
        rows.append(row)
    if degenerate:
        named = "; ".join(degenerate[:3]) + (f"; {len(degenerate) - 3} more" if len(degenerate) > 3 else "")
        todo = (" - check that the segments file belongs to this recording and that its times are seconds from "
                "its start") if outside else ""
        warnings.warn(f"{len(degenerate)} of {len(scopes)} feature scope(s) hold no valid sample; their features "
                      f"are NaN: {named}{todo}", DegenerateWindowWarning, stacklevel=2)
    cols = list(SCOPE_COLUMNS) + list(FEATURE_COLUMNS) + ["n_samples"]
    if not rows:
        return pd.DataFrame({c: pd.Series(dtype=object if c in ("scope", "label") else float) for c in cols})
    out = pd.DataFrame(rows)[cols]
    out["n_samples"] = out["n_samples"].astype("int64")
    return out
