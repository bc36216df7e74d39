"""Writing rendered frames to a compressed clip with true timestamps.

Frames are encoded with PyAV (FFmpeg): H.264 (libx264, constant quality
``crf``) or MPEG-4 part 2 (``mpeg4``, fixed bitrate), yuv420p, or Motion
JPEG (``mjpeg``, every frame a JPEG of its own at the fixed quantiser
:data:`MJPEG_QSCALE`, full-range yuvj420p, as many USB webcams deliver). Each frame
carries an explicit presentation timestamp on a 1/90000 s clock, so a
variable-frame-rate clip keeps its true frame times. A rotation is written as
the stream's display matrix (the way phones tag portrait video); a decoder
that honours it (PyAV reports it as ``VideoFrame.rotation``) shows the
picture upright.

Reproducibility: on processors with AVX-512, libx264's AVX-512 code reads
memory it has not written (measured here: the same frames encoded in two
processes whose freed memory held different bytes - ``MALLOC_PERTURB_`` -
gave different files, at 960 x 540 but not at 1024 x 540; with x264 limited
to AVX2 or without assembly they were identical). So that a rendered test
clip depends only on its inputs, x264 is limited to its AVX2 code there
(:func:`x264_options`); on other processors it keeps its own choice.
"""
from __future__ import annotations

from fractions import Fraction
from pathlib import Path

import numpy as np

from aspectus.errors import ParameterError

#: container format per file extension
FORMATS = {".mp4": "mp4", ".mov": "mov", ".m4v": "mp4", ".mkv": "matroska", ".avi": "avi"}
#: codecs the writer offers
CODECS = ("libx264", "mpeg4", "mjpeg")
#: Motion JPEG's fixed quantiser scale (FFmpeg's 2-31, lower = finer): a fixed one, so that the same picture gives
#: the same JPEG, as a camera's own encoder does
MJPEG_QSCALE = 4
#: presentation-timestamp clock of written clips (Matroska itself keeps milliseconds)
TIME_BASE = Fraction(1, 90000)
#: MPEG-4 part 2 keeps its time base in 16 bits (FFmpeg refuses 1/90000); 1/30000 s holds 30, 25, 60 and
#: 29.97 fps frame times exactly
MPEG4_TIME_BASE = Fraction(1, 30000)


def _cpu_has_avx512() -> bool:
    """Whether the processor reports AVX-512 (Linux ``/proc/cpuinfo``; False where it cannot be read)."""
    try:
        with open("/proc/cpuinfo", encoding="ascii", errors="replace") as fh:
            for line in fh:
                if line.startswith("flags"):
                    return "avx512f" in line.split()
    except OSError:
        pass
    return False


def x264_options(crf: int | None) -> dict:
    """libx264 options of the writer: ``veryfast`` preset, ``crf`` if given, AVX2 code on AVX-512 processors.

    ``asm=AVX2`` is only set where the processor reports AVX-512 (so it has
    AVX2): naming instruction sets the processor lacks would crash x264.
    """
    opts = {"preset": "veryfast"}
    if crf is not None:
        opts["crf"] = str(int(crf))
    if _cpu_has_avx512():
        opts["x264-params"] = "asm=AVX2"
    return opts


def rotate_for_storage(img: np.ndarray, rotation_deg: int) -> np.ndarray:
    """Rotate an upright picture so that a player applying ``rotation_deg`` (counter-clockwise) shows it upright."""
    k = (int(rotation_deg) // 90) % 4
    return np.ascontiguousarray(np.rot90(img, k=-k)) if k else img


class ClipWriter:
    """Encode RGB frames into a clip at ``path`` (written to ``tmp_path``, renamed by the caller).

    Parameters
    ----------
    path : path-like
        Final clip path; its extension picks the container.
    tmp_path : path-like
        Where the bytes go while writing.
    width_px, height_px : int
        Stored picture size (after rotation), even numbers.
    fps : float
        Nominal frame rate in frames per second (the container's average rate).
    codec : {"libx264", "mpeg4", "mjpeg"}
    crf : int
        libx264 constant-rate factor (0-51, lower = better quality).
    bitrate_kbps : float, optional
        Target bitrate in kbit/s (mpeg4, or libx264 instead of ``crf``).
    rotation_deg : int
        Display rotation to tag, a multiple of 90 (counter-clockwise).
    """

    def __init__(self, path, tmp_path, *, width_px: int, height_px: int, fps: float, codec: str = "libx264",
                 crf: int = 23, bitrate_kbps: float | None = None, rotation_deg: int = 0, vfr: bool = False):
        import av

        path = Path(path)
        fmt = FORMATS.get(path.suffix.lower())
        if fmt is None:
            raise ParameterError(f"cannot write a clip with extension {path.suffix!r}",
                                 hint=f"use one of {', '.join(FORMATS)}")
        if codec not in CODECS:
            raise ParameterError(f"codec must be one of {', '.join(CODECS)}, got {codec!r}")
        if vfr and fmt == "avi":
            raise ParameterError("AVI cannot carry variable frame times", hint="write .mp4, .mov or .mkv")
        if rotation_deg % 360 and fmt not in ("mp4", "mov"):
            raise ParameterError("rotation metadata is written to .mp4 and .mov clips only")
        self._av = av
        self.container = av.open(str(tmp_path), mode="w", format=fmt)
        rate = Fraction(fps).limit_denominator(1001)
        s = self.container.add_stream(codec, rate=rate)
        s.width, s.height = int(width_px), int(height_px)
        s.pix_fmt = "yuvj420p" if codec == "mjpeg" else "yuv420p"
        if codec == "libx264":
            if bitrate_kbps:
                s.bit_rate = int(bitrate_kbps * 1000)
            s.options = x264_options(None if bitrate_kbps else crf)
        elif codec == "mjpeg":  # FFmpeg's quality in lambda units: FF_QP2LAMBDA (118) per quantiser step
            s.options = {"flags": "+qscale", "global_quality": str(MJPEG_QSCALE * 118)}
        else:
            s.bit_rate = int((bitrate_kbps or 1500) * 1000)
        if fmt != "avi":
            tb = TIME_BASE if codec == "libx264" else MPEG4_TIME_BASE
            s.codec_context.time_base = tb
            s.time_base = tb
        else:
            s.codec_context.time_base = 1 / rate
        if rotation_deg % 360:
            s.set_display_rotation(int(rotation_deg) % 360)
        self.stream = s
        self.fmt = fmt
        self._last_pts = None

    def pts_of(self, t_s: float) -> int:
        """Encoder timestamp (ticks) for a frame time in seconds, on the clock the container keeps.

        Matroska stores milliseconds, so there the time is first rounded to
        the millisecond; mp4/mov keep the 1/90000 s clock.
        """
        tb = self.stream.codec_context.time_base
        if self.fmt == "matroska":
            t_s = round(t_s * 1000.0) / 1000.0
        return int(round(t_s / float(tb)))

    def write(self, rgb: np.ndarray, t_s: float) -> float:
        """Encode one RGB uint8 frame shown at ``t_s`` seconds; return its stored time in seconds."""
        frame = self._av.VideoFrame.from_ndarray(rgb, format="rgb24")
        pts = self.pts_of(t_s)
        if self._last_pts is not None and pts <= self._last_pts:
            raise ParameterError(f"frame times closer than the clip clock allows ({t_s:.6f} s)")
        self._last_pts = pts
        frame.pts = pts
        frame.time_base = self.stream.codec_context.time_base
        for packet in self.stream.encode(frame):
            self.container.mux(packet)
        return pts * float(frame.time_base)

    def close(self) -> None:
        for packet in self.stream.encode():
            self.container.mux(packet)
        self.container.close()

    def abort(self) -> None:
        try:
            self.container.close()
        except Exception:  # noqa: BLE001 - the half-written file is deleted anyway
            pass
