"""``aspectus batch FOLDER_OR_MANIFEST -o OUTDIR``: a whole study, resumable, in parallel."""
from __future__ import annotations

import signal

from aspectus.cli.outdir import add_output_options
import sys
import threading
from pathlib import Path


def register(sub) -> None:
    p = sub.add_parser(
        "batch",
        help="process every clip of a study (folder or manifest), resumable, on all cores or a Dask cluster",
        description="Process every clip of a folder (searched recursively by extension) or of a manifest CSV "
        "(columns: clip, and optionally reference, segments, participant, session and any other label). "
        "Per-clip outputs go to OUTDIR/<clip key>/ exactly as 'aspectus process' writes them (clips sharing a "
        "file stem get their relative path as key, e.g. classA__p01). Also writes OUTDIR/status.csv "
        "(done / failed with reason / skipped / pending) and OUTDIR/study_features.csv (one row per clip x "
        "window/segment, with the labels). Run it again after a stop or crash: finished clips are skipped, "
        "clips whose file or parameters changed are redone.",
    )
    p.add_argument("source", metavar="FOLDER_OR_MANIFEST", help="folder of clips, or manifest CSV")
    p.add_argument("-o", "--out", required=True, metavar="OUTDIR", help="batch output folder")
    add_output_options(p)
    p.add_argument("--workers", type=int, default=None, metavar="N",
                   help="local worker processes (default: one per core, fewer if memory is short)")
    p.add_argument("--stages", choices=("serial", "overlapped"), default="serial",
                   help="how each worker runs its clip: serial (default) - decoding, face mesh and geometry in one "
                        "thread on one core, so N workers on N cores come close to N times one; overlapped - the "
                        "stages side by side as `aspectus process` runs them, for workers with cores to spare")
    p.add_argument("--scheduler", default=None, metavar="tcp://HOST:PORT",
                   help="run on a Dask cluster with this scheduler; clips and OUTDIR must be on a filesystem "
                        "all workers see under the same paths")
    p.add_argument("--ext", default=None, metavar=".mp4,.mov",
                   help="clip file extensions when searching a folder (default: common video containers)")
    p.add_argument("--no-recursive", action="store_true", help="do not search sub-folders")
    p.add_argument("--labels", default=None, metavar="REGEX",
                   help="take labels from each clip's relative path with a regular expression with named "
                        r"groups, e.g. '(?P<participant>p\d+)_(?P<session>s\d+)' (default: sub-XX / ses-YY "
                        "entities in the path)")
    p.add_argument("--fov-deg", type=float, default=None,
                   help="assumed horizontal field of view of the webcams in degrees (default 60)")
    p.add_argument("--face", default=None, help='which face to follow: "largest" (default) or "index:N"')
    p.add_argument("--max-faces", type=int, default=None, help="faces looked for per frame")
    p.add_argument("--params", default=None, metavar="JSON",
                   help="processing parameters as saved in a clip's run.json ('params') or study.json; "
                        "options given on the command line override it")
    try:
        from aspectus.cli.process_cmd import add_analysis_arguments
    except ImportError:  # pragma: no cover - process command absent
        add_analysis_arguments = None
    if add_analysis_arguments is not None:
        add_analysis_arguments(p)
    p.add_argument("--retry-failed", action="store_true",
                   help="try again clips that failed with an input error although neither the file nor the "
                        "parameters changed")
    p.add_argument("--target-rule", default=None, metavar="NAME=VALUE,...",
                   help="exclusion rule for clips with a known-target check (aspectus targets check), written into "
                        "study_features.csv as target_excluded: max_accuracy_deg, max_precision_rms_s2s_deg, "
                        "max_loss_frac, gain_min, gain_max, min_targets_used (defaults 3, 1, 0.25, 0.8, 1.25, 5)")
    p.add_argument("--dry-run", action="store_true", help="only list what would be processed, skipped or failed")
    p.add_argument("--quiet", action="store_true", help="no progress bars")
    p.set_defaults(func=run)


def _params_from_args(args):
    import json

    from aspectus.errors import AspectusInputError, ParameterError
    from aspectus.webcam.pipeline import ProcessParams

    base: dict = {}
    if args.params:
        path = Path(args.params)
        try:
            d = json.loads(path.read_text(encoding="utf-8-sig"))
        except (OSError, ValueError) as exc:
            raise AspectusInputError(f"cannot read parameters ({exc})", path=path,
                                    hint="give a JSON file such as a clip's run.json or the batch's study.json") from None
        base = d.get("params", d) if isinstance(d, dict) else {}
        if not isinstance(base, dict):
            raise AspectusInputError("no parameters object found", path=path)
        try:
            ProcessParams.from_dict(base)
        except ParameterError as exc:  # name the file the setting was read from
            raise ParameterError(exc.problem, path=path, hint=exc.hint) from None
    params = ProcessParams.from_dict(base)
    d = params.to_dict()
    for opt, key in (("fov_deg", "fov_deg"), ("face", "face"), ("max_faces", "max_faces")):
        v = getattr(args, opt, None)
        if v is not None:
            d[key] = v
    cli_analysis = any(getattr(args, k, None) for k in ("detector", "window_s", "step_s", "settings"))
    if cli_analysis:
        from aspectus.cli.process_cmd import analysis_params_from_args

        a = analysis_params_from_args(args).to_dict()
        if base.get("analysis"):  # command-line analysis options override the file's
            merged = dict(base["analysis"])
            default = type(params.analysis)().to_dict()
            merged.update({k: v for k, v in a.items() if v != default.get(k)})
            a = merged
        d["analysis"] = a
    return ProcessParams.from_dict(d)


def run(args) -> int:
    from aspectus.studies.batch import plan_batch, run_batch
    from aspectus.studies.clips import VIDEO_EXTENSIONS

    from aspectus.cli.outdir import apply_output_options, prepare_out_dir
    from aspectus.labels import compile_label_pattern
    from aspectus.studies.engines import check_scheduler_address

    apply_output_options(args)
    if args.labels:
        compile_label_pattern(args.labels)
    if args.scheduler:
        check_scheduler_address(args.scheduler)
    prepare_out_dir(args.out, create=False)
    exts = tuple(e.strip() for e in args.ext.split(",") if e.strip()) if args.ext else VIDEO_EXTENSIONS
    params = _params_from_args(args)
    common = dict(params=params, extensions=exts, recursive=not args.no_recursive, label_pattern=args.labels,
                  retry_failed=args.retry_failed)
    if args.dry_run:
        plan = plan_batch(args.source, args.out, **common)
        for rec in plan.itertuples():
            print(f"{rec.action:8s} {rec.clip}  ->  {rec.key}" + (f"  ({rec.reason})" if rec.reason else ""))
        counts = plan["action"].value_counts().to_dict()
        print(", ".join(f"{n} to {a}" for a, n in sorted(counts.items())))
        return 0

    stop = threading.Event()
    previous = None

    def on_sigint(signum, frame):
        if stop.is_set():
            raise KeyboardInterrupt
        stop.set()
        print("\naspectus: stopping - running clips are cancelled, finished ones are kept "
              "(Ctrl-C again to abort at once)", file=sys.stderr)

    if threading.current_thread() is threading.main_thread():
        previous = signal.signal(signal.SIGINT, on_sigint)
    try:
        res = run_batch(args.source, args.out, workers=args.workers, scheduler=args.scheduler,
                        show_progress=not args.quiet, cancel=stop, stages=args.stages, target_rule=args.target_rule,
                        **common)
    finally:
        if previous is not None:
            signal.signal(signal.SIGINT, previous)
    c = res.counts
    print(f"{c['done']} done, {c['skipped']} skipped (already done), {c['failed']} failed"
          + (f", {c['pending']} not processed (stopped)" if c["pending"] else "")
          + f" in {res.elapsed_s:.0f} s on {res.engine}")
    failed = res.status[res.status["status"] == "failed"]
    for rec in failed.head(20).itertuples():
        reason = str(rec.reason)  # the reason usually names the clip already: not "p01.mp4: p01.mp4: ..."
        print(f"  failed: {reason if reason.startswith(f'{rec.clip}:') else f'{rec.clip}: {reason}'}",
              file=sys.stderr)
    if len(failed) > 20:
        print(f"  ... and {len(failed) - 20} more", file=sys.stderr)
    verdicts = verdict_counts(res.status)
    if verdicts:
        print(verdicts)
    print(f"status: {res.paths['status']}\nstudy table: {res.paths['study_csv']}")
    if c["pending"]:
        return 130
    return 1 if c["failed"] else 0


def verdict_counts(status) -> str:
    """The processed clips' verdicts counted in a line (status.csv's ``usable`` and ``verdict``): how many are
    usable for fixation measures, usable for the coarser features only ("Partly usable"), and not usable."""
    if status is None or not len(status) or "usable" not in status or "verdict" not in status:
        return ""
    rows = status[status["status"].isin(("done", "skipped"))]
    if not len(rows):
        return ""
    usable = rows["usable"].map(lambda v: v is True or str(v).lower() == "true")
    partly = usable & rows["verdict"].fillna("").astype(str).str.startswith("Partly usable")
    n_yes, n_partly, n_no = int((usable & ~partly).sum()), int(partly.sum()), int((~usable).sum())
    return (f"verdicts: {n_yes} usable, {n_partly} partly usable (coarser features only), {n_no} not usable - the "
            "verdict column of status.csv says why for each clip")
