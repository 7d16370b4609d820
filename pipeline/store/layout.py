"""Where everything lives in a store folder, and how a lot id becomes a path.

::

    store.json                                        the store's format (FORMAT)
    tables/<table>/lot=<key>/file_id=<id>/part-0.parquet     decoded rows of one log
    derived/lot=<key>/gen=<n>/<model>/<name>.parquet         one lot's derived tables
    derived/lot=<key>/gen=<n>/lot_files/part-0.parquet       ... and the logs they cover
    derived/lot=<key>/gen=<n>/logs/<file_id>                 ... as empty files
    meta/rejected/<file_id>.parquet                   logs that were not datalogs
    meta/rules/<sha>.parquet                          block-map rules, by content
    meta/state.json, meta/index.parquet               the writer's bookkeeping
    meta/journal.json, meta/gc.json                   a commit under way; old generations
    staging/                                          work in progress (never read)
    catalog.duckdb                                    views only

A lot's derived tables appear all at once: each commit builds a new *generation* folder
for every lot it touches and renames it into place, and views read each lot's newest
generation only. That generation's ``lot_files`` lists the logs whose raw tables count,
so a log, its derived rows and its lot's aggregates become visible together. No file is
ever replaced in place (a reader could see half of it); superseded generations are
removed once no reader can still be reading them.

``<key>`` is the lot id percent-encoded (RFC 3986, every byte but ``A-Z a-z 0-9 - . _ ~``,
and a leading ``.`` or ``_``, which Hive-style readers take for hidden files), so any id
round-trips exactly: DuckDB, Spark and Trino decode ``%XX`` in partition values. Every
table and model also has a ``lot=_schema`` partition holding one empty, typed file, so
that a glob over it never matches nothing; no view shows it.
"""

from __future__ import annotations

import urllib.parse
from pathlib import Path

from ..errors import InputError

FORMAT = 2  # store.json "format": the layout above
STORE_FILE = "store.json"
TABLES, DERIVED, META, STAGING = "tables", "derived", "meta", "staging"
STATE = f"{META}/state.json"
INDEX = f"{META}/index.parquet"
REJECTED = f"{META}/rejected"
RULES = f"{META}/rules"
JOURNAL = f"{META}/journal.json"
GC_LIST = f"{META}/gc.json"
CATALOG = "catalog.duckdb"
LOCK = ".lock"
LOT_FILES = "lot_files"  # the generation's own list of the logs it covers
LOGS = "logs"  # ... and the same as empty files named by file id (a listing, not a read)
SCHEMA_KEY = "_schema"  # the partition value of the empty, typed files
LOT, FILE, GEN = "lot", "file_id", "gen"  # Hive partition keys
# A partition value longer than this would come near the 255-byte limit of a file name.
MAX_KEY_BYTES = 200


def lot_key(lot_id: str) -> str:
    """The partition value of a lot id (percent-encoded; see the module docstring)."""
    key = urllib.parse.quote(lot_id, safe="", encoding="utf-8", errors="surrogatepass")
    if key[:1] in (".", "_"):
        key = f"%{ord(key[0]):02X}{key[1:]}"
    if not key:
        raise InputError("an empty lot id cannot be stored (the decoder names it 'unknown')")
    if len(key) > MAX_KEY_BYTES:
        raise InputError(f"lot id too long to store: {len(lot_id)} characters "
                         f"({len(key)} bytes as a folder name, at most {MAX_KEY_BYTES})")
    return key


def lot_from_key(key: str) -> str:
    return urllib.parse.unquote(key, encoding="utf-8", errors="surrogatepass")


def raw_dir(root: Path, table: str, lot_id: str, file_id: str) -> Path:
    return root / TABLES / table / f"{LOT}={lot_key(lot_id)}" / f"{FILE}={file_id}"


def gen_dir(root: Path, lot_id: str, gen: int) -> Path:
    """One generation of a lot's derived tables (``root`` the store or a staging area)."""
    return root / DERIVED / f"{LOT}={lot_key(lot_id)}" / f"{GEN}={gen}"


def raw_schema_file(root: Path, table: str) -> Path:
    return root / TABLES / table / f"{LOT}={SCHEMA_KEY}" / f"{FILE}={SCHEMA_KEY}" / "part-0.parquet"


def derived_schema_file(root: Path, model: str) -> Path:
    return root / DERIVED / f"{LOT}={SCHEMA_KEY}" / f"{GEN}=0" / model / "part-0.parquet"


def raw_glob(table: str) -> str:
    """Relative to the store: how the catalog's views find a table's files."""
    return f"{TABLES}/{table}/*/*/*.parquet"


def derived_glob(model: str) -> str:
    return f"{DERIVED}/*/*/{model}/*.parquet"
