"""CPU accounting of one ``aspectus process`` command, step by step, inside the command itself.

Used by ``bench/bench_cpu.py --account``; not a test, and not imported by aspectus. Run as a script it
executes the command (``python bench/_cpu_account.py CLIP OUT [serial|overlapped]``) with exclusive
``time.process_time`` timers wrapped around the named functions (a function's time excludes the
wrapped functions it calls), and prints one JSON line: CPU seconds per label, the process's own CPU
(getrusage: every thread, the face mesh's included) and its children's (the geometry process), and the
frames. With the stages serial, everything runs on the calling thread and the timers add up to the
process's CPU; with the stages overlapped, the timers of different threads overlap in time (process
CPU is process-wide), so only the serial run is split, and the overlapped run's extra CPU is measured
as a whole against it.
"""
from __future__ import annotations

import json
import os
import resource
import sys
import time
from collections import defaultdict
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

_PT = time.process_time


def _self_cpu_s() -> float:
    r = resource.getrusage(resource.RUSAGE_SELF)
    return r.ru_utime + r.ru_stime


def _children_cpu_s() -> float:
    r = resource.getrusage(resource.RUSAGE_CHILDREN)
    return r.ru_utime + r.ru_stime


class Account:
    """Exclusive CPU time per label of nested wrapped calls (one thread)."""

    def __init__(self):
        self.cpu: dict[str, float] = defaultdict(float)
        self.calls: dict[str, int] = defaultdict(int)
        self._stack: list[float] = []

    def wrap(self, label: str, fn):
        acc = self

        def timed(*a, **k):
            c = _PT()
            acc._stack.append(0.0)
            try:
                return fn(*a, **k)
            finally:
                el = _PT() - c
                inner = acc._stack.pop()
                acc.cpu[label] += el - inner
                acc.calls[label] += 1
                if acc._stack:
                    acc._stack[-1] += el

        timed.__wrapped__ = fn
        return timed

    def wrap_iter(self, label: str, make):
        """``make(...)`` returns an iterator; each ``next`` on it is timed under ``label``."""
        acc = self

        def timed_make(*a, **k):
            it = iter(acc.wrap(label + " (start)", make)(*a, **k))
            nxt = acc.wrap(label, it.__next__)

            class _It:
                def __iter__(self):
                    return self

                def __next__(self):
                    return nxt()

                def close(self):
                    if hasattr(it, "close"):
                        it.close()

            return _It()

        return timed_make

    def patch(self, obj, name: str, label: str) -> None:
        setattr(obj, name, self.wrap(label, getattr(obj, name)))


class ThreadCpu:
    """CPU seconds of each thread of this process (Linux: /proc/self/task), sampled until :meth:`stop`.

    Python threads are named by their ``threading`` names; the others (the face mesh's graph threads,
    FFmpeg's decoder threads, OpenBLAS's) by the kernel's name of the thread.
    """

    def __init__(self, every_s: float = 0.05):
        import threading

        self.cpu: dict[int, float] = {}
        self.names: dict[int, str] = {}
        self._stop = threading.Event()
        self._every = every_s
        self._tick = os.sysconf("SC_CLK_TCK")
        self._thread = threading.Thread(target=self._run, name="cpu-account", daemon=True)
        self._thread.start()

    def _sample(self) -> None:
        import threading

        py = {t.native_id: t.name for t in threading.enumerate()}
        try:
            tids = os.listdir("/proc/self/task")
        except OSError:
            return
        for tid in tids:
            try:
                with open(f"/proc/self/task/{tid}/stat") as fh:
                    stat = fh.read()
            except OSError:
                continue
            comm = stat[stat.index("(") + 1: stat.rindex(")")]
            fields = stat[stat.rindex(")") + 2:].split()
            cpu = (int(fields[11]) + int(fields[12])) / self._tick
            t = int(tid)
            self.cpu[t] = max(self.cpu.get(t, 0.0), cpu)
            self.names.setdefault(t, py.get(t) or f"native: {comm.split('/')[0]}")
            if t in py:
                self.names[t] = py[t]

    def _run(self) -> None:
        while not self._stop.wait(self._every):
            self._sample()

    def stop(self) -> dict[str, float]:
        self._stop.set()
        self._thread.join()
        self._sample()
        out: dict[str, float] = {}
        for t, c in self.cpu.items():
            out[self.names[t]] = out.get(self.names[t], 0.0) + c
        return out


def install(acc: Account) -> None:
    """Wrap the named steps of the command (module attributes, looked up where they are called).

    Labels are ``"group: part"``; the groups are those of :data:`GROUPS`.
    """
    from aspectus._env import import_mediapipe

    import_mediapipe()  # first through aspectus, as the command does (without matplotlib)
    from mediapipe.python import solution_base

    import aspectus.atomic as atomic
    import aspectus.cli.process_cmd as process_cmd  # noqa: F401 - imported for its own imports' cost
    import aspectus.events.analysis as analysis
    import aspectus.webcam.eye_anchors as eye_anchors
    import aspectus.webcam.frame_geometry as fg
    import aspectus.webcam.headpose as headpose
    import aspectus.webcam.landmarks as landmarks
    import aspectus.webcam.pipeline as pipeline
    import aspectus.webcam.video as video

    # decoding: each next() of the frame iterator, less the conversion inside it
    pipeline.iter_frames = acc.wrap_iter("decode: demux, libavcodec, per-frame Python", pipeline.iter_frames)
    acc.patch(video, "upright_rgb", "YUV->RGB: swscale conversion to an upright RGB array")
    acc.patch(video, "probe", "decode: probe (open the clip, decode its first frame)")
    acc.patch(atomic.HashingReader, "readinto", "decode: reading the clip + hashing")
    acc.patch(atomic.HashingReader, "hexdigest", "decode: reading the clip + hashing")
    # the face mesh: MediaPipe's graph, its Python wrapper, the landmarks read from the result
    acc.patch(landmarks._GraphCall, "__call__", "mesh: MediaPipe graph (direct call)")
    acc.patch(solution_base.SolutionBase, "process", "mesh: MediaPipe graph + its Python wrapper (public call)")
    acc.patch(solution_base.SolutionBase, "_make_packet", "mesh: input picture copied into MediaPipe")
    acc.patch(solution_base.SolutionBase, "_get_packet_content", "mesh: result read out of MediaPipe")
    acc.patch(landmarks, "landmarks_from_serialized", "mesh: landmark conversion (bytes -> array)")
    acc.patch(landmarks, "landmarks_array", "mesh: landmark conversion (bytes -> array)")
    acc.patch(landmarks, "mesh_input", "mesh: face tracker's own Python")
    acc.patch(landmarks.FaceTracker, "process", "mesh: face tracker's own Python")
    acc.patch(landmarks.FaceTracker, "__init__", "start-up: face mesh graphs")
    # hand-over to the geometry stage: the eye crop cut from the frame
    acc.patch(pipeline, "frame_item", "hand-over: eye crop (box + copy)")
    acc.patch(fg, "eye_crop_box", "hand-over: eye crop (box + copy)")
    # the geometry
    acc.patch(headpose.HeadPoseSolver, "solve", "geometry: PnP (head pose)")
    acc.patch(fg, "frame_measurements", "geometry: landmark measurements")
    acc.patch(eye_anchors.EyeAnchorTracker, "update", "geometry: eye anchors' template matching")
    acc.patch(fg, "translation_given_rotation", "geometry: anchored translation fit")
    acc.patch(fg, "limbus_centres_many", "geometry: limbus fits")
    acc.patch(fg.FrameGeometry, "rows", "geometry: row building")
    acc.patch(fg.FrameGeometry, "_row_before_iris", "geometry: row building")
    acc.patch(fg.FrameGeometry, "_anchored_translation", "geometry: row building")
    acc.patch(pipeline._Grow, "append", "pipeline loop: record buffer append")
    # after the frames
    acc.patch(pipeline, "estimate_gaze", "after the frames: gaze (whole clip)")
    acc.patch(analysis, "run_analysis", "after the frames: events/features")
    acc.patch(pipeline, "summarise", "after the frames: events/features")
    acc.patch(pipeline, "_write_outputs", "after the frames: writing outputs + checksums")
    acc.patch(pipeline._Staged, "commit", "after the frames: writing outputs + checksums")
    acc.patch(pipeline, "software_versions", "after the frames: run record")
    acc.patch(pipeline, "extract_samples", "pipeline loop: per-frame Python + samples table")
    acc.patch(pipeline, "process_clip", "after the frames: run record")


#: the groups of the labels, in the order they are printed
GROUPS = ("start-up", "decode", "YUV->RGB", "mesh", "hand-over", "geometry", "pipeline loop", "after the frames")


def main(argv=None) -> int:
    args = list(sys.argv[1:] if argv is None else argv)
    clip, out = args[0], args[1]
    stages = args[2] if len(args) > 2 else "serial"
    os.environ["ASPECTUS_STAGES"] = stages
    c_import0 = _self_cpu_s()
    from aspectus.cli import main as cli_main

    acc = Account()
    if stages == "serial":
        install(acc)
    c_start = _self_cpu_s()
    acc.cpu["start-up: interpreter + imports"] = c_start
    acc.calls["start-up: interpreter + imports"] = 1
    kids0 = _children_cpu_s()
    threads = ThreadCpu()
    rc = cli_main(["process", clip, "-o", out, "--no-reuse", "--quiet"])
    total = _self_cpu_s()
    per_thread = threads.stop()
    named = sum(acc.cpu.values())
    import pandas as pd

    frames = int(len(pd.read_parquet(Path(out) / Path(clip).stem / "samples.parquet")))
    print(json.dumps({"rc": rc, "stages": stages, "frames": frames, "cpu_s": dict(acc.cpu),
                      "calls": dict(acc.calls), "process_cpu_s": total, "children_cpu_s": _children_cpu_s() - kids0,
                      "unnamed_s": total - named, "threads_cpu_s": per_thread, "interpreter_before_imports_s": c_import0}))
    return rc


if __name__ == "__main__":
    sys.exit(main())
