"""Time alignment of a webcam recording and a reference recording with unrelated clocks.

Convention (the one ``alignment.json`` reports): ``offset_s`` is the clip
time at which the reference's first sample was taken. A reference time
``t_ref`` (seconds from its first sample) is clip time
``t_ref + offset_s + drift * t_ref``; ``offset_s = -1.0`` means the
reference started recording one second before the webcam.

The automatic estimate resamples both gaze signals to a common rate,
cross-correlates them over a search range, and refines the peak to a
fraction of a sample with a parabola through the peak and its neighbours.
Signals used: the gaze angles with their mean (and slow trends) removed,
which is insensitive to the webcam's constant angle offset (angle kappa) and
to its gain since the correlation is normalised, and the gaze speed, which
marks saccades and blinks on both sides. Gaps are masked (normalised
cross-correlation over the overlapping valid samples only, as in Padfield
2012).

References
----------
.. [1] Padfield, D. (2012). Masked object registration in the Fourier
   domain. IEEE Transactions on Image Processing, 21(5), 2706-2718.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy import signal as sps

from aspectus.errors import AspectusInputError, ParameterError

SIGNALS = ("both", "angle", "speed")
#: below this confidence the report warns that the automatic offset may be wrong
LOW_CONFIDENCE = 0.25


@dataclass
class Alignment:
    """How the reference's clock maps onto the clip's clock.

    Attributes
    ----------
    offset_s : float
        Clip time of the reference's first sample, s.
    confidence : float
        0-1: how far the correlation peak stands above the best competing
        peak at least ``exclusion_s`` away, relative to its height
        (``(peak - second) / peak``); 1 for a marker or a user override.
    method : str
        ``cross-correlation (both)`` (or ``(angle)``, ``(speed)``; ``+ linear drift`` when a drift was
        fitted), ``marker: <label>`` or ``user``; :func:`method_text` says it in words.
    search_range_s : float
        Offsets searched, -search_range_s to +search_range_s around 0 s.
    peak_corr : float
        Normalised correlation at the peak (-1 to 1); NaN when not estimated.
    second_peak_corr : float
        Best competing peak, at least ``exclusion_s`` from the main one.
    rate_hz : float
        Common rate the signals were resampled to, Hz.
    overlap_s : float
        Time both recordings have valid samples at this offset, s (at the common rate).
    drift_s_per_s : float
        Linear clock drift (reference clock runs slow by this fraction); 0 when
        not estimated.
    drift_ci : tuple of float
        Interval of the drift from the fit of local offsets (NaN if not estimated).
    notes : list of str
        Plain-language warnings (low confidence, short overlap, ...).
    curve : pandas.DataFrame
        ``offset_s`` and ``corr`` of the correlation function (for plotting).
    """

    offset_s: float
    confidence: float
    method: str
    search_range_s: float = float("nan")
    peak_corr: float = float("nan")
    second_peak_corr: float = float("nan")
    rate_hz: float = float("nan")
    overlap_s: float = float("nan")
    drift_s_per_s: float = 0.0
    drift_ci: tuple[float, float] = (float("nan"), float("nan"))
    exclusion_s: float = 1.0
    signal: str = ""
    notes: list[str] = field(default_factory=list)
    curve: pd.DataFrame | None = None

    def to_dict(self) -> dict:
        """Everything but the correlation curve, for ``alignment.json``."""
        return {"offset_s": self.offset_s, "confidence": self.confidence, "method": self.method,
                "search_range_s": self.search_range_s, "peak_corr": self.peak_corr,
                "second_peak_corr": self.second_peak_corr, "rate_hz": self.rate_hz, "overlap_s": self.overlap_s,
                "drift_s_per_s": self.drift_s_per_s, "drift_ppm": self.drift_s_per_s * 1e6,
                "drift_ci_low": self.drift_ci[0], "drift_ci_high": self.drift_ci[1],
                "exclusion_s": self.exclusion_s, "signal": self.signal, "notes": list(self.notes),
                "convention": "offset_s is the clip time of the reference's first sample; clip time = "
                              "reference time + offset_s + drift_s_per_s * reference time"}

    def to_clip_time(self, t_reference_s) -> np.ndarray:
        """Reference times (s from its first sample) to clip times."""
        t = np.asarray(t_reference_s, dtype=float)
        return t + self.offset_s + self.drift_s_per_s * t


#: what each alignment signal is, in words (:func:`method_text`)
SIGNAL_TEXT = {"both": "the gaze angles and the gaze speed", "angle": "the gaze angles", "speed": "the gaze speed"}


def method_text(method: str) -> str:
    """How an offset was found (:attr:`Alignment.method`), in words for reports and messages, e.g.
    ``cross-correlation (both)`` -> "cross-correlating the gaze angles and the gaze speed of both recordings".

    >>> method_text("cross-correlation (angle) + linear drift")
    'cross-correlating the gaze angles of both recordings, with a linear clock drift'
    >>> method_text("marker: page_2"), method_text("user")
    ("the marker 'page_2' in both recordings", 'the offset given by the user')
    """
    m = str(method)
    drift = m.endswith(" + linear drift")
    m = m.removesuffix(" + linear drift")
    if m == "user":
        text = "the offset given by the user"
    elif m.startswith("marker: "):
        text = f"the marker '{m.removeprefix('marker: ')}' in both recordings"
    elif m.startswith("cross-correlation (") and m.endswith(")"):
        sig = m.removeprefix("cross-correlation (")[:-1]
        text = f"cross-correlating {SIGNAL_TEXT.get(sig, sig)} of both recordings"
    else:
        text = m
    return text + (", with a linear clock drift" if drift else "")


def user_alignment(offset_s: float) -> Alignment:
    """An offset the user gives (``--offset-s``): taken as it is, confidence 1."""
    if not np.isfinite(offset_s):
        raise ParameterError(f"offset must be a finite number of seconds, got {offset_s!r}")
    return Alignment(offset_s=float(offset_s), confidence=1.0, method="user")


def marker_alignment(*, webcam_marker_s: float, reference_marker_s: float, label: str = "marker") -> Alignment:
    """Offset from a shared marker: an event both recordings contain.

    Parameters
    ----------
    webcam_marker_s : float
        Clip time of the marker (e.g. a segment's onset), s.
    reference_marker_s : float
        Reference time of the same marker (s from its first sample).
    label : str
        The marker's name, for the record.
    """
    for v in (webcam_marker_s, reference_marker_s):
        if not np.isfinite(v):
            raise ParameterError(f"marker times must be finite seconds, got {v!r}")
    return Alignment(offset_s=float(webcam_marker_s - reference_marker_s), confidence=1.0,
                     method=f"marker: {label}")


def find_marker(messages: pd.DataFrame, label: str, *, source: str = "reference") -> float:
    """Time of the first message called ``label`` (case-insensitive); an error listing the labels there are."""
    if messages is None or not len(messages):
        raise AspectusInputError(f"the {source} has no markers (messages), so --marker {label!r} cannot be used",
                                path=source if source != "reference" else None,
                                hint="align automatically, or give --offset-s")
    m = messages[messages["label"].astype(str).str.lower() == label.lower()]
    if not len(m):
        have = ", ".join(sorted(set(messages["label"].astype(str)))[:10])
        raise AspectusInputError(f"no marker {label!r} in the {source}; it has {have}",
                                hint="use one of those labels")
    return float(m["t_s"].iloc[0])


def _grid_signal(t, yaw, pitch, valid, *, rate_hz: float, t0: float, n: int) -> tuple[np.ndarray, np.ndarray]:
    """Bin-average (high-rate input) or interpolate (low-rate input) yaw/pitch onto a uniform grid."""
    t = np.asarray(t, float)
    ok = np.asarray(valid, bool) & np.isfinite(yaw) & np.isfinite(pitch)
    grid = t0 + np.arange(n) / rate_hz
    out = np.full((2, n), np.nan)
    if ok.sum() < 2:
        return grid, out
    tv, yv, pv = t[ok], np.asarray(yaw, float)[ok], np.asarray(pitch, float)[ok]
    src_rate = 1.0 / float(np.median(np.diff(t))) if len(t) > 1 else rate_hz
    if src_rate > 1.5 * rate_hz:
        b = np.floor((tv - t0) * rate_hz + 0.5).astype(int)
        inside = (b >= 0) & (b < n)
        cnt = np.bincount(b[inside], minlength=n)
        with np.errstate(invalid="ignore", divide="ignore"):
            out[0] = np.bincount(b[inside], yv[inside], minlength=n) / cnt
            out[1] = np.bincount(b[inside], pv[inside], minlength=n) / cnt
    else:
        out[0] = np.interp(grid, tv, yv, left=np.nan, right=np.nan)
        out[1] = np.interp(grid, tv, pv, left=np.nan, right=np.nan)
        # no interpolation across gaps longer than two source samples
        gap = 2.5 / src_rate
        j = np.clip(np.searchsorted(tv, grid), 1, len(tv) - 1)
        far = (tv[j] - tv[j - 1]) > gap
        out[:, far] = np.nan
    return grid, out


def _filt(x: np.ndarray, k: np.ndarray) -> np.ndarray:
    """Centred convolution with zero padding, output as long as ``x`` (any kernel length)."""
    from scipy.ndimage import convolve1d

    return convolve1d(x, k, mode="constant", cval=0.0)


def _highpass(x: np.ndarray, rate_hz: float, window_s: float) -> np.ndarray:
    """Remove a running mean (of the valid samples) over ``window_s``."""
    ok = np.isfinite(x)
    w = max(3, int(round(window_s * rate_hz)) | 1)
    k = np.ones(w)
    s = _filt(np.where(ok, x, 0.0), k)
    c = _filt(ok.astype(float), k)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(ok & (c > 0), x - s / np.maximum(c, 1), np.nan)


def _smooth(x: np.ndarray, rate_hz: float, sd_s: float) -> np.ndarray:
    ok = np.isfinite(x)
    half = int(np.ceil(3 * sd_s * rate_hz))
    if half < 1:
        return x
    k = np.exp(-0.5 * (np.arange(-half, half + 1) / (sd_s * rate_hz)) ** 2)
    s = _filt(np.where(ok, x, 0.0), k)
    c = _filt(ok.astype(float), k)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(ok, s / c, np.nan)


def _signals(grid_vals: np.ndarray, rate_hz: float, which: str) -> list[np.ndarray]:
    yaw, pitch = grid_vals
    out = []
    if which in ("both", "angle"):
        out += [_highpass(yaw, rate_hz, 10.0), _highpass(pitch, rate_hz, 10.0)]
    if which in ("both", "speed"):
        sy, sp = _smooth(yaw, rate_hz, 0.03), _smooth(pitch, rate_hz, 0.03)
        sp_ = np.hypot(np.gradient(sy), np.gradient(sp)) * rate_hz
        out.append(np.log1p(np.where(np.isfinite(sp_), sp_, np.nan)))
    return out


def _masked_xcorr(a: np.ndarray, b: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Normalised cross-correlation of a (webcam) and b (reference) over their valid overlap, at all lags.

    Returns (lags, corr, overlap_count); ``corr[lag]`` pairs ``a[i + lag]`` with ``b[i]``.
    """
    ma, mb = np.isfinite(a), np.isfinite(b)
    za = np.where(ma, a - np.nanmean(a), 0.0)
    zb = np.where(mb, b - np.nanmean(b), 0.0)
    sa = np.nanstd(a) or 1.0
    sb = np.nanstd(b) or 1.0
    za, zb = za / sa, zb / sb
    fa, fb = ma.astype(float), mb.astype(float)
    num = sps.correlate(za, zb, mode="full", method="fft")
    den_a = sps.correlate(za * za, fb, mode="full", method="fft")
    den_b = sps.correlate(fa, zb * zb, mode="full", method="fft")
    cnt = sps.correlate(fa, fb, mode="full", method="fft")
    lags = sps.correlation_lags(a.size, b.size, mode="full")
    with np.errstate(invalid="ignore", divide="ignore"):
        corr = num / np.sqrt(np.clip(den_a, 1e-12, None) * np.clip(den_b, 1e-12, None))
    return lags, corr, np.round(cnt)


def _local_peaks(c: np.ndarray) -> np.ndarray:
    ok = np.isfinite(c)
    cc = np.where(ok, c, -np.inf)
    return np.flatnonzero((cc[1:-1] >= cc[:-2]) & (cc[1:-1] > cc[2:])) + 1


def _correlate(webcam: pd.DataFrame, reference: pd.DataFrame, *, rate_hz: float, signal: str,
               lo_s: float, hi_s: float, min_overlap_s: float):
    tw = webcam["t_s"].to_numpy(float)
    tr = reference["t_s"].to_numpy(float)
    tw0, tr0 = float(tw[0]), float(tr[0])
    nw = int(np.floor((tw[-1] - tw0) * rate_hz)) + 1
    nr = int(np.floor((tr[-1] - tr0) * rate_hz)) + 1
    _, gw = _grid_signal(tw, webcam["yaw_deg"], webcam["pitch_deg"], webcam["valid"], rate_hz=rate_hz, t0=tw0,
                         n=nw)
    _, gr = _grid_signal(tr, reference["yaw_deg"], reference["pitch_deg"], reference["valid"], rate_hz=rate_hz,
                         t0=tr0, n=nr)
    total, count = None, None
    for a, b in zip(_signals(gw, rate_hz, signal), _signals(gr, rate_hz, signal)):
        if np.isfinite(a).sum() < 10 or np.isfinite(b).sum() < 10:
            continue
        lags, c, cnt = _masked_xcorr(a, b)
        total = np.nan_to_num(c) if total is None else total + np.nan_to_num(c)
        count = 1 if count is None else count + 1
        overlap = cnt
    if total is None:
        raise AspectusInputError("too few valid gaze samples on one side to align the recordings",
                                hint="give the offset with --offset-s or a shared marker")
    corr = total / count
    offsets = tw0 - tr0 + lags / rate_hz
    usable = (offsets >= lo_s) & (offsets <= hi_s) & (overlap >= min_overlap_s * rate_hz)
    return offsets, np.where(usable, corr, np.nan), overlap / rate_hz


def _peak(offsets, corr, *, rate_hz: float, exclusion_s: float):
    if not np.isfinite(corr).any():
        return None
    i = int(np.nanargmax(corr))
    est = offsets[i]
    if 0 < i < len(corr) - 1 and np.isfinite(corr[i - 1]) and np.isfinite(corr[i + 1]):
        y0, y1, y2 = corr[i - 1], corr[i], corr[i + 1]
        den = y0 - 2 * y1 + y2
        if den < 0:
            est += 0.5 * (y0 - y2) / den / rate_hz
    peaks = _local_peaks(corr)
    far = peaks[np.abs(offsets[peaks] - offsets[i]) >= exclusion_s]
    second = float(np.nanmax(corr[far])) if far.size else float("nan")
    return i, float(est), float(corr[i]), second


def estimate_offset(webcam: pd.DataFrame, reference: pd.DataFrame, *, search_range_s: float = 30.0,
                    rate_hz: float = 60.0, signal: str = "both", min_overlap_s: float = 5.0,
                    exclusion_s: float = 1.0, estimate_drift: bool = False, drift_windows: int = 4) -> Alignment:
    """Estimate the clock offset between webcam and reference samples by cross-correlation.

    Parameters
    ----------
    webcam : pandas.DataFrame
        Webcam samples table (``t_s`` on the clip clock, s).
    reference : pandas.DataFrame
        Reference samples table (``t_s`` from its first sample, s).
    search_range_s : float
        Offsets from ``-search_range_s`` to ``+search_range_s`` are searched, s.
    rate_hz : float
        Common resampling rate, Hz (high-rate input is bin-averaged, low-rate
        input linearly interpolated, never across gaps).
    signal : {"both", "angle", "speed"}
        Which signals are correlated: detrended angles (yaw and pitch, a 10 s
        running mean removed), gaze speed (log of 1 + deg/s, after a 30 ms
        Gaussian smoothing), or the mean of the three correlation functions.
    min_overlap_s : float
        Offsets at which the recordings overlap by less than this are not considered, s.
    exclusion_s : float
        A competing peak must be at least this far from the main one, s.
    estimate_drift : bool
        Also fit a linear clock drift from local offsets in ``drift_windows``
        consecutive stretches of the overlap.

    Returns
    -------
    Alignment
    """
    if signal not in SIGNALS:
        raise ParameterError(f"alignment signal {signal!r} is not one of {', '.join(SIGNALS)}")
    if not (search_range_s > 0 and rate_hz > 0):
        raise ParameterError("search_range_s and rate_hz must be positive")
    for name, df in (("webcam", webcam), ("reference", reference)):
        if len(df) < 10:
            raise AspectusInputError(f"the {name} recording has only {len(df)} samples; too short to align",
                                    hint="give the offset with --offset-s")
    offsets, corr, overlap = _correlate(webcam, reference, rate_hz=rate_hz, signal=signal, lo_s=-search_range_s,
                                        hi_s=search_range_s, min_overlap_s=min_overlap_s)
    pk = _peak(offsets, corr, rate_hz=rate_hz, exclusion_s=exclusion_s)
    if pk is None:
        raise AspectusInputError(
            f"the recordings never overlap by {min_overlap_s:g} s within +-{search_range_s:g} s",
            hint="widen --search-range-s, or give --offset-s / a shared marker")
    i, est, peak, second = pk
    conf = float(np.clip((peak - second) / peak, 0.0, 1.0)) if peak > 0 and np.isfinite(second) else (
        1.0 if peak > 0 else 0.0)
    notes = []
    if conf < LOW_CONFIDENCE or peak < 0.2:
        notes.append(f"the automatic offset is uncertain (peak correlation {peak:.2f}, competing peak "
                     f"{second:.2f}); check it in the time-series figure or give --offset-s")
    if abs(est) > 0.9 * search_range_s:
        notes.append(f"the offset {est:.2f} s lies near the edge of the search range (+-{search_range_s:g} s); "
                     "widen it to be sure")
    keep = np.isfinite(corr)
    step = max(1, int(keep.sum() // 4000))
    curve = pd.DataFrame({"offset_s": offsets[keep][::step], "corr": corr[keep][::step]})
    al = Alignment(offset_s=est, confidence=conf, method=f"cross-correlation ({signal})",
                   search_range_s=float(search_range_s), peak_corr=peak, second_peak_corr=second,
                   rate_hz=float(rate_hz), overlap_s=float(overlap[i]), exclusion_s=float(exclusion_s),
                   signal=signal, notes=notes, curve=curve)
    if estimate_drift:
        _fit_drift(al, webcam, reference, windows=drift_windows, rate_hz=rate_hz, signal=signal)
    return al


def _fit_drift(al: Alignment, webcam, reference, *, windows: int, rate_hz: float, signal: str) -> None:
    tw = webcam["t_s"].to_numpy(float)
    tr_clip = reference["t_s"].to_numpy(float) + al.offset_s
    lo, hi = max(tw[0], tr_clip[0]), min(tw[-1], tr_clip[-1])
    if hi - lo < windows * 10.0:
        al.notes.append(f"drift not estimated: the overlap ({hi - lo:.0f} s) is shorter than {windows} x 10 s")
        return
    edges = np.linspace(lo, hi, windows + 1)
    mids, offs = [], []
    for a, b in zip(edges[:-1], edges[1:]):
        w = webcam[(tw >= a) & (tw < b)]
        pad = 2.0
        r = reference[(tr_clip >= a - pad) & (tr_clip < b + pad)]
        if len(w) < 10 or len(r) < 10:
            continue
        try:
            o, c, _ = _correlate(w, r, rate_hz=rate_hz, signal=signal, lo_s=al.offset_s - 1.0,
                                 hi_s=al.offset_s + 1.0, min_overlap_s=0.5 * (b - a))
        except AspectusInputError:
            continue
        pk = _peak(o, c, rate_hz=rate_hz, exclusion_s=al.exclusion_s)
        if pk is None:
            continue
        mids.append(0.5 * (a + b) - al.offset_s)  # reference time of the window centre
        offs.append(pk[1])
    if len(mids) < 3:
        al.notes.append("drift not estimated: too few stretches could be aligned on their own")
        return
    from scipy import stats

    fit = stats.linregress(mids, offs)
    t = float(stats.t.ppf(0.975, len(mids) - 2))
    drift = float(fit.slope)
    al.drift_s_per_s = drift
    al.drift_ci = (drift - t * fit.stderr, drift + t * fit.stderr)
    al.offset_s = float(fit.intercept)
    al.method += " + linear drift"


def apply_alignment(reference: pd.DataFrame, alignment: Alignment) -> pd.DataFrame:
    """A copy of the reference samples with ``t_s`` on the clip clock (``t_ref_s`` keeps the original)."""
    out = reference.copy()
    out["t_ref_s"] = out["t_s"].to_numpy(float)
    out["t_s"] = alignment.to_clip_time(out["t_ref_s"])
    return out
