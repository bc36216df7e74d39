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
import importlib
import json
import os
import socket
import sys
import threading
import time
import traceback
import uuid
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable

import pandas as pd

from aspectus import __version__
from aspectus.atomic import sha256_file, write_csv, write_json, write_parquet
from aspectus.errors import AspectusError, AspectusInputError, Cancelled
from aspectus.studies.clips import VIDEO_EXTENSIONS, ClipJob, load_jobs

#: the per-clip function workers call, as "module:function"
DEFAULT_CLIP_FN = "aspectus.webcam.pipeline:process_clip"
#: outputs a finished clip folder must hold (besides run.json)
REQUIRED_OUTPUTS = ("samples.parquet", "events.csv", "features.csv", "features.parquet")
#: batch bookkeeping folder inside OUTDIR (clip keys never start with a dot)
STATE_DIR = ".batch"
#: status.csv is rewritten at least this often while a run goes on, s
STATUS_EVERY_S = 30.0

STATUS_COLUMNS = ("clip", "key", "status", "reason", "participant", "session")
STATUS_TAIL_COLUMNS = ("frames", "duration_s", "valid_frac", "usable", "verdict", "worker", "elapsed_s",
                       "input_sha256", "out_dir", "reference", "segments", "finished_utc")


def _utc_now() -> str:
    return _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds")


# ------------------------------------------------------------------------------------------------
# small on-disk state: hash index, attempts log, lock

class HashIndex:
    """Cache of clip SHA-256 keyed by absolute path, valid while (size, mtime_ns) stay the same.

    Parameters
    ----------
    path : path-like
        The JSON file that holds the index (written atomically).
    """

    def __init__(self, path):
        self.path = Path(path)
        self._d: dict[str, dict] = {}
        self.dirty = False
        try:
            d = json.loads(self.path.read_text(encoding="utf-8"))
            if isinstance(d, dict):
                self._d = {k: v for k, v in d.items() if isinstance(v, dict)}
        except (OSError, ValueError):
            self._d = {}

    @staticmethod
    def _stat(p: Path) -> tuple[int, int]:
        st = p.stat()
        return int(st.st_size), int(st.st_mtime_ns)

    def lookup(self, clip: Path) -> str | None:
        """The cached hash if the file's size and mtime are unchanged, else None."""
        e = self._d.get(str(clip))
        if not e:
            return None
        try:
            size, mtime = self._stat(clip)
        except OSError:
            return None
        return e.get("sha256") if (e.get("size"), e.get("mtime_ns")) == (size, mtime) else None

    def sha256(self, clip: Path) -> str:
        """Hash of the clip, from the cache or computed (and cached)."""
        h = self.lookup(clip)
        if h is None:
            before = self._stat(clip)
            h = sha256_file(clip)
            if self._stat(clip) == before:
                self.put(clip, h, stat=before)
        return h

    def put(self, clip: Path, sha: str, *, stat: tuple[int, int] | None = None) -> None:
        size, mtime = stat if stat is not None else self._stat(clip)
        self._d[str(clip)] = {"size": size, "mtime_ns": mtime, "sha256": sha}
        self.dirty = True

    def save(self) -> None:
        if self.dirty:
            write_json(self.path, self._d)
            self.dirty = False


class AttemptLog:
    """Append-only JSON-lines log of finished attempts, one fsynced line each.

    A line torn by a kill (the last one) is ignored on reading, and the next
    append starts on a fresh line.
    """

    def __init__(self, path):
        self.path = Path(path)
        self.path.parent.mkdir(parents=True, exist_ok=True)

    def read(self) -> list[dict]:
        out = []
        try:
            with open(self.path, encoding="utf-8", errors="replace") as fh:
                for line in fh:
                    line = line.strip()
                    if not line:
                        continue
                    try:
                        rec = json.loads(line)
                    except ValueError:
                        continue
                    if isinstance(rec, dict):
                        out.append(rec)
        except FileNotFoundError:
            pass
        return out

    def append(self, rec: dict) -> None:
        data = (json.dumps(rec, sort_keys=True, default=str) + "\n").encode("utf-8")
        fd = os.open(self.path, os.O_WRONLY | os.O_CREAT | os.O_APPEND, 0o644)
        try:
            size = os.fstat(fd).st_size
            if size:
                with open(self.path, "rb") as fh:
                    fh.seek(size - 1)
                    if fh.read(1) != b"\n":
                        data = b"\n" + data
            os.write(fd, data)
            os.fsync(fd)
        finally:
            os.close(fd)


@contextlib.contextmanager
def _out_dir_lock(state_dir: Path):
    """Hold an exclusive lock on OUTDIR for the run (released by the OS if the process dies)."""
    state_dir.mkdir(parents=True, exist_ok=True)
    lock_path = state_dir / "lock"
    fh = open(lock_path, "a+")
    try:
        try:
            import fcntl
        except ImportError:  # Windows: no advisory lock; rely on the user
            fcntl = None
        if fcntl is not None:
            try:
                fcntl.flock(fh.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)
            except OSError:
                fh.seek(0)
                who = fh.read().strip()
                raise AspectusError(f"another batch run is using {state_dir.parent} ({who or 'unknown process'}); "
                                   "wait for it to finish or stop it first") from None
        fh.seek(0)
        fh.truncate()
        fh.write(f"pid {os.getpid()} on {socket.gethostname()} since {_utc_now()}\n")
        fh.flush()
        yield
    finally:
        fh.close()


# ------------------------------------------------------------------------------------------------
# what is on disk for one clip

def read_run(out_dir) -> dict | None:
    """A clip folder's ``run.json``, or None if absent or unreadable."""
    try:
        with open(Path(out_dir) / "run.json", encoding="utf-8") as fh:
            d = json.load(fh)
    except (OSError, ValueError):
        return None
    return d if isinstance(d, dict) else None


def _listed_outputs(run: dict) -> dict[str, tuple[int | None, str | None]]:
    """Output file name -> (expected size in bytes, expected SHA-256), None where unknown.

    From run.json's ``outputs``, or the required outputs with nothing known.
    """
    outs = run.get("outputs")
    got: dict[str, tuple[int | None, str | None]] = {}
    if isinstance(outs, dict):
        for name, info in outs.items():
            info = info if isinstance(info, dict) else {}
            size, sha = info.get("bytes"), info.get("sha256")
            got[Path(name).name] = (int(size) if isinstance(size, (int, float)) else None,
                                    sha if isinstance(sha, str) else None)
    return got or {n: (None, None) for n in REQUIRED_OUTPUTS}


def run_summary(run: dict) -> dict:
    """The clip summary a run.json carries (``summary`` or ``quality``)."""
    s = run.get("summary") or run.get("quality") or {}
    return dict(s) if isinstance(s, dict) else {}


def clip_is_done(out_dir, *, input_sha256: str, params_sha256: str, segments=None) -> tuple[bool, str]:
    """Decide from the files whether a clip folder holds finished results for this input and parameters.

    Parameters
    ----------
    out_dir : path-like
        The clip's output folder.
    input_sha256 : str
        SHA-256 of the clip file now.
    params_sha256 : str
        :meth:`~aspectus.webcam.pipeline.ProcessParams.fingerprint` of the processing parameters now.
    segments : path-like, optional
        The clip's task-segments file now. The results must have been made
        with the same file, and after its last change.

    Every output run.json lists must be present with the size and SHA-256
    recorded when it was written (a file damaged in place, even at the same
    size, makes the clip be redone).

    Returns
    -------
    (bool, str)
        Whether it is done, and why not (empty when done).
    """
    out_dir = Path(out_dir)
    run = read_run(out_dir)
    if run is None:
        return False, "not processed yet" if not out_dir.exists() else "not finished"
    if run.get("input_sha256") != input_sha256:
        return False, "clip file changed since it was processed"
    if run.get("params_sha256") != params_sha256:
        return False, "parameters changed since it was processed"
    want_seg = str(Path(segments).resolve()) if segments is not None else None
    had_seg = run.get("segments")
    had_seg = str(Path(had_seg).resolve()) if had_seg else None
    if want_seg != had_seg:
        return False, "task segments file changed since it was processed"
    if want_seg is not None:
        try:
            if Path(want_seg).stat().st_mtime_ns > (out_dir / "run.json").stat().st_mtime_ns:
                return False, "task segments file edited since it was processed"
        except OSError:
            return False, "task segments file not readable"
    bad = []
    for name, (size, sha) in _listed_outputs(run).items():
        p = out_dir / name
        if not p.is_file():
            bad.append(f"{name} missing")
        elif size is not None and p.stat().st_size != size:
            bad.append(f"{name} has {p.stat().st_size} bytes, not {size}")
        elif sha is not None and sha256_file(p) != sha:
            bad.append(f"{name} differs from what was written (SHA-256 changed)")
    if bad:
        return False, "output(s) damaged: " + ", ".join(bad)
    return True, ""


def _clean_partials(out_dir: Path) -> int:
    """Remove temporary files (``.*.part``) left in a clip folder by a killed attempt."""
    n = 0
    if out_dir.is_dir():
        for p in out_dir.glob(".*.part"):
            with contextlib.suppress(OSError):
                p.unlink()
                n += 1
    return n


# ------------------------------------------------------------------------------------------------
# the task a worker runs for one clip

def _resolve_fn(spec: str | Callable) -> Callable:
    if callable(spec):
        return spec
    mod, _, name = spec.partition(":")
    return getattr(importlib.import_module(mod), name)


def run_clip_task(payload: dict, progress, cancel) -> dict:
    """Process one clip in a worker; never raises for a clip's own problems.

    Parameters
    ----------
    payload : dict
        ``clip``, ``out_dir`` (absolute paths as str), ``params`` (a
        ProcessParams), ``segments`` (path or None), ``clip_fn``
        ("module:function" with :func:`aspectus.webcam.pipeline.process_clip`'s
        signature).
    progress : callable
        ``progress(fraction, message)``.
    cancel : object with ``is_set()``
        Stop flag passed on to the per-clip function.

    Returns
    -------
    dict
        ``status`` ("done", "failed" or "pending"), ``reason``, ``kind``
        ("input", "internal" or ""), ``summary`` (dict), ``elapsed_s``,
        ``host``, and ``traceback`` for internal errors.
    """
    t0 = time.monotonic()
    # several workers on one machine would all put their background work on the same CPU
    # (aspectus._env.background_cpus): let the operating system place it
    os.environ["ASPECTUS_PIN_BACKGROUND"] = "0"
    clip = Path(payload["clip"])
    out = Path(payload["out_dir"])
    base = {"host": socket.gethostname(), "summary": {}, "kind": "", "reason": ""}
    try:
        if not clip.is_file():
            raise AspectusInputError(f"clip not found on worker {socket.gethostname()}", path=clip,
                                    hint="workers need the clips on a shared filesystem under the same path")
        _clean_partials(out)
        segments = payload.get("segments") or None  # a path: the pipeline reads it and records it in run.json
        fn = _resolve_fn(payload.get("clip_fn") or DEFAULT_CLIP_FN)
        res = fn(clip, out, params=payload["params"], segments=segments, progress=progress, cancel=cancel)
        summary = dict(getattr(res, "summary", None) or {})
        return {**base, "status": "done", "summary": summary, "elapsed_s": time.monotonic() - t0}
    except Cancelled:
        return {**base, "status": "pending", "reason": "stopped before it finished", "elapsed_s": time.monotonic() - t0}
    except AspectusInputError as exc:
        return {**base, "status": "failed", "kind": "input", "reason": str(exc), "elapsed_s": time.monotonic() - t0}
    except MemoryError:
        return {**base, "status": "failed", "kind": "internal", "reason": "out of memory while processing",
                "elapsed_s": time.monotonic() - t0}
    except Exception as exc:  # noqa: BLE001 - reported per clip, the batch goes on
        return {**base, "status": "failed", "kind": "internal",
                "reason": f"internal error: {type(exc).__name__}: {exc}",
                "traceback": "".join(traceback.format_exception(exc)), "elapsed_s": time.monotonic() - t0}


# ------------------------------------------------------------------------------------------------
# progress display

class _Board:
    """Study bar plus one bar per worker (tqdm), fed from engine threads; time remaining from tqdm."""

    def __init__(self, *, weights: dict[str, float], n_workers: int, enabled: bool,
                 callback: Callable[[float, str], None] | None):
        self.weights = weights
        self.total = sum(weights.values()) or 1.0
        self.frac: dict[str, float] = {}
        self.counts = {"done": 0, "failed": 0, "pending": 0}
        self.n_all = len(weights)
        self.callback = callback
        self.enabled = enabled
        self.worker_bars: dict[str, Any] = {}
        self.n_workers = max(1, n_workers)
        self.bar = None
        self._lock = threading.Lock()  # fed from the engine's progress thread and the coordinator
        if enabled:
            from aspectus.cli.progress_bar import ProgressBar

            self._tqdm = ProgressBar
            self.bar = ProgressBar(total=1000, desc="study", position=0, leave=True, dynamic_ncols=True,
                            bar_format="{desc} {percentage:3.0f}%|{bar}| [{elapsed}<{remaining}]")
            self._postfix()

    def _postfix(self) -> None:
        if self.bar is not None:
            c = self.counts
            self.bar.set_description_str(f"study: {c['done'] + c['failed']}/{self.n_all} clips, {c['failed']} failed",
                                         refresh=False)

    def _overall(self) -> float:
        return sum(self.weights.get(k, 0.0) * f for k, f in self.frac.items()) / self.total

    def _push(self, message: str) -> None:
        share = self._overall()
        if self.bar is not None:
            n = int(round(share * 1000))
            if n > self.bar.n:
                self.bar.update(n - self.bar.n)
            self._postfix()
            self.bar.refresh()
        if self.callback is not None:
            with contextlib.suppress(Exception):
                self.callback(share, message)

    def on_progress(self, ev) -> None:
        with self._lock:
            self._on_progress(ev)

    def _on_progress(self, ev) -> None:
        self.frac[ev.key] = max(self.frac.get(ev.key, 0.0), min(1.0, float(ev.fraction)) * 0.999)
        if self.bar is not None:
            wb = self.worker_bars.get(ev.worker)
            if wb is None and len(self.worker_bars) < 16:
                wb = self._tqdm(total=100, position=len(self.worker_bars) + 1, leave=False, dynamic_ncols=True,
                                bar_format="  {desc} {percentage:3.0f}%|{bar}|")
                self.worker_bars[ev.worker] = wb
            if wb is not None:
                msg = ev.message.split(": ", 1)[-1] if ev.message.startswith(ev.key) else ev.message
                wb.set_description_str(f"{ev.key[:28]}: {msg[:36]:<36}", refresh=False)
                wb.n = int(round(100 * min(1.0, ev.fraction)))
                wb.refresh()
        self._push(f"{ev.key}: {ev.message}")

    def finished(self, key: str, status: str) -> None:
        with self._lock:
            self.frac[key] = 1.0
            if status in self.counts:
                self.counts[status] += 1
            self._push(f"{key}: {status}")

    def close(self) -> None:
        for wb in self.worker_bars.values():
            wb.close()
        if self.bar is not None:
            self.bar.close()


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


def _status_table(rows: list[_Row], out_dir: Path) -> pd.DataFrame:
    extra = _label_names(rows)
    recs = []
    for r in rows:
        j = r.job
        s = r.summary or {}
        rec = {"clip": j.rel, "key": j.key, "status": r.status, "reason": r.reason,
               "participant": j.participant, "session": j.session}
        for k in extra:
            rec[k] = j.labels.get(k)
        rec.update({
            "frames": s.get("frames"), "duration_s": s.get("duration_s"), "valid_frac": s.get("valid_frac"),
            "usable": s.get("usable"), "verdict": s.get("verdict"), "worker": r.worker or None,
            "elapsed_s": None if r.elapsed_s is None else round(float(r.elapsed_s), 3),
            "input_sha256": r.input_sha256, "out_dir": j.key,
            "reference": str(j.reference) if j.reference else None,
            "segments": str(j.segments) if j.segments else None, "finished_utc": r.finished_utc,
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


def build_study_table(rows: list[_Row], out_dir: Path) -> pd.DataFrame:
    """One row per clip x scope for every finished clip, labels first, in clip order."""
    extra = _label_names(rows)
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
        parts.append(pd.concat([lab, feats.drop(columns=clash)], axis=1))
    if not parts:
        return pd.DataFrame(columns=["clip", "key", "participant", "session", *extra, "usable"])
    study = pd.concat(parts, ignore_index=True)
    for c in ("participant", "session", *extra):
        study[c] = study[c].astype(object).where(study[c].notna(), None)
    return study


def validation_manifest(rows: list[_Row], out_dir: Path) -> pd.DataFrame:
    """Finished clips that have a reference, as a manifest for :func:`aspectus.validation.pair.validate_study`.

    Columns ``webcam`` (the clip's output folder, relative to ``out_dir``),
    ``reference`` (absolute), ``participant`` (the clip key when the clip has
    no participant label), ``session``, ``segments``, ``mapping`` and
    ``offset_s`` (empty where not given).
    """
    recs = []
    for r in rows:
        j = r.job
        if j.reference is None or r.status not in ("done", "skipped"):
            continue
        recs.append({"webcam": j.key, "reference": str(j.reference),
                     "participant": j.participant or j.key.replace("+", "_"), "session": j.session or "",
                     "segments": str(j.segments) if j.segments else "", "mapping": j.labels.get("mapping") or "",
                     "offset_s": j.labels.get("offset_s") or ""})
    return pd.DataFrame(recs, columns=["webcam", "reference", "participant", "session", "segments", "mapping",
                                       "offset_s"])


def _write_tables(rows, out_dir: Path, *, meta: dict, final: bool) -> tuple[pd.DataFrame, pd.DataFrame | None, dict]:
    status = _status_table(rows, out_dir)
    paths = {"status": write_csv(out_dir / "status.csv", status)}
    study = None
    if final:
        study = build_study_table(rows, out_dir)
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
            row.status, row.reason = "failed", "clip file is empty (0 bytes)"
            continue
        clip_out = out_dir / job.key
        run = read_run(clip_out)
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
                    log.append({"t_utc": _utc_now(), "run_id": run_id, "key": job.key, "clip": str(job.clip),
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
              clip_fn: str = DEFAULT_CLIP_FN) -> BatchResult:
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

    Returns
    -------
    BatchResult

    Raises
    ------
    AspectusInputError
        The folder or manifest is unusable (no clips, bad manifest row).
    AspectusError
        Another run holds the output folder, or the scheduler is unreachable.
    """
    from aspectus.studies.engines import DaskEngine, LocalEngine

    t0 = time.monotonic()
    out_dir = Path(out_dir).resolve()
    out_dir.mkdir(parents=True, exist_ok=True)
    run_id = f"{_dt.datetime.now(_dt.timezone.utc).strftime('%Y%m%dT%H%M%SZ')}-{uuid.uuid4().hex[:6]}"
    with _out_dir_lock(out_dir / STATE_DIR):
        jobs, rows, todo, (params, params_sha), (index, log) = _prepare(
            source, out_dir, params=params, extensions=extensions, recursive=recursive,
            label_pattern=label_pattern, retry_failed=retry_failed, run_id=run_id, write=True)
        if engine is None:
            engine = DaskEngine(address=scheduler) if scheduler else LocalEngine(workers=workers)
        meta = {"software": "aspectus", "version": __version__, "run_id": run_id, "source": str(Path(source).resolve()),
                "params": params.to_dict(), "params_sha256": params_sha, "python": sys.version.split()[0],
                "started_utc": _utc_now()}
        _write_tables(rows, out_dir, meta=meta, final=False)
        by_key = {r.job.key: r for r in todo}
        payloads = {r.job.key: {"clip": str(r.job.clip), "out_dir": str(out_dir / r.job.key), "params": params,
                                "segments": str(r.job.segments) if r.job.segments else None, "clip_fn": clip_fn}
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
                row.worker = f"{res.get('host', '')} {out.worker}".strip()
                row.elapsed_s = res.get("elapsed_s")
                row.finished_utc = _utc_now()
                if row.status == "done":
                    run = read_run(out_dir / row.job.key) or {}
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
                                "clip": str(row.job.clip), "status": row.status, "kind": kind, "reason": row.reason,
                                "input_sha256": row.input_sha256, "params_sha256": params_sha,
                                "size": row.stat[0] if row.stat else None,
                                "mtime_ns": row.stat[1] if row.stat else None, "worker": row.worker,
                                "elapsed_s": row.elapsed_s})
                board.finished(row.job.key, row.status)
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
            status, study, paths = _write_tables(rows, out_dir, meta=meta, final=True)
    return BatchResult(out_dir=out_dir, status=status, study=study, counts=counts, paths=paths,
                       engine=meta["engine"], elapsed_s=time.monotonic() - t0)


def _save_traceback(out_dir: Path, key: str, text: str) -> None:
    from aspectus.atomic import write_text

    with contextlib.suppress(OSError):
        write_text(out_dir / STATE_DIR / "errors" / f"{key}.txt", text)
