"""The store: Hive-partitioned Parquet per table, a file registry, and the SQL catalog.

Layout (all paths relative, so a store can be moved or copied and still opens)::

    tables/<table>/file_id=<id>/part-<n>.parquet   decoded rows, one folder per log
    tables/<table>/file_id=_schema/part-0.parquet  empty, typed: keeps every glob valid
    tables/files/file_id=<id>/part-0.parquet       registry entry, written LAST = commit
    staging/<id>/...                               a file being written (never read)
    catalog.duckdb                                 views only (raw_* and sql/*.sql)
    .lock                                          held by the one writer

A log becomes visible in one step: its tables are written aside in ``staging/``, renamed
into ``tables/``, and only then is its registry entry published (itself by rename). Every
view filters rows to registered files, so a crash at any moment leaves orphans that no
view shows; the next writer removes them. Readers never take the lock.
"""

from __future__ import annotations

import fcntl
import functools
import os
import queue
import shutil
import threading
import time
import uuid
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import TYPE_CHECKING, Any

import pyarrow as pa
import pyarrow.parquet as pq

from .errors import StoreError, UsageError
from .schemas import DERIVED, table_schemas

if TYPE_CHECKING:  # duckdb and polars load only for queries: ingest starts faster
    import duckdb
    import polars as pl

SQL_DIR = Path(__file__).resolve().parent.parent / "sql"
CATALOG_VERSION = "1"
SCHEMA_PART = "file_id=_schema"
COMMITTED = "status in ('ok', 'partial')"


def _lock_timeout() -> float:
    raw = os.environ.get("TANDEM_LOCK_TIMEOUT", "").strip()
    if not raw:
        return 600.0
    try:
        value = float(raw)
        if not value >= 0:
            raise ValueError
    except ValueError:
        raise UsageError(f"TANDEM_LOCK_TIMEOUT must be a number of seconds (0 or more), "
                         f"not {raw!r}") from None
    return value


def _write_parquet(table: pa.Table, path: Path) -> None:
    # A temporary name of its own: two processes creating one store at once both write
    # the same schema files (outside the lock), and must not rename each other's.
    tmp = path.with_name(f"{path.name}.{os.getpid()}.{uuid.uuid4().hex[:8]}.tmp")
    pq.write_table(table, tmp, compression="zstd")
    os.replace(tmp, path)


class Staged:
    """One log's tables being written aside; ``Store.commit`` publishes them.

    Parquet encoding runs on a background thread (pyarrow releases the GIL), so the
    decoder fills the next batch while the last one is compressed and written.
    """

    def __init__(self, file_id: str, root: Path):
        self.file_id, self.root = file_id, root
        self.rows: dict[str, int] = {}
        self._writers: dict[str, tuple[pq.ParquetWriter, pa.Schema]] = {}
        self._queue: queue.Queue[tuple[str, pa.Table] | None] = queue.Queue(maxsize=8)
        self._error: BaseException | None = None
        self._thread: threading.Thread | None = None

    def write(self, table_name: str, table: pa.Table) -> None:
        if table.num_rows == 0:
            return
        if self._error is not None:
            raise self._error
        if self._thread is None:
            self._thread = threading.Thread(target=self._drain, daemon=True)
            self._thread.start()
        self.rows[table_name] = self.rows.get(table_name, 0) + table.num_rows
        self._queue.put((table_name, table))

    def _drain(self) -> None:
        while (item := self._queue.get()) is not None:
            if self._error is None:
                try:
                    self._write_now(*item)
                except BaseException as e:  # re-raised in the decoding thread
                    self._error = e

    def _write_now(self, table_name: str, table: pa.Table) -> None:
        w = self._writers.get(table_name)
        if w is None:
            d = self.root / table_name
            d.mkdir(parents=True, exist_ok=True)
            schema = _target_schema(table_name, table.schema)
            w = (pq.ParquetWriter(d / "part-0.parquet", schema, **_parquet_options(schema)),
                 schema)
            self._writers[table_name] = w
        w[0].write_table(_conform(table, w[1]))

    def close(self) -> None:
        if self._thread is not None:
            self._queue.put(None)
            self._thread.join()
            self._thread = None
        for w, _ in self._writers.values():
            w.close()
        self._writers.clear()
        if self._error is not None:
            raise self._error

    def discard(self) -> None:
        try:
            self.close()
        except BaseException:  # noqa: S110 - the folder is removed either way
            pass
        shutil.rmtree(self.root, ignore_errors=True)


# Columns that queries filter or join on keep min/max statistics; others skip them.
_STAT_COLUMNS = {"part_index", "part_key", "test_num", "site_num", "head_num", "touchdown",
                 "rec_index", "section_id"}
# Record positions only grow, by small steps: DELTA_BINARY_PACKED keeps a few bits of each.
_DELTA_COLUMNS = {"rec_index", "pir_rec_index", "begin_rec", "end_rec"}


def _parquet_options(schema: pa.Schema) -> dict[str, Any]:
    """Snappy, dictionaries for text only (names, units and formats repeat; text the
    decoder already dictionary-encoded is written as such), statistics only where they
    prune, delta-encoded record positions. Chosen with bench/bench_parquet.py on the dense
    benchmark log (100 MB, 4.4 M rows; load average 1.0; ratios to the setting before it,
    which wrote the dictionary-encoded units and formats plain): write time 0.73, files
    0.62 (63 to 39 MB), a typical DuckDB query 0.46. lz4 was as fast and a third smaller
    again, but not every Parquet reader reads LZ4_RAW, and every one reads snappy; zstd
    level 1 or 3 took 1.2 times as long as before, dictionaries on every column 1.4,
    none at all 0.9 (and slower queries); whole-log row groups saved a little more time
    but would hold a whole log in memory."""
    text = [f.name for f in schema if pa.types.is_large_string(f.type)
            or pa.types.is_string(f.type) or pa.types.is_dictionary(f.type)]
    options: dict[str, Any] = {
        "compression": "snappy", "use_dictionary": text or False,
        "write_statistics": [f.name for f in schema if f.name in _STAT_COLUMNS] or False}
    delta = {f.name: "DELTA_BINARY_PACKED" for f in schema
             if f.name in _DELTA_COLUMNS and pa.types.is_integer(f.type)}
    if delta:
        options["column_encoding"] = delta
    return options


def _target_schema(name: str, schema: pa.Schema) -> pa.Schema:
    known = table_schemas().get(name)
    if known is None:
        return schema
    extra = [f for f in schema if f.name not in known.names]
    return pa.schema(list(known) + extra)


def _conform(table: pa.Table, schema: pa.Schema) -> pa.Table:
    cols = []
    for f in schema:
        if f.name in table.column_names:
            col = table.column(f.name)
            cols.append(col if col.type == f.type else col.cast(f.type))
        else:
            cols.append(pa.nulls(table.num_rows, f.type))
    return pa.Table.from_arrays(cols, schema=schema)


class Store:
    """A folder of Parquet tables with a DuckDB catalog. ``Store(path)`` creates it."""

    def __init__(self, path: str | os.PathLike[str], lock_timeout: float | None = None):
        self.path = Path(path)
        # None: TANDEM_LOCK_TIMEOUT (seconds) when set, else 600 s.
        self.lock_timeout = _lock_timeout() if lock_timeout is None else lock_timeout
        self._writing = False  # this object holds the lock: writer() is re-entrant
        self._known: dict[str, dict[str, Any]] | None = None
        self.catalog_warning: str | None = None
        if self.path.exists() and not self.path.is_dir():
            raise UsageError(f"{self.path}: exists and is not a folder (--store takes a "
                             f"folder; it is created when missing)")
        if "," in str(self.path.resolve()):
            # DuckDB's file_search_path (how the views find the tables) is a comma-separated
            # list with no escape: such a store would open with every view empty or broken.
            raise UsageError(f"{self.path}: a store's path may not contain a comma (DuckDB "
                             f"reads it as a list of folders); choose another folder")
        (self.path / "tables").mkdir(parents=True, exist_ok=True)
        self._ensure_schema_files()

    # -- writing --------------------------------------------------------------------
    def ingest(self, paths: Any, workers: int | None = None, progress: Any = None) -> Any:
        """Store every new log under ``paths`` (files or folders); returns IngestReport."""
        from .ingest import ingest

        return ingest(self, paths, workers=workers, progress=progress)

    @contextmanager
    def writer(self) -> Iterator[Store]:
        """Hold the store's write lock (waits up to ``lock_timeout`` seconds). Re-entrant
        on one Store object: a nightly run holds it across ingest and the derived tables."""
        if self._writing:
            yield self
            return
        fd = os.open(self.path / ".lock", os.O_RDWR | os.O_CREAT, 0o644)
        deadline = time.monotonic() + self.lock_timeout
        try:
            while True:
                try:
                    fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
                    break
                except BlockingIOError:
                    if time.monotonic() >= deadline:
                        holder = os.pread(fd, 32, 0).decode("ascii", "replace").strip()
                        raise StoreError(
                            f"{self.path}: another writer holds the store lock"
                            + (f" (pid {holder})" if holder.isdigit() else "")
                            + f"; waited {self.lock_timeout:g} s. Try again when it "
                            f"finishes, or wait longer (TANDEM_LOCK_TIMEOUT=seconds)"
                        ) from None
                    time.sleep(0.1)
            os.ftruncate(fd, 0)
            os.write(fd, f"{os.getpid()}\n".encode())
            self._known = None
            self._recover()
            # catalog.duckdb depends only on the views, not on the data: (re)write it
            # alongside the work instead of after it.
            catalog = threading.Thread(target=self._write_catalog_quietly, daemon=True)
            catalog.start()
            self._writing = True
            try:
                yield self
            finally:
                self._writing = False
                catalog.join()
        finally:
            fcntl.flock(fd, fcntl.LOCK_UN)
            os.close(fd)

    def stage(self, file_id: str) -> Staged:
        # A folder of its own per attempt: a worker orphaned by a killed run that is still
        # writing can never write into the next run's staging of the same log.
        root = self.path / "staging" / f"{file_id}.{os.getpid()}.{uuid.uuid4().hex[:8]}"
        shutil.rmtree(root, ignore_errors=True)
        root.mkdir(parents=True)
        return Staged(file_id, root)

    def commit(self, staged: Staged, entry: dict[str, Any]) -> None:
        """Publish a staged log: tables first, registry entry last (the commit point)."""
        staged.close()
        part = f"file_id={staged.file_id}"
        for d in sorted(p for p in staged.root.iterdir() if p.is_dir()):
            target = self.path / "tables" / d.name / part
            target.parent.mkdir(parents=True, exist_ok=True)
            if target.exists():
                shutil.rmtree(target)
            os.rename(d, target)
        self._register(entry)
        shutil.rmtree(staged.root, ignore_errors=True)

    def register_only(self, entry: dict[str, Any]) -> None:
        """Record a log that stored no rows (rejected), so reruns skip it."""
        self._register(entry)

    def _register(self, entry: dict[str, Any]) -> None:
        d = self.path / "tables" / "files" / f"file_id={entry['file_id']}"
        d.mkdir(parents=True, exist_ok=True)
        schema = table_schemas()["files"]
        row = {k: [entry.get(k)] for k in schema.names}
        _write_parquet(pa.table(row, schema=schema), d / "part-0.parquet")
        if self._known is not None:
            self._known[entry["sha256"]] = {"file_id": entry["file_id"],
                                            "status": entry.get("status"), "path": entry["path"]}

    def _recover(self) -> None:
        """Remove what a crashed writer left: staging folders, unregistered rows, and
        half-written registry entries and catalogs (``*.tmp``, never read). Only files
        that are written under the lock: schema files and derived tables are written
        without it, so their temporary files may belong to a live process."""
        shutil.rmtree(self.path / "staging", ignore_errors=True)
        for tmp in [*self.path.glob("catalog.duckdb.*.tmp*"),
                    *(self.path / "tables" / "files").glob("file_id=[!_]*/*.tmp")]:
            tmp.unlink(missing_ok=True)
        registered = set(self.registry().column("file_id").to_pylist())
        for table_dir in (self.path / "tables").iterdir():
            if not table_dir.is_dir() or table_dir.name == "files":
                continue
            for part in table_dir.iterdir():
                fid = part.name.removeprefix("file_id=")
                if part.name != SCHEMA_PART and fid not in registered:
                    shutil.rmtree(part, ignore_errors=True)

    def _ensure_schema_files(self) -> None:
        wanted = [(self.path / "tables" / n / SCHEMA_PART, s) for n, s in table_schemas().items()]
        wanted += [(self.path / "derived" / n / "key=_schema", s) for n, s in DERIVED.items()]
        for d, schema in wanted:
            f = d / "part-0.parquet"
            if not f.exists():
                d.mkdir(parents=True, exist_ok=True)
                _write_parquet(schema.empty_table(), f)

    def write_derived(self, name: str, key: str, table: pa.Table | None) -> None:
        """Replace one key's rows of a derived table (None removes them), atomically."""
        import hashlib

        d = self.path / "derived" / name / f"key={hashlib.sha256(key.encode()).hexdigest()[:16]}"
        if table is None:
            shutil.rmtree(d, ignore_errors=True)
            return
        d.mkdir(parents=True, exist_ok=True)
        _write_parquet(_conform(table, DERIVED[name]), d / "part-0.parquet")

    # -- reading --------------------------------------------------------------------
    def registry(self) -> pa.Table:
        """Every registered log (including rejected ones), read with pyarrow alone."""
        rows = []
        for d in sorted((self.path / "tables" / "files").glob("file_id=*")):
            f = d / "part-0.parquet"
            if d.name == SCHEMA_PART or not f.exists():
                continue
            t = pq.read_table(f, schema=table_schemas()["files"])
            rows.append(t.append_column("file_id", pa.array([d.name[8:]] * t.num_rows,
                                                            pa.large_string())))
        if not rows:
            return table_schemas()["files"].empty_table().append_column(
                "file_id", pa.array([], pa.large_string()))
        return pa.concat_tables(rows)

    def known_sizes(self) -> set[int]:
        """Sizes of every registered log: a file of another size cannot be a duplicate."""
        reg = self.registry()
        return set(reg.column("size_bytes").to_pylist())

    def known(self, sha256: str) -> dict[str, Any] | None:
        """The registry entry of a log with this content, if any."""
        if self._known is None:
            reg = self.registry()
            self._known = {s: {"file_id": f, "status": st, "path": p} for s, f, st, p in zip(
                reg.column("sha256").to_pylist(), reg.column("file_id").to_pylist(),
                reg.column("status").to_pylist(), reg.column("path").to_pylist(), strict=True)}
        return self._known.get(sha256)

    def connect(self, raw_only: bool = False) -> duckdb.DuckDBPyConnection:
        """A DuckDB connection with every view over this store. catalog.duckdb, opened
        read-only, when it holds this release's views (creating the views costs seconds:
        DuckDB binds each one); else an in-memory DuckDB built from sql/. Never locks."""
        import duckdb

        if not raw_only:
            con = self._open_catalog()
            if con is not None:
                return con
        con = duckdb.connect(":memory:")
        con.execute(f"set file_search_path = '{_sql_str(str(self.path))}'")
        for stmt in (raw_statements("files") if raw_only else catalog_statements()):
            con.execute(stmt)
        return con

    def sql(self, query: str, params: list[Any] | None = None) -> pl.DataFrame:
        con = self.connect()
        try:
            return to_frame(con.sql(query, params=params or None))
        finally:
            con.close()

    def _write_catalog_quietly(self) -> None:
        try:
            self.write_catalog()
        except Exception as e:  # a reader may hold it open; the views are unchanged
            self.catalog_warning = f"catalog.duckdb not rewritten: {' '.join(str(e).split())}"

    def _open_catalog(self) -> duckdb.DuckDBPyConnection | None:
        import duckdb

        target = self.path / "catalog.duckdb"
        if not target.exists():
            return None
        try:
            con = duckdb.connect(str(target), read_only=True)
        except duckdb.Error:
            return None
        try:
            got = con.execute("select version from tandem_catalog").fetchone()
            if got is not None and got[0] == catalog_version():
                con.execute(f"set file_search_path = '{_sql_str(str(self.path))}'")
                return con
        except duckdb.Error:
            pass
        con.close()
        return None

    def write_catalog(self) -> None:
        """(Re)write catalog.duckdb when it does not hold this release's views. Written
        aside and renamed into place, so a reader that has the old one open keeps it."""
        target = self.path / "catalog.duckdb"
        if target.exists():
            probe = self._open_catalog()
            if probe is not None:
                probe.close()
                return
        tmp = self.path / f"catalog.duckdb.{os.getpid()}.tmp"
        tmp.unlink(missing_ok=True)
        cached = _catalog_cache()
        if cached is not None and cached.exists():
            # The views name only relative paths, so every store of one release has the
            # same catalog: copy it rather than have DuckDB bind ~50 views again (~1 s).
            shutil.copyfile(cached, tmp)
            os.replace(tmp, target)
            return
        import duckdb

        con = duckdb.connect(str(tmp))
        try:
            con.execute(f"set file_search_path = '{_sql_str(str(self.path))}'")
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


def to_frame(result: duckdb.DuckDBPyRelation | None) -> pl.DataFrame:
    """A query result as a polars DataFrame (through Arrow, no copy of the columns)."""
    import polars as pl

    if result is None:  # a statement with no result set
        return pl.DataFrame()
    frame = pl.from_arrow(result.to_arrow_table())
    assert isinstance(frame, pl.DataFrame)
    return frame


def _sql_str(s: str) -> str:
    return s.replace("'", "''")


def _raw_view(name: str) -> str:
    if name in DERIVED:
        return (f"create or replace view raw_{name} as select * from read_parquet("
                f"'derived/{name}/*/*.parquet', hive_partitioning = false, "
                f"union_by_name = true)")
    glob = f"tables/{name}/*/*.parquet"
    src = (f"read_parquet('{glob}', hive_partitioning = true, union_by_name = true, "
           f"hive_types = {{'file_id': VARCHAR}})")
    if name == "files":
        return f"create or replace view raw_files as select * from {src}"
    return (f"create or replace view raw_{name} as select * from {src} "
            f"where file_id in (select file_id from raw_files where {COMMITTED})")


def _sql_files() -> list[Path]:
    return sorted(SQL_DIR.glob("*.sql"))


def catalog_version() -> str:
    return CATALOG_VERSION + ":" + _sql_fingerprint()


@functools.cache
def _sql_fingerprint() -> str:
    import hashlib

    h = hashlib.sha256()
    for p in _sql_files():
        h.update(p.name.encode() + p.read_bytes())
    return h.hexdigest()[:16]


def raw_statements(*names: str) -> list[str]:
    """The raw_<table> views (raw_files first: the others filter by it)."""
    wanted = names or (*table_schemas(), *DERIVED)
    return [_raw_view("files")] + [_raw_view(n) for n in wanted if n != "files"]


def catalog_statements() -> list[str]:
    """Raw views first, then the sql/ views in an order that satisfies their inputs."""
    stmts = raw_statements()
    views = {p.stem: p.read_text() for p in _sql_files()}
    return stmts + [f"create or replace view {name} as\n{body.strip().rstrip(';')}"
                    for name, body in _dependency_order(views)]


def _dependency_order(views: dict[str, str]) -> list[tuple[str, str]]:
    import re

    done: list[tuple[str, str]] = []
    placed: set[str] = set()
    pending = dict(views)
    while pending:
        progress = False
        for name, body in sorted(pending.items()):
            code = re.sub(r"--[^\n]*", "", body)  # comments may name other views
            deps = {v for v in views if v != name and re.search(rf"\b{v}\b", code)}
            if deps <= placed:
                done.append((name, body))
                placed.add(name)
                del pending[name]
                progress = True
        if not progress:
            raise StoreError(f"sql/: views depend on each other in a cycle: {sorted(pending)}")
    return done
