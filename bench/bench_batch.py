"""Batch throughput with 2 local workers against 1 (prints figures; not a test).

Renders a 12-second segment of the reading-pilot scenario, repeats its
encoded packets to a ``--seconds`` long clip (no re-encoding) and copies
that to ``--clips`` files (each is processed in full - the batch does not
notice equal contents), then runs :func:`aspectus.studies.batch.run_batch` on the set with one and
with two worker processes into fresh output folders, and prints the wall
times and their ratio. Worker start-up (spawning, loading the face mesh) is
included, as a user would see it. Each worker runs its clip's stages one
after the other on one core (``--stages serial``, the batch's default), so
the target on a 2-core machine is at least 1.8x.

Printed beside the wall-clock figures, which another process on the machine
changes: the CPU seconds the workers used per frame (from ``getrusage`` of
the worker processes; it does not depend on how busy the machine is, and
with the same CPU per frame N workers on N free cores give N times one),
the cores they kept busy, and the load average before each run. With
``--dask`` the same set also runs on a real local Dask cluster (worker
processes, one thread each) with the same worker counts, and its outputs
are compared with the local pool's, file by file.

Run: ``python bench/bench_batch.py [--clips 4] [--seconds 60] [--workers 1 2] [--dask]``
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


def _outputs_equal(a: Path, b: Path, keys) -> bool:
    import pandas as pd

    for key in keys:
        for name in ("samples.parquet", "events.parquet", "features.parquet"):
            try:
                pd.testing.assert_frame_equal(pd.read_parquet(a / key / name), pd.read_parquet(b / key / name),
                                              check_exact=True)
            except AssertionError:
                return False
    return True


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--clips", type=int, default=4, help="clips in the set (default 4)")
    ap.add_argument("--seconds", type=float, default=60.0, help="length of each clip in seconds (default 60)")
    ap.add_argument("--size", default="1280x720", help="picture size WxH (default 1280x720)")
    ap.add_argument("--workers", type=int, nargs="+", default=[1, 2], help="worker counts to compare (default 1 2)")
    ap.add_argument("--stages", choices=("serial", "overlapped"), default="serial",
                    help="how each worker runs its clip (default serial, the batch's default)")
    ap.add_argument("--dask", action="store_true", help="also run the set on a local Dask cluster")
    args = ap.parse_args(argv)
    from aspectus.studies.batch import run_batch

    w, h = (int(v) for v in args.size.lower().split("x"))
    print(f"machine: {machine()}")
    times: dict[tuple[str, int], float] = {}
    cpu_ms: dict[tuple[str, int], float] = {}
    loads: dict[tuple[str, int], tuple[float, float]] = {}
    with tempfile.TemporaryDirectory() as d:
        d = Path(d)
        seg = render_test_clip(d / "render" / "reading.mp4", duration_s=min(12.0, args.seconds), size_px=(w, h))
        one = loop_clip(seg, d / "render" / "long.mp4", minutes=args.seconds / 60.0)
        src = d / "clips"
        src.mkdir()
        keys = [f"p{i + 1:02d}_s01" for i in range(args.clips)]
        for key in keys:
            shutil.copy(one, src / f"{key}.mp4")
        engines = ["local"] + (["dask"] if args.dask else [])
        for engine in engines:
            for n in args.workers:
                out = d / f"out_{engine}_{n}"
                cluster = None
                kw = {"workers": n}
                if engine == "dask":
                    from distributed import LocalCluster

                    cluster = LocalCluster(n_workers=n, threads_per_worker=1, processes=True, host="127.0.0.1",
                                           dashboard_address=None)
                    kw = {"scheduler": cluster.scheduler_address}
                load0 = os.getloadavg()[0]
                c0 = resource.getrusage(resource.RUSAGE_CHILDREN)
                t0 = time.perf_counter()
                try:
                    res = run_batch(src, out, stages=args.stages, **kw)
                    times[engine, n] = time.perf_counter() - t0
                finally:
                    if cluster is not None:
                        cluster.close()  # its worker processes end here, so their CPU is counted below
                c1 = resource.getrusage(resource.RUSAGE_CHILDREN)
                cpu = (c1.ru_utime + c1.ru_stime) - (c0.ru_utime + c0.ru_stime)
                assert res.counts["done"] == args.clips, res.status
                frames = int(res.status["frames"].sum())
                same = "" if (engine, n) == ("local", args.workers[0]) else (
                    "; outputs identical to the local pool's" if _outputs_equal(out, d / f"out_local_{args.workers[0]}", keys)
                    else "; OUTPUTS DIFFER from the local pool's")
                cpu_ms[engine, n] = 1e3 * cpu / frames
                loads[engine, n] = (load0, os.getloadavg()[0])
                print(f"{engine}, {n} worker(s): {times[engine, n]:7.1f} s for {args.clips} clips ({frames} frames, "
                      f"{w}x{h}), {frames / times[engine, n]:6.1f} frames/s; {1e3 * cpu / frames:.2f} CPU ms/frame, "
                      f"{cpu / times[engine, n]:.2f} cores busy (load average {load0:.1f} -> {loads[engine, n][1]:.1f})"
                      f"{same}", flush=True)
    base = min(args.workers)
    for engine in engines:
        for n in args.workers:
            if n != base:
                la = ", ".join(f"{k} worker(s) {a:.1f} -> {b:.1f}" for k, (a, b) in
                               ((k, loads[engine, k]) for k in (base, n)))
                print(f"{engine}: speed-up {n} vs {base} worker(s): {times[engine, base] / times[engine, n]:.2f}x "
                      f"wall clock, measured at load average {la} on {os.cpu_count()} CPUs (other processes take "
                      "cores from the workers: not a fair figure unless the load average stays well under the "
                      f"CPU count); from the CPU per frame, {n} workers on {n} free cores would give at most "
                      f"{n * cpu_ms[engine, base] / cpu_ms[engine, n]:.2f}x (target >= 1.8x for 2 vs 1)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
