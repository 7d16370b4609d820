"""Tables as text: aligned columns for a terminal, CSV, or a JSON array of objects. One
module for every command and the timing summaries, so each prints tables the same way.

``format_rows`` works on plain rows (what `tandem sql` gets from DuckDB, so that command
starts without polars or pyarrow); ``format_frame`` is the same for a polars DataFrame.
"""

from __future__ import annotations

import csv
import datetime as _dt
import io
import json
from collections.abc import Sequence
from typing import Any

_NUMERIC = ("TINYINT", "SMALLINT", "INTEGER", "BIGINT", "HUGEINT", "UTINYINT", "USMALLINT",
            "UINTEGER", "UBIGINT", "UHUGEINT", "FLOAT", "DOUBLE", "DECIMAL")


def is_numeric_type(duckdb_type: str) -> bool:
    """Whether a DuckDB column type holds numbers (right-aligned in a table)."""
    return duckdb_type.split("(")[0].upper() in _NUMERIC


_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")


def csv_cell(value: Any) -> Any:
    """Text a spreadsheet would run as a formula, with a leading single quote; else as is."""
    if isinstance(value, str) and value.startswith(_FORMULA_START):
        return "'" + value
    return value


def format_rows(columns: Sequence[str], numeric: Sequence[bool], rows: Sequence[Sequence[Any]],
                fmt: str, text: Sequence[bool] | None = None) -> str:
    """Rows as ``table`` (aligned, numbers to the right), ``csv`` or ``json``. In CSV, text
    that a spreadsheet would run as a formula gets a leading single quote (``text``: which
    columns hold text; default: the non-numeric ones)."""
    if fmt == "json":
        return json.dumps([dict(zip(columns, r, strict=True)) for r in rows], default=str,
                          indent=1) + "\n"
    if fmt == "csv":
        return _csv(columns, rows, text if text is not None else [not n for n in numeric])
    cells = [["" if v is None else _cell(v) for v in r] for r in rows]
    widths = [max([len(c)] + [len(r[i]) for r in cells]) for i, c in enumerate(columns)]

    def line(vals: Sequence[str]) -> str:
        return "  ".join(v.rjust(w) if n else v.ljust(w)
                         for v, w, n in zip(vals, widths, numeric, strict=True)).rstrip()

    out = [line(columns), line(["-" * w for w in widths])] + [line(r) for r in cells]
    return "\n".join(out) + f"\n({len(cells)} row{'s' if len(cells) != 1 else ''})\n"


def format_frame(df: Any, fmt: str) -> str:
    """A polars DataFrame, as format_rows does it."""
    import polars as pl

    numeric = [t.is_numeric() for t in df.dtypes]
    text = [t == pl.String for t in df.dtypes]
    return format_rows(df.columns, numeric, df.rows(), fmt, text)


def _csv(columns: Sequence[str], rows: Sequence[Sequence[Any]], text: Sequence[bool]) -> str:
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(columns)
    for r in rows:
        w.writerow([csv_cell(v) if t and isinstance(v, str) else _csv_value(v)
                    for v, t in zip(r, text, strict=True)])
    return buf.getvalue()


def _csv_value(v: Any) -> Any:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, _dt.datetime):
        return v.isoformat(sep="T")
    if isinstance(v, list | tuple | dict):
        return json.dumps(v, default=str)
    return v


def _cell(v: Any) -> str:
    if isinstance(v, float):
        return f"{v:.6g}"
    return str(v).replace("\n", " ")
