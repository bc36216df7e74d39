"""Peak memory of processing a 60-minute clip against a 1-minute clip (prints figures; not a test).

Renders a short segment of the reading-pilot scenario once, then builds the
long clips cheaply by repeating the segment's encoded packets with shifted
timestamps (no re-encoding; every repeat starts on a key frame). Each clip
is processed by :func:`aspectus.webcam.pipeline.process_clip` in a fresh child
process that reports its own peak resident set size
(``VmHWM``; ``ru_maxrss`` where there is none), plus the peak the
per-frame geometry's child process reports of itself (in run.json). The target: the 60-minute
clip peaks no higher than the 1-minute clip plus 150 MB.

Run: ``python bench/bench_memory.py [--minutes 1 60] [--size 640x360]``
(the 60-minute clip takes a while: it is processed in full).
"""
from __future__ import annotations

import argparse
import json
import subprocess
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from bench_pipeline import machine, render_test_clip  # noqa: E402


def loop_clip(segment: Path, out: Path, *, minutes: float) -> Path:
    """Write ``out`` as ``segment`` repeated (packets copied, timestamps shifted) to ``minutes`` long."""
    import av

    with av.open(str(segment)) as src:
        ist = src.streams.video[0]
        packets = [p for p in src.demux(ist) if p.size and p.pts is not None]
        tb = ist.time_base
        first = min(p.pts for p in packets)
        step = max(p.pts for p in packets) - first + (packets[1].pts - packets[0].pts if len(packets) > 1 else 1)
        seg_s = float(step * tb)
        repeats = max(1, int(round(minutes * 60.0 / seg_s)))
        with av.open(str(out), "w") as dst:
            ost = dst.add_stream_from_template(ist)
            for r in range(repeats):
                shift = r * step
                for p in packets:
                    q = av.Packet(bytes(p))
                    q.pts = p.pts - first + shift
                    q.dts = (p.dts if p.dts is not None else p.pts) - first + shift
                    q.time_base = tb
                    q.is_keyframe = p.is_keyframe
                    q.stream = ost
                    dst.mux(q)
    return out


def child(clip: Path) -> None:
    import resource

    from aspectus.webcam.pipeline import process_clip

    with tempfile.TemporaryDirectory() as d:
        t0 = time.perf_counter()
        res = process_clip(clip, Path(d) / clip.stem, reuse=False)
        dt = time.perf_counter() - t0
        run = json.loads((Path(d) / clip.stem / "run.json").read_text())
    from aspectus.webcam.frame_geometry import peak_rss_mb

    peak_mb = peak_rss_mb()  # VmHWM: ru_maxrss would count the fork from this benchmark's own process
    if peak_mb is None:
        peak_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
    # the per-frame geometry's child process (aspectus.webcam.frame_geometry) reports its own peak; not
    # RUSAGE_CHILDREN, which also counts any short-lived forked helper at its parent's size
    child_mb = float((run.get("extraction") or {}).get("geometry_process_peak_rss_mb") or 0.0)
    print(json.dumps({"frames": res.summary["frames"], "duration_s": res.summary["duration_s"],
                      "seconds": dt, "peak_rss_mb": peak_mb + child_mb, "main_mb": peak_mb, "geometry_mb": child_mb}))


def measure(clip: Path) -> dict:
    out = subprocess.run([sys.executable, __file__, "--child", str(clip)], capture_output=True, text=True, check=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--minutes", type=float, nargs="+", default=[1.0, 60.0])
    ap.add_argument("--segment-s", type=float, default=20.0, help="length of the rendered segment (default 20 s)")
    ap.add_argument("--size", default="640x360", help="picture size WxH (default 640x360)")
    ap.add_argument("--child", type=Path, default=None, help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.child is not None:
        child(args.child)
        return 0
    w, h = (int(v) for v in args.size.lower().split("x"))
    print(f"machine: {machine()}", flush=True)
    got = {}
    with tempfile.TemporaryDirectory() as d:
        d = Path(d)
        seg = render_test_clip(d / "segment.mp4", duration_s=args.segment_s, size_px=(w, h))
        for m in args.minutes:
            clip = loop_clip(seg, d / f"p01_s01_{m:g}min.mp4", minutes=m)
            r = measure(clip)
            got[m] = r
            print(f"{m:5g} min clip: {r['frames']} frames ({r['duration_s'] / 60:.1f} min, {w}x{h}) processed in "
                  f"{r['seconds']:.0f} s, peak RSS {r['peak_rss_mb']:.0f} MB (pipeline {r['main_mb']:.0f} MB + "
                  f"geometry process {r['geometry_mb']:.0f} MB, each at its peak)", flush=True)
            clip.unlink()
    lo, hi = min(got), max(got)
    if lo != hi:
        diff = got[hi]["peak_rss_mb"] - got[lo]["peak_rss_mb"]
        print(f"peak RSS {hi:g} min - {lo:g} min = {diff:+.0f} MB (target <= +150 MB)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
