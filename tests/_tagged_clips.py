"""Tiny clips whose container says how to show them (a display matrix or a rotation), for the tests of
upright and mirrored frames in processing and in the app's clip view."""
from __future__ import annotations

from pathlib import Path

import numpy as np


def tagged_clip(path: Path, *, matrix=None, rotation_deg: int = 0, video_s: float = 0.2, audio_s: float = 0.0,
                 fmt: str | None = None) -> Path:
    """A tiny clip, white in its left quarter as stored, with a display matrix and optionally a sound track."""
    from fractions import Fraction

    import av

    with av.open(str(path), "w", format=fmt) as c:
        v = c.add_stream("libx264", rate=30, options={"preset": "ultrafast"})
        v.width, v.height, v.pix_fmt = 160, 120, "yuv420p"
        if matrix is not None:
            v.set_display_matrix(matrix)
        elif rotation_deg:
            v.set_display_rotation(rotation_deg)
        a = None
        if audio_s:
            a = c.add_stream("pcm_s16le", rate=8000)
            a.layout = "mono"
        img = np.zeros((120, 160, 3), np.uint8)
        img[:, :40] = 255
        img[:30, :] = 128  # and a grey band at the top, to tell a flip from a rotation
        for i in range(int(round(video_s * 30))):
            fr = av.VideoFrame.from_ndarray(img, format="rgb24")
            fr.pts, fr.time_base = i, Fraction(1, 30)
            for p in v.encode(fr):
                c.mux(p)
        for p in v.encode(None):
            c.mux(p)
        if a is not None:
            n = int(audio_s * 8000)
            for k in range(0, n, 8000):
                af = av.AudioFrame.from_ndarray(np.zeros((1, min(8000, n - k)), np.int16), format="s16", layout="mono")
                af.sample_rate, af.pts, af.time_base = 8000, k, Fraction(1, 8000)
                for p in a.encode(af):
                    c.mux(p)
            for p in a.encode(None):
                c.mux(p)
    return path
