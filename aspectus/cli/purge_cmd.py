"""``aspectus purge OUTDIR_OR_STUDY``: delete cached per-frame data, keep events, features and run.json."""
from __future__ import annotations

import sys


def register(sub) -> None:
    p = sub.add_parser(
        "purge",
        help="delete a study's cached per-frame data (gaze samples, frame caches)",
        description="Delete the per-frame data of every clip output folder under OUTDIR (or under a study "
        "file's output folder): samples.parquet, samples.csv, landmark and frame caches, previews and "
        "leftover temporary files - only files the folder's run.json lists as written by aspectus. Events, features, "
        "the study tables and run.json are kept; run.json notes "
        "what was deleted and when. Processing a clip again rebuilds its samples. Asks for confirmation "
        "unless --yes is given. Do not run it while clips of the same OUTDIR are being processed.",
    )
    p.add_argument("target", metavar="OUTDIR_OR_STUDY", help="an output folder, a clip's output folder or a study file")
    p.add_argument("--dry-run", action="store_true", help="list what would be deleted, delete nothing")
    p.add_argument("-y", "--yes", action="store_true", help="do not ask for confirmation")
    p.set_defaults(func=run)


def _mb(n: int) -> str:
    return f"{n / 1e6:.1f} MB"


def run(args) -> int:
    from aspectus.errors import AspectusInputError
    from aspectus.privacy.blur import plan_purge, purge

    plan = plan_purge(args.target)
    n = len(plan.files) + len(plan.dirs)
    if not plan.clip_dirs:
        raise AspectusInputError("holds no clip output folders (none with a run.json written by aspectus)",
                                path=args.target, hint="give the OUTDIR of `aspectus process` or `aspectus batch`")
    if n == 0:
        print(f"{args.target}: {len(plan.clip_dirs)} clip folder(s), no per-frame data left to delete")
        return 0
    can_ask = bool(sys.stdin) and sys.stdin.isatty()
    deleting = not args.dry_run and (args.yes or can_ask)  # else the list is only what would go
    for f in plan.files + plan.dirs:
        print(f"  {'delete' if deleting else 'would delete'} {f}{'/' if f in plan.dirs else ''}")
    print(f"{n} item(s), {_mb(plan.bytes)}, in {len(plan.clip_dirs)} clip folder(s); events, features and "
          "run.json are kept")
    if args.dry_run:
        print("dry run: nothing deleted")
        return 0
    if not args.yes:
        if not can_ask:
            raise AspectusInputError("needs confirmation, and no terminal is attached to ask",
                                    path=args.target, hint="add --yes to delete without asking, or --dry-run to list")
        answer = input("Delete these files for good? Type 'yes' to go on: ").strip().lower()
        if answer != "yes":
            print("nothing deleted")
            return 1
    done = purge(plan)
    print(f"deleted {len(done.files) + len(done.dirs)} item(s), {_mb(done.bytes)}")
    return 0
