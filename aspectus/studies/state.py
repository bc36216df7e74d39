"""Small on-disk state of a batch run: the clip hash index, the attempts log and the output folder lock."""
from __future__ import annotations

import contextlib
import datetime as _dt
import hashlib
import json
import os
from pathlib import Path


from aspectus.atomic import sha256_file, write_json
from aspectus.errors import AspectusError




def _utc_now() -> str:
    return _dt.datetime.now(_dt.UTC).isoformat(timespec="seconds")



class HashIndex:
    """Cache of clip SHA-256, valid while the file is provably untouched.

    Entries are keyed by a SHA-256 of the clip's absolute path, so the index
    (which sits in the output folder) holds no path, user or student name.

    A cached hash is used only while the file's size, modification time,
    inode change time (``st_ctime_ns``, which no user tool can set back) and
    inode number are all the same as when it was hashed. A clip rewritten in
    place with the same size and its modification time put back (``touch
    -r``) therefore gets hashed again: identity is decided by content.

    Parameters
    ----------
    path : path-like
        The JSON file that holds the index (written atomically).
    """

    #: the file properties a cached hash is tied to
    IDENTITY = ("size", "mtime_ns", "ctime_ns", "ino")

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

    @staticmethod
    def _identity(p: Path) -> dict:
        st = p.stat()
        return {"size": int(st.st_size), "mtime_ns": int(st.st_mtime_ns), "ctime_ns": int(st.st_ctime_ns),
                "ino": int(st.st_ino)}

    @staticmethod
    def _key(clip: Path) -> str:
        return hashlib.sha256(str(Path(clip).absolute()).encode("utf-8", "surrogateescape")).hexdigest()

    def lookup(self, clip: Path) -> str | None:
        """The cached hash if the file is untouched since it was hashed (see the class), else None."""
        e = self._d.get(self._key(clip))
        if not e:
            return None
        try:
            now = self._identity(clip)
        except OSError:
            return None
        return e.get("sha256") if all(e.get(k) == now[k] for k in self.IDENTITY) else None

    def sha256(self, clip: Path) -> str:
        """Hash of the clip, from the cache or computed (and cached)."""
        h = self.lookup(clip)
        if h is None:
            before = self._identity(clip)
            h = sha256_file(clip)
            if self._identity(clip) == before:
                self._d[self._key(clip)] = before | {"sha256": h}
                self.dirty = True
        return h

    def put(self, clip: Path, sha: str, *, stat: tuple[int, int] | None = None) -> None:
        """Cache ``sha`` for the clip as it is now; not if its (size, mtime) is no longer ``stat``."""
        try:
            now = self._identity(clip)
        except OSError:
            return
        if stat is not None and (now["size"], now["mtime_ns"]) != tuple(stat):
            return
        self._d[self._key(clip)] = now | {"sha256": sha}
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
        fh.write(f"pid {os.getpid()} since {_utc_now()}\n")  # no host name: outputs name no machine
        fh.flush()
        yield
    finally:
        fh.close()
