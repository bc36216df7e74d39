"""Batch throughput with 2 local workers against 1 (prints figures; not a test).

Renders a 12-second segment of the reading-pilot scenario, repeats its
encoded packets to a ``--seconds`` long clip (no re-encoding) and copies
that to ``--clips`` files (each is processed in full - the batch does not
notice equal contents), then runs :func:`aspectus.studies.batch.run_batch` on the set with one and
with two worker processes into fresh output folders, and prints the wall
times and their ratio. Worker start-up (spawning, loading the face mesh) is
included, as a user would see it (a few seconds per worker, which is why the
clips are a minute long by default; study clips are 40 minutes). The target on a 2-core machine is at
least 1.8x. Also printed: the CPU the worker processes used per second of
wall time (one worker of the pipeline keeps more than one core busy: decode
thread, face-mesh threads) and the load average before each run, since
other processes on the machine change the ratio.

Run: ``python bench/bench_batch.py [--clips 4] [--seconds 60] [--workers 1 2]``
"""
from __future__ import annotations

import argparse
import os
import resource
import shutil
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from bench_memory import loop_clip  # noqa: E402
from bench_pipeline import machine, render_test_clip  # noqa: E402


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--clips", type=int, default=4, help="clips in the set (default 4)")
    ap.add_argument("--seconds", type=float, default=60.0, help="length of each clip in seconds (default 60)")
    ap.add_argument("--size", default="640x360", help="picture size WxH (default 640x360)")
    ap.add_argument("--workers", type=int, nargs="+", default=[1, 2], help="worker counts to compare (default 1 2)")
    args = ap.parse_args(argv)
    from aspectus.studies.batch import run_batch

    w, h = (int(v) for v in args.size.lower().split("x"))
    print(f"machine: {machine()}")
    times: dict[int, float] = {}
    cores_used: dict[int, float] = {}
    with tempfile.TemporaryDirectory() as d:
        d = Path(d)
        seg = render_test_clip(d / "render" / "reading.mp4", duration_s=min(12.0, args.seconds), size_px=(w, h))
        one = loop_clip(seg, d / "render" / "long.mp4", minutes=args.seconds / 60.0)
        src = d / "clips"
        src.mkdir()
        for i in range(args.clips):
            shutil.copy(one, src / f"p{i + 1:02d}_s01.mp4")
        for n in args.workers:
            c0 = resource.getrusage(resource.RUSAGE_CHILDREN)
            load0 = os.getloadavg()[0]
            t0 = time.perf_counter()
            res = run_batch(src, d / f"out_{n}", workers=n)
            times[n] = time.perf_counter() - t0
            c1 = resource.getrusage(resource.RUSAGE_CHILDREN)
            cpu = (c1.ru_utime + c1.ru_stime) - (c0.ru_utime + c0.ru_stime)
            assert res.counts["done"] == args.clips, res.status
            frames = int(res.status["frames"].sum())
            cores_used[n] = cpu / times[n]
            print(f"{n} worker(s): {times[n]:7.1f} s for {args.clips} clips ({frames} frames, {w}x{h}), "
                  f"{frames / times[n]:6.1f} frames/s; workers used {cpu / times[n]:.2f} cores on average "
                  f"(load average before: {load0:.1f})", flush=True)
    base = min(args.workers)
    for n in args.workers:
        if n != base:
            print(f"speed-up {n} vs {base} worker(s): {times[base] / times[n]:.2f}x (target >= 1.8x for 2 vs 1)")
    cores = len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else os.cpu_count()
    if base in cores_used and cores_used[base] > 0:
        # with the same CPU work per frame, n workers cannot be faster than the spare cores allow
        print(f"ceiling from the CPU one run of {base} worker(s) already uses: {cores} cores / "
              f"{cores_used[base]:.2f} = {cores / cores_used[base]:.2f}x")
    return 0


if __name__ == "__main__":
    sys.exit(main())
