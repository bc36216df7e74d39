"""Atomic writes and file hashes: no output is ever half-written.

Every file aspectus writes goes to a temporary name in the same folder, is
flushed and fsynced, then renamed over the target (``os.replace`` is atomic on
POSIX and Windows). A reader therefore sees either the old complete file or
the new complete file, never a truncated one.
"""
from __future__ import annotations

import contextlib
import hashlib
import io
import json
import os
import stat
import tempfile
from pathlib import Path
from typing import Any
from collections.abc import Iterator

import pandas as pd


def current_umask() -> int:
    """The process's file-creation mask (read without changing it where the OS allows)."""
    try:  # Linux: /proc tells it without touching it (os.umask would, for a moment, for every thread)
        for line in Path("/proc/self/status").read_text().splitlines():
            if line.startswith("Umask:"):
                return int(line.split()[1], 8)
    except (OSError, ValueError):
        pass
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


#: names of the temporary files :func:`atomic_path` makes (``.<name>.<random>.part``)
PART_GLOB = ".*.part"


def remove_stale_parts(folder) -> list[Path]:
    """Delete temporary files left by a write that was killed (``.<name>.<random>.part``) in ``folder``.

    Call it only where no other aspectus process writes into ``folder`` at the same time.
    """
    removed = []
    for p in Path(folder).glob(PART_GLOB):
        if p.is_file() and not p.is_symlink():
            with contextlib.suppress(OSError):
                p.unlink()
                removed.append(p)
    return removed


@contextlib.contextmanager
def atomic_path(target: os.PathLike | str) -> Iterator[Path]:
    """Yield a temporary path beside ``target``; rename it over ``target`` on success."""
    target = Path(target)
    target.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".part", dir=target.parent)
    os.close(fd)
    tmp = Path(tmp)
    try:
        yield tmp
        with open(tmp, "rb+") as fh:
            os.fsync(fh.fileno())
        # mkstemp makes the file owner-only (0600); an output follows the umask like any file the user makes,
        # so colleagues on a shared drive can read it when the user's umask lets them
        with contextlib.suppress(OSError):
            os.chmod(tmp, 0o666 & ~current_umask())
        os.replace(tmp, target)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            tmp.unlink()
        raise


def write_bytes(target, data: bytes) -> Path:
    with atomic_path(target) as tmp:
        tmp.write_bytes(data)
    return Path(target)


def write_text(target, text: str) -> Path:
    return write_bytes(target, text.encode("utf-8"))


def _json_default(o):
    import numpy as np

    if isinstance(o, (np.integer,)):
        return int(o)
    if isinstance(o, (np.floating,)):
        return None if not np.isfinite(o) else float(o)
    if isinstance(o, np.bool_):
        return bool(o)
    if isinstance(o, np.ndarray):
        return o.tolist()
    if isinstance(o, Path):
        return str(o)
    raise TypeError(f"not JSON serialisable: {type(o).__name__}")


def _clean_nan(o):
    if isinstance(o, float) and o != o:
        return None
    if isinstance(o, dict):
        return {k: _clean_nan(v) for k, v in o.items()}
    if isinstance(o, (list, tuple)):
        return [_clean_nan(v) for v in o]
    return o


def write_json(target, obj: Any) -> Path:
    """Write ``obj`` as indented JSON (NaN becomes null), atomically."""
    return write_text(target, json.dumps(_clean_nan(obj), indent=2, default=_json_default, sort_keys=False) + "\n")


def write_csv(target, df: pd.DataFrame, **kw) -> Path:
    kw.setdefault("index", False)
    with atomic_path(target) as tmp:
        df.to_csv(tmp, **kw)
    return Path(target)


def write_parquet(target, df: pd.DataFrame, metadata: dict | None = None, *, chunk_rows: int = 16384) -> Path:
    """Write a Parquet file atomically; ``metadata`` goes into the file's key-value metadata as JSON.

    Units travel in the schema, so R (``arrow``) and Python (``pyarrow``)
    find them without a sidecar: every field whose column has a unit
    (:func:`aspectus.schema.column_unit`) carries ``unit`` in its field
    metadata, and the schema metadata key ``units`` holds a JSON object
    column -> unit (``""`` for columns without one).

    The table goes to the file ``chunk_rows`` rows at a time (one row group
    each), so writing an hour of samples never holds a second full copy of
    them in memory.
    """
    import pyarrow as pa
    import pyarrow.parquet as pq

    from aspectus.schema import column_unit

    schema = pa.Schema.from_pandas(df, preserve_index=False)
    units = {f.name: column_unit(f.name) for f in schema}
    schema = pa.schema([f.with_metadata({**(f.metadata or {}), b"unit": units[f.name].encode()})
                        if units[f.name] else f for f in schema], metadata=schema.metadata)
    meta = dict(schema.metadata or {})
    meta[b"units"] = json.dumps(units).encode()
    if metadata:
        meta[b"aspectus"] = json.dumps(_clean_nan(metadata), default=_json_default).encode()
    schema = schema.with_metadata(meta)
    step = max(1, int(chunk_rows))
    with atomic_path(target) as tmp:
        with pq.ParquetWriter(tmp, schema) as writer:
            for start in range(0, max(len(df), 1), step):
                part = df.iloc[start:start + step]
                writer.write_table(pa.Table.from_pandas(part, schema=schema, preserve_index=False))
    return Path(target)


def _open_regular_file(path) -> int:
    """A read-only descriptor of ``path``, opened without blocking and checked to be a regular file before a
    byte is read: a FIFO, socket or device (which would block a read for good) raises
    :class:`~aspectus.errors.AspectusInputError`."""
    from aspectus.errors import AspectusInputError

    fd = os.open(path, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0) | getattr(os, "O_BINARY", 0))
    try:
        if not stat.S_ISREG(os.fstat(fd).st_mode):
            raise AspectusInputError("is not a regular file (a pipe, socket or device)", path=path,
                                     hint="give the recorded file itself")
    except BaseException:
        os.close(fd)
        raise
    return fd


def sha256_file(path, chunk: int = 1 << 20) -> str:
    """Hex SHA-256 of a file's bytes.

    Raises :class:`~aspectus.errors.AspectusInputError` for a FIFO, socket or
    device: reading one would block for good (it is opened without blocking
    and checked before a byte is read).
    """
    h = hashlib.sha256()
    with os.fdopen(_open_regular_file(path), "rb") as fh:
        while True:
            b = fh.read(chunk)
            if not b:
                break
            h.update(b)
    return h.hexdigest()


class HashingReader(io.RawIOBase):
    """A file opened for reading that computes the SHA-256 of its bytes from what its reader reads.

    Handed to a demuxer (PyAV takes file objects), it hashes the file in the
    same pass that decodes it, instead of reading it once more beforehand.
    Each read that continues the part hashed so far extends it; reads
    elsewhere (a demuxer that jumps to an index at the end and back) are
    passed through, and :meth:`hexdigest` hashes what no read covered in order,
    so the digest is always that of the whole file - the same as
    :func:`sha256_file` (tests/test_atomic.py). The first ``first`` bytes are
    read on opening: a file that cannot be read fails here, with an
    :class:`OSError`, before any decoding. Raises
    :class:`~aspectus.errors.AspectusInputError` for a FIFO, socket or device.
    """

    def __init__(self, path, *, first: int = 1 << 16):
        super().__init__()
        self.name = str(path)
        self._f = os.fdopen(_open_regular_file(path), "rb", buffering=0)
        self._h = hashlib.sha256()
        self._done = 0  # bytes [0, _done) are in the hash
        self._digest: str | None = None
        try:
            head = self._f.read(first)
            self._f.seek(0)
        except BaseException:
            self._f.close()
            raise
        self._h.update(head)
        self._done = len(head)

    def readable(self) -> bool:
        return True

    def seekable(self) -> bool:
        return True

    def readinto(self, b) -> int:
        pos = self._f.tell()
        n = self._f.readinto(b)
        if n and pos <= self._done < pos + n:
            self._h.update(memoryview(b)[self._done - pos:n])
            self._done = pos + n
        return n

    def seek(self, offset: int, whence: int = 0) -> int:
        return self._f.seek(offset, whence)

    def tell(self) -> int:
        return self._f.tell()

    def hexdigest(self, chunk: int = 1 << 20) -> str:
        """The file's SHA-256 (hex): the bytes not read in order so far are read now."""
        if self._digest is None:
            pos = self._f.tell()
            self._f.seek(self._done)
            while True:
                b = self._f.read(chunk)
                if not b:
                    break
                self._h.update(b)
                self._done += len(b)
            self._f.seek(pos)
            self._digest = self._h.hexdigest()
        return self._digest

    def close(self) -> None:
        if not self.closed:
            self._f.close()
        super().close()


def sha256_json(obj: Any) -> str:
    """Hex SHA-256 of a canonical JSON rendering (sorted keys) - used to key results by parameters."""
    return hashlib.sha256(json.dumps(_clean_nan(obj), sort_keys=True, default=_json_default).encode()).hexdigest()


#: environment variable that, when "1", makes outputs record inputs by their absolute paths as well
FULL_PATHS_ENV = "ASPECTUS_FULL_PATHS"


def recorded_path(path, base) -> str:
    """How an output records an input's path: relative to ``base`` (the output folder or study file's folder).

    Absolute paths carry user names and often students' names, so outputs
    hold paths relative to where they are written (with ``/`` separators),
    and identify inputs by their SHA-256. When ``path`` cannot be expressed
    relative to ``base`` (another drive on Windows) only its file name is
    kept.
    """
    p = Path(os.path.abspath(path))
    try:
        rel = os.path.relpath(p, os.path.abspath(base))
    except ValueError:
        return p.name
    return Path(rel).as_posix()


def full_paths_wanted(flag: bool | None = None) -> bool:
    """Whether outputs should also record absolute paths: ``flag`` if given, else ``ASPECTUS_FULL_PATHS=1``."""
    if flag is not None:
        return bool(flag)
    return os.environ.get(FULL_PATHS_ENV, "").strip() in ("1", "true", "yes")
