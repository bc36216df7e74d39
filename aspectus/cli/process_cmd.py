"""``aspectus process CLIP... -o OUTDIR``: clips to samples, events and features."""
from __future__ import annotations

import argparse
import sys
from pathlib import Path


def register(sub) -> None:
    p = sub.add_parser(
        "process",
        help="process recorded clips into gaze samples, events and features",
        description="Track face and irises in each clip, estimate head-compensated gaze angles, detect "
        "fixations, saccades and blinks, and write per-clip outputs into OUTDIR/<clip file stem>/ (or the "
        "folder 'aspectus batch' gave the clip, when a batch ran into OUTDIR): "
        "samples.parquet/.csv, events.csv/.parquet, features.csv/.parquet and run.json. "
        "A clip that fails is reported in one line; the other clips still finish.",
    )
    p.add_argument("clips", nargs="+", metavar="CLIP", help="video files (mp4, mov, avi, mkv, webm)")
    p.add_argument("-o", "--out", required=True, metavar="OUTDIR", help="output folder")
    from aspectus.cli.outdir import add_output_options

    add_output_options(p)
    p.add_argument("--fov-deg", type=float, default=60.0,
                   help="assumed horizontal field of view of the webcam in degrees, across the upright picture's width "
                        "(for a clip tagged to play rotated, the width as played; default 60)")
    p.add_argument("--face", default="largest",
                   help='which face to follow when several are in view: "largest" (default) or "index:N" '
                        "(N-th face from the picture's left edge, from 0)")
    p.add_argument("--max-faces", type=int, default=2,
                   help="faces looked for per frame (default 2; with three or more people in view raise it, or the "
                        "face to follow may not be among those reported)")
    p.add_argument("--segments", metavar="CSV", help="task segments (label, onset_s, offset_s) for per-segment features; applied to every clip")
    p.add_argument("--gaze", dest="gaze_settings", action="append", default=[], metavar="NAME=VALUE",
                   help="a choice of how the gaze is measured (repeatable), e.g. --gaze mirrored=true for clips "
                        "recorded mirrored left to right, --gaze iris_combine=limbus; the choices are described in "
                        "the README (What you get per clip) and in the app (Parameters, Gaze measurement), and "
                        "run.json records them under params, gaze. A change alters the gaze samples, so the face is "
                        "tracked again")
    add_analysis_arguments(p)
    p.add_argument("--no-reuse", action="store_true",
                   help="track the face again even when OUTDIR holds gaze samples from the same clip and settings "
                        "(by default they are reused, and only the detection and features are redone)")
    p.add_argument("--stages", choices=("overlapped", "serial"), default=None,
                   help="overlapped (default): decoding and the per-frame geometry run beside the face mesh, the "
                        "fastest for one clip on a machine of its own; serial: all in one thread on one core, the "
                        "least CPU per frame, for running one such command per core (batch workers do this); "
                        "the outputs are the same")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.set_defaults(func=run)


def add_analysis_arguments(p: argparse.ArgumentParser) -> None:
    """Options shared by every command that detects events."""
    from aspectus.events.analysis import AnalysisParams
    from aspectus.events.detect import DETECTORS

    names = {"idt": "dispersion threshold, Salvucci & Goldberg 2000", "i2mc": "two-means clustering, Hessels et al. "
             "2017", "ivt": "velocity threshold, Engbert & Kliegl 2003 / Nystroem & Holmqvist 2010"}
    default = AnalysisParams().detector
    p.add_argument("--detector", default=None, metavar="NAME",
                   help="event detector, one of: " + "; ".join(
                       f"{d} ({names.get(d, d)})" for d in DETECTORS) + f". Default: {default}")
    d = AnalysisParams()
    p.add_argument("--window-s", type=float, default=None, metavar="S",
                   help=f"length of the fixed feature windows in seconds (default {d.window_s:g})")
    p.add_argument("--step-s", type=float, default=None, metavar="S",
                   help=f"start-to-start step between feature windows in seconds (default: the window length, "
                        f"{d.step_s:g}, so windows lie side by side)")
    p.add_argument("--set", dest="settings", action="append", default=[], metavar="NAME=VALUE",
                   help="any other detection setting, e.g. --set min_fixation_ms=80 (repeatable); the names are "
                        "listed when one is misspelt, and the app's Parameters panel shows each one's meaning when "
                        "you hover over it")


def analysis_params_from_args(args):
    from aspectus.events.analysis import AnalysisParams
    from aspectus.errors import ParameterError

    d = AnalysisParams().to_dict()
    if getattr(args, "detector", None):
        d["detector"] = args.detector
    if getattr(args, "window_s", None) is not None:
        d["window_s"] = args.window_s
        d["step_s"] = args.window_s  # --window-s alone: windows side by side, not the default step's gaps
    if getattr(args, "step_s", None) is not None:
        d["step_s"] = args.step_s
    for item in getattr(args, "settings", []) or []:
        if "=" not in item:
            raise ParameterError(f"--set {item!r} is not NAME=VALUE")
        k, v = item.split("=", 1)
        k = k.strip()
        if k not in d:
            raise ParameterError(f"unknown analysis parameter {k!r}", hint=_did_you_mean(k, d))
        d[k] = _parse_value(v.strip(), d[k], k, "--set")
    try:
        return AnalysisParams.from_dict(d)
    except ParameterError as exc:  # worded with the options the user typed, not the parameters' inner names
        import re

        def opt(m):
            return _OPTION_OF[m.group(0)]

        names = r"\b(?:" + "|".join(_OPTION_OF) + r")\b"
        raise ParameterError(re.sub(names, opt, exc.problem), path=exc.path, where=exc.where,
                             hint=re.sub(names, opt, exc.hint) if exc.hint else None) from None


#: analysis parameters with an option of their own (every other one is given as --set NAME=VALUE)
_OPTION_OF = {"window_s": "--window-s", "step_s": "--step-s"}


def gaze_params_from_args(args):
    from dataclasses import asdict

    from aspectus.errors import ParameterError
    from aspectus.webcam.gaze import GazeParams

    d = asdict(GazeParams())
    for item in getattr(args, "gaze_settings", []) or []:
        if "=" not in item:
            raise ParameterError(f"--gaze {item!r} is not NAME=VALUE")
        k, v = (x.strip() for x in item.split("=", 1))
        if k not in d:
            raise ParameterError(f"unknown gaze parameter {k!r}", hint=_did_you_mean(k, d))
        d[k] = _parse_value(v, d[k], k, "--gaze")
    return GazeParams(**d)


def _count(n, word: str) -> str:
    return f"{n} {word}" + ("" if n == 1 else "s")


def _did_you_mean(name: str, known) -> str:
    """The hint for a misspelt parameter name: the closest known names first, then all of them."""
    import difflib

    close = difflib.get_close_matches(name, list(known), n=3, cutoff=0.6)
    return (f"did you mean {' or '.join(close)}? " if close else "") + "known: " + ", ".join(sorted(known))


def _parse_value(v: str, like, name: str, option: str):
    """``v`` read as the type of the parameter's default ``like``; a ParameterError naming it otherwise."""
    from aspectus.errors import ParameterError

    def refuse(expected):
        shown = str(like).lower() if isinstance(like, bool) else like  # as typed on the command line
        return ParameterError(f"{option} {name}={v!r}: expected {expected}", hint=f"e.g. {option} {name}={shown}"
                              if like is not None else None)

    if isinstance(like, bool):
        if v.lower() in ("1", "true", "yes", "on"):
            return True
        if v.lower() in ("0", "false", "no", "off"):
            return False
        raise refuse("true or false")
    if isinstance(like, int):
        try:
            f = float(v)
        except ValueError:
            raise refuse("a whole number") from None
        if not f.is_integer():
            raise refuse("a whole number")
        return int(f)
    if isinstance(like, float):
        try:
            return float(v)
        except ValueError:
            raise refuse("a number") from None
    if like is None:
        if v.lower() in ("none", "null", ""):
            return None
        try:
            return float(v)
        except ValueError:
            return v
    return v


def _write_error_log(out_dir: Path, clip: Path) -> Path | None:
    """The traceback of the exception being handled, as ``out_dir/error.log`` (None if it cannot be written)."""
    import datetime
    import traceback

    from aspectus import __version__

    log = out_dir / "error.log"
    try:
        out_dir.mkdir(parents=True, exist_ok=True)
        log.write_text(f"aspectus {__version__}, {datetime.datetime.now().isoformat(timespec='seconds')}\n"
                       f"clip: {clip.name}\n\n{traceback.format_exc()}", encoding="utf-8")
    except OSError:
        return None
    return log


def _num(x, fmt: str, unit: str) -> str:
    """A figure with its unit for the summary line, or "n/a" where it could not be measured."""
    try:
        x = float(x)
    except (TypeError, ValueError):
        return "n/a"
    return f"{format(x, fmt)} {unit}" if x == x and abs(x) != float("inf") else "n/a"


def run(args) -> int:
    from aspectus.progress import ProgressBar, classify_failure

    from aspectus.studies.clips import clip_output_dir
    from aspectus.webcam.pipeline import ProcessParams, process_clip

    params = ProcessParams(fov_deg=args.fov_deg, face=args.face, max_faces=args.max_faces,
                           gaze=gaze_params_from_args(args), analysis=analysis_params_from_args(args))
    from aspectus.cli.outdir import apply_output_options, prepare_out_dir

    apply_output_options(args)
    if args.segments is not None:  # one file for every clip: a problem with it is said once, before any clip runs
        from aspectus.events.segments import read_segments

        read_segments(args.segments)
    out_root = prepare_out_dir(args.out)
    failures = 0
    stems: dict[str, Path] = {}
    for clip in args.clips:
        clip = Path(clip)
        clip_out = clip_output_dir(out_root, clip)  # the batch's folder for the clip when a batch ran into OUTDIR
        if clip_out.name in stems and stems[clip_out.name] != clip.resolve():
            print(f"aspectus: error: {clip}: has the same file stem as {stems[clip_out.name]}; "
                  f"both would write to {clip_out} - process them into different OUTDIRs "
                  "or use `aspectus batch`, which keeps them apart", file=sys.stderr)
            failures += 1
            continue
        stems[clip_out.name] = clip.resolve()
        bar = ProgressBar(total=1000, desc=clip.name, unit="‰", disable=args.quiet, leave=False,
                   bar_format="{desc}: {percentage:3.0f}%|{bar}| [{elapsed}<{remaining}]")

        def progress(frac, msg, bar=bar):
            bar.n = int(frac * 1000)
            bar.refresh()

        try:
            res = process_clip(clip, clip_out, params=params, segments=args.segments,
                               progress=progress, reuse=not args.no_reuse, stages=args.stages)
        except BaseException as exc:  # noqa: BLE001 - one clip's failure must not stop the others
            bar.close()
            failure = classify_failure(exc)  # the one sorting of failures (aspectus.progress)
            if failure.kind == "cancelled":
                raise
            if failure.kind == "input":
                print(f"aspectus: error: {exc}", file=sys.stderr)
            elif failure.kind == "file":
                where = Path(exc.filename) if exc.filename else None
                writing = where is not None and clip_out.resolve() in (where.resolve(), *where.resolve().parents)
                if writing:
                    print(f"aspectus: error: {clip}: could not write its outputs ({where}: "
                          f"{exc.strerror or exc}); the new result was built beside the earlier one and is "
                          "discarded, so the earlier result (if any) is still there and valid - free space or fix "
                          "the folder, then run again", file=sys.stderr)
                else:
                    print(f"aspectus: error: {clip}: file error ({f'{where}: ' if where else ''}"
                          f"{exc.strerror or exc}); the other clips go on", file=sys.stderr)
            else:  # memory or a fault of aspectus: keep the traceback for a report
                if not isinstance(exc, Exception):
                    raise
                log = _write_error_log(clip_out, clip)
                where = f"the details are in {log}; please report it with that file" if log else "please report it"
                print(f"aspectus: error: {clip}: processing failed ({type(exc).__name__}: {exc}); this is a "
                      f"fault in aspectus, not in the clip as far as it can tell - {where}; the other clips go on",
                      file=sys.stderr)
            failures += 1
            continue
        bar.close()
        try:  # a fault of an earlier run is no longer the state of this clip
            (res.out_dir / "error.log").unlink(missing_ok=True)
        except OSError:
            pass
        s = res.summary
        # the two noise figures the verdict and the precision tier read (RMS over 33 ms steps, SD within fixations), as
        # the app shows them
        print(f"{clip.name}: {s['frames']} frame{'' if s['frames'] == 1 else 's'} ({s['duration_s']:.1f} s), face found {s['face_found_frac']:.0%}, "
              f"{_count(s['blink_count'], 'blink')}, {_count(s['fixation_count'], 'fixation')}, median eye-to-camera distance "
              f"{_num(s['median_distance_mm'], '.0f', 'mm')}, noise {_num(s.get('noise_rms_s2s_33ms_deg'), '.2f', 'deg')} "
              f"sample to sample, SD {_num(s.get('noise_sd_deg'), '.2f', 'deg')} within fixations -> {res.out_dir}")
        print(f"  {s['verdict']}")
        if res.reused_samples:
            print("  (gaze samples reused from the earlier run of this clip with the same settings; "
                  "--no-reuse tracks the face again)")
    if failures:
        print(f"aspectus: {failures} of {len(args.clips)} clip(s) failed", file=sys.stderr)
        return 1
    return 0
