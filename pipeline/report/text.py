"""Text that came from a log (block and test names, lot ids, program names) is untrusted:
these helpers make it inert in each output, and hold the cautions every report carries.

- HTML: ``html_text`` escapes ``& < > " '``; JSON inside a ``<script>`` element goes
  through ``script_json``, which also escapes ``< > &`` so no name can close the element.
- Markdown: ``md_text`` backslash-escapes the punctuation Markdown gives meaning to
  inline (and ``< > &``, so no raw HTML or entity survives), and a leading ``# + - = ! .``
  that could start a heading or a list; line breaks become spaces. An underscore between
  two letters or digits is left alone: CommonMark never reads it as emphasis, and
  ``scan_core0`` stays legible in the raw file.
- CSV: ``csv_cell`` (pipeline/render.py, shared with the terminal's CSV) prefixes a
  single quote to a cell a spreadsheet would run as a formula (one starting ``= + - @``,
  a tab or a carriage return). Numbers are left alone: the rule is for text only, so
  ``-3.5`` stays a number.
"""

from __future__ import annotations

import csv
import html
import json
import math
from pathlib import Path
from typing import Any

from ..render import csv_cell  # one rule for every CSV Tandem writes

CAUTIONS = (
    "Running blocks concurrently raises power draw and die temperature: it can damage "
    "parts, probe cards, load boards or tester hardware. Check every overlap against the "
    "device's power and thermal limits and the hardware's ratings before it runs.",
    "Dropping, reordering or changing tests can let bad parts escape. Every change here "
    "is a proposal, not a qualified test program.",
    "Validate with correlation runs on known-good and known-bad material before any "
    "change reaches production, and watch yield and bin results after it does.",
    "Defer to your quality system, change control and local practice: they decide, "
    "this report only informs.",
)
CAUTION_HEADLINE = "Read before acting on this report"

_MD_SPECIAL = set("\\`*_[]|<>&~")
_MD_START = set("#+-=!.")  # meaningful only where a line begins: escaped there


def html_text(value: Any) -> str:
    return html.escape("" if value is None else str(value), quote=True)


def finite(obj: Any) -> Any:
    """The same structure with NaN and infinities as None (JSON has no NaN)."""
    if isinstance(obj, float):
        return obj if math.isfinite(obj) else None
    if isinstance(obj, dict):
        return {k: finite(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [finite(v) for v in obj]
    return obj


def script_json(obj: Any) -> str:
    """JSON safe inside ``<script type="application/json">``: no ``</script>``, no
    ``<!--``, and nothing that looks like a URL scheme to a naive scanner."""
    text = json.dumps(finite(obj), ensure_ascii=False, separators=(",", ":"), allow_nan=False)
    return (text.replace("&", "\\u0026").replace("<", "\\u003c").replace(">", "\\u003e")
            .replace("\u2028", "\\u2028").replace("\u2029", "\\u2029")
            .replace("://", ":\\/\\/"))


def md_text(value: Any) -> str:
    s = " ".join(("" if value is None else str(value)).split())  # no line breaks in cells
    out = []
    for i, ch in enumerate(s):
        if ch == "_" and 0 < i < len(s) - 1 and s[i - 1].isalnum() and s[i + 1].isalnum():
            out.append(ch)
        elif ch in _MD_SPECIAL or (i == 0 and ch in _MD_START):
            out.append("\\" + ch)
        else:
            out.append(ch)
    return "".join(out)


def safe_json(obj: Any) -> str:
    """Indented JSON with ``< > &`` written as ``\\u003c`` and so on: the same values
    to any JSON reader, and inert if someone pastes the file into a page."""
    text = json.dumps(finite(obj), indent=1, default=str, allow_nan=False)
    return text.replace("&", "\\u0026").replace("<", "\\u003c").replace(">", "\\u003e")


def write_csv(table: Any, path: Path) -> Path:
    """One table as CSV; text cells that a spreadsheet would run as a formula get a
    leading single quote (csv_cell)."""
    with path.open("w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow([csv_cell(c) for c in table.columns])
        for row in table.rows:
            w.writerow([csv_cell(_csv_value(v)) for v in row])
    return path


def _csv_value(v: Any) -> Any:
    if isinstance(v, list | tuple):
        return " + ".join(str(x) for x in v)
    if hasattr(v, "isoformat"):
        return v.isoformat(sep=" ")
    return v
