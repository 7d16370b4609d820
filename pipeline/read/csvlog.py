"""The timing CSV: one row per (part, block) with the block's start and end in ms.

Pure: bytes in, an Arrow table out; the store opens files and writes Parquet. The header
line decides the separator (``,`` ``;`` or tab) and where each column sits; names are
trimmed and case-insensitive, columns come in any order, unknown ones are ignored and
listed so the caller can warn.

Speed comes from polars' native reader, told to read every cell as a string so that we do
the casting ourselves and can name the exact bad cell. Polars does not say which line a
row came from, and pads short rows instead of refusing them, so the raw bytes are counted
alongside (records, separators outside quotes) to prove every row whole and to number the
lines. When the counts and polars disagree, or polars refuses the file, the stdlib ``csv``
module reads it instead: about ten times slower, but it names the line of a ragged row and
accepts the odd quoting polars rejects. Only damaged or unusual files take that path.
"""

from __future__ import annotations

import csv
import gc
import io
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass

import numpy as np
import polars as pl
import pyarrow as pa

from ..errors import InputError
from .schemas import TIMING_CSV

__all__ = ["CsvLog", "REQUIRED_COLUMNS", "OPTIONAL_COLUMNS", "TIMING_CSV_SCHEMA",
           "read_timing_csv", "sniff_timing_csv"]

REQUIRED_COLUMNS = ("lot_id", "touchdown", "site", "part_id", "block", "start_ms", "end_ms")
OPTIONAL_COLUMNS = ("head", "hard_bin", "soft_bin", "passed", "test_time_ms")

# The table this reader returns is the stored table's schema (one definition).
TIMING_CSV_SCHEMA = TIMING_CSV

_SEPARATORS = (",", ";", "\t")
_BOM = b"\xef\xbb\xbf"
_UTF16_BOMS = (b"\xff\xfe", b"\xfe\xff")
_SNIFF_LIMIT = 64 * 1024  # a header longer than this is not one of ours
_INT_COLUMNS = ("touchdown", "site", "head", "hard_bin", "soft_bin")
_FLOAT_COLUMNS = ("start_ms", "end_ms", "test_time_ms")
_DEFAULTS: dict[str, object] = {"head": 1}  # one-head testers do not write the column
_PASSED = {"true": True, "1": True, "yes": True, "y": True, "pass": True, "p": True,
           "false": False, "0": False, "no": False, "n": False, "fail": False, "f": False}


@dataclass(frozen=True)
class CsvLog:
    """A decoded timing CSV: the rows, and header names that were not ours."""

    table: pa.Table
    ignored_columns: list[str]


@dataclass(frozen=True)
class _Header:
    sep: str
    width: int
    index: dict[str, int]  # our column name -> field position
    ignored: list[str]


# ---------------------------------------------------------------------------- sniffing


def sniff_timing_csv(head: bytes) -> bool:
    """True when the first line of `head` is a timing-CSV header (cheap; never raises)."""
    line = _first_line(head[:_SNIFF_LIMIT])
    if line is None:
        return False
    try:
        text = line.decode("utf-8")
    except UnicodeDecodeError as exc:
        # `head` may be cut inside a multi-byte character after an unterminated line
        if exc.reason != "unexpected end of data":
            return False
        text = line[:exc.start].decode("utf-8")
    return _pick_separator(text)[2] == []


def _first_line(head: bytes) -> bytes | None:
    head = head.removeprefix(_BOM)
    end = head.find(b"\n")
    if end < 0 and len(head) >= _SNIFF_LIMIT - len(_BOM):
        return None
    line = head if end < 0 else head[:end]
    # a CR-only file is still ours: the reader then says how to fix its line ends
    return line.split(b"\r", 1)[0]


# ---------------------------------------------------------------------------- header


def _split_names(line: str, sep: str) -> list[str]:
    try:
        fields = next(csv.reader([line], delimiter=sep, quotechar='"'), [])
    except csv.Error:
        return []
    return [f.strip() for f in fields]


def _pick_separator(line: str) -> tuple[str, list[str], list[str]]:
    """(separator, names, missing required columns) for the best-fitting separator."""
    best: tuple[int, int] = (-1, -1)
    choice: tuple[str, list[str], list[str]] = (",", [], list(REQUIRED_COLUMNS))
    for sep in _SEPARATORS:
        names = _split_names(line, sep)
        lowered = {n.lower() for n in names}
        missing = [c for c in REQUIRED_COLUMNS if c not in lowered]
        known = sum(1 for n in lowered if n in REQUIRED_COLUMNS + OPTIONAL_COLUMNS)
        # the separator that finds most of our names wins; ties go to the first tried
        if (known, len(names)) > best:
            best, choice = (known, len(names)), (sep, names, missing)
    return choice


def _parse_header(line: str, path: str) -> _Header:
    if "\r" in line:
        raise InputError(f"{path}: lines end in CR only; save the file with LF or CRLF "
                         "line ends")
    if not line.strip():
        raise InputError(f"{path}: line 1 is blank; the header must be the first line")
    sep, names, missing = _pick_separator(line)
    if missing:
        plural = "s" if len(missing) > 1 else ""
        raise InputError(f"{path}: missing column{plural} {', '.join(missing)} "
                         f"(header has: {', '.join(names)})")
    index: dict[str, int] = {}
    ignored: list[str] = []
    for pos, name in enumerate(names):
        key = name.lower()
        if key not in REQUIRED_COLUMNS + OPTIONAL_COLUMNS:
            ignored.append(name or f"(unnamed column {pos + 1})")
        elif key in index:
            raise InputError(f"{path}: line 1: column {key} appears twice")
        else:
            index[key] = pos
    return _Header(sep, len(names), index, ignored)


# ---------------------------------------------------------------------------- bytes


def _check_utf8(data: bytes, path: str) -> None:
    if data.startswith(_UTF16_BOMS):
        raise InputError(f"{path}: the file is UTF-16 text; save it as UTF-8")
    try:
        data.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = data.count(b"\n", 0, exc.start) + 1
        raise InputError(f"{path}: line {line}: not UTF-8 text (byte 0x{data[exc.start]:02x}); "
                         "save the file as UTF-8") from None


def _quote_parity(arr: np.ndarray) -> np.ndarray:
    """1 where an odd number of quotes comes before (a byte is inside a quoted field).

    An escaped quote ("") adds two, so it keeps the parity. Only files with quotes pay.
    """
    return np.bitwise_xor.accumulate((arr == ord('"')).view(np.uint8))


def _record_lines(arr: np.ndarray, parity: np.ndarray | None) -> tuple[np.ndarray, ...]:
    """(first line, byte length) of each record, for bodies where lines != records."""
    newlines = np.flatnonzero(arr == 10)
    ends = newlines if parity is None else newlines[parity[newlines] == 0]
    ends = np.append(ends, len(arr))  # the body's last record has no newline
    starts = np.concatenate(([0], ends[:-1] + 1))
    # +2: the header is line 1 and the body starts on line 2
    return np.searchsorted(newlines, starts) + 2, ends - starts


def _fast_cells(body: bytes, header: _Header) -> pl.DataFrame | None:
    """Our columns as strings plus `line`, or None when the stdlib should read the file.

    Polars pads a short row with empty cells instead of refusing it, so rows are checked
    by counting: no row can have too many fields (polars refuses those), so when the
    separators outside quotes number exactly (width - 1) per non-blank row, every row is
    whole. Counting bytes is cheap; per-record positions are only worked out when some
    record spans lines or looks blank.
    """
    schema = {f"c{i}": pl.String for i in range(header.width)}
    try:
        raw = pl.read_csv(body, has_header=False, schema=schema, separator=header.sep,
                          quote_char='"', empty_string_is_null=False,
                          truncate_ragged_lines=False, encoding="utf8")
    except (pl.exceptions.PolarsError, pl.exceptions.PanicException):
        # a panic on odd input is polars' bug, not the file's: the stdlib reader decides
        return None
    arr = np.frombuffer(body, dtype=np.uint8)
    parity = _quote_parity(arr) if b'"' in body else None
    if parity is None:
        seps, spanning = body.count(header.sep.encode()), False
        records = body.count(b"\n") + 1
    else:
        outside = parity == 0
        seps = int(np.count_nonzero((arr == ord(header.sep)) & outside))
        records = int(np.count_nonzero((arr == 10) & outside)) + 1
        spanning = records != body.count(b"\n") + 1
    blank = raw.select(pl.all_horizontal(pl.all() == "")).to_series().to_numpy()
    if raw.height != records or seps != (records - blank.sum()) * (header.width - 1):
        return None
    lines = np.arange(2, records + 2, dtype=np.int64)
    if spanning or blank.any():
        lines, length = _record_lines(arr, parity)
        # an all-empty row is blank only when it is no more than a line end
        if np.any(blank & (length > 1)):
            return None
    cells = raw.select(pl.col(f"c{i}").alias(name) for name, i in header.index.items())
    cells = cells.with_columns(line=pl.Series(lines, dtype=pl.Int64))
    return cells.filter(pl.Series(~blank))


def _slow_cells(body: str, header: _Header, path: str) -> pl.DataFrame:
    """The stdlib reader: exact diagnostics for ragged rows, forgiving about quotes."""
    with _gc_paused():
        rows, lines = _stdlib_rows(body, header.sep, path)
        keep = [i for i, row in enumerate(rows) if row and (len(row) > 1 or row[0].strip())]
        bad = next((i for i in keep if len(rows[i]) != header.width), None)
        if bad is not None:
            at_end = bad == len(rows) - 1
            raise InputError(_ragged(path, lines[bad], rows[bad], header.width, at_end))
        if len(keep) < len(rows):
            rows, lines = [rows[i] for i in keep], [lines[i] for i in keep]
        fields = list(zip(*rows, strict=True)) if rows else [()] * header.width
    columns = {name: pl.Series(name, fields[pos], dtype=pl.String)
               for name, pos in header.index.items()}
    return pl.DataFrame([*columns.values(), pl.Series("line", lines, dtype=pl.Int64)])


@contextmanager
def _gc_paused() -> Iterator[None]:
    """The stdlib path makes millions of small lists, and the cyclic collector would
    rescan them over and over (about half the time); none of them can form a cycle."""
    was_enabled = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if was_enabled:
            gc.enable()


def _stdlib_rows(body: str, sep: str, path: str) -> tuple[list[list[str]], list[int]]:
    """All records, and the line each starts on (the header is line 1)."""
    reader = csv.reader(io.StringIO(body, newline=""), delimiter=sep, quotechar='"')
    try:
        rows = list(reader)  # at C speed; line numbers are only tracked when needed
        if reader.line_num == len(rows):  # no record spans lines
            return rows, list(range(2, len(rows) + 2))
        reader = csv.reader(io.StringIO(body, newline=""), delimiter=sep, quotechar='"')
        rows, lines, done = [], [], 0
        for row in reader:
            rows.append(row)
            lines.append(done + 2)
            done = reader.line_num
    except csv.Error as exc:
        raise InputError(f"{path}: line {reader.line_num + 1}: {exc}") from None
    return rows, lines


def _ragged(path: str, line: int, row: list[str], width: int, at_end: bool) -> str:
    # an open quote swallows the rest of the file into one field of the last record
    if at_end and any("\n" in field for field in row):
        return f"{path}: line {line}: a quoted field is never closed"
    return f"{path}: line {line}: expected {width} fields (as in the header), found {len(row)}"


# ---------------------------------------------------------------------------- values


@dataclass(frozen=True)
class _Check:
    """One rule over all rows; `explain` turns the first offending row into a message."""

    bad: pl.Expr
    explain: Callable[[dict[str, object]], str]


def _shown(value: object) -> str:
    text = str(value)
    return repr(text if len(text) <= 40 else text[:37] + "...")


def _value_expr(name: str, present: bool) -> pl.Expr:
    """The typed value of one column; empty optional cells take the absent default."""
    if not present:
        default = _DEFAULTS.get(name)
        return pl.lit(default, dtype=_dtype(name)).alias(name)
    raw = pl.col(name)
    if name in _INT_COLUMNS or name in _FLOAT_COLUMNS:
        typed = raw.cast(_dtype(name), strict=False)
    elif name == "passed":
        typed = raw.str.to_lowercase().replace_strict(_PASSED, default=None,
                                                      return_dtype=pl.Boolean)
    else:
        typed = raw
    empty = pl.lit(_DEFAULTS.get(name), dtype=_dtype(name))
    return pl.when(raw == "").then(empty).otherwise(typed).alias(name)


def _dtype(name: str) -> pl.DataType:
    if name in _INT_COLUMNS:
        return pl.Int64()
    if name in _FLOAT_COLUMNS:
        return pl.Float64()
    return pl.Boolean() if name == "passed" else pl.String()


def _cell_checks(name: str, required: bool) -> list[_Check]:
    raw, value = pl.col(f"{name}__raw"), pl.col(name)
    where = f", column {name}: "
    if name in ("lot_id", "block"):
        return [_Check(raw == "", lambda r: f"{where}expected a name, found nothing")]
    if name == "part_id":
        return []
    if name == "passed":
        return [_Check((raw != "") & value.is_null(), lambda r: f"{where}expected pass/fail, "
                       f"true/false, yes/no, y/n, p/f or 1/0, found {_shown(r[name + '__raw'])}")]
    kind = "an integer" if name in _INT_COLUMNS else "a number"
    checks = [_Check((raw != "") & value.is_null(),
                     lambda r: f"{where}expected {kind}, found {_shown(r[name + '__raw'])}")]
    if required:
        checks.insert(0, _Check(raw == "", lambda r: f"{where}expected {kind}, found nothing"))
    if name in _FLOAT_COLUMNS:
        checks.append(_Check(value.is_not_null() & ~value.is_finite(), lambda r:
                             f"{where}expected a finite number, found {_shown(r[name + '__raw'])}"))
    checks.append(_Check(value < 0, lambda r:
                         f"{where}expected 0 or more, found {_shown(r[name + '__raw'])}"))
    return checks


def _checks(present: set[str]) -> list[_Check]:
    checks = [c for name in REQUIRED_COLUMNS for c in _cell_checks(name, True)]
    checks += [c for name in OPTIONAL_COLUMNS if name in present
               for c in _cell_checks(name, False)]
    checks.append(_Check(pl.col("end_ms") < pl.col("start_ms"), lambda r:
                         f": end_ms {r['end_ms']!r} is before start_ms {r['start_ms']!r}"))
    return checks


def _first_problem(frame: pl.DataFrame, checks: list[_Check]) -> tuple[int, _Check] | None:
    firsts = frame.select(pl.col("line").filter(c.bad).first().alias(f"k{i}")
                          for i, c in enumerate(checks)).row(0)
    hits = [(line, i) for i, line in enumerate(firsts) if line is not None]
    if not hits:
        return None
    line, i = min(hits)  # earliest line; on one line, the rule listed first
    return line, checks[i]


def _typed(cells: pl.DataFrame, path: str, trim: bool) -> pl.DataFrame:
    """Cast and validate; `trim` strips blanks around cells (skipped when there are none)."""
    present = set(cells.columns) - {"line"}
    stripped = cells.with_columns(pl.col(n).str.strip_chars() for n in present) if trim else cells
    frame = stripped.with_columns(
        *(pl.col(n).alias(f"{n}__raw") for n in present),
        *(_value_expr(n, n in present) for n in REQUIRED_COLUMNS + OPTIONAL_COLUMNS),
    )
    problem = _first_problem(frame, _checks(present))
    if problem is not None:
        line, check = problem
        row = frame.filter(pl.col("line") == line).row(0, named=True)
        raise InputError(f"{path}: line {line}{check.explain(row)}")
    part_id = pl.when(pl.col("part_id") == "").then(None).otherwise(pl.col("part_id"))
    return frame.with_columns(part_id=part_id).select(TIMING_CSV_SCHEMA.names)


# ---------------------------------------------------------------------------- entry


def read_timing_csv(data: bytes, path: str) -> CsvLog:
    """Decode a timing CSV; `path` is only used to name the file in error messages."""
    data = data.removeprefix(_BOM)
    if not data.isascii():  # ASCII is UTF-8 already, and checking that is far cheaper
        _check_utf8(data, path)
    if not data or data.isspace():
        raise InputError(f"{path}: empty file")
    cut = data.find(b"\n")
    cut = len(data) if cut < 0 else cut
    header = _parse_header(data[:cut].decode("utf-8").removesuffix("\r"), path)
    body = data[cut + 1:_end_of_rows(data)]
    if not body or body.isspace():
        raise InputError(f"{path}: no data rows (only the header)")
    cells = _fast_cells(body, header)
    trim = _may_need_trim(data, body, header.sep)
    if cells is None:
        cells, trim = _slow_cells(body.decode("utf-8"), header, path), True
    if cells.height == 0:
        raise InputError(f"{path}: no data rows (only the header)")
    table = _typed(cells, path, trim).to_arrow().cast(TIMING_CSV_SCHEMA)
    return CsvLog(table=table, ignored_columns=header.ignored)


def _may_need_trim(data: bytes, body: bytes, sep: str) -> bool:
    """False only when no cell can start or end with whitespace: stripping 1e6 rows of
    cells costs a fifth of the read, and most machine-written files have no blanks."""
    if not data.isascii() or b'"' in body:  # unicode spaces; line ends inside quotes
        return True
    if any(c in body for c in (b" ", b"\x0b", b"\x0c")) or (sep != "\t" and b"\t" in body):
        return True
    return b"\r" in body and body.count(b"\r") != body.count(b"\r\n")


def _end_of_rows(data: bytes) -> int:
    """Where the trailing line ends stop: blank trailing lines are common and harmless,
    and leaving them out keeps the fast path (found without copying the whole file)."""
    end = len(data)
    while end and data[end - 1] in b"\r\n":
        end -= 1
    return end
