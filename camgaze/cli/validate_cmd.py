"""``camgaze validate``: webcam features against a lab eye tracker's recording, for one pair or a study."""
from __future__ import annotations

import sys

from .table_args import add_table_arguments, mapping_from_args, screen_from_args


def register(sub) -> None:
    p = sub.add_parser(
        "validate",
        help="compare a processed clip with a lab eye tracker's recording of the same session",
        description="Align the clocks, run the same detector on both sides, pair features per window and task "
        "segment, and write OUTDIR/agreement.csv (n, means, Pearson r, Spearman rho, Lin's CCC, ICC, "
        "Bland-Altman bias and limits, all with 95 % intervals), pairs.csv, alignment.json (offset_s: the clip "
        "time of the reference's first sample), events_agreement.json (kappa, F1, gain) and a self-contained "
        "report.html with PNG figures. WEBCAM is a clip's output folder from 'camgaze process'; REFERENCE is a "
        "BIDS *_physio.tsv.gz (sidecars beside it) or any gaze table described by the column options or "
        "--mapping. Study mode: --manifest CSV with columns webcam, reference and optional participant, "
        "session, mapping, segments, offset_s.",
    )
    p.add_argument("webcam", nargs="?", metavar="WEBCAM", help="clip output folder from 'camgaze process'")
    p.add_argument("reference", nargs="?", metavar="REFERENCE", help="BIDS *_physio.tsv.gz or a gaze table")
    p.add_argument("-o", "--out", required=True, metavar="OUTDIR", help="output folder")
    p.add_argument("--manifest", metavar="CSV", help="study mode: a CSV pairing each webcam folder with its reference")
    p.add_argument("--participant", metavar="ID", help="participant label for the report (one pair)")
    p.add_argument("--session", metavar="ID", help="session label for the report (one pair)")
    add_table_arguments(p, title="columns of a reference table (not needed for BIDS)")
    a = p.add_argument_group("time alignment")
    a.add_argument("--offset-s", type=float, metavar="X",
                   help="clip time of the reference's first sample (overrides the automatic alignment)")
    a.add_argument("--marker", metavar="LABEL", help="align on a marker present in both (reference message / "
                   "event label; webcam: the onset of the segment with this label)")
    a.add_argument("--webcam-marker-s", type=float, metavar="T", help="clip time of the marker (instead of a segment)")
    a.add_argument("--search-range-s", type=float, default=30.0, metavar="S",
                   help="automatic alignment searches offsets of +-S seconds (default 30)")
    a.add_argument("--align-signal", choices=("both", "angle", "speed"), default="both",
                   help="signals cross-correlated (default both)")
    a.add_argument("--drift", action="store_true", help="also estimate a linear clock drift")
    c = p.add_argument_group("comparison")
    c.add_argument("--segments", metavar="CSV", help="task segments on the clip clock (label, onset_s, offset_s)")
    c.add_argument("--resample-reference-hz", type=float, metavar="HZ",
                   help="resample the reference to this rate before detection (default: its own rate)")
    c.add_argument("--reference-events", choices=("detect", "own"), default="detect",
                   help="event agreement against events detected in the reference's samples (default) or the "
                        "events stored in the reference file")
    c.add_argument("--icc-form", default="2,1", choices=("1,1", "2,1", "3,1", "1,k", "2,k", "3,k"),
                   help="Shrout & Fleiss ICC form reported as 'icc' (default 2,1: absolute agreement)")
    c.add_argument("--match-tolerance-s", type=float, default=0.1, metavar="S",
                   help="largest onset difference of matched events (default 0.1 s)")
    c.add_argument("--min-valid-frac", type=float, default=0.5, metavar="F",
                   help="leave out windows with less valid data than this on either side (default 0.5)")
    c.add_argument("--no-figures", action="store_true", help="skip the PNG figures")
    from .process_cmd import add_analysis_arguments

    add_analysis_arguments(p)
    p.set_defaults(func=run)


def _mapping(args):
    screen = screen_from_args(args)
    return mapping_from_args(args, screen), screen


def run(args) -> int:
    from ..errors import ParameterError
    from ..validate import ValidateParams, validate_pair, validate_study
    from .process_cmd import analysis_params_from_args

    mapping, screen = _mapping(args)
    analysis = analysis_params_from_args(args)
    # --window-s alone means back-to-back windows of that length
    window_s = args.window_s
    step_s = args.step_s if args.step_s is not None else window_s
    params = ValidateParams(
        analysis=analysis, window_s=window_s, step_s=step_s, offset_s=args.offset_s, marker=args.marker,
        webcam_marker_s=args.webcam_marker_s, search_range_s=args.search_range_s, align_signal=args.align_signal,
        estimate_drift=args.drift, resample_reference_hz=args.resample_reference_hz,
        reference_events=args.reference_events, icc_form=args.icc_form, match_tolerance_s=args.match_tolerance_s,
        min_valid_frac=args.min_valid_frac)
    if args.manifest:
        if args.webcam or args.reference:
            raise ParameterError("give either WEBCAM REFERENCE or --manifest, not both")
        res = validate_study(args.manifest, args.out, params=params, screen=screen, mapping=mapping,
                             figures=not args.no_figures,
                             progress=lambda f, m: print(f"[{f:4.0%}] {m}", file=sys.stderr))
        print(f"{len(res.results)} pair(s) validated, {len(res.failures)} failed -> {res.paths['report']}")
        for k, v in res.failures.items():
            print(f"  failed {k}: {v}", file=sys.stderr)
        return 1 if res.failures else 0
    if not (args.webcam and args.reference):
        raise ParameterError("validate needs WEBCAM and REFERENCE (or --manifest CSV)",
                             hint="camgaze validate OUT/clip REFERENCE -o VALIDATION")
    r = validate_pair(args.webcam, args.reference, args.out, mapping=mapping, screen=screen, params=params,
                      segments=args.segments, participant=args.participant, session=args.session,
                      figures=not args.no_figures)
    al = r.alignment
    ag = r.agreement
    fc = ag[(ag["scope"] == "window") & (ag["feature"] == "fixation_count")] if len(ag) else ag
    line = f"offset {al.offset_s:+.3f} s ({al.method}, confidence {al.confidence:.2f}); kappa {r.events['kappa']:.2f}, " \
           f"F1 {r.events['f1']:.2f}"
    if len(fc):
        line += f"; fixation count per window r {fc['pearson_r'].iloc[0]:.2f}, ICC {fc['icc'].iloc[0]:.2f} " \
                f"(n={int(fc['n'].iloc[0])})"
    print(line + f" -> {r.paths['report']}")
    for n in r.notes:
        print(f"  note: {n}", file=sys.stderr)
    return 0
