"""``aspectus validate``: webcam features against a lab eye tracker's recording, for one pair or a study."""
from __future__ import annotations

import sys
from pathlib import Path

from aspectus.cli.outdir import add_output_options
from aspectus.cli.table_args import add_table_arguments, mapping_from_args, screen_from_args


def register(sub) -> None:
    p = sub.add_parser(
        "validate",
        help="compare a processed clip with a lab eye tracker's recording of the same session",
        description="Align the clocks, run the same detector on both sides, pair features per window and task "
        "segment, and write OUTDIR/agreement.csv (n, means, Pearson r, Spearman rho, Lin's CCC, ICC, "
        "Bland-Altman bias and limits, all with 95 % intervals), pairs.csv, alignment.json (offset_s: the clip "
        "time of the reference's first sample), events_agreement.json (kappa, F1, gain) and a self-contained "
        "report.html with PNG figures. WEBCAM is a clip's output folder from 'aspectus process'; REFERENCE is a "
        "BIDS *_physio.tsv.gz (sidecars beside it) or any gaze table described by the column options or "
        "--mapping. Study mode: WEBCAM_FOLDER REFERENCE_FOLDER (the output folder of 'aspectus batch' or "
        "'aspectus process', and a folder or BIDS tree of reference recordings, paired by participant/session/task/run "
        "labels in the names, else by identical names), or --manifest CSV with columns webcam, reference and "
        "optional participant, session, task, run, mapping, segments, offset_s.",
    )
    p.add_argument("webcam", nargs="?", metavar="WEBCAM",
                   help="clip output folder from 'aspectus process' (study: the folder holding one per clip)")
    p.add_argument("reference", nargs="?", metavar="REFERENCE",
                   help="BIDS *_physio.tsv.gz or a gaze table (study: a folder of them)")
    p.add_argument("-o", "--out", required=True, metavar="OUTDIR", help="output folder")
    add_output_options(p)
    p.add_argument("--manifest", metavar="CSV", help="study mode: a CSV pairing each webcam folder with its reference")
    s = p.add_argument_group("study from two folders")
    s.add_argument("--labels", metavar="REGEX", default=None,
                   help="take labels from clip folder names and reference paths with a regular expression with named "
                        r"groups participant, session, task, run, e.g. '(?P<participant>p\d+)_(?P<session>s\d+)' "
                        "(default: status.csv of the batch, then sub-/ses-/task-/run- entities)")
    s.add_argument("--reference-glob", metavar="GLOB", default=None,
                   help="only references whose name or relative path matches, e.g. '*recording-eye1_physio.tsv.gz'")
    s.add_argument("--save-manifest", metavar="CSV", default=None,
                   help="write the pairing found as a manifest CSV (to check, edit and rerun with --manifest)")
    s.add_argument("--dry-run", action="store_true",
                   help="only pair the folders: print the pairs and what was left over (and --save-manifest)")
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
    from aspectus.validation.agreement import DEFAULT_ICC_FORM, ICC_FORM_TEXT, ICC_FORMS

    c.add_argument("--icc-form", default=DEFAULT_ICC_FORM, choices=ICC_FORMS, metavar="FORM",
                   help="Shrout & Fleiss ICC form reported as 'icc', one of: " + "; ".join(
                       f"{f} = {ICC_FORM_TEXT[f].split(': ', 1)[1]}" for f in ICC_FORMS)
                   + f". Default: {DEFAULT_ICC_FORM}")
    c.add_argument("--match-tolerance-s", type=float, default=0.1, metavar="S",
                   help="largest onset difference of matched events (default 0.1 s)")
    c.add_argument("--min-valid-frac", type=float, default=0.5, metavar="F",
                   help="leave out windows with less valid data than this on either side (default 0.5)")
    c.add_argument("--no-figures", action="store_true", help="skip the PNG figures")
    c.add_argument("--target-rule", default=None, metavar="NAME=VALUE,...",
                   help="study mode: exclusion rule for webcam folders with a known-target check (aspectus targets "
                        "check), shown in the report and participants.csv: max_accuracy_deg, "
                        "max_precision_rms_s2s_deg, max_loss_frac, gain_min, gain_max, min_targets_used")
    c.add_argument("--force-agreement", action="store_true",
                   help="report the agreement figures even when the automatic alignment is uncertain (by default "
                        "they are withheld then)")
    from aspectus.cli.process_cmd import add_analysis_arguments

    add_analysis_arguments(p)
    p.set_defaults(func=run)


def _mapping(args):
    screen = screen_from_args(args)
    return mapping_from_args(args, screen), screen


def run(args) -> int:
    from aspectus.errors import ParameterError
    from aspectus.validation.pair import ValidateParams, validate_pair
    from aspectus.validation.study import validate_study
    from aspectus.cli.process_cmd import analysis_params_from_args

    from aspectus.cli.outdir import apply_output_options, prepare_out_dir

    apply_output_options(args)
    if getattr(args, "labels", None):
        from aspectus.labels import compile_label_pattern

        compile_label_pattern(args.labels)
    prepare_out_dir(args.out, create=False)
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
        min_valid_frac=args.min_valid_frac, force_agreement=args.force_agreement)
    folder_mode = bool(args.webcam and args.reference and Path(args.reference).is_dir())
    if args.manifest or folder_mode:
        if args.manifest and (args.webcam or args.reference):
            raise ParameterError("give either WEBCAM REFERENCE or --manifest, not both")
        if folder_mode:
            return _run_folders(args, params, screen, mapping)
        if args.dry_run or args.save_manifest or args.labels or args.reference_glob:
            raise ParameterError("--dry-run, --save-manifest, --labels and --reference-glob pair two folders; a "
                                 "manifest is already paired", hint="drop them, or give WEBCAM_FOLDER REFERENCE_FOLDER")
        res = validate_study(args.manifest, args.out, params=params, screen=screen, mapping=mapping,
                             figures=not args.no_figures, target_rule=args.target_rule,
                             progress=lambda f, m: print(f"[{f:4.0%}] {m}", file=sys.stderr))
        return _report_study(res)
    if args.dry_run or args.save_manifest or args.labels or args.reference_glob:
        raise ParameterError("--dry-run, --save-manifest, --labels and --reference-glob belong to the study from two "
                             "folders", hint="aspectus validate WEBCAM_FOLDER REFERENCE_FOLDER -o OUT --dry-run")
    if args.webcam and args.reference and Path(args.webcam).is_dir() and not (Path(args.webcam) / "samples.parquet"
                                                                                ).exists() \
            and any(Path(args.webcam).glob("*/samples.parquet")):
        raise ParameterError(f"{args.webcam} holds one folder per clip, but {args.reference} is a single file",
                             hint="for a study give the reference FOLDER; for one pair give one clip's folder")
    if not (args.webcam and args.reference):
        raise ParameterError("validate needs WEBCAM and REFERENCE (or --manifest CSV)",
                             hint="aspectus validate OUT/clip REFERENCE -o VALIDATION")
    r = validate_pair(args.webcam, args.reference, args.out, mapping=mapping, screen=screen, params=params,
                      segments=args.segments, participant=args.participant, session=args.session,
                      figures=not args.no_figures)
    print("\n".join(pair_summary_lines(r)))
    if r.meta.get("agreement_withheld"):
        print("WARNING: the alignment is uncertain - agreement figures withheld (see the note below; "
              "--force-agreement shows them)")
    for n in r.notes:
        print(f"  note: {n}", file=sys.stderr)
    return 0


def _report_study(res) -> int:
    n = len(res.results)
    print(f"{n} pair{'' if n == 1 else 's'} validated, {len(res.failures)} failed -> {res.paths['report']}")
    line = _pooled_line(getattr(res, "pooled", None))
    if line:
        print(line)
    for k, v in res.failures.items():
        print(f"  failed {k}: {v}", file=sys.stderr)
    if res.unpaired:
        print(f"  {len(res.unpaired)} file{'' if len(res.unpaired) == 1 else 's'} not paired (clips or references), "
              "listed above and in "
              f"{res.paths.get('pairing', 'pairing.csv')}", file=sys.stderr)
    return 1 if res.failures else 0


def _run_folders(args, params, screen, mapping) -> int:
    from aspectus.validation.pairing import pair_folders
    from aspectus.validation.study import validate_study

    pairing = pair_folders(args.webcam, args.reference, label_pattern=args.labels, tables=mapping is not None,
                           reference_glob=args.reference_glob)
    written = pairing.write_manifest(args.save_manifest) if args.save_manifest else None
    for p in pairing.pairs:
        print(f"pair {p.clip.key} <- {p.reference.rel} ({p.matched_on})")
    for m in pairing.messages():
        print(f"  left over: {m}", file=sys.stderr)
    if written is not None:
        print(f"pairing written to {written}; check it, edit it if needed, and rerun with --manifest {written}")
    pairing.raise_if_ambiguous(written)
    if args.dry_run:
        print(f"{len(pairing.pairs)} pair(s) found, {len(pairing.messages())} file(s) left over (dry run: nothing "
              "validated)")
        return 0
    if not pairing.pairs:  # the reasons are the lines above: the error does not repeat them
        from aspectus.errors import AspectusInputError

        raise AspectusInputError(f"no clip could be paired with a reference ({len(pairing.messages())} file(s) left "
                                 "over, each listed above with the reason)", path=args.webcam,
                                 hint="take participant/session labels from the names with --labels REGEX, or write "
                                      "a manifest CSV and use --manifest")
    res = validate_study(pairing, args.out, params=params, screen=screen, mapping=mapping,
                         figures=not args.no_figures, target_rule=args.target_rule,
                         progress=lambda f, m: print(f"[{f:4.0%}] {m}", file=sys.stderr))
    return _report_study(res)


def _pooled_line(pooled) -> str:
    """The study's headline figure in a line: the per-window fixation count's r and ICC over every paired window
    (or why they are not given), with a pointer to the report for the figures that allow for several windows per
    participant."""
    from aspectus.validation.windows import MIN_PAIRS

    if pooled is None or not len(pooled) or "feature" not in pooled:
        return ""
    fc = pooled[(pooled["scope"] == "window") & (pooled["feature"] == "fixation_count")]
    if not len(fc):
        return ""
    n = int(fc["n"].iloc[0])
    if n < MIN_PAIRS:
        return (f"Fixations per window, all windows pooled: {n} windows, too few for r and ICC (at least "
                f"{MIN_PAIRS}); shorter windows (--window-s) or more recordings give more.")
    return (f"Fixations per window, all {n} windows pooled: r {_f(fc['pearson_r'].iloc[0])}, ICC "
            f"{_f(fc['icc'].iloc[0])} (windows taken as independent; the report also gives the figures that allow "
            "for several windows per participant).")


def _f(v) -> str:
    """A figure with two decimals, "n/a" where it could not be computed (never "nan")."""
    try:
        v = float(v)
    except (TypeError, ValueError):
        return "n/a"
    return f"{v:.2f}" if v == v and abs(v) != float("inf") else "n/a"


def pair_summary_lines(r) -> list[str]:
    """What the terminal says after one pair: how the clocks were aligned, the headline agreement figures (each
    named in words, with its scale), and where the report is."""
    from aspectus.validation.align import method_text
    from aspectus.validation.report import confidence_words
    from aspectus.validation.windows import MIN_PAIRS

    al, ag = r.alignment, r.agreement
    when = "before" if al.offset_s < 0 else "after"
    clocks = (f"Clocks: the lab tracker started {abs(al.offset_s):.3f} s {when} the webcam (found by "
              f"{method_text(al.method)}")
    if al.method != "user" and not al.method.startswith("marker"):
        clocks += f"; confidence {al.confidence:.2f} on a 0-1 scale: {confidence_words(al.confidence)}"
    lines = [clocks + ")."]
    agree = (f"Agreement: fixation labels sample by sample kappa {_f(r.events.get('kappa'))} (0: chance, 1: complete); "
             f"fixation onsets found by both F1 {_f(r.events.get('f1'))} (1: all matched)")
    fc = ag[(ag["scope"] == "window") & (ag["feature"] == "fixation_count")] if len(ag) else ag
    if len(fc):
        n = int(fc["n"].iloc[0])
        win = (r.meta.get("params") or {}).get("window_s")
        per = f"fixations per {win:g} s window" if win else "fixations per window"
        if r.meta.get("agreement_withheld"):
            agree += f"; {per} r and ICC withheld ({n} windows)"
        elif n < MIN_PAIRS:  # as the report and the app: too few pairs for r, ICC and limits to mean anything
            agree += f"; {per}: {n} windows, too few for r and ICC (at least {MIN_PAIRS})"
        else:
            agree += f"; {per} r {_f(fc['pearson_r'].iloc[0])}, ICC {_f(fc['icc'].iloc[0])} ({n} windows)"
    lines.append(agree + ".")
    own = r.meta.get("webcam_verdict") or {}
    if own.get("precision_tier") not in (None, "events"):
        lines.append(f"Webcam clip's own check: {str(own.get('verdict') or '').split(':', 1)[0] or 'not usable'} - "
                     "its precision is too low for fixation counts and durations (run.json, quality).")
    lines.append(f"Report (open in a browser): {r.paths['report']}")
    return lines
