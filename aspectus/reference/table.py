"""Any delimited gaze table (CSV, TSV, whitespace, ...) into the samples table.

A lab eye tracker's export is a text table with a time column and two gaze
position columns in some unit. :class:`TableMapping` says which columns hold
what and in which unit; :func:`read_gaze_table` turns the file into the
samples table of :mod:`aspectus.schema` (angles in degrees, subject's frame),
so the same event detector runs on it as on the webcam side.

A mapping can be saved as JSON (:meth:`TableMapping.save`) and reused for
every file of a study.

Missing values: empty cells, ``n/a``, ``NA``, ``NaN`` (any case) and the
tokens in ``missing_values`` are missing; a sample with a missing gaze value
is not valid. Row numbers in error messages are line numbers of the file
(1-based, counting comment and header lines), so a user can open the file at
that line.
"""
from __future__ import annotations

import io
import json
import re
from dataclasses import asdict, dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from aspectus.atomic import write_json
from aspectus.errors import ParameterError, ReferenceFormatError
from aspectus.schema import check_samples
from aspectus.reference.screen import ScreenGeometry

TIME_UNITS = {"s": 1.0, "ms": 1e-3, "us": 1e-6, "ns": 1e-9}
POSITION_UNITS = ("deg", "px", "mm", "norm")
ORIGINS = ("top-left", "center")
#: tokens that always mean "no value" (compared case-insensitively, stripped)
MISSING_TOKENS = ("", "n/a", "na", "nan", "null", "none", "-", ".")
#: label words understood in an event column (lower case) -> event type
DEFAULT_EVENT_WORDS = {
    "fixation": "fixation", "fix": "fixation", "f": "fixation",
    "saccade": "saccade", "sacc": "saccade", "sac": "saccade", "s": "saccade",
    "blink": "blink", "b": "blink",
}


#: what a mapping file is and where one comes from (for errors about a file given as one)
_MAPPING_HINT = ("give a mapping saved with --save-mapping (or by the app's column dialog), or name the columns with "
                 "--time-col, --x-col, --y-col and --units")


@dataclass
class TableMapping:
    """Which columns of a gaze table hold what, and in which units.

    Parameters
    ----------
    time_col : str
        Name (or 0-based index as a string, for headerless files without
        ``column_names``) of the time column.
    time_unit : {"s", "ms", "us", "ns"}
        Unit of the time column.
    x_col, y_col : str
        Horizontal and vertical gaze position columns.
    units : {"deg", "px", "mm", "norm"}
        Unit of the position columns: visual angle in degrees, screen pixels,
        millimetres on the screen, or normalised screen coordinates (0-1).
    screen : ScreenGeometry, optional
        Screen geometry; required for ``px``, ``mm`` and ``norm``.
    origin : {"top-left", "center"}
        Where positions are measured from (``px``, ``mm``, ``norm``); default
        the top-left corner of the screen, as screen pixels are.
    y_up : bool, optional
        Whether the y column grows upwards. Default: ``True`` for ``deg``,
        ``False`` (screen convention, y down) for the other units. With
        ``origin="top-left"`` and ``y_up=True`` positions are measured up
        from the bottom edge (a bottom-left origin).
    validity_col : str, optional
        Column telling whether a sample is valid.
    validity_values : list of str, optional
        Values of ``validity_col`` that mean valid (compared as stripped
        strings). Default: ``1``, ``true``, ``yes``, ``valid``, ``ok``.
    pupil_col : str, optional
        Pupil size column (arbitrary units), copied to ``pupil``.
    event_col : str, optional
        Per-sample event label column (e.g. ``fixation``/``saccade``/``blink``);
        copied to ``event_label`` so the reference can be compared as events.
    event_values : dict, optional
        Map from raw event-column values to ``fixation``, ``saccade``,
        ``blink`` or ``other`` (e.g. ``{"1": "fixation", "2": "saccade"}``).
        Default: common words (fixation, saccade, blink, ...).
    delimiter : str, optional
        Field delimiter; default detected (tab, comma, semicolon, whitespace).
    comment : str
        Lines starting with this are comments.
    header : bool, optional
        Whether the first non-comment line names the columns; default
        detected (a first line with non-numeric cells is a header).
    column_names : list of str, optional
        Column names for a headerless file.
    missing_values : list of str
        Extra cell values that mean missing (besides empty, n/a, NA, NaN).
    zero_is_missing : bool
        A sample with both x and y exactly 0 is missing (some trackers write
        (0, 0) for lost data).
    zero_time : bool
        Subtract the first sample's time so that the samples start at 0 s
        (the raw start is kept in ``DataFrame.attrs["clock_start_s"]``).
    """

    time_col: str
    time_unit: str = "s"
    x_col: str = "x"
    y_col: str = "y"
    units: str = "deg"
    screen: ScreenGeometry | None = None
    origin: str = "top-left"
    y_up: bool | None = None
    validity_col: str | None = None
    validity_values: list[str] | None = None
    pupil_col: str | None = None
    event_col: str | None = None
    event_values: dict[str, str] | None = None
    delimiter: str | None = None
    comment: str = "#"
    header: bool | None = None
    column_names: list[str] | None = None
    missing_values: list[str] = field(default_factory=list)
    zero_is_missing: bool = False
    zero_time: bool = True

    def __post_init__(self):
        if isinstance(self.screen, dict):
            s = dict(self.screen)
            if s.get("origin_px") is not None:
                s["origin_px"] = tuple(s["origin_px"])
            self.screen = ScreenGeometry(**s)
        self.validate()

    def validate(self) -> None:
        """Check the mapping on its own (before any file is read)."""
        if not self.time_col or not self.x_col or not self.y_col:
            raise ParameterError("a table mapping needs time_col, x_col and y_col",
                                 hint="name the columns with --time-col, --x-col, --y-col")
        if self.time_unit not in TIME_UNITS:
            raise ParameterError(f"time unit {self.time_unit!r} is not one of {', '.join(TIME_UNITS)}")
        if self.units not in POSITION_UNITS:
            raise ParameterError(f"position unit {self.units!r} is not one of {', '.join(POSITION_UNITS)}",
                                 hint="use deg, px, mm or norm")
        if self.origin not in ORIGINS:
            raise ParameterError(f"origin {self.origin!r} is not one of {', '.join(ORIGINS)}")
        d = self.delimiter
        if d is not None and d not in ("\\t", r"\s+") and (not isinstance(d, str) or len(d) != 1
                                                           or d in "\r\n\"" or not (d == "\t" or d.isprintable())):
            raise ParameterError(f"delimiter {d!r} is not one character that can separate fields",
                                 hint='give one character such as "," ";" "|" or "\\t" for a tab, or leave it '
                                      "out to have it detected")
        if self.units in ("px", "mm", "norm") and self.screen is None:
            raise ParameterError(f"positions in {self.units} need the screen geometry",
                                 hint="give --screen-size-mm W H and --distance-mm D"
                                 + (" and --screen-res-px W H" if self.units == "px" else ""))
        if self.units == "px" and (self.screen.width_px is None or self.screen.height_px is None):
            raise ParameterError("positions in px need the screen resolution", hint="give --screen-res-px W H")
        if self.event_values is not None:
            bad = {v for v in self.event_values.values() if v not in ("fixation", "saccade", "blink", "other")}
            if bad:
                raise ParameterError(f"event_values map to {sorted(bad)}; allowed are fixation, saccade, blink, other")

    def to_dict(self) -> dict:
        d = asdict(self)
        d["screen"] = self.screen.to_dict() if self.screen is not None else None
        return d

    @classmethod
    def from_dict(cls, d: dict) -> TableMapping:
        known = set(cls.__dataclass_fields__)
        unknown = sorted(set(d) - known - {"kind", "aspectus_version"})
        if unknown:
            raise ParameterError(f"unknown table mapping field(s): {', '.join(unknown)}",
                                 hint=f"known fields are {', '.join(sorted(known))}")
        return cls(**{k: v for k, v in d.items() if k in known})

    def save(self, path) -> Path:
        """Write the mapping as JSON (atomically) for reuse across a study."""
        from aspectus import __version__

        return write_json(path, {"kind": "aspectus table mapping", "aspectus_version": __version__, **self.to_dict()})

    @classmethod
    def load(cls, path) -> TableMapping:
        """Read a mapping written by :meth:`save`."""
        path = Path(path)
        try:
            d = json.loads(path.read_text(encoding="utf-8-sig"))
        except FileNotFoundError:
            raise ReferenceFormatError("mapping file not found", path=path) from None
        except (json.JSONDecodeError, UnicodeDecodeError) as exc:
            raise ReferenceFormatError(f"mapping file is not valid JSON ({exc})", path=path, hint=_MAPPING_HINT) from None
        if not isinstance(d, dict):
            raise ReferenceFormatError("mapping file must hold a JSON object", path=path, hint=_MAPPING_HINT)
        if d.get("kind") != "aspectus table mapping" and not ({"time_col", "x_col", "y_col"} & set(d)):
            # another JSON file (a study file, a sidecar, a schedule): say what belongs here, not which fields it lacks
            raise ReferenceFormatError("is not a table mapping (it names none of a mapping's columns)", path=path,
                                       hint=_MAPPING_HINT)
        try:
            return cls.from_dict(d)
        except ParameterError as exc:
            raise ReferenceFormatError(exc.problem, path=path, hint=exc.hint) from None
        except TypeError as exc:
            raise ReferenceFormatError(f"mapping is incomplete ({exc})", path=path) from None


# ----------------------------------------------------------------------------- raw parsing


@dataclass
class RawTable:
    """Cells of a delimited file as strings, with the file line of every row."""

    frame: pd.DataFrame  # all cells as str
    line_no: np.ndarray  # 1-based file line of each row
    path: Path


def _read_text(path: Path) -> str:
    try:
        raw = path.read_bytes()
    except FileNotFoundError:
        raise ReferenceFormatError("file not found", path=path) from None
    except IsADirectoryError:
        raise ReferenceFormatError("is a folder, expected a gaze table file", path=path) from None
    if raw[:2] == b"\x1f\x8b":
        raw = _gunzip_bounded(raw, path)
    if raw[:2] in (b"\xff\xfe", b"\xfe\xff") or raw[:4] in (b"\x00\x00\xfe\xff", b"\xff\xfe\x00\x00"):
        raise ReferenceFormatError("is UTF-16/UTF-32 text; aspectus reads UTF-8 (or Latin-1) tables", path=path,
                                   hint="save the table again as CSV UTF-8")
    nul = raw.find(b"\x00")
    if nul >= 0:  # a NUL would end a cell early in the parser (6.7\x00574 read as 6.7): never read such a file
        line = raw.count(b"\n", 0, nul) + 1
        raise ReferenceFormatError("holds a NUL byte (binary data, or UTF-16 text without its byte-order mark)",
                                   path=path, where=f"line {line}",
                                   hint="export the table again as plain text (CSV UTF-8)")
    for enc in ("utf-8-sig", "latin-1"):
        try:
            return raw.decode(enc)
        except UnicodeDecodeError:
            continue
    raise ReferenceFormatError("cannot decode the file as text", path=path)  # pragma: no cover


#: a gzip table may inflate to at most this many times its compressed size (text tables of gaze samples
#: compress 3-10 times; a "zip bomb" a thousand times and more)
GZIP_MAX_RATIO = 200
#: ... and never to more than this many bytes (an hour at 2000 Hz with 20 columns is some 1.5 GB of text)
GZIP_MAX_BYTES = 4 << 30


def _gunzip_bounded(raw: bytes, path: Path) -> bytes:
    """Inflate gzip data, refusing when it grows beyond :data:`GZIP_MAX_RATIO` x its size or :data:`GZIP_MAX_BYTES`."""
    import zlib

    limit = min(max(GZIP_MAX_RATIO * len(raw), 64 << 20), GZIP_MAX_BYTES)
    out = bytearray()
    d = zlib.decompressobj(16 + zlib.MAX_WBITS)
    data = raw
    try:
        while data:
            out += d.decompress(data, limit + 1 - len(out))
            if len(out) > limit:
                raise ReferenceFormatError(
                    f"gzip data inflates to more than {limit / 1e6:.0f} MB ({GZIP_MAX_RATIO} times its size or "
                    f"{GZIP_MAX_BYTES >> 30} GiB at most): not a gzip-compressed gaze table", path=path,
                    hint="decompress it yourself if it really is one, and give the plain table")
            data = d.unconsumed_tail
            if d.eof:
                rest = d.unused_data
                if rest.strip(b"\x00"):  # concatenated gzip members (gzip -c a b > c)
                    d = zlib.decompressobj(16 + zlib.MAX_WBITS)
                    data = rest
                else:
                    break
        if not d.eof:
            raise ReferenceFormatError("gzip data is damaged (it ends before the end of the compressed stream)",
                                       path=path, hint="copy the file again")
    except zlib.error as exc:
        raise ReferenceFormatError(f"gzip data is damaged ({exc})", path=path, hint="copy the file again") from None
    return bytes(out)


def _sniff_delimiter(lines: list[str]) -> str:
    sample = lines[:20]
    for cand in ("\t", ",", ";", "|"):
        counts = [ln.count(cand) for ln in sample]
        if counts and min(counts) > 0 and len(set(counts)) == 1:
            return cand
    for cand in ("\t", ",", ";"):
        if sum(ln.count(cand) for ln in sample) >= len(sample):
            return cand
    return r"\s+"


def _looks_numeric(cell: str) -> bool:
    c = cell.strip().lower()
    if c in MISSING_TOKENS:
        return True
    try:
        float(c)
        return True
    except ValueError:
        return False


def read_raw_table(path, *, delimiter: str | None = None, comment: str = "#", header: bool | None = None,
                   column_names: list[str] | None = None) -> RawTable:
    """Read a delimited text file (optionally gzip-compressed) into string cells.

    Parameters
    ----------
    path : path-like
        The file.
    delimiter : str, optional
        Field delimiter; detected when omitted.
    comment : str
        Comment prefix; such lines (and blank lines) are skipped.
    header : bool, optional
        Whether the first data line is a header; detected when omitted.
    column_names : list of str, optional
        Names for the columns of a headerless file.

    Returns
    -------
    RawTable
    """
    path = Path(path)
    text = _read_text(path)
    keep, line_no = [], []
    for i, ln in enumerate(text.splitlines(), start=1):
        ln = ln.replace("\ufeff", "")  # stray byte-order marks (files concatenated from several exports)
        s = ln.strip()
        if not s or (comment and s.startswith(comment)):
            continue
        keep.append(ln.rstrip("\r"))
        line_no.append(i)
    if not keep:
        raise ReferenceFormatError("the table is empty (no data lines)", path=path,
                                   hint="check that this is the exported gaze file")
    delim = delimiter if delimiter else _sniff_delimiter(keep)
    if delim == "\\t":
        delim = "\t"
    splitter = (lambda s: re.split(r"\s+", s.strip())) if delim == r"\s+" else (lambda s: s.split(delim))
    first = [c.strip().strip('"') for c in splitter(keep[0])]
    if header is None:
        header = column_names is None and not all(_looks_numeric(c) for c in first)
    if header:
        names = first
        body, body_lines = keep[1:], line_no[1:]
    else:
        names = list(column_names) if column_names else [str(i) for i in range(len(first))]
        body, body_lines = keep, line_no
    if len(set(names)) != len(names):
        from collections import Counter

        dup = sorted(n for n, c in Counter(names).items() if c > 1)[:10]  # linear: a header may have 1e5 fields
        raise ReferenceFormatError(f"column name(s) {', '.join(dup)} appear more than once", path=path,
                                   where=f"row {line_no[0]}")
    if not body:
        raise ReferenceFormatError("the table has a header but no data rows", path=path)
    sep = delim
    try:
        df = pd.read_csv(io.StringIO("\n".join(body)), sep=sep, header=None, dtype=str, keep_default_na=False,
                         engine="python" if sep == r"\s+" else "c", skipinitialspace=True, quotechar='"')
    except pd.errors.EmptyDataError:
        raise ReferenceFormatError("the table has no readable cells", path=path) from None
    except pd.errors.ParserError as exc:
        m = re.search(r"line (\d+)", str(exc))
        where = f"row {body_lines[int(m.group(1)) - 1]}" if m and int(m.group(1)) <= len(body_lines) else None
        raise ReferenceFormatError(f"rows have different numbers of fields ({exc})", path=path, where=where,
                                   hint="check the delimiter (--delimiter) and the header") from None
    if df.shape[1] != len(names):
        raise ReferenceFormatError(
            f"the table has {df.shape[1]} columns but {len(names)} names ({', '.join(names)})", path=path,
            where=f"row {body_lines[0]}", hint="check the delimiter, the header setting or the column names")
    df.columns = names
    df = df.apply(lambda s: s.str.strip())
    return RawTable(frame=df, line_no=np.asarray(body_lines, dtype=int), path=path)


def _col(raw: RawTable, name: str, role: str) -> pd.Series:
    if name in raw.frame.columns:
        return raw.frame[name]
    cols = [str(c) for c in raw.frame.columns]
    if len(cols) == 1 and name in cols[0] and name != cols[0]:  # the header, delimiters and all, is one column
        raise ReferenceFormatError(
            f"no column {name!r} for the {role}: the whole header {cols[0]!r} was read as one column, so the file "
            "is separated by another delimiter than the one set", path=raw.path,
            hint="set the mapping's delimiter (--delimiter) to the file's, or leave it out: it is detected")
    raise ReferenceFormatError(
        f"no column {name!r} for the {role}; the table has {', '.join(map(str, raw.frame.columns))}",
        path=raw.path, hint="fix the column mapping (or --mapping file)")


def numeric_column(raw: RawTable, name: str, role: str, *, extra_missing=()) -> np.ndarray:
    """A column as floats; missing tokens become NaN, anything else non-numeric is an error naming the row."""
    s = _col(raw, name, role)
    low = s.str.lower()
    missing = low.isin(list(MISSING_TOKENS) + [m.lower() for m in extra_missing])
    vals = pd.to_numeric(s.where(~missing, None), errors="coerce").to_numpy(dtype=float, copy=True)
    bad = ~missing.to_numpy() & ~np.isfinite(vals)
    if bad.any():
        i = int(np.argmax(bad))
        raise ReferenceFormatError(f"{role} column {name!r} holds {s.iloc[i]!r}, expected a number", path=raw.path,
                                   where=f"row {raw.line_no[i]}", hint="fix the cell or the column mapping")
    # pandas' fast parser can be off by one unit in the last place; Python's float() reads every decimal
    # to the nearest double, so a number written with repr() reads back bit for bit
    ok = np.isfinite(vals)
    if ok.any():
        vals[ok] = s.to_numpy(dtype=object)[ok].astype(float)
    return vals


def check_times(t_s: np.ndarray, *, raw_line: np.ndarray, path: Path, column: str) -> None:
    """Times must be present, finite and strictly increasing; errors name the file line."""
    bad = ~np.isfinite(t_s)
    if bad.any():
        i = int(np.argmax(bad))
        raise ReferenceFormatError(f"time column {column!r} is empty or not a number", path=path,
                                   where=f"row {raw_line[i]}", hint="every sample needs a time")
    d = np.diff(t_s)
    if (d < 0).any():
        i = int(np.argmax(d < 0)) + 1
        raise ReferenceFormatError(f"timestamps go backwards ({t_s[i - 1]:.9g} s then {t_s[i]:.9g} s)", path=path,
                                   where=f"row {raw_line[i]}",
                                   hint="sort the file by time, or check that the time column and unit are right")
    if (d == 0).any():
        i = int(np.argmax(d == 0)) + 1
        raise ReferenceFormatError(f"timestamp {t_s[i]:.9g} s appears twice", path=path, where=f"row {raw_line[i]}",
                                   hint="remove the repeated sample, or check the time unit (too coarse?)")


#: sampling rates a gaze recording can have, Hz: below, the slowest webcams (5 fps) and hand-coded data leave a
#: wide margin; above, the fastest lab trackers (2 kHz) do (common practice)
PLAUSIBLE_RATE_HZ = (1.0, 10_000.0)


def check_sampling_rate(t_s: np.ndarray, *, path: Path, column: str, unit: str) -> None:
    """Refuse a time column whose declared unit gives an impossible sampling rate (a unit mistake).

    Milliseconds read as seconds make 250 Hz data 0.25 Hz, and its fixations
    minutes long; seconds read as milliseconds make it 250 kHz. The median
    sample interval decides, and the error names the unit that fits.
    """
    if len(t_s) < 3:
        return
    d = np.diff(np.asarray(t_s, dtype=float))
    d = d[np.isfinite(d) & (d > 0)]
    if not len(d):
        return
    rate = 1.0 / float(np.median(d))
    lo, hi = PLAUSIBLE_RATE_HZ
    if lo <= rate <= hi:
        return
    fits = [u for u, f in TIME_UNITS.items() if lo <= rate * TIME_UNITS[unit] / f <= hi and u != unit]
    likely = (f"the times look like {' or '.join(fits)}" if fits else "check the time column")
    raise ReferenceFormatError(
        f"time column {column!r} read in {unit} gives a sampling rate of {rate:.3g} Hz, which no gaze recording "
        f"has (expected {lo:g}-{hi:g} Hz)", path=path,
        hint=f"{likely}: set the time unit accordingly (--time-unit)")


def positions_to_deg(x, y, *, units: str, screen: ScreenGeometry | None, origin: str = "top-left",
                     y_up: bool | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Gaze positions in ``units`` to (yaw_deg, pitch_deg) in the frame of :mod:`aspectus.schema`.

    Parameters
    ----------
    x, y : array_like
        Positions, in ``units``.
    units : {"deg", "px", "mm", "norm"}
        Unit of ``x`` and ``y``.
    screen : ScreenGeometry or None
        Needed for ``px``, ``mm`` and ``norm``.
    origin : {"top-left", "center"}
        Where ``px``/``mm``/``norm`` positions are measured from.
    y_up : bool, optional
        Whether ``y`` grows upwards; default True for ``deg``, else False.
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    if y_up is None:
        y_up = units == "deg"
    if units == "deg":
        return x, (y if y_up else -y)
    if screen is None:
        raise ParameterError(f"positions in {units} need the screen geometry")
    if y_up:  # turn into the screen convention (y down from the top edge, or from the centre)
        if origin == "center":
            y = -y
        else:
            full = {"px": screen.height_px, "mm": screen.height_mm, "norm": 1.0}[units]
            y = full - y
    if units == "px":
        sx, sy = screen.mm_per_px()
        if origin == "center":
            return screen.mm_to_deg(x * sx, y * sy)
        return screen.px_to_deg(x, y)
    if units == "mm":
        if origin == "center":
            return screen.mm_to_deg(x, y)
        return screen.mm_to_deg(x - screen.width_mm / 2.0, y - screen.height_mm / 2.0)
    if units == "norm":
        if origin == "center":
            return screen.mm_to_deg(x * screen.width_mm, y * screen.height_mm)
        return screen.norm_to_deg(x, y)
    raise ParameterError(f"unknown position unit {units!r}")  # pragma: no cover


def check_position_range(x, y, *, units: str, screen: ScreenGeometry | None, path: Path, line_no: np.ndarray,
                         x_name: str, y_name: str) -> None:
    """Catch a wrong unit early: values far outside what the unit allows are an error naming the row."""
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    if units == "deg":
        lim_x = lim_y = 90.0
        lo_x = lo_y = -90.0
        guess = "px or mm"
    elif units == "norm":
        lo_x = lo_y = -1.0
        lim_x = lim_y = 2.0
        guess = "px, mm or deg"
    elif units == "px":
        lo_x, lim_x = -2.0 * screen.width_px, 3.0 * screen.width_px
        lo_y, lim_y = -2.0 * screen.height_px, 3.0 * screen.height_px
        guess = "a different screen resolution, or us/ms confusion with another column"
    else:  # mm
        lo_x, lim_x = -2.0 * screen.width_mm, 3.0 * screen.width_mm
        lo_y, lim_y = -2.0 * screen.height_mm, 3.0 * screen.height_mm
        guess = "px, or a different screen size"
    for vals, lo, hi, name in ((x, lo_x, lim_x, x_name), (y, lo_y, lim_y, y_name)):
        out = np.isfinite(vals) & ((vals < lo) | (vals > hi))
        if out.any():
            i = int(np.argmax(out))
            raise ReferenceFormatError(
                f"column {name!r} holds {vals[i]:.6g}, which is not a plausible position in {units} "
                f"(expected {lo:.6g} to {hi:.6g})", path=path, where=f"row {line_no[i]}",
                hint=f"check the units (perhaps {guess}) and the screen geometry")


def check_median_on_screen(x, y, *, units: str, screen: ScreenGeometry | None, origin: str, path: Path,
                           x_name: str, y_name: str) -> None:
    """Catch a wrong unit that :func:`check_position_range` lets through: gaze recorded at a screen rests on
    the screen, so a median position more than half a screen beyond its edge (more than one screen width or
    height from its centre) means the unit or the screen geometry is wrong (e.g. pixels read as mm)."""
    if units == "deg" or screen is None:
        return
    if units == "px":
        size = (screen.width_px, screen.height_px)
        unit = "px"
    elif units == "mm":
        size, unit = (screen.width_mm, screen.height_mm), "mm"
    else:
        size, unit = (1.0, 1.0), "screen widths/heights"
    if size[0] is None or size[1] is None:
        return
    for vals, extent, name, what in ((x, size[0], x_name, "width"), (y, size[1], y_name, "height")):
        v = np.asarray(vals, dtype=float)
        v = v[np.isfinite(v)]
        if not len(v):
            continue
        med = float(np.median(v))
        centre = 0.0 if origin == "center" else extent / 2.0
        if abs(med - centre) > extent:
            guess = {"px": "mm or deg, or another screen resolution", "mm": "px, or another screen size",
                     "norm": "px or mm"}.get(units, "another unit")
            raise ReferenceFormatError(
                f"column {name!r} has its median at {med:.6g} {unit}, more than half a screen beyond the edge of a "
                f"screen {extent:.6g} {unit} in {what} (positions measured from its "
                f"{'centre' if origin == 'center' else 'top-left corner'}): the gaze would "
                "mostly lie off the screen", path=path,
                hint=f"check the position unit (perhaps {guess}), the screen size and resolution, and where "
                "positions are measured from")


def _validity(raw: RawTable, mapping: TableMapping) -> np.ndarray:
    s = _col(raw, mapping.validity_col, "validity").str.lower()
    ok = [v.strip().lower() for v in (mapping.validity_values or ["1", "1.0", "true", "yes", "valid", "ok"])]
    return s.isin(ok).to_numpy()


def event_labels(values: pd.Series, event_values: dict[str, str] | None) -> np.ndarray:
    """Raw per-sample event values to ``fixation``/``saccade``/``blink``/``other``/``""`` (missing)."""
    if event_values is not None:
        m = {str(k).strip().lower(): v for k, v in event_values.items()}
    else:
        m = DEFAULT_EVENT_WORDS
    low = values.astype(str).str.strip().str.lower()
    out = low.map(lambda v: "" if v in MISSING_TOKENS else m.get(v, "other"))
    return out.to_numpy(dtype=object)


def read_gaze_table(path, mapping: TableMapping) -> pd.DataFrame:
    """Read a delimited gaze table into the samples table.

    Parameters
    ----------
    path : path-like
        CSV/TSV/whitespace text file, optionally gzip-compressed.
    mapping : TableMapping
        Column mapping, units and screen geometry.

    Returns
    -------
    pandas.DataFrame
        Samples table (:data:`aspectus.schema.SAMPLE_COLUMNS`): ``t_s`` (from
        the first sample when ``mapping.zero_time``), ``valid``, ``yaw_deg``,
        ``pitch_deg``, ``blink``, and ``pupil`` / ``event_label`` when mapped.
        ``attrs`` holds ``source`` (the path), ``clock_start_s`` (raw time of
        the first sample, s) and ``mapping``.

    Raises
    ------
    aspectus.errors.ReferenceFormatError
        Missing file or column, non-numeric cell, time going backwards or
        repeated, implausible positions for the unit, or no valid sample at
        all; the message names file, row (file line) and column.
    """
    path = Path(path)
    mapping.validate()
    raw = read_raw_table(path, delimiter=mapping.delimiter, comment=mapping.comment, header=mapping.header,
                         column_names=mapping.column_names)
    return samples_from_raw(raw, mapping)


def samples_from_raw(raw: RawTable, mapping: TableMapping) -> pd.DataFrame:
    """Turn parsed cells into a samples table (the work of :func:`read_gaze_table`)."""
    path = raw.path
    extra = mapping.missing_values
    t_raw = numeric_column(raw, mapping.time_col, "time", extra_missing=extra) * TIME_UNITS[mapping.time_unit]
    check_times(t_raw, raw_line=raw.line_no, path=path, column=mapping.time_col)
    x = numeric_column(raw, mapping.x_col, "gaze x", extra_missing=extra)
    y = numeric_column(raw, mapping.y_col, "gaze y", extra_missing=extra)
    check_sampling_rate(t_raw, path=path, column=mapping.time_col, unit=mapping.time_unit)
    if mapping.zero_is_missing:
        zero = (x == 0) & (y == 0)
        x[zero] = np.nan
        y[zero] = np.nan
    check_position_range(x, y, units=mapping.units, screen=mapping.screen, path=path, line_no=raw.line_no,
                         x_name=mapping.x_col, y_name=mapping.y_col)
    check_median_on_screen(x, y, units=mapping.units, screen=mapping.screen, origin=mapping.origin, path=path,
                           x_name=mapping.x_col, y_name=mapping.y_col)
    yaw, pitch = positions_to_deg(x, y, units=mapping.units, screen=mapping.screen, origin=mapping.origin,
                                  y_up=mapping.y_up)
    valid = np.isfinite(yaw) & np.isfinite(pitch)
    if mapping.validity_col:
        valid &= _validity(raw, mapping)
    t0 = float(t_raw[0])
    out = pd.DataFrame({
        "t_s": t_raw - t0 if mapping.zero_time else t_raw,
        "valid": valid,
        "yaw_deg": np.where(valid, yaw, np.nan),
        "pitch_deg": np.where(valid, pitch, np.nan),
    })
    blink = np.zeros(len(out), dtype=bool)
    if mapping.pupil_col:
        out["pupil"] = numeric_column(raw, mapping.pupil_col, "pupil", extra_missing=extra)
    if mapping.event_col:
        ev_raw = _col(raw, mapping.event_col, "event label")
        labels = event_labels(ev_raw, mapping.event_values)
        out["event_label"] = labels
        out["event_raw"] = ev_raw.to_numpy(dtype=object)
        blink = labels == "blink"
    out["blink"] = blink
    if not valid.any():
        raise ReferenceFormatError(
            f"no valid gaze sample in {len(out)} rows (every x/y cell is missing"
            + (" or marked invalid" if mapping.validity_col else "") + ")", path=path,
            hint="check the x/y column names, the missing-value tokens and the validity column")
    out = check_samples(out, source=str(path))
    out.attrs.update(source=str(path), clock_start_s=t0, mapping=mapping.to_dict())
    return out


def events_from_labels(t_s, labels) -> pd.DataFrame:
    """Runs of equal per-sample labels as an events table (type, onset_s, offset_s, duration_ms, n_samples).

    The offset of a run is the time of the first sample after it (the last
    run ends one median sample interval after its last sample), as in
    :data:`aspectus.schema.EVENT_COLUMNS`. Labels other than fixation,
    saccade and blink are dropped.
    """
    t = np.asarray(t_s, dtype=float)
    lab = np.asarray(labels, dtype=object)
    cols = ["type", "onset_s", "offset_s", "duration_ms", "n_samples"]
    if len(t) == 0:
        return pd.DataFrame(columns=cols)
    dt = float(np.median(np.diff(t))) if len(t) > 1 else 0.0
    change = np.flatnonzero(lab[1:] != lab[:-1]) + 1
    starts = np.r_[0, change]
    ends = np.r_[change, len(t)]
    rows = []
    for a, b in zip(starts, ends):
        kind = lab[a]
        if kind not in ("fixation", "saccade", "blink"):
            continue
        off = t[b] if b < len(t) else t[-1] + dt
        rows.append((kind, t[a], off, (off - t[a]) * 1e3, int(b - a)))
    return pd.DataFrame(rows, columns=cols).astype({"onset_s": float, "offset_s": float, "duration_ms": float,
                                                    "n_samples": "int64"})
