"""Face and iris landmarks: MediaPipe face mesh (478 points) on the CPU.

MediaPipe 0.10.21 is pinned because it is the last release whose wheel ships
the face-mesh and iris model files; nothing is downloaded at run time. The
face mesh runs in tracking (video) mode with iris refinement.

Landmark indices used by aspectus (subject's own left/right):

* iris centre: right eye 468, left eye 473; iris outline right 469-472,
  left 474-477 (469/474 and 471/476 are the horizontal ends);
* eye corners: right eye outer 33, inner 133; left eye outer 263, inner 362;
* eyelid points for the eye aspect ratio (Soukupova & Cech 2016):
  right p1..p6 = 33, 160, 158, 133, 153, 144; left 362, 385, 387, 263, 373, 380.

Several faces: while one face is in view the mesh looks for one face only
(fast); a face detector checks the picture every few frames, and once it sees
more than one face the mesh reports up to ``max_faces`` faces per frame and
one consistent face is followed - on the first such frame the face nearest to
the one followed so far (or, at the start, the largest, or the N-th from the
picture's left edge when the user picks one), then the face nearest to where
the followed face was, if it lies within 1.5 face sizes of that place. A face
farther away is somebody else: while only such faces are in view the
followed face counts as not found (those frames are invalid, and counted),
so a student who ducks out of view is not replaced by a classmate behind
them. Only after the followed face has been missing for ``reacquire_after``
frames is a face taken up again (counted as a re-acquisition: the face
followed may have changed): among several faces by the starting rule, and a
lone face only if it is not where another face was last seen. With one face ever seen, any face found is the followed one (no
recognition of persons: somebody who takes the student's seat in one-face
mode is not told apart).
"""
from __future__ import annotations

import threading
from dataclasses import dataclass

import numpy as np

from aspectus._env import import_mediapipe, import_mediapipe_part, native_stderr_silenced, quiet_native_logs
from aspectus.errors import ParameterError

from aspectus.face_mesh import (FACE_OVAL, LEFT_EAR_POINTS, LEFT_EYE_CORNERS, LEFT_EYE_OUTLINE,  # noqa: F401 (re-exported)
                                LEFT_IRIS_CENTRE, LEFT_IRIS_RING, N_LANDMARKS, RIGHT_EAR_POINTS, RIGHT_EYE_CORNERS,
                                RIGHT_EYE_OUTLINE, RIGHT_IRIS_CENTRE, RIGHT_IRIS_RING)


@dataclass
class FaceObservation:
    """The followed face in one frame.

    Attributes
    ----------
    points_px : ndarray, shape (478, 3)
        x, y in pixels of the (upright) picture; z in the same pixel scale,
        relative depth as the face mesh reports it (smaller = nearer).
    face_count : int
        Faces the mesh found in the frame.
    """

    points_px: np.ndarray
    face_count: int

    @property
    def bbox_px(self) -> tuple[float, float, float, float]:
        p = self.points_px
        return float(p[:, 0].min()), float(p[:, 1].min()), float(p[:, 0].max()), float(p[:, 1].max())


def parse_face_choice(face: str) -> tuple[str, int]:
    """``"largest"`` or ``"index:N"`` (N-th face from the picture's left, 0-based)."""
    face = (face or "largest").strip().lower()
    if face == "largest":
        return "largest", 0
    if face.startswith("index:"):
        try:
            n = int(face.split(":", 1)[1])
        except ValueError:
            n = -1
        if n >= 0:
            return "index", n
    raise ParameterError(f"face choice {face!r} not understood", hint='use "largest" or "index:N" (N from 0, left to right)')


class FaceChoiceError(ParameterError):
    """``--face index:N`` names a face that is not in the picture."""


_MP_LOCK = threading.Lock()

#: bytes of one serialised landmark: field 1 (x), 2 (y), 3 (z), each a 4-byte float with its tag,
#: inside a length-prefixed sub-message - ``0a 0f 0d xxxx 15 yyyy 1d zzzz``
_LM_BYTES = 17
_LM_HEAD = np.array([0x0A, 0x0F, 0x0D], dtype=np.uint8)
_LM_XYZ_COLS = np.r_[3:7, 8:12, 13:17]


def landmarks_array(face_landmarks) -> np.ndarray:
    """``(n, 3)`` float64 x, y, z (0-1 normalised) of one face-mesh result.

    Reads the result's serialised bytes in one go instead of 478 x 3 Python
    attribute reads (about 0.4 ms a frame); falls back to the attribute reads
    when the bytes are not the plain x/y/z layout (e.g. a landmark carrying
    visibility). Both give identical numbers (a test compares them).
    """
    a = _plain_landmarks(face_landmarks.SerializeToString())
    return a if a is not None else landmarks_array_slow(face_landmarks)


def landmarks_from_serialized(raw: bytes) -> np.ndarray:
    """:func:`landmarks_array` of a face-mesh result given as its serialised bytes (as MediaPipe's graph
    hands them out: :class:`_GraphCall`)."""
    a = _plain_landmarks(raw)
    if a is not None:
        return a
    msg = import_mediapipe_part("mediapipe.framework.formats.landmark_pb2").NormalizedLandmarkList()
    msg.ParseFromString(raw)
    return landmarks_array_slow(msg)


def _plain_landmarks(raw: bytes) -> np.ndarray | None:
    """The landmarks of serialised bytes in the plain x/y/z layout, or None for any other layout."""
    raw = np.frombuffer(raw, dtype=np.uint8)
    if raw.size and raw.size % _LM_BYTES == 0:
        rows = raw.reshape(-1, _LM_BYTES)
        if (rows[:, :3] == _LM_HEAD).all() and (rows[:, 7] == 0x15).all() and (rows[:, 12] == 0x1D).all():
            return np.ascontiguousarray(rows[:, _LM_XYZ_COLS]).view("<f4").reshape(-1, 3).astype(np.float64)
    return None


def mesh_input(image_rgb: np.ndarray) -> np.ndarray:
    """The picture as MediaPipe takes it without copying it: C-contiguous and read-only.

    MediaPipe copies a writeable array into a picture of its own (0.15-0.25 ms a frame at 720p, measured
    with bench/bench_cpu.py) and refers to a read-only one in place. This is a read-only view of the
    caller's array (a copy only when it is not contiguous); the caller's array stays writeable. The graph
    has finished with the picture when ``process`` returns, so the caller may reuse it afterwards.
    """
    a = np.ascontiguousarray(image_rgb)
    if a.flags.writeable:
        a = a.view()
        a.flags.writeable = False
    return a


#: call MediaPipe's graphs as :class:`_GraphCall` does (False: through MediaPipe's public ``process``,
#: which gives the same landmarks; tests/webcam/test_landmarks.py compares the two)
DIRECT_GRAPH_CALLS = True


class _GraphCall:
    """Run a MediaPipe solution's graph on one picture and take one output stream's serialised protos.

    This is what the solution's public ``process`` does for a graph with one picture input - the picture
    as a packet at the next simulated 30-fps timestamp, then run until idle - without what it adds each
    frame: a named-tuple class built anew (``collections.namedtuple``, which compiles code), the results
    parsed into Python messages which :func:`landmarks_array` would serialise again. It uses the
    solution's own graph, timestamps and output buffer, so calls through either way can be mixed. It
    relies on attributes of mediapipe's ``SolutionBase`` (0.10.x); :meth:`make` returns None where they
    are not as expected, and the caller then uses ``process``.
    """

    def __init__(self, solution, input_name: str, make_packet, image_format, output: str, serialized):
        self._s = solution
        self._in = input_name
        self._make_packet = make_packet
        self._format = image_format
        self._out = output
        self._serialized = serialized

    @classmethod
    def make(cls, solution, output: str):
        if not DIRECT_GRAPH_CALLS:
            return None
        try:
            packet_creator = import_mediapipe_part("mediapipe.python.packet_creator")
            _packet_getter = import_mediapipe_part("mediapipe.python._framework_bindings._packet_getter")
            image_frame = import_mediapipe_part("mediapipe.python._framework_bindings.image_frame")
            PacketDataType = import_mediapipe_part("mediapipe.python.solution_base").PacketDataType

            inputs = dict(solution._input_stream_type_info)
            outputs = dict(solution._output_stream_type_info)
            (name, kind), = inputs.items()
            make_packet = {PacketDataType.IMAGE: packet_creator.create_image,
                           PacketDataType.IMAGE_FRAME: packet_creator.create_image_frame}[kind]
            if outputs.get(output) != PacketDataType.PROTO_LIST:
                return None
            ok = (isinstance(solution._simulated_timestamp, int) and hasattr(solution._graph, "wait_until_idle")
                  and isinstance(solution._graph_outputs, dict))
            serialized = _packet_getter._get_serialized_proto_list
            image_format = image_frame.ImageFormat.SRGB
        except (AttributeError, ImportError, KeyError, TypeError, ValueError):
            return None
        return cls(solution, name, make_packet, image_format, output, serialized) if ok else None

    def __call__(self, image: np.ndarray) -> list[bytes]:
        s = self._s
        if image.ndim != 3 or image.shape[2] != 3:
            raise ValueError("Input image must contain three channel rgb data.")
        s._graph_outputs.clear()
        s._simulated_timestamp += 33333  # as SolutionBase.process: a 30-fps clock
        s._graph.add_packet_to_input_stream(
            stream=self._in, packet=self._make_packet(image, image_format=self._format).at(s._simulated_timestamp))
        s._graph.wait_until_idle()
        p = s._graph_outputs.get(self._out)
        if p is None or p.is_empty():
            return []
        return list(self._serialized(p))


def landmarks_array_slow(face_landmarks) -> np.ndarray:
    """The same as :func:`landmarks_array`, one attribute at a time."""
    return np.array([(p.x, p.y, p.z) for p in face_landmarks.landmark], dtype=np.float64).reshape(-1, 3)


def _warm_up(solution) -> None:
    """Run a new graph once on a blank picture, inside the caller's silenced stderr.

    The graphs' models print their start-up lines (TF-Lite's delegate note,
    absl's warnings) from the graph's own threads while the first picture is
    processed; run here, they land in the silenced stretch instead of on the
    user's terminal a moment later (measured: with another Python thread busy,
    they used to slip out between building the graph and its first frame). A
    blank picture holds no face, so the tracking state is as after a frame
    without a face.
    """
    solution.process(np.zeros((64, 64, 3), dtype=np.uint8))


class FaceTracker:
    """Follows one face through a clip with the MediaPipe face mesh.

    While only one face is in view the mesh is asked for one face, which is
    markedly faster (measured here: about 1.5x at 720p) than asking for two:
    with two, the mesh runs its face detector on every frame looking for the
    second face. A separate face detector (the same short-range model the
    mesh uses) checks the picture on the first frame, every
    ``check_every`` frames and whenever the face is found again after a
    loss; as soon as it sees several faces and ``max_faces`` allows it, the
    tracker moves to a mesh that reports up to ``max_faces`` faces and
    follows one of them as described in the module notes. ``face_count`` in
    one-face mode is the detector's count from its latest check.

    Parameters
    ----------
    max_faces : int
        Most faces reported per frame (>= 1). With 1 the mesh itself
        decides which face it follows.
    face : str
        ``"largest"`` or ``"index:N"``.
    min_detection_confidence, min_tracking_confidence : float
        Passed to the face mesh and the detector (0-1).
    check_every : int
        Frames between checks for further faces while one is followed.
    reacquire_after : int
        With several faces seen: frames the followed face must have been
        missing before a face far from where it was is taken up again.

    After each frame, ``faces_in_view`` is the number of faces the mesh
    found, the followed one or not; ``other_faces_only_frames`` counts the
    frames in which faces were found but none was the followed one, and
    ``reacquired_frames`` lists the frames where a face was taken up again.
    """

    #: a face farther than this many face sizes from where the followed face was is another face
    SAME_FACE_REACH = 1.5

    def __init__(self, *, max_faces: int = 2, face: str = "largest",
                 min_detection_confidence: float = 0.5, min_tracking_confidence: float = 0.5,
                 check_every: int = 15, reacquire_after: int = 90):
        if not (1 <= int(max_faces) <= 10):
            raise ParameterError(f"max_faces must be 1-10, got {max_faces}")
        if int(check_every) < 1:
            raise ParameterError(f"check_every must be >= 1 frame, got {check_every}")
        if int(reacquire_after) < 1:
            raise ParameterError(f"reacquire_after must be >= 1 frame, got {reacquire_after}")
        self.reacquire_after = int(reacquire_after)
        self.faces_in_view = 0
        self.other_faces_only_frames = 0
        self.reacquired_frames: list[int] = []
        self._missing = 0  # frames since the followed face was last seen
        self._others: list[tuple[np.ndarray, float]] = []  # where other faces were last seen (centre, size)
        self.mode, self.index = parse_face_choice(face)
        self.max_faces = int(max_faces)
        self.check_every = int(check_every)
        self._conf = (float(min_detection_confidence), float(min_tracking_confidence))
        quiet_native_logs()
        self._mesh = self._new_mesh(1)
        self._detector = None
        if self.max_faces > 1:
            with _MP_LOCK, native_stderr_silenced():
                face_detection = import_mediapipe().solutions.face_detection

                self._detector = face_detection.FaceDetection(min_detection_confidence=self._conf[0],
                                                              model_selection=0)
                _warm_up(self._detector)
        self._mesh_call = _GraphCall.make(self._mesh, "multi_face_landmarks")
        self._detector_call = None if self._detector is None else _GraphCall.make(self._detector, "detections")
        self.multi_face_from_frame: int | None = None
        self._frame = 0
        self._since_check = self.check_every  # check on the first frame
        self._seen_count = 0
        self._was_found = False
        self._quiet_frames = 8
        self._last_centre: np.ndarray | None = None
        self._last_size: float | None = None

    def _new_mesh(self, faces: int):
        with _MP_LOCK, native_stderr_silenced():
            face_mesh = import_mediapipe().solutions.face_mesh

            mesh = face_mesh.FaceMesh(static_image_mode=False, max_num_faces=faces, refine_landmarks=True,
                                      min_detection_confidence=self._conf[0],
                                      min_tracking_confidence=self._conf[1])
            _warm_up(mesh)
            return mesh

    @property
    def multi_face_mode(self) -> bool:
        return self.multi_face_from_frame is not None

    def close(self):
        for name in ("_mesh", "_detector"):
            obj = getattr(self, name, None)
            if obj is not None:
                obj.close()
                setattr(self, name, None)

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    def _run(self, call, image_rgb):
        if self._quiet_frames > 0:  # the graphs' models print start-up lines on their first frames
            with native_stderr_silenced():
                return call(image_rgb)
        return call(image_rgb)

    def _count_faces(self, image_rgb) -> int:
        if self._detector_call is not None:
            return len(self._run(self._detector_call, image_rgb))
        res = self._run(self._detector.process, image_rgb)
        return len(res.detections or [])

    def _faces(self, image_rgb) -> list[np.ndarray]:
        """The mesh's faces in the picture, each ``(478, 3)`` normalised as :func:`landmarks_array` gives."""
        if self._mesh_call is not None:
            return [landmarks_from_serialized(raw) for raw in self._run(self._mesh_call, image_rgb)]
        res = self._run(self._mesh.process, image_rgb)
        return [landmarks_array(f) for f in res.multi_face_landmarks or []]

    def process(self, image_rgb: np.ndarray) -> FaceObservation | None:
        """Landmarks of the followed face in one upright RGB frame, or None."""
        h, w = image_rgb.shape[:2]
        image_rgb = mesh_input(image_rgb)
        check = (self._detector is not None and not self.multi_face_mode
                 and (self._since_check >= self.check_every or not self._was_found))
        if check:
            self._since_check = 0
            self._seen_count = self._count_faces(image_rgb)
            if self._seen_count > 1:
                self._mesh.close()
                self._mesh = self._new_mesh(self.max_faces)
                self._mesh_call = _GraphCall.make(self._mesh, "multi_face_landmarks")
                self.multi_face_from_frame = self._frame
                self._quiet_frames = max(self._quiet_frames, 2)
        self._since_check += 1
        self._frame += 1
        faces = self._faces(image_rgb)
        if self._quiet_frames > 0:
            self._quiet_frames -= 1
        self._was_found = bool(faces)
        if not faces:
            self.faces_in_view = 0
            self._missing += 1
            return None
        scale = np.array([w, h, w], dtype=np.float64)
        arrays = [f * scale for f in faces]
        count = len(arrays) if self.multi_face_mode or self._detector is None else max(1, self._seen_count)
        self.faces_in_view = count
        k = self._choose(arrays)
        if k is None:  # only other faces in view
            self.other_faces_only_frames += 1
            self._missing += 1
            return None
        self._missing = 0
        return FaceObservation(points_px=arrays[k], face_count=count)

    def _choose(self, arrays: list[np.ndarray]) -> int | None:
        """Index of the followed face among ``arrays``, or None when it is not among them."""
        centres = np.array([a[:, :2].mean(axis=0) for a in arrays])
        sizes = np.array([np.ptp(a[:, 0]) * np.ptp(a[:, 1]) for a in arrays]) ** 0.5
        if self._last_centre is None:
            k = self._initial(centres, sizes)
        elif not self.multi_face_mode:  # one face ever seen: the mesh's one face is it
            k = 0
        else:
            d = np.linalg.norm(centres - self._last_centre, axis=1)
            k = int(np.argmin(d))
            if d[k] > self.SAME_FACE_REACH * (self._last_size or sizes[k]):  # the followed face is not here
                k = self._reacquire(centres, sizes)
                if k is None:
                    self._remember_others(centres, sizes, None)
                    return None
                self.reacquired_frames.append(self._frame - 1)
        self._last_centre, self._last_size = centres[k], float(sizes[k])
        if self.multi_face_mode:
            self._remember_others(centres, sizes, k)
        return k

    def _reacquire(self, centres, sizes) -> int | None:
        """After the followed face has been missing for ``reacquire_after`` frames: the face to take up, or None.

        Among several faces the starting rule picks. A lone face is taken only if it is not where another
        face was seen while the followed one was around or missing (that one is somebody else); a student
        who comes back alone at a new place is so taken up again.
        """
        if self._missing < self.reacquire_after:
            return None
        if len(centres) >= 2:
            return self._initial(centres, sizes)
        for c, size in self._others:
            if np.linalg.norm(centres[0] - c) <= self.SAME_FACE_REACH * size:
                return None
        return 0

    def _remember_others(self, centres, sizes, followed: int | None) -> None:
        """Keep where the faces other than the followed one were last seen (at most ``max_faces`` of them)."""
        others = [(centres[i].copy(), float(sizes[i])) for i in range(len(centres)) if i != followed]
        kept = [o for o in self._others
                if all(np.linalg.norm(o[0] - c) > self.SAME_FACE_REACH * s for c, s in others)]
        self._others = (others + kept)[: max(1, self.max_faces)]

    def _initial(self, centres, sizes) -> int:
        if self.mode == "index":
            order = np.argsort(centres[:, 0])
            if self.index >= len(order):  # never follow another face than the one asked for
                raise FaceChoiceError(
                    f"--face index:{self.index} asks for face {self.index + 1} from the left, but the first frame "
                    f"with a face (frame {self._frame - 1}) shows {len(order)} face(s)",
                    hint=f"use index:0 to index:{len(order) - 1}, or \"largest\"")
            return int(order[self.index])
        return int(np.argmax(sizes))


def mediapipe_version() -> str:
    try:
        from importlib.metadata import version

        return version("mediapipe")
    except Exception:  # noqa: BLE001
        return "unknown"
