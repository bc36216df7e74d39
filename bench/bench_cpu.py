"""CPU per frame of each step of processing a clip, and the whole command against the face mesh alone.

Prints figures; not a test. Everything is CPU time (``time.process_time``
around each step, run one after the other on one thread, and
``getrusage(RUSAGE_CHILDREN)`` for the commands run as child processes), so
the breakdown holds on a shared machine where wall-clock rates drift; the
wall-clock throughput ratios are printed beside it with the load average,
and mean little while other processes compete for the cores.

Steps, per frame of one rendered 720p clip:

* decode: demux and decode to the codec's YUV pictures (no conversion);
* yuv->rgb: the conversion to an upright RGB array the face mesh takes;
* mesh: :class:`aspectus.webcam.landmarks.FaceTracker` on that array;
* geometry: head pose, eye anchors, limbus fits (:class:`FrameGeometry`, batches of 16);
* hand-over: cutting the eye crop, pickling a batch to the geometry process and back;
* hashing: SHA-256 of the clip file;
* gaze + events/features: :func:`estimate_gaze` is inside ``extract_samples``; here the
  steps after landmarking (events, features, the summary) on the clip's samples;
* writing: all output files and their checksums;
* start-up: importing aspectus and starting the face mesh (in a fresh process),
  spread over the clip's frames.

Then, as ratios measured in this run: the whole ``python -m aspectus process`` command
(``--no-reuse``) against the face mesh alone, in CPU per frame and in frames per
second of wall time (the mesh alone's rate is its own wall time summed over the
frames of the breakdown pass). With ``--serial`` the command is also run with the
stages in one thread (as batch workers run them).

With ``--account`` the command is also run with CPU timers inside it (``bench/_cpu_account.py``): the serial
run's CPU split by named part (start-up, decoding, the conversion, the mesh's graph and its Python, the eye
crops, each part of the geometry, the pipeline loop, the steps after the frames), and the overlapped run's
CPU by thread and the geometry process.

Run: ``python bench/bench_cpu.py [--seconds 60] [--seconds 300] [--rounds 2] [--serial] [--account]``
"""
from __future__ import annotations

import argparse
import os
import pickle
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from bench_memory import loop_clip  # noqa: E402
from bench_pipeline import machine, render_test_clip  # noqa: E402

REPO = Path(__file__).resolve().parents[1]


def _children_cpu_s() -> float:
    r = resource.getrusage(resource.RUSAGE_CHILDREN)
    return r.ru_utime + r.ru_stime


def _load() -> float:
    try:
        return os.getloadavg()[0]
    except OSError:
        return float("nan")


def startup_cpu_s() -> float:
    """CPU seconds of a fresh interpreter importing aspectus's pipeline and starting the face mesh."""
    code = ("from aspectus.webcam.pipeline import ProcessParams, process_clip\n"
            "from aspectus.webcam.landmarks import FaceTracker\n"
            "p = ProcessParams()\n"
            "FaceTracker(max_faces=p.max_faces, face=p.face).close()\n")
    c0 = _children_cpu_s()
    subprocess.run([sys.executable, "-c", code], cwd=REPO, check=True, stderr=subprocess.DEVNULL)
    return _children_cpu_s() - c0


def short_clip(clip: Path, out: Path, frames: int = 45) -> Path:
    """The first ``frames`` packets of ``clip`` (copied, not re-encoded), for the command's fixed cost."""
    import av

    with av.open(str(clip)) as src, av.open(str(out), "w") as dst:
        ist = src.streams.video[0]
        ost = dst.add_stream_from_template(ist)
        n = 0
        for p in src.demux(ist):
            if p.dts is None:
                continue
            p.stream = ost
            dst.mux(p)
            n += 1
            if n >= frames:
                break
    return out


def breakdown(clip: Path) -> dict:
    """CPU seconds of each step over the whole clip (one thread, steps one after the other), and frames."""
    import av
    import numpy as np

    from aspectus.atomic import sha256_file
    from aspectus.events.analysis import run_analysis
    from aspectus.webcam.frame_geometry import _BATCH, FrameGeometry, frame_item
    from aspectus.webcam.landmarks import FaceTracker
    from aspectus.webcam.pipeline import ProcessParams, _write_outputs, extract_samples, summarise
    from aspectus.webcam.video import _fix_decoder_threads, _Upright

    cpu = dict.fromkeys(("decode", "yuv->rgb", "mesh", "geometry", "hand-over", "hashing", "events/features",
                         "writing"), 0.0)
    mesh_wall = 0.0
    pt = time.process_time
    p = ProcessParams()
    c = pt()
    sha256_file(clip)
    cpu["hashing"] = pt() - c
    geo = FrameGeometry(fov_deg=p.fov_deg, refine_iris=p.gaze.refine_iris, eye_anchors=p.gaze.eye_anchors)
    n = 0
    batch: list = []
    with FaceTracker(max_faces=p.max_faces, face=p.face) as tracker, av.open(str(clip)) as container:
        st = container.streams.video[0]
        _fix_decoder_threads(st)
        frames = container.decode(st)
        upright = _Upright()  # as the decoder does: one scaler for the clip's frames
        while True:
            c = pt()
            fr = next(frames, None)
            cpu["decode"] += pt() - c
            if fr is None:
                break
            c = pt()
            img = upright(fr)
            cpu["yuv->rgb"] += pt() - c
            c, w0 = pt(), time.perf_counter()
            obs = tracker.process(img)
            cpu["mesh"] += pt() - c
            mesh_wall += time.perf_counter() - w0
            c = pt()
            batch.append(frame_item(float(fr.time or 0.0), img, obs, refine_iris=p.gaze.refine_iris,
                                    faces_in_view=tracker.faces_in_view))
            if len(batch) == _BATCH:
                batch = pickle.loads(pickle.dumps(batch, protocol=pickle.HIGHEST_PROTOCOL))
            cpu["hand-over"] += pt() - c
            if len(batch) == _BATCH:
                c = pt()
                rows = geo.rows(batch)
                cpu["geometry"] += pt() - c
                c = pt()
                pickle.loads(pickle.dumps(("rows", rows), protocol=pickle.HIGHEST_PROTOCOL))
                cpu["hand-over"] += pt() - c
                batch = []
            n += 1
    if batch:
        c = pt()
        geo.rows(batch)
        cpu["geometry"] += pt() - c
    del np
    # the steps after landmarking, on the clip's own samples (extracted once more, not timed)
    samples, meta = extract_samples(clip, params=p, geometry_mode="thread")
    c = pt()
    analysis = run_analysis(samples, p.analysis, segments=None, source=str(clip))
    summarise(samples, analysis, meta)
    cpu["events/features"] = pt() - c
    with tempfile.TemporaryDirectory() as d:
        c = pt()
        _write_outputs(Path(d), samples, analysis, {"input_sha256": "0" * 64, "extraction": meta})
        cpu["writing"] = pt() - c
    return {"cpu": cpu, "frames": n, "mesh_wall_s": mesh_wall}


def command(clip: Path, out: Path, *, serial: bool = False) -> tuple[float, float]:
    """Wall and CPU seconds (the command and its geometry process) of ``aspectus process`` on the clip."""
    env = dict(os.environ)
    if serial:
        env["ASPECTUS_STAGES"] = "serial"
    c0, t0 = _children_cpu_s(), time.perf_counter()
    subprocess.run([sys.executable, "-m", "aspectus", "process", str(clip), "-o", str(out), "--no-reuse", "--quiet"],
                   cwd=REPO, env=env, check=True, stdout=subprocess.DEVNULL)
    return time.perf_counter() - t0, _children_cpu_s() - c0


#: what runs in each thread of the command with its stages overlapped (names as bench/_cpu_account.py reports them)
_THREADS = {"MainThread": "main thread: face mesh calls, eye crops, pipeline loop, after the frames",
            "native: mediapipe": "MediaPipe's graph threads (the face mesh itself)",
            "aspectus-decode": "decoder thread: demux, per-frame Python, YUV->RGB conversion",
            "native: python": "FFmpeg's decoder threads (libavcodec), OpenBLAS's",
            "aspectus-geometry-send": "hand-over: pickling eye crops and landmarks to the geometry process",
            "aspectus-geometry-receive": "hand-over: rows back from the geometry process"}


def account(clip: Path, out: Path, stages: str) -> dict:
    """The command run with CPU timers inside it (bench/_cpu_account.py), in a child process."""
    import json

    p = subprocess.run([sys.executable, str(REPO / "bench" / "_cpu_account.py"), str(clip), str(out), stages],
                       cwd=REPO, check=True, capture_output=True, text=True, env=dict(os.environ, PYTHONPATH=str(REPO)))
    return json.loads(p.stdout.strip().splitlines()[-1])


def print_account(serial: dict, overlapped: dict, mesh_ms: float) -> None:
    """The serial command's CPU by named part, and the overlapped command's CPU by thread."""
    from _cpu_account import GROUPS

    n = serial["frames"]
    ms = {k: 1e3 * v / n for k, v in serial["cpu_s"].items()}
    total = 1e3 * serial["process_cpu_s"] / n
    print("  the command itself, stages serial, CPU by named part (timers inside it: bench/_cpu_account.py)")
    print(f"  {'part':72s} CPU ms/frame")
    for g in GROUPS:
        parts = {k.split(": ", 1)[1]: v for k, v in ms.items() if k.split(": ", 1)[0] == g and v >= 0.0005}
        print(f"  {g:72s} {sum(parts.values()):8.3f}")
        for k, v in sorted(parts.items(), key=lambda kv: -kv[1]):
            print(f"      {k:68s} {v:8.3f}")
    print(f"  {'not named (between the timers)':72s} {1e3 * serial['unnamed_s'] / n:8.3f}")
    print(f"  {'total: the process CPU (getrusage)':72s} {total:8.3f}   = {total / mesh_ms:.2f}x the mesh alone "
          f"(timers included)")
    n = overlapped["frames"]
    print("  the command itself, stages overlapped, CPU by thread (/proc/self/task)")
    threads = dict(overlapped["threads_cpu_s"])
    for name, what in _THREADS.items():
        print(f"      {what:68s} {1e3 * threads.pop(name, 0.0) / n:8.3f}")
    threads.pop("cpu-account", None)
    print(f"      {'other threads':68s} {1e3 * sum(threads.values()) / n:8.3f}")
    kids = 1e3 * overlapped["children_cpu_s"] / n
    print(f"      {'geometry process (start-up, unpickling, geometry)':68s} {kids:8.3f}")
    o_total = 1e3 * overlapped["process_cpu_s"] / n + kids
    print(f"  {'total (process + geometry process)':72s} {o_total:8.3f}   = {o_total / mesh_ms:.2f}x the mesh alone; "
          f"overlapped - serial = {o_total - total:+.3f}")


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seconds", type=float, action="append", default=None,
                    help="clip length in seconds (repeatable; default 60)")
    ap.add_argument("--rounds", type=int, default=1, help="rounds per clip (default 1)")
    ap.add_argument("--serial", action="store_true", help="also run the command with its stages in one thread")
    ap.add_argument("--account", action="store_true",
                    help="also run the command with CPU timers inside it: the serial run split by named part, "
                         "the overlapped run by thread (bench/_cpu_account.py)")
    args = ap.parse_args(argv)
    print(f"machine: {machine()}")
    with tempfile.TemporaryDirectory() as d:
        d = Path(d)
        seg = render_test_clip(d / "render" / "p01_s01_reading.mp4", duration_s=12.0)
        start = startup_cpu_s()
        print(f"start-up (import + face mesh, fresh process): {start * 1e3:.0f} ms CPU")
        short = short_clip(seg, d / "clip_45_frames.mp4")
        fixed = [command(short, d / "out_short", serial=True)[1] for _ in range(3)]
        print(f"the whole command (stages in one thread) on a 45-frame clip: {min(fixed):.2f} s CPU (least of 3): "
              "start-up, imports, one clip's outputs, and 45 frames")
        for seconds in args.seconds or [60.0]:
            clip = loop_clip(seg, d / f"clip_{int(seconds)}s.mp4", minutes=seconds / 60.0)
            for r in range(args.rounds):
                load0 = _load()
                b = breakdown(clip)
                n = b["frames"]
                runs = [("command", *command(clip, d / "out", serial=False))]
                if args.serial:
                    runs.append(("command, stages in one thread", *command(clip, d / "out_serial", serial=True)))
                cpu = b["cpu"] | {"start-up": start}
                total = sum(cpu.values())
                mesh = cpu["mesh"] / n
                print(f"\n{seconds:.0f}-s 720p clip, {n} frames, round {r + 1} (load average {load0:.1f} -> {_load():.1f})")
                print("  step              CPU ms/frame   share")
                for k, v in cpu.items():
                    print(f"  {k:16s} {1e3 * v / n:10.3f}   {v / total:6.1%}")
                print(f"  {'sum of steps':16s} {1e3 * total / n:10.3f}   = {total / cpu['mesh']:.2f}x the mesh alone")
                mesh_fps = n / b["mesh_wall_s"]
                for name, wall, ccpu in runs:
                    print(f"  {name}: {n / wall:.1f} frames/s, {1e3 * ccpu / n:.3f} CPU ms/frame; "
                          f"throughput / mesh alone ({mesh_fps:.1f} frames/s) = {n / wall / mesh_fps:.2f} "
                          f"(wall clock: loaded machine, see load average); CPU per frame / mesh alone = "
                          f"{ccpu / n / mesh:.2f}")
                if args.account:
                    print_account(account(clip, d / "out_account", "serial"),
                                  account(clip, d / "out_account", "overlapped"), 1e3 * mesh)
                    print(f"  (load average now {_load():.1f})")
    return 0


if __name__ == "__main__":
    sys.exit(main())
