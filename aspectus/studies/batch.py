"""Whole studies: every clip of a folder or manifest, resumable, in parallel.

:func:`run_batch` is the coordinator. It finds the clips
(:mod:`aspectus.studies.clips`), decides from the files on disk which are already
done, runs the rest on an engine (:mod:`aspectus.studies.engines`: local processes or
a Dask cluster), and writes the study's tables.

Output folder layout::

    OUTDIR/<clip key>/...           per-clip outputs, exactly as ``aspectus process`` writes them
    OUTDIR/status.csv               one row per clip: done / failed / skipped / pending, with the reason
    OUTDIR/study_features.csv       one row per clip x scope (clip, window, segment), with the labels
    OUTDIR/study_features.parquet   the same table
    OUTDIR/study.json               sidecar: parameters, counts, engine, software version
    OUTDIR/validation_manifest.csv  when clips have a reference: finished clip folders paired with their
                                    reference recordings, ready for ``aspectus validate``
    OUTDIR/.batch/attempts.jsonl    append-only log: one fsynced line per finished attempt
    OUTDIR/.batch/hash_index.json   (size, mtime_ns) -> SHA-256 of each clip, so clips are hashed once
    OUTDIR/.batch/errors/<key>.txt  traceback of an internal error
    OUTDIR/.batch/lock              held while a run uses OUTDIR

When is a clip done
-------------------
Only the files decide, never the log: a clip is done when its folder holds a
``run.json`` (the pipeline writes it last, after every other output was
renamed into place) whose ``input_sha256`` equals the clip's current SHA-256
and whose ``params_sha256`` equals the current
:meth:`~aspectus.webcam.pipeline.ProcessParams.fingerprint` (every parameter and the
method's revision, so results of an earlier method are redone), and whose
listed outputs are all present. Such a clip is *skipped*. A clip whose file or
parameters changed is processed again. Every output is written to a temporary
name and renamed, so a run killed at any moment leaves complete files or none;
stale temporary files (``.*.part``) of a killed attempt are removed before
the clip is tried again.

A clip that failed with an input error (unreadable video, no face ...) is not
retried while its file and the parameters stay the same - it would fail the
same way - unless ``retry_failed`` is set. Internal errors and worker crashes
are always retried.

Status values: ``done`` (processed in this run), ``skipped`` (already done
with the same input and parameters), ``failed`` (with the reason) and
``pending`` (not reached because the run was stopped).
"""
from __future__ import annotations

import contextlib
import datetime as _dt
import sys
import time
import uuid
from dataclasses import dataclass, field
from pathlib import Path
from collections.abc import Callable

import pandas as pd

from aspectus import __version__
from aspectus.atomic import write_csv, write_json, write_parquet
from aspectus.run_record import read_run_json
from aspectus.studies.clips import VIDEO_EXTENSIONS, ClipJob, load_jobs
from aspectus.studies.board import _Board
from aspectus.studies.done import clip_is_done, run_summary, _clean_partials  # noqa: F401 (clip_is_done re-exported)
from aspectus.studies.state import AttemptLog, HashIndex, _out_dir_lock, _utc_now  # noqa: F401 (re-exported)
from aspectus.studies.task import DEFAULT_CLIP_FN, run_clip_task  # noqa: F401 (re-exported)

#: batch bookkeeping folder inside OUTDIR (clip keys never start with a dot)
STATE_DIR = ".batch"
#: status.csv is rewritten at least this often while a run goes on, s
STATUS_EVERY_S = 30.0

STATUS_COLUMNS = ("clip", "key", "status", "reason", "participant", "session")
STATUS_TAIL_COLUMNS = ("frames", "duration_s", "valid_frac", "usable", "verdict", "worker", "elapsed_s",
                       "input_sha256", "out_dir", "reference", "segments", "finished_utc")




# ------------------------------------------------------------------------------------------------
# the coordinator

@dataclass
class BatchResult:
    """What a batch run produced.

    Attributes
    ----------
    out_dir : Path
        The batch output folder.
    status : pandas.DataFrame
        The status table (as written to ``status.csv``).
    study : pandas.DataFrame
        The study table (as written to ``study_features.csv``).
    counts : dict
        Number of clips per status.
    paths : dict
        ``status``, ``study_csv``, ``study_parquet``, ``sidecar`` -> Path.
    engine : str
        Which engine ran the clips.
    elapsed_s : float
        Wall time of the run, s.
    """

    out_dir: Path
    status: pd.DataFrame
    study: pd.DataFrame
    counts: dict
    paths: dict
    engine: str = ""
    elapsed_s: float = 0.0

    @property
    def ok(self) -> bool:
        """True when no clip failed and none was left pending."""
        return not self.counts.get("failed") and not self.counts.get("pending")


@dataclass
class _Row:
    job: ClipJob
    status: str = "pending"
    reason: str = ""
    summary: dict = field(default_factory=dict)
    worker: str = ""
    elapsed_s: float | None = None
    input_sha256: str | None = None
    stat: tuple[int, int] | None = None
    finished_utc: str | None = None


def _default_params():
    from aspectus.webcam.pipeline import ProcessParams

    return ProcessParams()


def _label_names(rows: list[_Row]) -> list[str]:
    """The extra label columns of the clips (participant and session aside), in first-seen order."""
    return list(dict.fromkeys(k for r in rows for k in r.job.labels))


def _rec(path, out_dir: Path) -> str:
    """An input's path as the study tables record it: relative to OUTDIR (absolute ones name users and
    students), absolute only with --full-paths / ASPECTUS_FULL_PATHS=1."""
    from aspectus.atomic import full_paths_wanted, recorded_path

    return str(Path(path).resolve()) if full_paths_wanted() else recorded_path(path, out_dir)


def _status_table(rows: list[_Row], out_dir: Path) -> pd.DataFrame:
    extra = _label_names(rows)
    recs = []
    for r in rows:
        j = r.job
        s = r.summary or {}
        reason = r.reason.replace(str(j.clip), j.rel) if isinstance(r.reason, str) else r.reason
        rec = {"clip": j.rel, "key": j.key, "status": r.status, "reason": reason,
               "participant": j.participant, "session": j.session}
        for k in extra:
            rec[k] = j.labels.get(k)
        rec.update({
            "frames": s.get("frames"), "duration_s": s.get("duration_s"), "valid_frac": s.get("valid_frac"),
            "usable": s.get("usable"), "verdict": s.get("verdict"), "worker": r.worker or None,
            "elapsed_s": None if r.elapsed_s is None else round(float(r.elapsed_s), 3),
            "input_sha256": r.input_sha256, "out_dir": j.key,
            "reference": _rec(j.reference, out_dir) if j.reference else None,
            "segments": _rec(j.segments, out_dir) if j.segments else None, "finished_utc": r.finished_utc,
        })
        recs.append(rec)
    cols = list(STATUS_COLUMNS) + extra + list(STATUS_TAIL_COLUMNS)
    return pd.DataFrame(recs, columns=cols)


def _read_features(out_dir: Path) -> pd.DataFrame | None:
    for name, reader in (("features.parquet", pd.read_parquet), ("features.csv", pd.read_csv)):
        p = out_dir / name
        if p.is_file():
            try:
                return reader(p)
            except Exception:  # noqa: BLE001 - fall back to the other copy
                continue
    return None


def target_quality(rows: list[_Row], out_dir: Path, rule=None) -> pd.DataFrame | None:
    """The known-target check's figures per finished clip (:data:`aspectus.schema.TARGET_QUALITY_COLUMNS`,
    indexed by clip key) with the verdict of ``rule`` (default :class:`aspectus.targets.study.ExclusionRule`);
    None when no clip of the study has a ``target_check.json``. A clip without a check has NaN figures and an
    empty verdict (whether it should have one is the study's to say)."""
    from aspectus.targets.check import read_check
    from aspectus.targets.study import ExclusionRule, check_row

    rule = rule or ExclusionRule()
    recs, any_check = {}, False
    for r in rows:
        if r.status not in ("done", "skipped"):
            continue
        doc = read_check(out_dir / r.job.key)
        any_check |= doc is not None
        q = pd.DataFrame([check_row(doc)])
        if doc is not None:
            q = rule.apply(q)
        else:
            q["target_excluded"] = None
            q["target_exclusion_reasons"] = None
        recs[r.job.key] = q.iloc[0].to_dict()
    if not any_check:
        return None
    return pd.DataFrame.from_dict(recs, orient="index")


def build_study_table(rows: list[_Row], out_dir: Path, *, target_rule=None) -> pd.DataFrame:
    """One row per clip x scope for every finished clip, labels first, in clip order.

    When any clip's folder holds a known-target check (``aspectus targets check``), its quality figures and the
    verdict of ``target_rule`` follow the features on every row of that clip (:func:`target_quality`)."""
    extra = _label_names(rows)
    quality = target_quality(rows, out_dir, target_rule)
    parts = []
    for r in rows:
        if r.status not in ("done", "skipped"):
            continue
        feats = _read_features(out_dir / r.job.key)
        if feats is None or feats.empty:
            continue
        j = r.job
        head = {"clip": j.rel, "key": j.key, "participant": j.participant, "session": j.session}
        for k in extra:
            head[k] = j.labels.get(k)
        head["usable"] = (r.summary or {}).get("usable")
        lab = pd.DataFrame({k: [v] * len(feats) for k, v in head.items()}, index=feats.index)
        clash = [c for c in feats.columns if c in lab.columns]
        part = [lab, feats.drop(columns=clash)]
        if quality is not None:
            q = quality.loc[[j.key]].reset_index(drop=True)
            part.append(pd.DataFrame({c: [q[c].iloc[0]] * len(feats) for c in q.columns}, index=feats.index))
        parts.append(pd.concat(part, axis=1))
    if not parts:
        return pd.DataFrame(columns=["clip", "key", "participant", "session", *extra, "usable"])
    study = pd.concat(parts, ignore_index=True)
    for c in ("participant", "session", *extra):
        study[c] = study[c].astype(object).where(study[c].notna(), None)
    return study


def validation_manifest(rows: list[_Row], out_dir: Path) -> pd.DataFrame:
    """Finished clips that have a reference, as a manifest for :func:`aspectus.validation.study.validate_study`.

    Columns ``webcam`` (the clip's output folder, relative to ``out_dir``),
    ``reference`` (relative to ``out_dir``, where the manifest is written; absolute with --full-paths),
    ``participant`` (the clip key when the clip has no participant label), ``session``, ``segments``, ``mapping`` and
    ``offset_s`` (empty where not given).
    """
    recs = []
    for r in rows:
        j = r.job
        if j.reference is None or r.status not in ("done", "skipped"):
            continue
        recs.append({"webcam": j.key, "reference": _rec(j.reference, out_dir),
                     "participant": j.participant or j.key.replace("+", "_"), "session": j.session or "",
                     "segments": _rec(j.segments, out_dir) if j.segments else "", "mapping": j.labels.get("mapping") or "",
                     "offset_s": j.labels.get("offset_s") or ""})
    return pd.DataFrame(recs, columns=["webcam", "reference", "participant", "session", "segments", "mapping",
                                       "offset_s"])


def _write_tables(rows, out_dir: Path, *, meta: dict, final: bool,
                  target_rule=None) -> tuple[pd.DataFrame, pd.DataFrame | None, dict]:
    status = _status_table(rows, out_dir)
    paths = {"status": write_csv(out_dir / "status.csv", status)}
    study = None
    if final:
        study = build_study_table(rows, out_dir, target_rule=target_rule)
        if "target_excluded" in study.columns:
            from aspectus.targets.study import ExclusionRule

            meta["target_quality"] = {
                "clips_with_check": int(study.drop_duplicates("key")["target_n_fixation_targets"].notna().sum()),
                "rule": (target_rule or ExclusionRule()).to_dict(),
                "columns": "target_*: the known-target check's figures (aspectus.schema.TARGET_QUALITY_COLUMNS); "
                           "empty where the clip has no check"}
        paths["study_csv"] = write_csv(out_dir / "study_features.csv", study)
        pq_study = study.copy()
        for c in pq_study.columns:
            if pq_study[c].dtype == object:
                pq_study[c] = pq_study[c].map(lambda v: None if v is None else (v if isinstance(v, (bool, int, float)) else str(v)))
        paths["study_parquet"] = write_parquet(out_dir / "study_features.parquet", pq_study, metadata=meta)
        if any(r.job.reference is not None for r in rows):
            paths["validation_manifest"] = write_csv(out_dir / "validation_manifest.csv",
                                                     validation_manifest(rows, out_dir))
        paths["sidecar"] = write_json(out_dir / "study.json", {**meta, "outputs": {k: Path(v).name for k, v in paths.items()}})
    return status, study, paths


def plan_batch(source, out_dir, *, params=None, extensions=VIDEO_EXTENSIONS, recursive: bool = True,
               label_pattern: str | None = None, retry_failed: bool = False) -> pd.DataFrame:
    """What :func:`run_batch` would do, without running anything (a dry run).

    Returns
    -------
    pandas.DataFrame
        Columns ``clip``, ``key``, ``action`` ("process", "skip" or "fail") and ``reason``.

    Examples
    --------
    >>> plan_batch(sample_clips, tmp / "out")[["key", "action"]]
                        key   action
    0  linden_brook_p01_s01  process
    1  linden_brook_p02_s01  process
    """
    jobs, rows, todo, _, _ = _prepare(source, Path(out_dir).resolve(), params=params, extensions=extensions,
                                      recursive=recursive, label_pattern=label_pattern, retry_failed=retry_failed,
                                      run_id="dry-run", write=False)
    act = {"pending": "process", "skipped": "skip", "failed": "fail"}
    return pd.DataFrame([{"clip": r.job.rel, "key": r.job.key, "action": act.get(r.status, r.status),
                          "reason": r.reason} for r in rows])


def _prepare(source, out_dir: Path, *, params, extensions, recursive, label_pattern, retry_failed, run_id, write):
    jobs = load_jobs(source, extensions=extensions, recursive=recursive, exclude=[out_dir],
                     label_pattern=label_pattern)
    params = params if params is not None else _default_params()
    from aspectus.webcam.pipeline import params_fingerprint

    params_sha = params_fingerprint(params.to_dict())
    state = out_dir / STATE_DIR
    index = HashIndex(state / "hash_index.json")
    log = AttemptLog(state / "attempts.jsonl")
    history = log.read()
    # last deterministic failure per clip, keyed by what it was tried with
    failed_before: dict[tuple, dict] = {}
    done_logged: set[tuple] = set()
    for rec in history:
        k = (rec.get("key"), rec.get("size"), rec.get("mtime_ns"), rec.get("params_sha256"))
        if rec.get("status") == "failed" and rec.get("kind") == "input":
            failed_before[k] = rec
        elif rec.get("status") in ("done", "recovered"):
            failed_before.pop(k, None)
            done_logged.add((rec.get("key"), rec.get("input_sha256"), rec.get("params_sha256")))
    rows: list[_Row] = []
    todo: list[_Row] = []
    for job in jobs:
        row = _Row(job)
        rows.append(row)
        if not job.clip.is_file():
            row.status, row.reason = "failed", f"clip file not found: {job.clip}"
            continue
        for what, p in (("reference", job.reference), ("segments", job.segments)):
            if p is not None and not p.is_file():
                row.status, row.reason = "failed", f"{what} file not found: {p}"
                break
        if row.status == "failed":
            continue
        st = job.clip.stat()
        row.stat = (int(st.st_size), int(st.st_mtime_ns))
        if st.st_size == 0:
            row.status, row.reason = "failed", "clip file is empty (0 bytes) - the recording was not saved; re-export it"
            continue
        clip_out = out_dir / job.key
        run = read_run_json(clip_out)
        if run is not None:
            row.input_sha256 = index.sha256(job.clip)
            done, why = clip_is_done(clip_out, input_sha256=row.input_sha256, params_sha256=params_sha,
                                     segments=job.segments)
            if done:
                row.status, row.reason = "skipped", "already done with the same input and parameters"
                row.summary = run_summary(run)
                row.finished_utc = run.get("finished_utc") or run.get("created_utc")
                if write and (job.key, row.input_sha256, params_sha) not in done_logged:
                    # finished by a run that was killed before it could log it
                    log.append({"t_utc": _utc_now(), "run_id": run_id, "key": job.key, "clip": job.rel,
                                "status": "recovered", "input_sha256": row.input_sha256,
                                "params_sha256": params_sha, "size": row.stat[0], "mtime_ns": row.stat[1]})
                continue
            row.reason = why
        prev = failed_before.get((job.key, row.stat[0], row.stat[1], params_sha))
        if prev is not None and not retry_failed:
            row.status = "failed"
            row.reason = f"{prev.get('reason', 'failed')} (same failure in an earlier run with this file and these " \
                         "parameters; not retried - use --retry-failed)"
            row.input_sha256 = prev.get("input_sha256")
            continue
        todo.append(row)
    if write:
        index.save()
    return jobs, rows, todo, (params, params_sha), (index, log)


def run_batch(source, out_dir, *, params=None, workers: int | None = None, scheduler: str | None = None,
              engine=None, extensions=VIDEO_EXTENSIONS, recursive: bool = True, label_pattern: str | None = None,
              retry_failed: bool = False, show_progress: bool = False,
              progress: Callable[[float, str], None] | None = None, cancel=None,
              clip_fn: str = DEFAULT_CLIP_FN, stages: str = "serial", target_rule=None) -> BatchResult:
    """Process every clip of a study; resumable; local processes or a Dask cluster.

    Parameters
    ----------
    source : path-like
        A folder of clips (searched by extension) or a manifest CSV
        (:func:`aspectus.studies.clips.read_manifest`).
    out_dir : path-like
        Batch output folder (created). Per-clip outputs go to
        ``out_dir/<clip key>/`` (key rules in :mod:`aspectus.studies.clips`).
    params : aspectus.webcam.pipeline.ProcessParams, optional
        Processing and analysis parameters for every clip; default
        ``ProcessParams()``.
    workers : int, optional
        Local worker processes; default sized to the machine
        (:func:`aspectus.studies.engines.default_workers`). Ignored with ``scheduler``.
    scheduler : str, optional
        Address of a Dask scheduler (``tcp://HOST:PORT``): run on that
        cluster instead of locally.
    engine : LocalEngine or DaskEngine, optional
        A ready engine (overrides ``workers``/``scheduler``).
    extensions : sequence of str
        Clip file extensions when ``source`` is a folder.
    recursive : bool, default True
        Search sub-folders.
    label_pattern : str, optional
        Regular expression with named groups that takes labels from clip
        paths (:func:`aspectus.studies.clips.labels_from_path`).
    retry_failed : bool, default False
        Try again clips that failed with an input error in an earlier run
        although neither the file nor the parameters changed.
    show_progress : bool, default False
        Draw terminal progress bars (study + one per worker).
    progress : callable, optional
        ``progress(fraction_done, message)`` for the whole study.
    cancel : object with ``is_set()``, optional
        When set, no new clip starts and running clips are stopped; their
        status stays ``pending``.
    clip_fn : str, default "aspectus.webcam.pipeline:process_clip"
        The per-clip function as "module:function".
    stages : {"serial", "overlapped"}, default "serial"
        How each worker runs its clip's stages (:data:`aspectus.webcam.pipeline.STAGES`): serial - decoding,
        face mesh and geometry one after the other on one core, the least CPU per frame, so N workers on N
        cores come close to N times one (bench/bench_batch.py); overlapped - as ``aspectus process`` runs one
        clip, for a worker that has cores to spare. The outputs are the same.
    target_rule : aspectus.targets.study.ExclusionRule or str, optional
        The pre-registered exclusion rule applied to the clips' known-target checks in the study table
        (``target_excluded``); a string as for :meth:`~aspectus.targets.study.ExclusionRule.parse`. Default
        the rule's defaults. Only used when a clip folder holds a ``target_check.json``.

    Returns
    -------
    BatchResult

    Raises
    ------
    AspectusInputError
        The folder or manifest is unusable (no clips, bad manifest row).
    AspectusError
        Another run holds the output folder, or the scheduler is unreachable.

    Examples
    --------
    A manifest with one demo clip and its labels (the shorter one, about
    ten seconds on a laptop CPU):

    >>> _ = (tmp / "study.csv").write_text("clip,participant,session\\n"
    ...                                    f"{sample_clips / 'linden_brook_p02_s01.mp4'},p02,s01\\n")
    >>> res = run_batch(tmp / "study.csv", tmp / "out", workers=1)
    >>> res.status[["key", "status", "participant", "session"]]
                        key status participant session
    0  linden_brook_p02_s01   done         p02     s01
    >>> sorted(p.name for p in (tmp / "out").iterdir() if p.is_file())
    ['status.csv', 'study.json', 'study_features.csv', 'study_features.parquet']
    """
    from aspectus.studies.engines import DaskEngine, LocalEngine

    from aspectus.webcam.pipeline import resolve_stages

    stages = resolve_stages(stages)
    if isinstance(target_rule, str):
        from aspectus.targets.study import ExclusionRule

        target_rule = ExclusionRule.parse(target_rule)
    t0 = time.monotonic()
    out_dir = Path(out_dir).resolve()
    out_dir.mkdir(parents=True, exist_ok=True)
    run_id = f"{_dt.datetime.now(_dt.UTC).strftime('%Y%m%dT%H%M%SZ')}-{uuid.uuid4().hex[:6]}"
    with _out_dir_lock(out_dir / STATE_DIR):
        jobs, rows, todo, (params, params_sha), (index, log) = _prepare(
            source, out_dir, params=params, extensions=extensions, recursive=recursive,
            label_pattern=label_pattern, retry_failed=retry_failed, run_id=run_id, write=True)
        if engine is None:
            engine = DaskEngine(address=scheduler) if scheduler else LocalEngine(workers=workers)
        meta = {"software": "aspectus", "version": __version__, "run_id": run_id, "source": _rec(source, out_dir),
                "params": params.to_dict(), "params_sha256": params_sha, "python": sys.version.split()[0],
                "started_utc": _utc_now()}
        _write_tables(rows, out_dir, meta=meta, final=False)
        by_key = {r.job.key: r for r in todo}
        payloads = {r.job.key: {"clip": str(r.job.clip), "out_dir": str(out_dir / r.job.key), "params": params,
                                "segments": str(r.job.segments) if r.job.segments else None, "clip_fn": clip_fn,
                                "stages": stages}
                    for r in todo}
        board = _Board(weights={r.job.key: float(r.stat[0] if r.stat else 1) for r in todo},
                       n_workers=getattr(engine, "n_workers", 1), enabled=show_progress and bool(todo),
                       callback=progress)
        last_status = time.monotonic()
        try:
            for out in engine.run(run_clip_task, payloads, on_progress=board.on_progress, cancel=cancel):
                row = by_key[out.key]
                res = out.result or {}
                if out.result is None:
                    row.status, row.reason, kind = "failed", f"worker error: {out.error}", "crash"
                    if out.traceback:
                        _save_traceback(out_dir, row.job.key, out.traceback)
                else:
                    row.status, row.reason, kind = res.get("status", "failed"), res.get("reason", ""), res.get("kind", "")
                    row.summary = res.get("summary") or {}
                    if res.get("traceback"):
                        _save_traceback(out_dir, row.job.key, res["traceback"])
                row.worker = str(out.worker)  # no host name in the outputs
                row.elapsed_s = res.get("elapsed_s")
                row.finished_utc = _utc_now()
                if row.status == "done":
                    run = read_run_json(out_dir / row.job.key) or {}
                    sha = run.get("input_sha256")
                    try:
                        now_stat = index._stat(row.job.clip)
                    except OSError:
                        now_stat = None
                    if sha and now_stat == row.stat:
                        index.put(row.job.clip, sha, stat=row.stat)
                    row.input_sha256 = sha
                    if run.get("params_sha256") not in (None, params_sha):
                        row.status, kind = "failed", "internal"
                        row.reason = "the clip's run.json records other parameters than were asked for"
                if row.status != "pending":
                    log.append({"t_utc": row.finished_utc, "run_id": run_id, "key": row.job.key,
                                "clip": row.job.rel, "status": row.status, "kind": kind, "reason": row.reason,
                                "input_sha256": row.input_sha256, "params_sha256": params_sha,
                                "size": row.stat[0] if row.stat else None,
                                "mtime_ns": row.stat[1] if row.stat else None, "worker": row.worker,
                                "elapsed_s": row.elapsed_s})
                board.finished(row.job.key, row.status)
                # status.csv follows every finished clip, so a kill never leaves finished clips "pending" there
                write_csv(out_dir / "status.csv", _status_table(rows, out_dir))
                if time.monotonic() - last_status >= STATUS_EVERY_S:
                    index.save()
                    _write_tables(rows, out_dir, meta=meta, final=False)
                    last_status = time.monotonic()
        finally:
            board.close()
            for r in todo:
                if r.status == "pending" and not r.reason:
                    r.reason = "not processed: the run was stopped"
            index.save()
            meta["finished_utc"] = _utc_now()
            meta["engine"] = engine.describe()
            counts = {s: sum(r.status == s for r in rows) for s in ("done", "skipped", "failed", "pending")}
            meta["counts"] = counts
            status, study, paths = _write_tables(rows, out_dir, meta=meta, final=True, target_rule=target_rule)
    return BatchResult(out_dir=out_dir, status=status, study=study, counts=counts, paths=paths,
                       engine=meta["engine"], elapsed_s=time.monotonic() - t0)


def _save_traceback(out_dir: Path, key: str, text: str) -> None:
    from aspectus.atomic import write_text

    with contextlib.suppress(OSError):
        write_text(out_dir / STATE_DIR / "errors" / f"{key}.txt", text)
