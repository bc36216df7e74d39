"""``camgaze events TABLE -o OUTDIR``: fixations, saccades, blinks and features from any gaze table."""
from __future__ import annotations

import sys


def register(sub) -> None:
    p = sub.add_parser(
        "events",
        help="detect fixations, saccades, blinks and data loss in a gaze table",
        description="Detect events in a gaze table and write OUTDIR/events.csv (type, onset_s, offset_s, "
        "duration_ms, ...), events.parquet, features.csv/.parquet and the sidecar events.json. TABLE is a "
        "samples table from 'camgaze process' (samples.parquet or samples.csv; no column options needed) or "
        "any delimited table with a time column and x/y gaze columns in degrees or screen pixels. The "
        "delimiter is detected; empty cells and n/a are missing data. Times stay on the table's own time "
        "axis, in seconds.",
    )
    p.add_argument("table", metavar="TABLE", help="gaze table (CSV/TSV/...) or camgaze samples table")
    p.add_argument("-o", "--out", required=True, metavar="OUTDIR", help="output folder")
    g = p.add_argument_group("columns of a gaze table")
    g.add_argument("--time-col", metavar="NAME", help="time column")
    g.add_argument("--time-unit", choices=("s", "ms", "us"), default="s", help="unit of the time column (default s)")
    g.add_argument("--x-col", metavar="NAME", help="horizontal gaze column")
    g.add_argument("--y-col", metavar="NAME", help="vertical gaze column")
    g.add_argument("--units", choices=("deg", "px"), default="deg",
                   help="unit of x/y: visual angle in degrees (y up) or screen pixels (origin top left, y down)")
    g.add_argument("--validity-col", metavar="NAME", help="column telling whether a sample is valid (1/true/yes)")
    g.add_argument("--delimiter", metavar="CHAR", help="field delimiter (default: detected)")
    g.add_argument("--mapping", metavar="JSON", help="a saved table mapping instead of the column options")
    s = p.add_argument_group("screen geometry (for --units px)")
    s.add_argument("--screen-size-mm", nargs=2, type=float, metavar=("W", "H"), help="visible screen size in mm")
    s.add_argument("--screen-size-m", nargs=2, type=float, metavar=("W", "H"), help="visible screen size in m")
    s.add_argument("--screen-res-px", nargs=2, type=int, metavar=("W", "H"), help="screen resolution in pixels")
    s.add_argument("--distance-mm", type=float, metavar="D", help="eye-to-screen distance in mm")
    s.add_argument("--distance-m", type=float, metavar="D", help="eye-to-screen distance in m")
    p.add_argument("--segments", metavar="CSV", help="task segments (label, onset_s, offset_s) for per-segment features")
    from .process_cmd import add_analysis_arguments

    add_analysis_arguments(p)
    p.set_defaults(func=run)


def _screen(args):
    from ..errors import ParameterError
    from ..screen import ScreenGeometry

    size = args.screen_size_mm or ([v * 1000.0 for v in args.screen_size_m] if args.screen_size_m else None)
    dist = args.distance_mm if args.distance_mm is not None else (
        args.distance_m * 1000.0 if args.distance_m is not None else None)
    if size is None and dist is None and args.screen_res_px is None:
        return None
    if size is None or dist is None:
        raise ParameterError("screen geometry needs the size and the distance",
                             hint="give --screen-size-mm W H (or --screen-size-m) and --distance-mm D")
    res = args.screen_res_px or (None, None)
    return ScreenGeometry(width_mm=size[0], height_mm=size[1], distance_mm=dist, width_px=res[0], height_px=res[1])


def run(args) -> int:
    from ..analysis import analyse_table
    from ..errors import ParameterError
    from .process_cmd import analysis_params_from_args

    params = analysis_params_from_args(args)
    mapping = None
    if args.mapping:
        from ..reference.table import TableMapping

        mapping = TableMapping.load(args.mapping)
    screen = _screen(args)
    if args.units == "px" and screen is None and mapping is None:
        raise ParameterError("pixel positions need the screen geometry",
                             hint="give --screen-size-mm W H --screen-res-px W H --distance-mm D")
    if args.time_col is None and (args.x_col or args.y_col):
        raise ParameterError("--x-col/--y-col given without --time-col", hint="name the time column too")
    run_ = analyse_table(args.table, args.out, time_col=args.time_col, time_unit=args.time_unit, x_col=args.x_col,
                         y_col=args.y_col, units=args.units, screen=screen, validity_col=args.validity_col,
                         delimiter=args.delimiter, mapping=mapping, params=params, segments=args.segments)
    ev = run_.result.events
    q = run_.result.quality
    counts = ev["type"].value_counts()
    print(f"{run_.input_path}: {int(counts.get('fixation', 0))} fixations, {int(counts.get('saccade', 0))} saccades, "
          f"{int(counts.get('blink', 0))} blinks, {int(counts.get('loss', 0))} loss periods; "
          f"noise {q['noise_rms_s2s_deg']:.3g} deg RMS-S2S, valid {q['valid_frac']:.0%}, "
          f"detector {params.detector} -> {run_.paths['events_csv']}", file=sys.stdout)
    return 0
