"""Study mode: many webcam/reference pairs from a manifest or two folders.

Results per participant, pooled agreement over all windows, statistics that
allow for windows nested in participants (:mod:`aspectus.validation.repeated`)
and the summary table (:mod:`aspectus.validation.summary`)."""
from __future__ import annotations

from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np
import pandas as pd

from aspectus import __version__
from aspectus.errors import AspectusInputError
from aspectus.reference import TableMapping
from aspectus.reference.screen import ScreenGeometry

from aspectus.progress import CancelFlag, ProgressFn, raise_if_cancelled
from aspectus.validation.manifest import read_validation_manifest
from aspectus.validation.pair import ValidateParams, agreement_table, is_clip, validate_pair

from aspectus.validation.repeated import repeated_agreement_table
from aspectus.validation.summary import study_summary


@dataclass
class StudyResult:
    """Per-participant results, pooled agreement, repeated-measures statistics, and the summary table.

    ``pooled`` has one row per (scope, feature): the statistics over all
    windows taken as independent (``pearson_r`` ... ``ba_loa_high``) and
    those that allow for windows nested in participants (``rmcorr*``,
    ``ba_rm_*``, ``means_*``; see :func:`repeated_agreement_table`).
    ``participant_means`` has one row per (scope, feature, participant).
    ``pairing`` is the :class:`aspectus.validation.pairing.FolderPairing` of folder mode
    (None for a manifest); ``unpaired`` lists, one line each, the clips and
    references that were not paired.
    """

    per_participant: pd.DataFrame
    pooled: pd.DataFrame
    summary: pd.DataFrame
    results: dict
    failures: dict
    participant_means: pd.DataFrame = field(default_factory=pd.DataFrame)
    pairing: object = None
    unpaired: list = field(default_factory=list)
    paths: dict = field(default_factory=dict)


def _study_rows(source, *, references=None, label_pattern=None, reference_glob=None, tables=False,
                save_manifest=None):
    """(rows, pairing) from a manifest, a pair of folders, or a FolderPairing."""
    from aspectus.validation.pairing import FolderPairing, pair_folders

    if isinstance(source, FolderPairing):
        pairing = source
    elif references is not None:
        src = Path(source)
        if not src.is_dir():
            raise AspectusInputError("folder mode needs the webcam side as a folder", path=src,
                                    hint="give the output folder of `aspectus batch`/`aspectus process`, or a manifest "
                                         "CSV without a reference folder")
        pairing = pair_folders(src, references, label_pattern=label_pattern, tables=tables,
                               reference_glob=reference_glob)
    else:
        if Path(source).is_dir():
            raise AspectusInputError("is a folder: folder mode needs the reference folder too", path=source,
                                    hint="aspectus validate WEBCAM_FOLDER REFERENCE_FOLDER -o OUT, or --manifest CSV")
        return read_validation_manifest(source), None
    written = pairing.write_manifest(save_manifest) if save_manifest is not None else None
    pairing.raise_if_ambiguous(written)
    if not pairing.pairs:
        raise AspectusInputError(
            "no clip could be paired with a reference: " + "; ".join(pairing.messages()[:6])
            + (" ..." if len(pairing.messages()) > 6 else ""), path=pairing.webcam_folder,
            hint="take participant/session labels from the names with --labels REGEX, or write a manifest CSV and "
                 "use --manifest")
    return pairing.rows(), pairing


def _own_check(verdict: dict | None) -> dict:
    """The webcam clip's own precision check for the study table: its tier and its verdict's opening words
    ("Usable", "Partly usable", "Not usable"; empty without a check)."""
    verdict = verdict or {}
    return {"webcam_precision_tier": verdict.get("precision_tier") or "",
            "webcam_verdict": str(verdict.get("verdict") or "").split(":", 1)[0].strip()}


def _target_quality(cam_dir, rule) -> dict:
    """The known-target check's figures of a webcam folder (NaN when it has none) and the rule's verdict."""
    from aspectus.targets.check import read_check
    from aspectus.targets.study import check_row

    doc = read_check(cam_dir) if cam_dir is not None and Path(cam_dir).is_dir() else None
    q = pd.DataFrame([check_row(doc)])
    if doc is None:
        return {**q.iloc[0].to_dict(), "target_excluded": None, "target_exclusion_reasons": None}
    return rule.apply(q).iloc[0].to_dict()


def validate_study(source, out_dir, *, references=None, label_pattern: str | None = None,
                   reference_glob: str | None = None, save_manifest=None, params: ValidateParams | None = None,
                   screen: ScreenGeometry | None = None, mapping: TableMapping | None = None, figures: bool = True,
                   progress: ProgressFn | None = None, cancel: CancelFlag | None = None,
                   target_rule=None) -> StudyResult:
    """Validate every pair of a study; pool the windows of all participants.

    Parameters
    ----------
    source : path-like or FolderPairing
        A manifest CSV (:func:`read_validation_manifest`); or, with
        ``references``, the output folder of ``aspectus batch`` / ``aspectus
        process`` (folder mode, :func:`aspectus.validation.pairing.pair_folders`); or a
        pairing made beforehand.
    out_dir : path-like
        The study folder.
    references : path-like, optional
        Folder mode: the folder (or BIDS tree) of reference recordings.
    label_pattern, reference_glob : str, optional
        Folder mode: see :func:`aspectus.validation.pairing.pair_folders`. Plain tables
        are considered as references when ``mapping`` is given.
    save_manifest : path-like, optional
        Folder mode: write the pairs found as a manifest CSV (before any
        validation, and also when the pairing is ambiguous).
    params, screen, mapping, figures
        As for :func:`validate_pair`; ``mapping`` is used for rows without one.
    progress : callable(fraction, message), optional
        Called before each pair and at the end (:mod:`aspectus.progress`).
    cancel : object with ``is_set()``, optional
        Checked before each pair; when set, :class:`aspectus.errors.Cancelled`
        is raised and nothing of the study's own tables is written.
    target_rule : aspectus.targets.study.ExclusionRule or str, optional
        Exclusion rule for the pairs whose webcam folder holds a known-target
        check (``target_check.json``); default its default thresholds.

    Notes
    -----
    Each pair gets ``OUTDIR/<participant>[_<session>][_<task>][_<run>]/`` with
    the files of :func:`validate_pair`. The study folder gets
    ``pooled_agreement.csv`` (one row per scope and feature: the statistics
    over all paired windows taken as independent, and beside them the
    repeated-measures correlation, the Bland & Altman (2007) limits for
    several windows per participant and the comparison of participant means,
    :func:`repeated_agreement_table`), ``participant_means.csv``,
    ``participants.csv`` (one row per pair: offset, its confidence, kappa, F1,
    n windows, r and ICC of the fixation count; unpaired clips and references
    as rows too in folder mode), ``summary.csv`` / ``summary.md`` /
    ``summary.html`` (a table to paste into a paper), ``report.html``, in
    folder mode ``pairing.csv`` (every clip and reference with what happened
    to it), and ``study_validation.json`` last. When a webcam folder holds a
    known-target check, ``participants.csv`` carries its figures
    (:data:`aspectus.schema.TARGET_QUALITY_COLUMNS`, empty for the other
    pairs) with the rule's verdict, and the report shows them with the
    rule in words. A pair that fails is reported
    with its error and the others go on. Subjects of the repeated-measures
    statistics are participants: two sessions of one participant count as one
    subject.

    Examples
    --------
    Folder mode: the clip results of a batch (``batch_folder``) against a
    folder of BIDS recordings - here the batch's own BIDS export, so the
    agreement is perfect (the participants and sessions are paired by their
    labels):

    >>> from aspectus.studies.bids_export import export_bids
    >>> from aspectus.validation.pair import ValidateParams
    >>> _ = export_bids(batch_folder, tmp / "bids")
    >>> res = validate_study(batch_folder, tmp / "study", references=tmp / "bids",
    ...                      params=ValidateParams(window_s=2.0, step_s=2.0), figures=False)
    >>> sorted(res.results), res.failures
    (['p01_s01_webcam', 'p02_s01_webcam'], {})
    >>> res.pooled.query("scope == 'window' and feature == 'fixation_count'")[["n", "pearson_r", "icc"]]
       n  pearson_r  icc
    0  8        1.0  1.0
    """
    from aspectus.atomic import write_bytes, write_csv, write_json, write_text
    from aspectus.validation.report import render_study_report, summary_html, summary_markdown

    from aspectus.targets.study import ExclusionRule

    params = params or ValidateParams()
    if isinstance(target_rule, str):
        target_rule = ExclusionRule.parse(target_rule)
    target_rule = target_rule or ExclusionRule()
    if params.window_s is None:  # one window length for every pair, so that their windows can be pooled
        params = replace(params, window_s=params.window_length_s, step_s=params.window_step_s)
    raise_if_cancelled(cancel)
    rows, pairing = _study_rows(source, references=references, label_pattern=label_pattern,
                                reference_glob=reference_glob, tables=mapping is not None, save_manifest=save_manifest)
    unpaired = pairing.messages() if pairing is not None else []
    out = Path(out_dir)
    results, failures, row_of, cam_dirs = {}, {}, {}, {}
    for k, row in enumerate(rows):
        raise_if_cancelled(cancel)
        if progress:
            progress(k / len(rows), f"validating {row.key}")
        row_of[row.key] = row
        m = TableMapping.load(row.mapping) if row.mapping else mapping
        p = replace(params, offset_s=row.offset_s) if row.offset_s is not None else params
        try:
            cam = row.webcam
            if is_clip(cam):
                from aspectus.webcam.pipeline import clip_output_dir, process_clip

                proc = clip_output_dir(out / "processed", cam)
                process_clip(cam, proc, segments=row.segments)
                cam = proc
            cam_dirs[row.key] = cam
            results[row.key] = validate_pair(cam, row.reference, out / row.key, mapping=m, screen=screen, params=p,
                                             segments=row.segments, participant=row.participant,
                                             session=row.session, figures=figures)
        except AspectusInputError as exc:
            failures[row.key] = str(exc)
    if not results:
        raise AspectusInputError("no pair of the study could be validated: "
                                + "; ".join(f"{k}: {v}" for k, v in failures.items()),
                                path=source if pairing is None else pairing.webcam_folder)
    per = []
    for key, r in results.items():
        fc = r.agreement[(r.agreement["scope"] == "window") & (r.agreement["feature"] == "fixation_count")]
        row = row_of[key]
        per.append({"participant": r.meta["participant"], "session": r.meta["session"], "task": row.task,
                    "run": row.run, "key": key,
                    "offset_s": r.alignment.offset_s, "offset_confidence": r.alignment.confidence,
                    "offset_method": r.alignment.method, "overlap_s": r.meta["overlap_s"],
                    "windows_paired": int(r.pairs[(r.pairs["scope"] == "window") & r.pairs["paired"]].shape[0])
                    if len(r.pairs) else 0,
                    "kappa": r.events["kappa"], "f1": r.events["f1"],
                    "fixation_count_r": float(fc["pearson_r"].iloc[0]) if len(fc) else np.nan,
                    "fixation_count_icc": float(fc["icc"].iloc[0]) if len(fc) else np.nan,
                    **_own_check(r.meta.get("webcam_verdict")),
                    "status": "ok", "notes": "; ".join(r.notes), **_target_quality(cam_dirs.get(key), target_rule)})
    for key, msg in failures.items():
        row = row_of[key]
        per.append({"participant": row.participant, "session": row.session, "task": row.task, "run": row.run,
                    "key": key, "status": "failed", "notes": msg})
    if pairing is not None:
        for c, why in pairing.clips_without_reference:
            per.append({"key": c.key, **{k: c.labels.get(k) for k in ("participant", "session", "task", "run")},
                        "status": "no reference", "notes": why})
        for ref in pairing.references_without_clip:
            per.append({**{k: ref.labels.get(k) for k in ("participant", "session", "task", "run")},
                        "key": "", "status": "no clip", "notes": f"reference {ref.rel}: no processed clip"})
        for key, why in pairing.not_processed:
            per.append({"key": key, "status": "not processed", "notes": why})
    per_df = pd.DataFrame(per)
    all_pairs = pd.concat([r.pairs.assign(participant=r.meta["participant"], key=k) for k, r in results.items()],
                          ignore_index=True)
    pooled = agreement_table(all_pairs, params.features, icc_form=params.icc_form, confidence=params.confidence)
    repeated, part_means = repeated_agreement_table(all_pairs, params.features, icc_form=params.icc_form,
                                                    confidence=params.confidence)
    if len(pooled):
        pooled = pooled.merge(repeated, on=["scope", "feature"], how="left")
    summary = study_summary(pooled, per_df, icc_form=params.icc_form)
    if "target_excluded" in per_df.columns and per_df["target_n_fixation_targets"].isna().all():
        per_df = per_df.drop(columns=[c for c in per_df.columns if c.startswith("target_")])  # no check anywhere
    html, pngs = render_study_report(per_df, pooled, summary, all_pairs, results, failures, params,
                                     figures=figures, participant_means=part_means, unpaired=unpaired,
                                     target_rule=target_rule)
    paths = {f"{k}_png": write_bytes(out / f"{k}.png", v) for k, v in pngs.items()}
    paths |= {"participants": write_csv(out / "participants.csv", per_df),
              "pooled_agreement": write_csv(out / "pooled_agreement.csv", pooled),
              "participant_means": write_csv(out / "participant_means.csv", part_means),
              "pooled_pairs": write_csv(out / "pooled_pairs.csv", all_pairs),
              "summary_csv": write_csv(out / "summary.csv", summary),
              "summary_md": write_text(out / "summary.md", summary_markdown(summary, icc_form=params.icc_form)),
              "summary_html": write_text(out / "summary.html", summary_html(summary, icc_form=params.icc_form)),
              "report": write_text(out / "report.html", html)}
    from aspectus.validation.pair import _recorded

    def rec(path):  # relative to the study folder, as every output records an input (absolute: --full-paths)
        return _recorded(path, out) if isinstance(path, (str, Path)) and str(path) else path

    if pairing is not None:
        table = pairing.table()
        for col in ("webcam", "reference"):
            table[col] = table[col].map(rec)
        paths["pairing"] = write_csv(out / "pairing.csv", table)
    paths["study"] = write_json(out / "study_validation.json", {
        "aspectus": __version__,
        "manifest": rec(str(source)) if pairing is None else None,
        "webcam_folder": rec(pairing.webcam_folder) if pairing is not None else None,
        "reference_folder": rec(pairing.reference_folder) if pairing is not None else None,
        "pairs": len(rows), "validated": len(results), "failed": failures, "unpaired": unpaired,
        "target_quality_rule": target_rule.to_dict() if "target_excluded" in per_df.columns else None,
        "params": params.to_dict(),
        "pooling": {
            "pooled": "pearson_r ... ba_loa_high: all paired windows of all participants taken as independent "
                      "(clustering in participants ignored; intervals too narrow when participants differ)",
            "rmcorr": "repeated-measures correlation, Bakdash & Marusich (2017): within-participant association, "
                      "df = N - k - 1",
            "ba_rm": "Bland & Altman (2007), true value varies: limits for a single window with several windows "
                     "per participant, from a one-way ANOVA of the differences by participant",
            "means": "participants' mean values compared, one point per participant",
            "subject": "participant (sessions of one participant are one subject)"}})
    if progress:
        progress(1.0, "study done")
    return StudyResult(per_participant=per_df, pooled=pooled, summary=summary, results=results, failures=failures,
                       participant_means=part_means, pairing=pairing, unpaired=unpaired, paths=paths)


