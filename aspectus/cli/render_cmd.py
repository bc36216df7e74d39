"""``aspectus render OUT.mp4``: render a webcam-like test clip with known gaze truth."""
from __future__ import annotations

import sys


def register(sub) -> None:
    p = sub.add_parser(
        "render",
        help="render a test clip of a face with known gaze, blinks and head motion",
        description="Render a webcam-like clip from a face photograph shipped with the dependencies, with eyes "
        "that follow a synthetic gaze trajectory, and write the ground truth beside it: "
        "<stem>_truth.csv (per frame), <stem>_truth_hi.csv (trajectory at 240 Hz), "
        "<stem>_truth_events.csv (true fixations, saccades, blinks) and <stem>_truth.json (parameters).",
    )
    p.add_argument("out", metavar="OUT", help="clip to write (.mp4, .mov, .mkv, .avi)")
    p.add_argument("--duration-s", type=float, default=10.0, help="clip length in seconds (default 10)")
    p.add_argument("--fps", type=float, default=30.0, help="frame rate in frames per second (default 30)")
    p.add_argument("--vfr-jitter-ms", type=float, default=0.0,
                   help="make the frame rate variable: frame intervals vary uniformly by +- this many ms (default 0)")
    p.add_argument("--size", default="1280x720", metavar="WxH", help="picture size in pixels (default 1280x720)")
    p.add_argument("--face", default="hopper", choices=("hopper", "astronaut"), help="face photograph (default hopper)")
    p.add_argument("--seed", type=int, default=0, help="random seed (default 0)")
    p.add_argument("--task", default="reading", choices=("reading", "scene"), help="viewing task (default reading)")
    p.add_argument("--amplitude-deg", type=float, default=None,
                   help="half-width of the region looked at, degrees (default 8 reading, 10 scene)")
    p.add_argument("--blink-rate-per-min", type=float, default=12.0, help="mean blinks per minute (default 12)")
    p.add_argument("--head-motion", action="store_true", help="slow head turns and drift (yaw up to +-10 deg)")
    p.add_argument("--head-drift", action="store_true",
                   help="slow head drift in position (+-15 mm sideways, +-10 mm up and down), distance (+-25 mm) "
                   "and roll (+-2 deg) without turning; with --head-motion the head turns as well")
    p.add_argument("--lids", default="follow", choices=("follow", "still"),
                   help="upper lids that follow vertical gaze, the lower lid a little (default), or still lids")
    p.add_argument("--glasses", action="store_true", help="spectacles on the face")
    p.add_argument("--lighting-drift", type=float, default=0.0,
                   help="slow change of the light level, as a fraction (e.g. 0.15 for +-15 %%; default 0)")
    p.add_argument("--lighting-gradient", type=float, default=0.0,
                   help="light falling off from the picture's left to its right, as a fraction of the mean "
                   "(e.g. 0.4; default 0)")
    p.add_argument("--mirror", action="store_true", help="store the picture mirrored left to right")
    p.add_argument("--distance-mm", type=float, default=600.0, help="head distance from the camera, mm (default 600)")
    p.add_argument("--fov-deg", type=float, default=60.0, help="horizontal field of view of the camera, degrees (default 60)")
    p.add_argument("--noise-sd", type=float, default=2.0, help="sensor noise SD in grey levels (default 2)")
    p.add_argument("--crf", type=int, default=23, help="H.264 quality, lower is better (default 23)")
    p.add_argument("--codec", default="libx264", choices=("libx264", "mpeg4", "mjpeg"),
                   help="video codec: H.264, MPEG-4 part 2 or Motion JPEG (default libx264)")
    p.add_argument("--lost-frames", type=float, default=0.0, metavar="SHARE",
                   help="share of frames the camera misses, each at random (e.g. 0.05; default 0)")
    p.add_argument("--lost-as", default="gaps", choices=("gaps", "repeats"),
                   help="how the recording holds a missed frame: a gap in its timestamps (default) or the last "
                   "picture stored again at the constant frame rate")
    p.add_argument("--rotation-deg", type=int, default=0, choices=(0, 90, 180, 270),
                   help="store the picture rotated and tag the clip so players turn it back (default 0)")
    p.add_argument("--darkness", type=float, default=1.0, help="light level in (0, 1]; lower is dimmer and noisier")
    p.add_argument("--extra-faces", type=int, default=0, help="other, smaller faces in view (0-2, default 0)")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.set_defaults(func=run)


def _size(text: str) -> tuple[int, int]:
    from aspectus.errors import ParameterError

    try:
        w, h = text.lower().split("x")
        return int(w), int(h)
    except ValueError:
        raise ParameterError(f"--size {text!r} is not WIDTHxHEIGHT in pixels, e.g. 1280x720") from None


def _head_motion(args):
    if args.head_drift and not args.head_motion:
        return {"yaw_deg": 0.0, "pitch_deg": 0.0}  # translation, distance and roll at their default amplitudes
    return bool(args.head_motion)


def run(args) -> int:
    import numpy as np

    from aspectus.errors import ParameterError
    from aspectus.synth.render import constant_frame_times, lost_frames, render_clip, synth_trajectory

    size = _size(args.size)
    traj = synth_trajectory(duration_s=args.duration_s, seed=args.seed, task=args.task,
                            amplitude_deg=args.amplitude_deg, blink_rate_per_min=args.blink_rate_per_min,
                            head_motion=_head_motion(args), head_distance_mm=args.distance_mm)
    frame_times = None
    if args.vfr_jitter_ms:
        step = 1.0 / args.fps
        j = args.vfr_jitter_ms / 1000.0
        if not (0 < j < step):
            raise ParameterError(f"--vfr-jitter-ms must be between 0 and the frame interval ({step * 1000:.1f} ms)")
        rng = np.random.default_rng(args.seed + 1)
        d = step + rng.uniform(-j, j, int(args.duration_s * args.fps) + 2)
        frame_times = np.concatenate([[0.0], np.cumsum(d)])
        frame_times = frame_times[frame_times <= args.duration_s]
    repeated = None
    if not (np.isfinite(args.lost_frames) and 0.0 <= args.lost_frames < 1.0):
        raise ParameterError(f"--lost-frames must be a share of the frames within 0-1, e.g. 0.05; got {args.lost_frames:g}")
    if args.lost_frames:
        if frame_times is None:
            frame_times = constant_frame_times(traj, args.fps)
        lost = lost_frames(len(frame_times), args.lost_frames, args.seed)
        if args.lost_as == "repeats":
            if args.vfr_jitter_ms:
                raise ParameterError("--lost-as repeats keeps a constant frame rate: leave out --vfr-jitter-ms")
            repeated, frame_times = lost, None
        else:
            frame_times = frame_times[~lost]

    bar = None
    progress = None
    if not args.quiet:
        from aspectus.progress import ProgressBar

        bar = ProgressBar(total=100, unit="%", desc="render", file=sys.stderr, leave=False)

        def progress(frac, msg):
            bar.n = int(round(100 * frac))
            bar.refresh()

    try:
        res = render_clip(args.out, traj, face=args.face, size_px=size, fps=args.fps, frame_times_s=frame_times,
                          fov_deg=args.fov_deg, noise_sd=args.noise_sd, codec=args.codec, crf=args.crf,
                          rotation_deg=args.rotation_deg, darkness=args.darkness, extra_faces=args.extra_faces,
                          seed=args.seed, lid_follow=1.0 if args.lids == "follow" else 0.0, glasses=args.glasses,
                          lighting_drift=args.lighting_drift, lighting_gradient=args.lighting_gradient,
                          mirror=args.mirror, repeated_frames=repeated, progress=progress)
    finally:
        if bar is not None:
            bar.close()
    print(f"wrote {res.path} ({res.frames} frames, {res.path.stat().st_size / 1e6:.2f} MB) and truth "
          f"{res.truth_path.name}, {res.truth_hi_path.name}, {res.truth_events_path.name}, {res.truth_json_path.name}")
    return 0
