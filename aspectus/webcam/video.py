"""Decoding clips into frames that carry their true presentation time.

Webcam recordings are often variable-frame-rate, so a frame's time is taken
from the container's presentation timestamp (PTS) and never computed as
``index / nominal_fps``. Rotation metadata (the display matrix phones write)
is honoured, so a portrait clip comes out upright. Frames are streamed one at
a time: memory does not grow with clip length.

Decoding uses PyAV (FFmpeg), which reads every common container (mp4, mov,
avi, mkv, webm) and releases the GIL while it decodes, so a background thread
(:class:`FramePrefetcher`) can decode the next frames while the face mesh runs
on the current one.
"""
from __future__ import annotations

import queue
import sys
import threading
from dataclasses import asdict, dataclass, field
from fractions import Fraction
from pathlib import Path
from collections.abc import Iterator

import numpy as np

from aspectus.errors import Cancelled, VideoError

#: container extensions that count as clips wherever aspectus looks for them (batch, the app's
#: "Add folder", validation's folder pairing): the one list
VIDEO_EXTENSIONS = (".mp4", ".mov", ".m4v", ".avi", ".mkv", ".webm", ".wmv", ".mpg", ".mpeg")


def is_video_file(path) -> bool:
    """True for an existing regular file whose extension is in :data:`VIDEO_EXTENSIONS` (case-insensitive)."""
    p = Path(path)
    return p.suffix.lower() in VIDEO_EXTENSIONS and p.is_file()

#: decoded pictures larger than this many pixels are refused (8K UHD is 33 Mpx)
MAX_PIXELS = 40_000_000


@dataclass
class VideoInfo:
    """What the container says about a clip's video stream."""

    path: str
    width_px: int
    height_px: int
    rotation_deg: int
    nominal_fps: float
    duration_s: float
    frame_count_hint: int
    codec: str
    container: str

    @property
    def display_size_px(self) -> tuple[int, int]:
        """(width, height) after applying the rotation metadata."""
        if self.rotation_deg % 180:
            return self.height_px, self.width_px
        return self.width_px, self.height_px

    def to_dict(self) -> dict:
        d = asdict(self)
        d["display_width_px"], d["display_height_px"] = self.display_size_px
        return d


@dataclass
class Frame:
    """One decoded frame.

    Attributes
    ----------
    index : int
        0-based position in decode order.
    pts_s : float
        Presentation timestamp on the container's clock, in seconds.
    image : ndarray
        ``(H, W, 3)`` uint8 RGB picture, upright (rotation applied).
    repeat : bool
        A frame coded on its own whose picture is the frame before's, pixel for
        pixel (:func:`same_picture`): the camera delivered no new one and the
        recorder kept its frame rate by storing the last picture again.
    """

    index: int
    pts_s: float
    image: np.ndarray
    repeat: bool = False


def same_picture(image: np.ndarray, before: np.ndarray | None) -> bool:
    """Whether ``image`` is ``before`` again, pixel for pixel.

    The decoder asks it of frames coded on their own (intra frames: every
    frame of Motion JPEG, the key frames of other codecs): a live camera's
    pictures always differ somewhere (sensor noise, if nothing else), so an
    intra frame that decodes to the picture before it was coded from the same
    picture - the recording repeated its last one. A predicted frame
    (H.264, MPEG-4 part 2) can decode unchanged from a new but still picture
    (the encoder left every block as it was), and a repeated one is often
    re-coded with small changes: there a repeat cannot be told from a still
    scene and is not flagged (docs/notes/frame-loss.md).

    Examples
    --------
    >>> a = np.zeros((4, 6, 3), np.uint8)
    >>> same_picture(a.copy(), a), same_picture(a, None)
    (True, False)
    >>> b = a.copy(); b[3, 5, 0] = 1
    >>> same_picture(b, a)
    False
    """
    if before is None or image.shape != before.shape:
        return False
    # a strided look first: genuine frames differ there almost always, so the full comparison is rare
    return bool(np.array_equal(image[::7, ::7], before[::7, ::7]) and np.array_equal(image, before))


@dataclass
class DecodeReport:
    """Problems met while decoding, for the clip's quality figures."""

    frames: int = 0
    pts_missing: int = 0
    pts_non_increasing: int = 0
    repeated_pictures: int = 0
    corrupt_packets: int = 0
    stopped_early: str | None = None
    notes: list[str] = field(default_factory=list)

    def to_dict(self) -> dict:
        return asdict(self)


def _open(path: Path, source=None):
    """The clip's container, opened by path or, given ``source``, from that file object (e.g. a
    :class:`aspectus.atomic.HashingReader` of the same file)."""
    import av

    if not path.exists():
        raise VideoError("file not found", path=path, hint="check the path")
    if path.is_dir():
        raise VideoError("is a folder, not a video file", path=path)
    if not path.is_file():  # a FIFO, socket or device would block the reader for good
        raise VideoError("is not a regular file (a pipe, socket or device)", path=path,
                         hint="give the recorded clip file itself")
    if path.stat().st_size == 0:
        raise VideoError("file is empty (0 bytes)", path=path, hint="the recording was not saved; re-export it")
    try:
        container = av.open(str(path) if source is None else source, mode="r", metadata_errors="ignore")
    except av.error.FFmpegError as exc:
        raise VideoError(f"not a readable video file ({_ffmpeg_reason(exc)})", path=path,
                         hint="check that it is a video (mp4, mov, avi, mkv, webm) and not truncated or renamed") from None
    except (UnicodeDecodeError, OSError) as exc:
        raise VideoError(f"cannot be opened ({exc})", path=path) from None
    if not container.streams.video:
        container.close()
        raise VideoError("contains no video stream", path=path, hint="is it an audio or data file?")
    _fix_decoder_threads(container.streams.video[0])
    return container


def _ffmpeg_reason(exc) -> str:
    msg = getattr(exc, "strerror", None) or str(exc)
    return str(msg).split(":")[-1].strip() or type(exc).__name__


def probe(path) -> VideoInfo:
    """Read a clip's stream properties without decoding it.

    Raises
    ------
    VideoError
        If the file is missing, empty, not a video, or has no video stream.
    """
    path = Path(path)
    container = _open(path)
    try:
        st = container.streams.video[0]
        cc = st.codec_context
        rate = st.average_rate or st.guessed_rate or st.base_rate
        fps = float(rate) if rate else float("nan")
        if st.duration is not None and st.time_base is not None:
            dur = float(st.duration * st.time_base)
        elif container.duration is not None:
            dur = container.duration / 1e6
        else:
            dur = float("nan")
        n = int(st.frames or 0)
        if not n and np.isfinite(dur) and np.isfinite(fps):
            n = int(round(dur * fps))
        rot = _first_frame_rotation_deg(container, st)
        return VideoInfo(
            path=str(path), width_px=int(cc.width or 0), height_px=int(cc.height or 0), rotation_deg=rot,
            nominal_fps=fps, duration_s=dur, frame_count_hint=n, codec=str(cc.name), container=str(container.format.name),
        )
    finally:
        container.close()


#: decoder threads, fixed: FFmpeg's concealment of damaged data depends on the count (measured on a clip with
#: bad sectors: one thread and two or more gave different pictures), and the default follows the CPUs the
#: decoding thread may use - so it would change with the machine and with the pipeline's CPU placement
DECODER_THREADS = 2


def _fix_decoder_threads(stream) -> None:
    """The same decoded pictures on every machine, whatever its CPU count (see :data:`DECODER_THREADS`)."""
    try:
        stream.codec_context.thread_count = DECODER_THREADS
    except (AttributeError, ValueError):  # a codec that cannot be set up so: decode as it comes
        pass


def _first_frame_rotation_deg(container, stream) -> int:
    """The rotation metadata (0, 90, 180 or 270 deg counter-clockwise) as the first decoded frame carries it.

    PyAV exposes the display matrix on frames, not on streams, so one frame is decoded (a few ms). A clip
    whose first frame does not decode reports 0 here; decoding it properly reports the problem.
    """
    import av

    try:
        for fr in container.decode(stream):
            return 90 * _rotation_k(fr)
    except (av.error.FFmpegError, ValueError, OSError):
        pass
    return 0


def _display_matrix(frame) -> tuple[int, int, int, int] | None:
    """The top-left 2x2 (a, b, c, d) of the frame's display matrix (FFmpeg's AV_FRAME_DATA_DISPLAYMATRIX), or None."""
    import struct

    try:
        for sd in frame.side_data:
            if "DISPLAYMATRIX" in str(getattr(sd, "type", "")):
                m = struct.unpack("<9i", bytes(sd)[:36])
                return m[0], m[1], m[3], m[4]
    except Exception:  # noqa: BLE001 - old PyAV or malformed side data: no matrix
        return None
    return None


def _mirrored(frame) -> bool:
    """Whether the display matrix mirrors the picture (negative determinant): not a rotation."""
    m = _display_matrix(frame)
    return m is not None and m[0] * m[3] - m[1] * m[2] < 0


def _unmirror(img: np.ndarray, frame) -> np.ndarray:
    """Apply a mirroring display matrix as FFmpeg's own player does (its autorotate: hflip where the matrix's
    x scale is negative, vflip where its y scale is; a transposing matrix with a mirror is a transpose)."""
    a, b, c, d = _display_matrix(frame)
    if b == 0 and c == 0:
        if a < 0:
            img = img[:, ::-1]
        if d < 0:
            img = img[::-1]
        return np.ascontiguousarray(img)
    t = np.swapaxes(img, 0, 1)
    return np.ascontiguousarray(t if b > 0 else t[::-1, ::-1])


def _rotation_k(frame) -> int:
    """Number of counter-clockwise quarter turns that make the frame upright (0 for a mirroring matrix with
    no quarter turn: a horizontal flip is not a 180 deg rotation)."""
    if _mirrored(frame):
        a, b, c, d = _display_matrix(frame)
        return 0 if (b == 0 and c == 0) else 1  # 1: the picture's sides swap, as for a quarter turn
    try:
        rot = frame.rotation  # degrees counter-clockwise (FFmpeg display matrix)
    except Exception:  # noqa: BLE001 - old PyAV or no side data
        return 0
    if not rot:
        return 0
    return int(round(float(rot) / 90.0)) % 4


def _frame_time(fr, tb, last_t, dt_nominal, report: DecodeReport) -> float:
    """A frame's presentation time in s; missing or non-increasing stamps are repaired and counted."""
    if fr.pts is not None:
        t = float(fr.pts * tb)
    elif fr.time is not None:
        t = float(fr.time)
        report.pts_missing += 1
    else:
        t = (last_t + dt_nominal) if last_t is not None else 0.0
        report.pts_missing += 1
    if last_t is not None and t <= last_t:
        report.pts_non_increasing += 1
        t = last_t + 1e-6
    return t


def upright_rgb(fr, reformatter=None, *, display_matrix: bool = True) -> np.ndarray:
    """The frame as an RGB array with its rotation metadata applied.

    ``reformatter`` (a PyAV ``VideoReformatter`` kept for a clip's frames) keeps the scaler set up from one
    frame to the next instead of building it again for each frame; the pictures are the same bit for bit
    (tests/webcam/test_video.py), for some 8 % less CPU of the conversion (bench/bench_cpu.py's host).
    ``display_matrix=False``: the caller knows the frame carries none (:class:`_Upright`).
    """
    img = (fr.to_ndarray(format="rgb24") if reformatter is None
           else reformatter.reformat(fr, format="rgb24").to_ndarray())
    if not display_matrix:
        return img
    if _mirrored(fr):
        return _unmirror(img, fr)
    k = _rotation_k(fr)
    return np.ascontiguousarray(np.rot90(img, k)) if k else img


def _reformatter():
    """A PyAV VideoReformatter for one clip's frames, or None where this PyAV has none."""
    try:
        from av.video.reformatter import VideoReformatter
    except ImportError:
        return None
    return VideoReformatter()


def _rotation_tag(frame) -> int | None:
    """The frame's display rotation as PyAV reads it without building its side-data objects, or None."""
    try:
        return int(frame.rotation)
    except Exception:  # noqa: BLE001 - old PyAV
        return None


class _Upright:
    """One clip's frames as upright RGB arrays (:func:`upright_rgb`), with one scaler for the clip.

    A frame's side data is read only where it can hold a display matrix: on the first frame, on every
    frame after one that carried a matrix, and on any frame whose display rotation (which PyAV reads
    without building side-data objects) is not 0. Reading it builds objects that refer to the frame and
    to which the frame refers, so the decoded picture (1.4 MB at 720p) waits for Python's cycle
    collector instead of going back to the decoder at once; measured on a 720p clip (bench/bench_cpu.py's
    host), that cost some 220 fresh memory pages and 0.2-0.3 ms of system CPU a frame. The pictures are
    the same (tests/webcam/test_video.py). Not read so: a matrix that only mirrors appearing in the middle
    of a clip whose first frame carried none.
    """

    def __init__(self):
        self.reformatter = _reformatter()
        self._matrix = True  # until the first frame is seen

    def __call__(self, fr) -> np.ndarray:
        if not self._matrix and _rotation_tag(fr) == 0:
            return upright_rgb(fr, self.reformatter, display_matrix=False)
        self._matrix = _display_matrix(fr) is not None
        return upright_rgb(fr, self.reformatter)


def iter_frames(path, *, report: DecodeReport | None = None, cancel=None,
                max_pixels: int = MAX_PIXELS, source=None) -> Iterator[Frame]:
    """Yield the clip's frames in presentation order with container timestamps.

    Parameters
    ----------
    path : path-like
        The clip.
    report : DecodeReport, optional
        Filled in with decode problems (missing PTS, corrupt packets, early
        end) as decoding goes.
    cancel : object with ``is_set()``, optional
        Checked before each frame; raises :class:`~aspectus.errors.Cancelled`.
    max_pixels : int
        Larger pictures are refused with a :class:`VideoError` (they would
        need gigabytes per second of memory bandwidth and are not webcam clips).
    source : file object, optional
        Read the clip's bytes from this (opened on ``path``; e.g. an
        :class:`aspectus.atomic.HashingReader`, which hashes the clip as it is
        decoded); the caller closes it.

    Notes
    -----
    A frame without a PTS gets the previous frame's time plus the nominal
    frame interval and is counted in ``report.pts_missing``; a PTS that does
    not increase is moved just after the previous one and counted in
    ``report.pts_non_increasing``. A frame coded on its own whose picture is
    the frame before's again (:func:`same_picture`) is yielded with ``repeat`` set and counted in
    ``report.repeated_pictures``. A corrupt packet is skipped and counted; if
    decoding breaks off, the frames before the break are kept and
    ``report.stopped_early`` says why.
    """
    import av

    path = Path(path)
    report = report if report is not None else DecodeReport()
    container = _open(path, source)
    try:
        st = container.streams.video[0]
        # no frame threading: one core decodes 720p at about 400 fps (well ahead of the face mesh), it leaves
        # the other core to the pipeline, and damaged files decode the same way every time
        w, h = int(st.codec_context.width or 0), int(st.codec_context.height or 0)
        if w * h > max_pixels:
            raise VideoError(f"picture size {w}x{h} is larger than aspectus accepts ({max_pixels / 1e6:.0f} Mpx)",
                             path=path, hint="downscale the clip (e.g. to 1280x720) before processing")
        tb = st.time_base or Fraction(1, 90000)
        rate = st.average_rate or st.guessed_rate
        dt_nominal = 1.0 / float(rate) if rate else 1.0 / 30.0
        last_t = None
        index = 0
        before = None  # the picture yielded last, to tell a repeated one

        def frame(fr) -> Frame:
            nonlocal before
            image = upright(fr)
            repeat = (bool(fr.key_frame) or int(fr.pict_type) == 1) and same_picture(image, before)  # 1: intra
            report.repeated_pictures += repeat
            before = image
            return Frame(index=index, pts_s=last_t, image=image, repeat=repeat)

        upright = _Upright()
        other_end_s = None  # where the data of the other streams (sound) ends: tells a cut file from a long sound track
        demux = container.demux()  # every stream: the demuxer reads their packets anyway
        while True:
            if cancel is not None and cancel.is_set():
                raise Cancelled(f"cancelled while decoding {path.name}")
            try:
                packet = next(demux)
            except StopIteration:
                break
            except av.error.EOFError:
                break
            except av.error.FFmpegError as exc:
                report.stopped_early = f"demuxing stopped after frame {index}: {_ffmpeg_reason(exc)}"
                break
            if packet.stream.index != st.index:
                if packet.pts is not None and packet.time_base is not None:
                    end = float((packet.pts + (packet.duration or 0)) * packet.time_base)
                    other_end_s = end if other_end_s is None else max(other_end_s, end)
                continue
            try:
                frames = packet.decode()
            except av.error.FFmpegError:
                report.corrupt_packets += 1
                continue
            for fr in frames:
                last_t = _frame_time(fr, tb, last_t, dt_nominal, report)
                if fr.width * fr.height > max_pixels:
                    raise VideoError(f"picture size {fr.width}x{fr.height} is too large", path=path,
                                     where=f"frame {index}")
                yield frame(fr)
                index += 1
                report.frames = index
        # flush the decoder
        try:
            for fr in st.codec_context.decode(None):
                last_t = _frame_time(fr, tb, last_t, dt_nominal, report)
                yield frame(fr)
                index += 1
                report.frames = index
        except av.error.FFmpegError:
            pass
        # a copy cut short can end without any decoder error: compare with the length the header states
        if index and last_t is not None and report.stopped_early is None:
            start = float(st.start_time * tb) if st.start_time is not None else 0.0
            if st.duration is not None:
                stated, slack = float(st.duration * tb), 3 * dt_nominal
            else:  # container length: may include a slightly longer sound track
                stated = container.duration / 1e6 if container.duration else float("nan")
                slack = max(3 * dt_nominal, 0.5)
            got = last_t - start + dt_nominal
            if np.isfinite(stated) and stated - got > slack:
                other_got = None if other_end_s is None else other_end_s - start
                if st.duration is None and other_got is not None and stated - other_got <= slack:
                    # the header's length is the sound track's, and its data is all there: not a cut file
                    report.notes.append(f"the video ends at {got:.2f} s; the sound track runs on to "
                                        f"{other_got:.2f} s")
                else:
                    report.stopped_early = (f"frames end at {got:.2f} s but the file's header says {stated:.2f} s "
                                            "(the file is probably truncated)")
    finally:
        container.close()
    if index == 0:
        raise VideoError("no frames could be decoded", path=path,
                         hint="the file may be truncated, empty, or use a codec FFmpeg cannot read")


class FramePrefetcher:
    """Decode frames in a background thread, a few frames ahead.

    Iterating yields :class:`Frame` objects; the bounded queue keeps memory
    flat. Exceptions in the decoder thread re-raise in the consumer.

    ``lower_priority`` lowers the decoder thread's scheduling priority by that
    many nice steps (Linux; elsewhere ignored): decoding runs well ahead of
    the face mesh and can wait, so under load the mesh gets the core first.
    ``cpus`` restricts the decoder thread to those CPUs (Linux; elsewhere
    ignored; see :func:`aspectus._env.background_cpus`).
    """

    _DONE = object()

    def __init__(self, path, *, report: DecodeReport | None = None, cancel=None, depth: int = 6,
                 lower_priority: int = 0, cpus: set[int] | None = None, source=None):
        self._path = path
        self._source = source
        self._lower_priority = int(lower_priority)
        self._cpus = set(cpus) if cpus else None
        self._report = report if report is not None else DecodeReport()
        self._cancel = cancel
        self._q: queue.Queue = queue.Queue(maxsize=depth)
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, name="aspectus-decode", daemon=True)
        self._thread.start()

    @property
    def report(self) -> DecodeReport:
        return self._report

    def _put(self, item) -> bool:
        while not self._stop.is_set():
            try:
                self._q.put(item, timeout=0.1)
                return True
            except queue.Full:
                continue
        return False

    def _run(self):
        if self._lower_priority > 0:
            from aspectus._env import lower_this_thread_priority

            lower_this_thread_priority(self._lower_priority)
        if self._cpus and sys.platform.startswith("linux"):  # pid 0 is this thread on Linux only
            from aspectus._env import pin_to_cpus

            pin_to_cpus(self._cpus)
        try:
            for fr in iter_frames(self._path, report=self._report, cancel=self._cancel, source=self._source):
                if not self._put(fr):
                    return
            self._put(self._DONE)
        except BaseException as exc:  # noqa: BLE001 - handed to the consumer
            self._put(exc)

    def __iter__(self):
        try:
            while True:
                item = self._q.get()
                if item is self._DONE:
                    return
                if isinstance(item, BaseException):
                    raise item
                yield item
        finally:
            self.close()

    def close(self):
        self._stop.set()
        try:
            while True:
                self._q.get_nowait()
        except queue.Empty:
            pass
        self._thread.join(timeout=5)


def read_frame_at(path, t_s: float) -> Frame | None:
    """Return the first frame whose time (from the clip's first frame) is >= ``t_s``.

    Seeks to the nearest key frame before the target and decodes forward, so
    it is fast anywhere in a long clip. Used by the app's clip view.
    """
    import av

    path = Path(path)
    container = _open(path)
    try:
        st = container.streams.video[0]
        tb = st.time_base or Fraction(1, 90000)
        first_pts = st.start_time if st.start_time is not None else 0
        target_pts = int(first_pts + t_s / float(tb))
        try:
            container.seek(max(target_pts, first_pts), stream=st, backward=True, any_frame=False)
        except av.error.FFmpegError:
            container.seek(0)
        first_t = float(first_pts * tb)
        best = None
        for fr in container.decode(st):
            if fr.pts is None:
                continue
            t = float(fr.pts * tb) - first_t
            best = Frame(index=-1, pts_s=t + first_t, image=upright_rgb(fr))
            if t >= t_s - 1e-6:
                break
        return best
    finally:
        container.close()
