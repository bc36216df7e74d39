"""Event-level agreement: sample-by-sample Cohen's kappa of labels, and matching of events by onset.

Both compare the webcam side with the reference after time alignment: a
reference time ``t_ref`` (seconds from the reference's first sample) is clip
time ``t_ref + offset_s`` (the convention of ``alignment.json``).

References
----------
.. [1] Cohen, J. (1960). A coefficient of agreement for nominal scales.
   Educational and Psychological Measurement, 20(1), 37-46.
.. [2] Andersson, R., Larsson, L., Holmqvist, K., Stridh, M., & Nyström, M.
   (2017). One algorithm to rule them all? Behavior Research Methods, 49(2),
   616-637 (sample-level kappa for comparing event detectors).
.. [3] Künsch, H. R. (1989). The jackknife and the bootstrap for general
   stationary observations. Annals of Statistics, 17(3), 1217-1241 (moving
   block bootstrap, used for the kappa interval because neighbouring samples
   are not independent).
"""
from __future__ import annotations

import warnings
from dataclasses import asdict, dataclass

import numpy as np
import pandas as pd

from aspectus.validation.agreement import AgreementWarning
from aspectus.errors import ParameterError

NAN = float("nan")
_OUTSIDE = "<outside>"


@dataclass(frozen=True)
class KappaResult:
    """Cohen's kappa of two label sequences on a common time grid.

    Attributes
    ----------
    kappa, ci_low, ci_high : float
        Kappa and its moving-block bootstrap interval.
    n : int
        Samples compared.
    observed_agreement, chance_agreement : float
        p_o and p_e of Cohen (1960).
    prevalence_webcam, prevalence_reference : float
        Share of samples labelled ``label`` on each side (binary kappa only).
    label : str
        The label compared against all others (``"*"`` for all labels).
    block_s : float
        Bootstrap block length, s.
    """

    kappa: float
    ci_low: float
    ci_high: float
    n: int
    observed_agreement: float
    chance_agreement: float
    prevalence_webcam: float
    prevalence_reference: float
    label: str
    block_s: float
    confidence: float = 0.95

    def to_dict(self) -> dict:
        return asdict(self)


@dataclass(frozen=True)
class EventMatch:
    """One-to-one matching of events by onset, within a tolerance.

    Attributes
    ----------
    event_type : str
    tolerance_s : float
        Largest onset difference of a match, s.
    n_webcam, n_reference, n_matched : int
    precision : float
        Matched share of the webcam events.
    recall : float
        Matched share of the reference events.
    f1 : float
        Harmonic mean of precision and recall.
    onset_diff_mean_ms, onset_diff_sd_ms : float
        Mean and SD of (webcam - reference) onset over matches, ms.
    duration_diff_mean_ms : float
        Mean (webcam - reference) duration over matches, ms.
    pairs : pandas.DataFrame
        Index of each matched webcam and reference event and their onsets.
    """

    event_type: str
    tolerance_s: float
    n_webcam: int
    n_reference: int
    n_matched: int
    precision: float
    recall: float
    f1: float
    onset_diff_mean_ms: float
    onset_diff_sd_ms: float
    duration_diff_mean_ms: float
    pairs: pd.DataFrame

    def to_dict(self) -> dict:
        d = asdict(self)
        d.pop("pairs")
        return d


def cohen_kappa(a, b) -> tuple[float, float, float]:
    """Cohen's (1960) kappa of two label vectors of any labels: (kappa, p_o, p_e)."""
    a = np.asarray(a, dtype=object)
    b = np.asarray(b, dtype=object)
    if a.shape != b.shape:
        raise ParameterError(f"label vectors differ in length ({a.size} and {b.size})")
    n = a.size
    if n == 0:
        return NAN, NAN, NAN
    po = float(np.mean(a == b))
    cats = np.unique(np.concatenate([a, b]).astype(str))
    a_s, b_s = a.astype(str), b.astype(str)
    pe = float(sum(np.mean(a_s == c) * np.mean(b_s == c) for c in cats))
    if pe >= 1.0:
        return NAN, po, pe
    return (po - pe) / (1.0 - pe), po, pe


def labels_at(t_query, t_source, labels_source, *, max_gap_s: float | None = None, fill: str = "") -> np.ndarray:
    """Labels of ``t_source`` at times ``t_query`` (nearest sample).

    Queries farther than ``max_gap_s`` from any source sample (e.g. outside
    the source's time range) get ``fill``.
    """
    tq = np.asarray(t_query, dtype=float)
    ts = np.asarray(t_source, dtype=float)
    lab = np.asarray(labels_source, dtype=object)
    if ts.size == 0:
        return np.full(tq.size, fill, dtype=object)
    j = np.clip(np.searchsorted(ts, tq), 1, max(ts.size - 1, 1)) if ts.size > 1 else np.zeros(tq.size, int)
    if ts.size > 1:
        left = j - 1
        j = np.where(np.abs(ts[left] - tq) <= np.abs(ts[j] - tq), left, j)
    out = lab[j].copy()
    if max_gap_s is not None:
        out[np.abs(ts[j] - tq) > max_gap_s] = fill
    return out


def labels_from_events(t_s, events: pd.DataFrame, *, fill: str = "other") -> np.ndarray:
    """Per-sample labels from an events table (``type``, ``onset_s``, ``offset_s``); later events win."""
    t = np.asarray(t_s, dtype=float)
    out = np.full(t.size, fill, dtype=object)
    if events is None or not len(events):
        return out
    for kind, on, off in zip(events["type"], events["onset_s"], events["offset_s"]):
        a, b = np.searchsorted(t, [on, off], side="left")
        out[a:b] = kind
    return out


def _bootstrap_kappa(a: np.ndarray, b: np.ndarray, block: int, *, reps: int, confidence: float,
                     seed: int) -> tuple[float, float]:
    n = a.size
    if n < 2 * block or block < 1:
        return NAN, NAN
    rng = np.random.default_rng(seed)
    n_blocks = int(np.ceil(n / block))
    chunk = max(1, min(reps, 2_000_000 // max(n, 1)))  # bound the memory of one batch of resamples
    ks = []
    for start in range(0, reps, chunk):
        m = min(chunk, reps - start)
        starts = rng.integers(0, n - block + 1, size=(m, n_blocks))
        idx = (starts[:, :, None] + np.arange(block)[None, None, :]).reshape(m, -1)[:, :n]
        aa, bb = a[idx], b[idx]
        po = np.mean(aa == bb, axis=1)
        pa, pb = aa.mean(axis=1), bb.mean(axis=1)
        pe = pa * pb + (1 - pa) * (1 - pb)
        with np.errstate(divide="ignore", invalid="ignore"):
            ks.append((po - pe) / (1 - pe))
    k = np.concatenate(ks)
    k = k[np.isfinite(k)]
    if k.size < reps // 2:
        return NAN, NAN
    q = (1 - confidence) / 2
    return float(np.quantile(k, q)), float(np.quantile(k, 1 - q))


def label_kappa(t_webcam, labels_webcam, t_reference, labels_reference, *, offset_s: float = 0.0,
                label: str = "fixation", max_gap_s: float = 0.1, exclude=("loss",), block_s: float = 1.0,
                bootstrap_reps: int = 500, confidence: float = 0.95, seed: int = 0) -> KappaResult:
    """Sample-by-sample Cohen's kappa of ``label`` vs everything else, on the webcam's time grid.

    Parameters
    ----------
    t_webcam, labels_webcam : array_like
        Webcam sample times (s, clip clock) and per-sample labels.
    t_reference, labels_reference : array_like
        Reference sample times (s from its first sample) and labels.
    offset_s : float
        Clip time of the reference's first sample (see module docstring).
    label : str
        The label compared (binary kappa: ``label`` or not). ``"*"`` compares
        all labels (multi-class kappa).
    max_gap_s : float
        A webcam sample with no reference sample within this many seconds is
        not compared (outside the reference's recording).
    exclude : tuple of str
        Samples carrying one of these labels on either side are not compared
        (default: data loss).
    block_s : float
        Block length of the moving-block bootstrap interval, s [3]_.
    bootstrap_reps : int
        Bootstrap resamples (fixed ``seed``, so the result is repeatable).

    Returns
    -------
    KappaResult
    """
    tw = np.asarray(t_webcam, dtype=float)
    lw = np.asarray(labels_webcam, dtype=object)
    if tw.size != lw.size:
        raise ParameterError(f"webcam times and labels differ in length ({tw.size}, {lw.size})")
    tr = np.asarray(t_reference, dtype=float) + float(offset_s)
    lr = labels_at(tw, tr, labels_reference, max_gap_s=max_gap_s, fill=_OUTSIDE)
    keep = lr != _OUTSIDE
    for ex in exclude:
        keep &= (lw != ex) & (lr != ex)
    a, b = lw[keep], lr[keep]
    n = int(a.size)
    rate = 1.0 / float(np.median(np.diff(tw))) if tw.size > 1 else 1.0
    if n < 3:
        warnings.warn(f"kappa: only {n} samples overlap after alignment; reported as NaN", AgreementWarning,
                      stacklevel=2)
        return KappaResult(NAN, NAN, NAN, n, NAN, NAN, NAN, NAN, label, block_s, confidence)
    if label == "*":
        k, po, pe = cohen_kappa(a, b)
        pa = pb = NAN
        lo = hi = NAN
    else:
        aa, bb = (a == label), (b == label)
        k, po, pe = cohen_kappa(aa, bb)
        pa, pb = float(aa.mean()), float(bb.mean())
        lo, hi = _bootstrap_kappa(aa, bb, max(1, int(round(block_s * rate))), reps=bootstrap_reps,
                                  confidence=confidence, seed=seed)
    if not np.isfinite(k):
        warnings.warn(f"kappa: one side labels every sample the same ({label}); reported as NaN",
                      AgreementWarning, stacklevel=2)
    return KappaResult(float(k), lo, hi, n, po, pe, pa, pb, label, float(block_s), confidence)


def match_events(webcam: pd.DataFrame, reference: pd.DataFrame, *, offset_s: float = 0.0,
                 event_type: str = "fixation", tolerance_s: float = 0.1) -> EventMatch:
    """Match webcam and reference events one to one by onset, within ``tolerance_s``.

    Candidate pairs (same type, onsets within the tolerance after shifting
    the reference by ``offset_s``) are accepted closest first, each event at
    most once. Reference events outside the webcam's time span (and webcam
    events outside the reference's) are left out of both counts, so a longer
    recording on one side does not count as misses.

    Parameters
    ----------
    webcam, reference : pandas.DataFrame
        Events tables (``type``, ``onset_s``, ``offset_s``), each on its own clock.
    offset_s : float
        Clip time of the reference's first sample, s.
    event_type : str
        Which events to match.
    tolerance_s : float
        Largest onset difference of a match, s (default 0.1 s, about three
        webcam frames; common practice for 30 Hz data).
    """
    if not tolerance_s > 0:
        raise ParameterError(f"tolerance_s must be positive, got {tolerance_s!r}")
    w = webcam[webcam["type"] == event_type].reset_index(drop=True) if len(webcam) else webcam
    r = reference[reference["type"] == event_type].reset_index(drop=True) if len(reference) else reference
    w_on = w["onset_s"].to_numpy(float) if len(w) else np.empty(0)
    r_on = r["onset_s"].to_numpy(float) + offset_s if len(r) else np.empty(0)
    if len(w_on) and len(r_on):
        lo_t = max(webcam["onset_s"].min(), reference["onset_s"].min() + offset_s) - tolerance_s
        hi_t = min(webcam["offset_s"].max(), reference["offset_s"].max() + offset_s) + tolerance_s
        w_in = np.flatnonzero((w_on >= lo_t) & (w_on <= hi_t))
        r_in = np.flatnonzero((r_on >= lo_t) & (r_on <= hi_t))
    else:
        w_in, r_in = np.arange(len(w_on)), np.arange(len(r_on))
    cand = []
    order = np.argsort(r_on[r_in]) if len(r_in) else np.empty(0, int)
    r_sorted = r_on[r_in][order]
    for i in w_in:
        a, b = np.searchsorted(r_sorted, [w_on[i] - tolerance_s, w_on[i] + tolerance_s], side="left")
        for jj in range(a, min(b + 1, len(r_sorted))):
            d = abs(w_on[i] - r_sorted[jj])
            if d <= tolerance_s:
                cand.append((d, int(i), int(r_in[order[jj]])))
    cand.sort()
    used_w, used_r, pairs = set(), set(), []
    for d, i, j in cand:  # noqa: B007 - sorted by distance, unpacked for the indices
        if i in used_w or j in used_r:
            continue
        used_w.add(i)
        used_r.add(j)
        pairs.append((i, j))
    pairs.sort()
    nw, nr, nm = int(len(w_in)), int(len(r_in)), len(pairs)
    prec = nm / nw if nw else NAN
    rec = nm / nr if nr else NAN
    f1 = 2 * prec * rec / (prec + rec) if nw and nr and (prec + rec) > 0 else (0.0 if nw and nr else NAN)
    if pairs:
        pi = np.array([p[0] for p in pairs])
        pj = np.array([p[1] for p in pairs])
        dd = (w_on[pi] - r_on[pj]) * 1e3
        dur_w = (w["offset_s"].to_numpy(float)[pi] - w["onset_s"].to_numpy(float)[pi]) * 1e3
        dur_r = (r["offset_s"].to_numpy(float)[pj] - r["onset_s"].to_numpy(float)[pj]) * 1e3
        pdf = pd.DataFrame({"webcam_index": pi, "reference_index": pj, "webcam_onset_s": w_on[pi],
                            "reference_onset_s": r_on[pj], "webcam_duration_ms": dur_w,
                            "reference_duration_ms": dur_r})
        stats_ = (float(dd.mean()), float(dd.std(ddof=1)) if nm > 1 else NAN, float((dur_w - dur_r).mean()))
    else:
        pdf = pd.DataFrame(columns=["webcam_index", "reference_index", "webcam_onset_s", "reference_onset_s",
                                    "webcam_duration_ms", "reference_duration_ms"])
        stats_ = (NAN, NAN, NAN)
    return EventMatch(event_type, float(tolerance_s), nw, nr, nm, prec, rec, f1, *stats_, pairs=pdf)
