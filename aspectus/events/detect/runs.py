"""Runs of ``True`` in boolean vectors, and other small index helpers."""
from __future__ import annotations

import numpy as np


def true_runs(mask) -> tuple[np.ndarray, np.ndarray]:
    """Start and (exclusive) end indices of the runs of ``True`` in ``mask``."""
    m = np.asarray(mask, dtype=bool)
    if not len(m):
        e = np.zeros(0, dtype=np.int64)
        return e, e.copy()
    d = np.diff(np.concatenate([[0], m.view(np.int8), [0]]))
    return np.flatnonzero(d == 1).astype(np.int64), np.flatnonzero(d == -1).astype(np.int64)


def runs_to_mask(starts, ends, n: int) -> np.ndarray:
    """Boolean vector of length ``n`` that is ``True`` on ``[starts[k], ends[k])``."""
    d = np.zeros(n + 1, dtype=np.int64)
    np.add.at(d, np.asarray(starts, dtype=np.int64), 1)
    np.add.at(d, np.asarray(ends, dtype=np.int64), -1)
    return np.cumsum(d[:-1]) > 0


def run_ids(mask) -> np.ndarray:
    """For each sample, the index of the run of ``True`` it lies in, else -1."""
    m = np.asarray(mask, dtype=bool)
    starts = np.concatenate([[False], m[1:] & ~m[:-1]]) | (m & (np.arange(len(m)) == 0))
    ids = np.cumsum(starts) - 1
    return np.where(m, ids, -1)


def end_times(t_s, dt_s: float) -> np.ndarray:
    """``t_s`` with one more entry, ``t_s[-1] + dt_s``: exclusive end index ``e`` maps to ``t[e]``."""
    t = np.asarray(t_s, dtype=float)
    return np.append(t, (t[-1] if len(t) else 0.0) + dt_s)


def trim_runs(starts, ends, inside) -> tuple[np.ndarray, np.ndarray]:
    """Shrink each run ``[s, e)`` to span from its first to its last ``inside`` sample; drop runs with none."""
    s = np.asarray(starts, dtype=np.int64)
    e = np.asarray(ends, dtype=np.int64)
    m = np.asarray(inside, dtype=bool)
    n = len(m)
    if not len(s):
        return s, e
    idx = np.arange(n)
    nxt = np.minimum.accumulate(np.where(m, idx, n)[::-1])[::-1]  # next inside at or after i
    nxt = np.append(nxt, n)
    prv = np.maximum.accumulate(np.where(m, idx, -1))  # last inside at or before i
    ns = nxt[s]
    ne = prv[e - 1] + 1
    keep = ne > ns
    return ns[keep], ne[keep]
