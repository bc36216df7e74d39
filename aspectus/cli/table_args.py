"""Column and screen options for commands that read a gaze table (``events``, ``validate``).

One definition, so both commands take the same options and build the same
:class:`~aspectus.reference.table.TableMapping` and
:class:`~aspectus.reference.screen.ScreenGeometry` from them.
"""
from __future__ import annotations

import argparse


def add_table_arguments(p: argparse.ArgumentParser, *, title: str) -> None:
    g = p.add_argument_group(title)
    g.add_argument("--mapping", metavar="JSON", help="a saved table mapping instead of the column options")
    g.add_argument("--time-col", metavar="NAME", help="time column")
    g.add_argument("--time-unit", choices=("s", "ms", "us"), default="s", help="unit of the time column (default s)")
    g.add_argument("--x-col", metavar="NAME", help="horizontal gaze column")
    g.add_argument("--y-col", metavar="NAME", help="vertical gaze column")
    g.add_argument("--units", choices=("deg", "px", "mm", "norm"), default="deg",
                   help="unit of x/y: visual angle in degrees (y up), screen pixels (origin top left, y down), "
                        "mm from the screen centre, or normalised 0-1 screen coordinates")
    g.add_argument("--validity-col", metavar="NAME", help="column telling whether a sample is valid (1/true/yes)")
    g.add_argument("--valid-values", nargs="+", metavar="V", help="values of the validity column meaning valid")
    g.add_argument("--pupil-col", metavar="NAME", help="pupil size column")
    g.add_argument("--event-col", metavar="NAME", help="per-sample event label column (fixation/saccade/blink)")
    g.add_argument("--delimiter", metavar="CHAR", help="field delimiter (default: detected)")
    g.add_argument("--save-mapping", metavar="JSON", help="save the column options as a mapping for reuse")
    s = p.add_argument_group("screen geometry (for px, mm, norm; BIDS files carry their own)")
    s.add_argument("--screen-size-mm", nargs=2, type=float, metavar=("W", "H"), help="visible screen size in mm")
    s.add_argument("--screen-size-m", nargs=2, type=float, metavar=("W", "H"), help="visible screen size in m")
    s.add_argument("--screen-res-px", nargs=2, type=int, metavar=("W", "H"), help="screen resolution in pixels")
    s.add_argument("--distance-mm", type=float, metavar="D", help="eye-to-screen distance in mm")
    s.add_argument("--distance-m", type=float, metavar="D", help="eye-to-screen distance in m")


def screen_from_args(args):
    """The screen geometry the options give, or None when none is given."""
    from aspectus.errors import ParameterError
    from aspectus.reference.screen import ScreenGeometry

    size = args.screen_size_mm or ([v * 1000.0 for v in args.screen_size_m] if args.screen_size_m else None)
    dist = args.distance_mm if args.distance_mm is not None else (
        args.distance_m * 1000.0 if args.distance_m is not None else None)
    if size is None and dist is None and args.screen_res_px is None:
        return None
    if size is None or dist is None:
        raise ParameterError("screen geometry needs the size and the distance",
                             hint="give --screen-size-mm W H (or --screen-size-m) and --distance-mm D "
                                  "(and --screen-res-px W H for pixels)")
    res = args.screen_res_px or (None, None)
    return ScreenGeometry(width_mm=size[0], height_mm=size[1], distance_mm=dist, width_px=res[0], height_px=res[1])


def mapping_from_args(args, screen=None, *, zero_time: bool = True):
    """The table mapping the options give (a saved one with ``--mapping``), or None when no column is named."""
    from aspectus.errors import ParameterError
    from aspectus.reference.table import TableMapping

    if args.mapping:
        return TableMapping.load(args.mapping)
    if not (args.time_col or args.x_col or args.y_col):
        return None
    if not (args.time_col and args.x_col and args.y_col):
        raise ParameterError("a gaze table needs --time-col, --x-col and --y-col together")
    if args.units in ("px", "mm", "norm") and screen is None:
        raise ParameterError(f"positions in {args.units} need the screen geometry",
                             hint="give --screen-size-mm W H --distance-mm D (and --screen-res-px W H for px)")
    m = TableMapping(time_col=args.time_col, time_unit=args.time_unit, x_col=args.x_col, y_col=args.y_col,
                     units=args.units, screen=screen, validity_col=args.validity_col,
                     validity_values=args.valid_values, pupil_col=args.pupil_col, event_col=args.event_col,
                     delimiter=args.delimiter, zero_time=zero_time)
    if args.save_mapping:
        m.save(args.save_mapping)
    return m
