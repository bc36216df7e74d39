"""``aspectus targets make|check|table``: the known-target sequence, its check on a clip, the study table."""
from __future__ import annotations


def register(sub) -> None:
    p = sub.add_parser(
        "targets",
        help="known-target sequence: make it, check a clip that recorded it, tabulate a study's checks",
        description="A short sequence of dots at known places and times, shown on the study's screen while the "
        "webcam records, measures each student's gaze quality without a lab tracker: per-person offset and "
        "gain, accuracy, precision, data loss, fixations on the dots and smooth-pursuit gain.",
    )
    tsub = p.add_subparsers(dest="targets_command", metavar="ACTION")

    m = tsub.add_parser("make", help="write schedule.json, the offline page and the video for a screen",
                        description="Write OUTDIR/schedule.json (the documented, versioned schedule), "
                        "OUTDIR/targets.html (self-contained offline page: open it in a browser on the study's "
                        "screen, press the space bar) and OUTDIR/targets.mp4 (the same sequence as a video).")
    m.add_argument("-o", "--out", required=True, metavar="OUTDIR", help="folder to write into")
    m.add_argument("--screen-px", nargs=2, type=int, required=True, metavar=("W", "H"),
                   help="screen resolution in pixels, e.g. 1920 1080")
    m.add_argument("--screen-mm", nargs=2, type=float, required=True, metavar=("W", "H"),
                   help="visible screen area in mm, e.g. 344 194")
    m.add_argument("--distance-mm", type=float, required=True, help="viewing distance (eyes to screen centre), mm")
    m.add_argument("--seed", type=int, default=0, help="orders the dots (default 0)")
    m.add_argument("--fixation-s", type=float, default=2.0, help="time per still dot, s (default 2)")
    m.add_argument("--targets", type=int, default=13,
                   help="still dots of the grid, 5-13 (default 13); each moving sweep adds a 1-s still dot before "
                   "it, which the check counts as a still target too")
    m.add_argument("--pursuit-speed-deg-s", type=float, default=8.0, help="moving dot's speed, deg/s (default 8)")
    m.add_argument("--pursuit-sweeps", type=int, default=2, choices=(0, 1, 2),
                   help="moving sweeps: 0, 1 (horizontal), 2 (and vertical; default)")
    m.add_argument("--no-video", action="store_true", help="skip the video")
    m.add_argument("--video-fps", type=float, default=30.0, help="video frame rate (default 30)")
    m.set_defaults(func=run_make)

    c = tsub.add_parser("check", help="measure gaze quality on a clip that recorded the sequence",
                        description="Process the clip (or reuse its outputs), find the sequence (the flash in the "
                        "picture, else by matching the gaze to the dots' path), fit offset and gain and write "
                        "target_check.json and target_check_targets.csv into the clip's output folder "
                        "OUTDIR/<clip key>/: the folder 'aspectus batch' made for the clip when a batch ran into "
                        "OUTDIR (e.g. OUTDIR/classA__p01 for classA/p01.mp4 beside classB/p01.mp4), the key the "
                        "batch would give it within --study, else OUTDIR/<clip stem>.")
    c.add_argument("clip", metavar="CLIP", help="the video file recorded while the sequence was shown")
    c.add_argument("--schedule", required=True, help="the schedule.json that was shown")
    c.add_argument("-o", "--out", required=True, metavar="OUTDIR", help="output root (as for aspectus process)")
    c.add_argument("--study", default=None, metavar="FOLDER_OR_MANIFEST",
                   help="the study the clip belongs to, as given to 'aspectus batch': the check goes into the "
                   "folder the batch names for the clip (needed before the batch has run when two clips of the "
                   "study share a file name)")
    c.add_argument("--align", default="auto", choices=("auto", "flash", "xcorr", "given"),
                   help="how to find the sequence (default auto: the flash, else cross-correlation)")
    c.add_argument("--start-s", type=float, default=None, help="clip time of the flash with --align given, s")
    c.add_argument("--search-from-s", type=float, default=0.0,
                   help="look for the flash from this clip time on (a second showing at the session's end)")
    c.add_argument("--apply-mapping", action="store_true",
                   help="also write screen_gaze.parquet/.csv: every sample of the clip mapped to the screen")
    c.add_argument("--quiet", action="store_true", help="no progress bar")
    c.set_defaults(func=run_check_cmd)

    t = tsub.add_parser("table", help="one row per session from all checks under a results folder, with a rule",
                        description="Collect the target_check.json of every clip output folder under RESULTS and "
                        "write target_quality.csv and target_quality.md (the exclusion rule in words, how each "
                        "figure was computed, the sessions and their verdicts) into OUTDIR.")
    t.add_argument("results", metavar="RESULTS")
    t.add_argument("-o", "--out", required=True, metavar="OUTDIR")
    t.add_argument("--rule", default="", metavar="NAME=VALUE,...",
                   help="exclusion thresholds: max_accuracy_deg, max_precision_rms_s2s_deg, max_loss_frac, "
                   "gain_min, gain_max, min_targets_used (defaults 3, 1, 0.25, 0.8, 1.25, 5)")
    t.set_defaults(func=run_table)
    p.set_defaults(func=lambda args: (p.print_help(), 2)[1])


def run_make(args) -> int:

    from aspectus.targets.page import write_page, write_video
    from aspectus.targets.schedule import Screen, make_schedule

    screen = Screen(int(args.screen_px[0]), int(args.screen_px[1]), float(args.screen_mm[0]), float(args.screen_mm[1]),
                    float(args.distance_mm))
    sched = make_schedule(screen, seed=args.seed, fixation_s=args.fixation_s, n_fixations=args.targets,
                          pursuit_speed_deg_s=args.pursuit_speed_deg_s, pursuit_sweeps=args.pursuit_sweeps)
    from aspectus.cli.outdir import prepare_out_dir

    out = prepare_out_dir(args.out)
    sched.write(out / "schedule.json")
    write_page(sched, out / "targets.html")
    print(f"{out / 'schedule.json'}: {sched.describe()}")
    print(f"{out / 'targets.html'}: open it on the study's screen, press the space bar")
    if not args.no_video:
        write_video(sched, out / "targets.mp4", fps=args.video_fps)
        print(f"{out / 'targets.mp4'}: the same sequence, 2 s before the flash")
    return 0


def run_check_cmd(args) -> int:
    from pathlib import Path

    from aspectus.targets.analysis import CheckParams
    from aspectus.targets.check import read_check, run_check, summary_lines
    from aspectus.errors import AspectusInputError
    from aspectus.studies.clips import clip_output_dir, output_folder_holds_another_clip

    params = CheckParams(align=args.align, start_s=args.start_s, search_from_s=args.search_from_s)
    from aspectus.cli.outdir import prepare_out_dir

    clip = Path(args.clip)
    if not clip.is_file():
        raise AspectusInputError("no such clip file", path=clip, hint="give the recorded clip with the sequence in it")
    out_dir = clip_output_dir(prepare_out_dir(args.out, create=False), clip, study=args.study)
    clash = output_folder_holds_another_clip(out_dir, clip)
    if clash:
        raise AspectusInputError(clash, path=clip,
                                 hint="give the study the clip belongs to (--study FOLDER_OR_MANIFEST, as for "
                                 "'aspectus batch') so that it gets its own folder, or another OUTDIR")
    bar = None
    if not args.quiet:
        from aspectus.progress import ProgressBar

        bar = ProgressBar(total=1000, desc=clip.name, leave=False, bar_format="{desc}: {percentage:3.0f}%|{bar}|")

    def progress(frac, message):
        if bar is not None:
            bar.n = int(1000 * min(1.0, max(0.0, frac)))
            bar.refresh()

    try:
        run_check(clip, args.schedule, out_dir, params=params, apply_mapping=args.apply_mapping, progress=progress)
    finally:
        if bar is not None:
            bar.close()
    doc = read_check(out_dir)
    print(f"{clip.name}: target check -> {out_dir / 'target_check.json'}")
    for line in summary_lines(doc or {}):
        print(f"  {line}")
    return 0


def run_table(args) -> int:
    from aspectus.targets.study import ExclusionRule, write_quality_report

    from aspectus.cli.outdir import prepare_out_dir

    rule = ExclusionRule.parse(args.rule)
    prepare_out_dir(args.out, create=False)
    res = write_quality_report(args.results, args.out, rule=rule)
    print(f"{res['sessions']} session(s), {res['excluded']} excluded -> {res['csv']}, {res['md']}")
    return 0
