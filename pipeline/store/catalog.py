"""The catalog: every view over a store, as SQL statements, and ``catalog.duckdb``.

Three layers of views:

- the registry: ``raw_files`` (one row per log and lot), ``raw_committed`` (the logs
  whose rows count) and ``raw_lot_gens`` (the current generation of each lot's derived
  tables);
- ``raw_<table>``: a stored table as decoded, its rows limited to committed logs; the
  partition columns ``lot`` and ``file_id`` come from the path;
- one view per model in ``sql/``: a view model's own SQL; a materialised model's thin read
  of what the derivation wrote, limited to each lot's current generation, with the
  partition ``lot`` as its ``lot_id`` so that a filter on ``lot_id`` reads only that lot's
  files.

The views name only paths relative to the store, so every store of one release has the
same catalog; it is built once per release into a cache and copied.
"""

from __future__ import annotations

import os
import shutil
from pathlib import Path
from typing import TYPE_CHECKING

from .layout import (
    CATALOG,
    DERIVED,
    FILE,
    GEN,
    LOGS,
    LOT,
    LOT_FILES,
    REJECTED,
    SCHEMA_KEY,
    derived_glob,
    raw_glob,
)
from .models import PYTHON_MODELS, dependency_order, fingerprint, load_models

if TYPE_CHECKING:
    import duckdb

CATALOG_VERSION = "2"
COMMITTED = "status in ('ok', 'partial')"


def catalog_version() -> str:
    return f"{CATALOG_VERSION}:{fingerprint()}"


def sql_str(s: str) -> str:
    return s.replace("'", "''")


def registry_statements() -> list[str]:
    """Which lots and logs count: each lot's newest generation (found by listing the
    folders, no file read), the logs it lists, and the rejected logs."""
    lot_files = (f"read_parquet('{derived_glob(LOT_FILES)}', hive_partitioning = true, "
                 f"hive_types = {{'{LOT}': VARCHAR, '{GEN}': BIGINT}})")
    return [
        f"create or replace view raw_lot_gens as select url_decode(m.k) as {LOT}, "
        f"max(m.g::bigint) as {GEN} from (select regexp_extract(file, "
        f"'/{LOT}=([^/]+)/{GEN}=([0-9]+)/{LOT_FILES}/', ['k', 'g']) as m "
        f"from glob('{DERIVED}/*/*/{LOT_FILES}/part-0.parquet')) "
        f"where m.k <> '{SCHEMA_KEY}' group by m.k",
        f"create or replace view raw_lot_files as select * exclude ({LOT}, {GEN}) "
        f"replace ({LOT} as lot_id) from {lot_files} "
        f"semi join raw_lot_gens using ({LOT}, {GEN})",
        "create or replace view raw_files as select * from raw_lot_files union all by name "
        f"select * from read_parquet('{REJECTED}/*.parquet')",
        # From the folder listing, not from reading every lot's lot_files: a raw view's
        # rows are its committed logs' whatever the filter, and a listing costs microseconds.
        f"create or replace view raw_committed as select {LOT}, file_id from ("
        f"select url_decode(m.k) as {LOT}, m.g::bigint as {GEN}, m.f as file_id from ("
        f"select regexp_extract(file, '/{LOT}=([^/]+)/{GEN}=([0-9]+)/{LOGS}/([^/]+)$', "
        f"['k', 'g', 'f']) as m from glob('{DERIVED}/*/*/{LOGS}/*'))) "
        f"semi join raw_lot_gens using ({LOT}, {GEN})",
    ]


def raw_view(table: str) -> str:
    return (f"create or replace view raw_{table} as select * from read_parquet("
            f"'{raw_glob(table)}', hive_partitioning = true, "
            f"hive_types = {{'{LOT}': VARCHAR, '{FILE}': VARCHAR}}) "
            f"semi join raw_committed using ({LOT}, {FILE})")


def derived_view(model: str) -> str:
    return (f"create or replace view {model} as select * exclude ({LOT}, {GEN}) "
            f"replace ({LOT} as lot_id) from read_parquet('{derived_glob(model)}', "
            f"hive_partitioning = true, hive_types = {{'{LOT}': VARCHAR, '{GEN}': BIGINT}}) "
            f"semi join raw_lot_gens using ({LOT}, {GEN})")


def catalog_statements() -> list[str]:
    """Registry views, raw views, then the models in an order that satisfies their inputs."""
    from ..read.schemas import table_schemas

    ms = load_models()
    stmts = registry_statements()
    stmts += [raw_view(t) for t in table_schemas() if t != "files"]
    stmts += [derived_view(n) for n in PYTHON_MODELS]
    for name in dependency_order({n: m.deps for n, m in ms.items()}):
        m = ms[name]
        stmts.append(derived_view(name) if m.materialized
                     else f"create or replace view {name} as\n{m.body}")
    return stmts


# -- catalog.duckdb ------------------------------------------------------------------------
def open_catalog(root: Path) -> duckdb.DuckDBPyConnection | None:
    """catalog.duckdb read-only, when it holds this release's views; else None."""
    import duckdb

    target = root / CATALOG
    if not target.exists():
        return None
    try:
        con = duckdb.connect(str(target), read_only=True)
    except duckdb.Error:
        return None
    try:
        got = con.execute("select version from tandem_catalog").fetchone()
        if got is not None and got[0] == catalog_version():
            con.execute(f"set file_search_path = '{sql_str(str(root))}'")
            return con
    except duckdb.Error:
        pass
    con.close()
    return None


def memory_catalog(root: Path) -> duckdb.DuckDBPyConnection:
    """The same views, built in memory (when catalog.duckdb is missing or outdated)."""
    import duckdb

    con = duckdb.connect(":memory:")
    con.execute(f"set file_search_path = '{sql_str(str(root))}'")
    for stmt in catalog_statements():
        con.execute(stmt)
    return con


def write_catalog(root: Path) -> None:
    """(Re)write catalog.duckdb when it does not hold this release's views. Written aside
    and renamed into place, so a reader that has the old one open keeps it."""
    target = root / CATALOG
    probe = open_catalog(root)
    if probe is not None:
        probe.close()
        return
    tmp = root / f"{CATALOG}.{os.getpid()}.tmp"
    tmp.unlink(missing_ok=True)
    cached = _catalog_cache()
    if cached is not None and cached.exists():
        shutil.copyfile(cached, tmp)
        os.replace(tmp, target)
        return
    import duckdb

    con = duckdb.connect(str(tmp))
    try:
        con.execute(f"set file_search_path = '{sql_str(str(root))}'")
        for stmt in catalog_statements():
            con.execute(stmt)
        con.execute("create or replace view tandem_catalog as select "
                    f"'{catalog_version()}' as version")
    finally:
        con.close()
    os.replace(tmp, target)
    _remember_catalog(target, cached)


def _catalog_cache() -> Path | None:
    """Where this release's catalog is kept between stores (None: no cache folder)."""
    base = os.environ.get("XDG_CACHE_HOME") or os.path.join(os.path.expanduser("~"), ".cache")
    if not base or base.startswith("~"):
        return None
    return Path(base) / "tandem" / f"catalog-{catalog_version().replace(':', '-')}.duckdb"


def _remember_catalog(built: Path, cached: Path | None) -> None:
    if cached is None:
        return
    try:
        cached.parent.mkdir(parents=True, exist_ok=True)
        tmp = cached.with_name(f"{cached.name}.{os.getpid()}.tmp")
        shutil.copyfile(built, tmp)
        os.replace(tmp, cached)
    except OSError:
        pass  # a cache only: the next store builds its catalog again


# Bump when a Python model (estimate, site summary) computes differently: stores derived
# before must then be brought up to date (`tandem upgrade`), as when a SQL model changes.
DERIVATION_VERSION = "1"


def derivation_version() -> str:
    """What the derived tables were computed by: the Python models' and the catalog's version."""
    return f"{DERIVATION_VERSION}:{catalog_version()}"
