"""``aspectus events TABLE -o OUTDIR``: fixations, saccades, blinks and features from any gaze table."""
from __future__ import annotations

import sys

from aspectus.cli.outdir import add_output_options
from aspectus.cli.table_args import add_table_arguments, mapping_from_args, screen_from_args


def register(sub) -> None:
    p = sub.add_parser(
        "events",
        help="detect fixations, saccades, blinks and data loss in a gaze table",
        description="Detect events in a gaze table and write OUTDIR/events.csv (type, onset_s, offset_s, "
        "duration_ms, ...), events.parquet, features.csv/.parquet and the sidecar events.json. TABLE is a "
        "samples table from 'aspectus process' (samples.parquet or samples.csv; no column options needed) or "
        "any delimited table with a time column and x/y gaze columns in degrees or screen pixels. The "
        "delimiter is detected; empty cells and n/a are missing data. Times stay on the table's own time "
        "axis, in seconds.",
    )
    p.add_argument("table", metavar="TABLE", help="gaze table (CSV/TSV/...) or aspectus samples table")
    p.add_argument("-o", "--out", required=True, metavar="OUTDIR", help="output folder")
    add_output_options(p)
    add_table_arguments(p, title="columns of a gaze table (not needed for a samples table from aspectus process)")
    p.add_argument("--segments", metavar="CSV", help="task segments (label, onset_s, offset_s) for per-segment features")
    from aspectus.cli.process_cmd import add_analysis_arguments

    add_analysis_arguments(p)
    p.set_defaults(func=run)


def run(args) -> int:
    from aspectus.events.analysis import analyse_table
    from aspectus.errors import ParameterError
    from aspectus.cli.process_cmd import _num, analysis_params_from_args

    from aspectus.cli.outdir import apply_output_options, prepare_out_dir

    from aspectus.errors import AspectusInputError
    from aspectus.webcam.video import is_video_file

    apply_output_options(args)
    if is_video_file(args.table):
        raise AspectusInputError("is a video clip, not a gaze table", path=args.table,
                                hint="process the clip first (aspectus process CLIP -o OUT), then give "
                                     "OUT/<clip name>/samples.parquet")
    params = analysis_params_from_args(args)
    prepare_out_dir(args.out, create=False)
    if args.time_col is None and (args.x_col or args.y_col):
        raise ParameterError("--x-col/--y-col given without --time-col", hint="name the time column too")
    mapping = mapping_from_args(args, screen_from_args(args), zero_time=False)
    run_ = analyse_table(args.table, args.out, mapping=mapping, params=params, segments=args.segments)
    ev = run_.result.events
    q = run_.result.quality
    counts = ev["type"].value_counts()
    print(f"{run_.input_path}: {int(counts.get('fixation', 0))} fixations, {int(counts.get('saccade', 0))} saccades, "
          f"{int(counts.get('blink', 0))} blinks, {int(counts.get('loss', 0))} data-loss periods; "
          f"noise {_num(q['noise_rms_s2s_deg'], '.3g', 'deg')} sample to sample (RMS), "
          f"SD {_num(q['noise_sd_deg'], '.3g', 'deg')} within fixations, "
          f"valid {q['valid_frac']:.0%}, "
          f"detector {params.detector} -> {run_.paths['events_csv']}", file=sys.stdout)
    return 0
