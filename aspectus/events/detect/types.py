"""Result type shared by the detectors."""
from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from aspectus.errors import AspectusWarning


class DetectionWarning(AspectusWarning):
    """A detector's parameters do not suit the input (e.g. its sampling rate); the result is doubtful."""


@dataclass
class Candidates:
    """Fixation candidates found by a detector, before post-processing.

    Attributes
    ----------
    starts, ends : ndarray of int64
        Index ranges ``[starts[k], ends[k])`` into the samples, sorted, not
        overlapping, never spanning an unusable sample.
    info : dict
        Thresholds the detector actually used (e.g. the adapted dispersion
        threshold in deg), for the JSON sidecar.
    threshold_of_samples : callable, optional
        I-DT: the dispersion threshold (deg) of a window of ``m`` samples,
        vectorised over ``m``; reported per fixation.
    noise_dispersion_of_samples : callable, optional
        I-DT: the dispersion (deg) the noise alone is expected to reach over
        ``m`` samples.
    """

    starts: np.ndarray
    ends: np.ndarray
    info: dict = field(default_factory=dict)
    threshold_of_samples: Callable | None = field(default=None, repr=False)
    noise_dispersion_of_samples: Callable | None = field(default=None, repr=False)

    @classmethod
    def empty(cls, info: dict | None = None) -> Candidates:
        z = np.zeros(0, dtype=np.int64)
        return cls(z, z.copy(), dict(info or {}))

    def __len__(self) -> int:
        return len(self.starts)
