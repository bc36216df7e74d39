"""Eye-movement features per clip, per fixed window and per task segment.

Counting rule: a fixation, saccade or blink belongs to the scope its onset
falls in (``start_s <= onset_s < end_s``). ``fixation_time_frac`` is the time
covered by fixations inside the scope (clipped at its edges) over the scope's
length. ``noise_rms_s2s_deg`` is the RMS sample-to-sample distance over steps
between two originally valid samples of the same fixation (precision as in
Holmqvist, Nystrom & Mulvey 2012, Proc. ETRA). A scope without a single valid
sample is degenerate: all its features are NaN and a
:class:`DegenerateWindowWarning` is issued.
"""
from __future__ import annotations

import warnings

import numpy as np
import pandas as pd

from aspectus.errors import AspectusWarning

from aspectus import schema as _schema

#: feature columns, in order; every name carries its unit
FEATURE_COLUMNS = tuple(c.name for c in _schema.FEATURE_COLUMNS)  # defined, with units, in aspectus.schema
SCOPE_COLUMNS = ("scope", "label", "start_s", "end_s")


class DegenerateWindowWarning(AspectusWarning):
    """A feature scope (window or segment) holds no valid sample; its features are NaN."""


def _overlap_s(on: np.ndarray, off: np.ndarray, start: float, end: float) -> float:
    if not len(on):
        return 0.0
    return float(np.clip(np.minimum(off, end) - np.maximum(on, start), 0.0, None).sum())


def compute_features(events: pd.DataFrame, *, t_s, valid, yaw_deg, pitch_deg, labels, scopes: pd.DataFrame,
                     sample_interval_s: float | None = None) -> pd.DataFrame:
    """Features for each scope.

    Parameters
    ----------
    events : pandas.DataFrame
        Events table (:data:`aspectus.schema.EVENT_COLUMNS`).
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
        Median sample interval (for the clip's end time); computed if absent.

    Returns
    -------
    pandas.DataFrame
        One row per scope: :data:`SCOPE_COLUMNS`, :data:`FEATURE_COLUMNS`, n_samples.
    """
    t = np.asarray(t_s, dtype=float)
    valid = np.asarray(valid, dtype=bool)
    x = np.asarray(yaw_deg, dtype=float)
    y = np.asarray(pitch_deg, dtype=float)
    fixlab = np.asarray(labels) == "fixation"
    step_ok = valid[1:] & valid[:-1] & fixlab[1:] & fixlab[:-1]
    d2 = np.where(step_ok, np.diff(x) ** 2 + np.diff(y) ** 2, 0.0) if len(t) > 1 else np.zeros(0)
    d2 = np.nan_to_num(d2)
    cd2 = np.concatenate([[0.0], np.cumsum(d2)])
    cnd = np.concatenate([[0], np.cumsum(step_ok)]) if len(t) > 1 else np.zeros(1, dtype=np.int64)
    cval = np.concatenate([[0], np.cumsum(valid)])

    def by_type(name):
        ev = events[events["type"] == name]
        return (ev["onset_s"].to_numpy(dtype=float), ev["offset_s"].to_numpy(dtype=float),
                ev["duration_ms"].to_numpy(dtype=float), ev["amplitude_deg"].to_numpy(dtype=float))

    fon, foff, fdur, _ = by_type("fixation")
    son, _, _, samp = by_type("saccade")
    bon, _, _, _ = by_type("blink")
    rows = []
    degenerate = 0
    for sc in scopes.itertuples(index=False):
        start, end = float(sc.start_s), float(sc.end_s)
        i0, i1 = np.searchsorted(t, [start, end], side="left")
        n_in = int(i1 - i0)
        nval = int(cval[i1] - cval[i0])
        row = {"scope": sc.scope, "label": sc.label, "start_s": start, "end_s": end}
        length_s = end - start
        if nval == 0 or length_s <= 0:
            degenerate += 1
            row.update({c: np.nan for c in FEATURE_COLUMNS})
            row["valid_frac"] = 0.0 if n_in else np.nan
            row["n_samples"] = n_in
            rows.append(row)
            continue
        j0, j1 = np.searchsorted(fon, [start, end], side="left")
        dur = fdur[j0:j1]
        k0, k1 = np.searchsorted(son, [start, end], side="left")
        b0, b1 = np.searchsorted(bon, [start, end], side="left")
        ov = (foff > start) & (fon < end)
        m = max(int(i1) - 1 - int(i0), 0)
        nsteps = int(cnd[i0 + m] - cnd[i0]) if m > 0 else 0
        row.update({
            "fixation_count": float(len(dur)),
            "fixation_rate_per_s": len(dur) / length_s,
            "fixation_duration_mean_ms": float(dur.mean()) if len(dur) else np.nan,
            "fixation_duration_median_ms": float(np.median(dur)) if len(dur) else np.nan,
            "fixation_duration_sd_ms": float(dur.std(ddof=1)) if len(dur) > 1 else np.nan,
            "fixation_time_frac": _overlap_s(fon[ov], foff[ov], start, end) / length_s,
            "saccade_count": float(k1 - k0),
            "saccade_amplitude_mean_deg": float(np.nanmean(samp[k0:k1])) if k1 > k0 else np.nan,
            "blink_count": float(b1 - b0),
            "blink_rate_per_min": (b1 - b0) / (length_s / 60.0),
            "valid_frac": nval / n_in,
            "noise_rms_s2s_deg": float(np.sqrt((cd2[i0 + m] - cd2[i0]) / nsteps)) if nsteps else np.nan,
            "n_samples": n_in,
        })
        rows.append(row)
    if degenerate:
        warnings.warn(f"{degenerate} of {len(scopes)} feature scope(s) hold no valid sample; their features are NaN",
                      DegenerateWindowWarning, stacklevel=2)
    cols = list(SCOPE_COLUMNS) + list(FEATURE_COLUMNS) + ["n_samples"]
    if not rows:
        return pd.DataFrame({c: pd.Series(dtype=object if c in ("scope", "label") else float) for c in cols})
    out = pd.DataFrame(rows)[cols]
    out["n_samples"] = out["n_samples"].astype("int64")
    return out
