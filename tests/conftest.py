"""Shared test fixtures. Keep per-module fixtures in their own test files."""
from __future__ import annotations

import os
from pathlib import Path

import pytest

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
os.environ.setdefault("GLOG_minloglevel", "2")

REPO = Path(__file__).resolve().parents[1]
SHARED = REPO.parent / "shared"
LUND_DIR = SHARED / "reference" / "lund2013" / "img"


@pytest.fixture(scope="session")
def lund_dir() -> Path:
    """The hand-coded recordings of Andersson et al. (2017), read from ../shared/."""
    if not LUND_DIR.is_dir() or not any(LUND_DIR.glob("*.mat")):
        pytest.skip(f"reference data absent: expected the Andersson et al. (2017) recordings in {LUND_DIR}")
    return LUND_DIR


@pytest.fixture(scope="session")
def repo_root() -> Path:
    return REPO


def _key(value):
    import numpy as np

    if isinstance(value, np.ndarray):
        return ("ndarray", value.dtype.str, value.shape, value.tobytes())
    if isinstance(value, (list, tuple)):
        return tuple(_key(v) for v in value)
    return value


@pytest.fixture(scope="session")
def rendered_clip(tmp_path_factory):
    """Render a test clip once per session for each set of arguments (``aspectus.synth.render_clip``).

    Call it as ``rendered_clip(duration_s=3.0, seed=3, size_px=(640, 360), extra_faces=1, ...)``; the
    trajectory is ``synth_trajectory(duration_s, seed, head_motion)``, the render's seed the same ``seed``.
    Several tests share the file: a test that changes or deletes a clip renders its own.
    """
    from aspectus.synth.render import render_clip
    from aspectus.synth.trajectory import synth_trajectory

    cache: dict = {}

    def make(*, duration_s: float, seed: int, size_px=(640, 360), fps: float = 30.0, head_motion: bool = False,
             name: str = "p01_s01.mp4", **kw):
        key = (duration_s, seed, tuple(size_px), fps, head_motion, name, tuple(sorted((k, _key(v)) for k, v in kw.items())))
        if key not in cache:
            d = tmp_path_factory.mktemp("rendered")
            traj = synth_trajectory(duration_s=duration_s, seed=seed, head_motion=head_motion)
            cache[key] = render_clip(d / name, traj, size_px=tuple(size_px), fps=fps, seed=seed, **kw)
        return cache[key]

    return make
