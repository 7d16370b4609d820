"""The Store object: a folder of Parquet tables, their derived tables and a catalog.

Readers never take a lock and never write: ``connect``/``sql`` open the catalog
read-only and take one snapshot of the registry, so a whole query sees one state of the
store even while a writer commits. Writers hold ``.lock`` (``writer()``), which also
recovers from a crashed writer and keeps the registry in memory for the session.

Start-up matters here (``tandem sql`` answers in a fraction of a second), so this module
imports neither pyarrow nor polars until a caller needs them.
"""

from __future__ import annotations

import fcntl
import json
import os
import threading
import time
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import TYPE_CHECKING, Any

from .. import __version__
from ..errors import StoreError, UsageError
from .catalog import derivation_version
from .frames import to_frame
from .layout import FORMAT, LOCK, META, RULES, STATE, STORE_FILE, TABLES

if TYPE_CHECKING:  # duckdb, polars and pyarrow load only when needed
    import duckdb
    import polars as pl
    import pyarrow as pa

    from .commit import Incoming, Runner
    from .registry import Registry

class StoreVersionError(UsageError):
    """The store was written by another release: `tandem upgrade` brings it up to date."""


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


class Store:
    """A store folder. ``Store(path)`` only names it: readers need one made by a writer
    (``tandem ingest``), and a writer (``writer()``) creates it when missing."""

    def __init__(self, path: str | os.PathLike[str], lock_timeout: float | None = None):
        self.path = Path(path)
        # None: TANDEM_LOCK_TIMEOUT (seconds) when set, else 600 s.
        self.lock_timeout = _lock_timeout() if lock_timeout is None else lock_timeout
        self._writing = False  # this object holds the lock: writer() is re-entrant
        self._registry: Registry | None = None  # the registry, while writing
        self.catalog_warning: str | None = None
        if self.path.exists() and not self.path.is_dir():
            raise UsageError(f"{self.path}: exists and is not a folder (--store takes a "
                             f"folder; tandem ingest creates it when missing)")
        if "," in str(self.path.resolve()):
            # DuckDB's file_search_path (how the views find the tables) is a comma-separated
            # list with no escape: such a store would open with every view empty or broken.
            raise UsageError(f"{self.path}: a store's path may not contain a comma (DuckDB "
                             f"reads it as a list of folders); choose another folder")

    # -- what is there ----------------------------------------------------------------
    @property
    def exists(self) -> bool:
        return (self.path / STORE_FILE).is_file()

    def _legacy(self) -> bool:
        """A store of the first release (per-file registry entries under tables/files/,
        no store.json), or one whose `tandem upgrade` was interrupted."""
        return not self.exists and ((self.path / TABLES / "files").is_dir()
                                    or (self.path / STATE).exists()
                                    and self.snapshot().commit > 0)

    def require(self) -> None:
        """UsageError (exit 2) unless a store of this release is here; creates nothing."""
        if self._legacy():
            raise StoreVersionError(
                f"{self.path}: this store was written by an earlier release of Tandem "
                f"(layout 1); bring it up to date with: tandem upgrade --store {self.path}")
        if not self.exists:
            raise UsageError(f"{self.path}: no store here (make one with: tandem ingest "
                             f"LOGS --store {self.path})")
        try:
            fmt = json.loads((self.path / STORE_FILE).read_text(encoding="utf-8"))["format"]
        except (OSError, ValueError, KeyError, TypeError):
            raise StoreError(f"{self.path / STORE_FILE}: unreadable; is this a Tandem "
                             f"store?") from None
        if fmt != FORMAT:
            raise StoreVersionError(
                f"{self.path}: store layout {fmt}, this release reads layout {FORMAT}; "
                f"bring it up to date with: tandem upgrade --store {self.path}")

    def require_current(self, registry: Registry | None = None) -> None:
        """StoreVersionError when the derived tables were made by another release."""
        reg = registry if registry is not None else self.snapshot()
        if reg.commit == 0 and reg.table.num_rows and set(reg.gens) != {
                lot for lot in reg.table.column("lot_id").to_pylist() if lot is not None}:
            raise StoreVersionError(
                f"{self.path}: an upgrade of this store did not finish; run it again: "
                f"tandem upgrade --store {self.path}")
        if reg.commit and reg.models != derivation_version():
            raise StoreVersionError(
                f"{self.path}: its derived tables were made by another release of Tandem "
                f"(or other SQL models); bring them up to date with: tandem upgrade "
                f"--store {self.path}")

    def _create(self) -> None:
        """Make an empty store here; under the lock (a registry is never overwritten).
        store.json comes last: until it exists, this is not a store to readers."""
        if self._legacy():
            self.require()
        from .registry import Registry
        from .schema_files import write_schema_files

        (self.path / META).mkdir(parents=True, exist_ok=True)
        write_schema_files(self.path)
        if not (self.path / STATE).exists():
            Registry().write(self.path)
        if not self.exists:
            tmp = self.path / f".{STORE_FILE}.{os.getpid()}.tmp"
            tmp.write_text(json.dumps({"format": FORMAT, "created_by": f"tandem {__version__}"})
                           + "\n", encoding="utf-8")
            os.replace(tmp, self.path / STORE_FILE)

    # -- writing ----------------------------------------------------------------------
    @contextmanager
    def writer(self, upgrading: bool = False) -> Iterator[Store]:
        """Hold the store's write lock (waits up to ``lock_timeout`` seconds), creating
        the store when missing. Re-entrant on one Store object: a nightly run holds it
        across its steps. ``upgrading``: skip the release check (`tandem upgrade`)."""
        if self._writing:
            yield self
            return
        self.path.mkdir(parents=True, exist_ok=True)
        fd = os.open(self.path / LOCK, os.O_RDWR | os.O_CREAT, 0o644)
        try:
            self._lock(fd)
            yield from self._session(upgrading)
        finally:
            fcntl.flock(fd, fcntl.LOCK_UN)
            os.close(fd)

    def _lock(self, fd: int) -> None:
        deadline = time.monotonic() + self.lock_timeout
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
                        f"finishes, or wait longer (TANDEM_LOCK_TIMEOUT=seconds)") from None
                time.sleep(0.1)
        os.ftruncate(fd, 0)
        os.write(fd, f"{os.getpid()}\n".encode())

    def _session(self, upgrading: bool) -> Iterator[Store]:
        from .commit import collect_garbage, recover
        from .registry import Registry

        if not upgrading:
            if not self.exists:
                self._create()
            self.require()
        registry = recover(self.path, Registry.read(self.path))
        if not upgrading:
            self.require_current(registry)
        self._registry = registry
        # catalog.duckdb depends only on the views, not on the data: (re)write it
        # alongside the work instead of after it.
        catalog = None
        if not upgrading:  # an upgrade writes it last, once the store is current
            catalog = threading.Thread(target=self._write_catalog_quietly, daemon=True)
            catalog.start()
        self._writing = True
        try:
            yield self
        finally:
            self._writing = False
            self._registry = None
            if catalog is not None:
                catalog.join()
            collect_garbage(self.path)

    def _require_writer(self) -> Registry:
        if self._registry is None:
            raise StoreError("internal: the store is written only inside Store.writer()")
        return self._registry

    def commit(self, incoming: list[Incoming], runner: Runner,
               refresh: frozenset[str] = frozenset(), rules: pa.Table | None = None) -> Registry:
        """Publish decoded logs and re-derive their lots and ``refresh`` (commit.py).
        ``rules``: the block-map rules to derive with from now on (None: keep them)."""
        from .commit import commit
        from .registry import KEEP

        reg = self._require_writer()
        sha: str | None | object = KEEP if rules is None else self._write_rules(rules)
        current = reg.rules_sha if sha is KEEP else sha
        self._registry = commit(self.path, reg, incoming, runner, refresh,
                                self.rules_path(current if isinstance(current, str) else None),
                                sha, derivation_version())
        return self._registry

    def _write_rules(self, rules: pa.Table) -> str | None:
        import hashlib

        import pyarrow as pa

        from .derive import RULES_SCHEMA
        from .parquet import conform, write_parquet

        if rules.num_rows == 0:
            return None
        table = conform(rules, RULES_SCHEMA)
        sha = hashlib.sha256(json.dumps(table.to_pylist(), default=str).encode()).hexdigest()
        path = self.rules_path(sha[:16])
        if path is not None and not path.exists():
            write_parquet(pa.Table.from_pylist(table.to_pylist(), schema=RULES_SCHEMA), path)
        return sha[:16]

    def rules_path(self, sha: str | None) -> Path | None:
        return None if not sha else self.path / RULES / f"{sha}.parquet"

    def rules(self) -> pa.Table | None:
        """The block-map rules the derived tables follow (None: none given)."""
        import pyarrow.parquet as pq

        path = self.rules_path(self.snapshot().rules_sha)
        return pq.read_table(path) if path is not None and path.exists() else None

    # -- the registry ---------------------------------------------------------------------
    def snapshot(self) -> Registry:
        """The registry as it is now (the writer's own while it writes)."""
        from .registry import Registry

        return self._registry if self._registry is not None else Registry.read(self.path)

    def registry(self) -> pa.Table:
        """Every registered log (one row per log and lot; rejected ones too)."""
        return self.snapshot().table

    def known_sizes(self) -> set[int]:
        """Sizes of every registered log: a file of another size cannot be a duplicate."""
        return self.snapshot().sizes()

    def known(self, sha256: str) -> dict[str, Any] | None:
        """The registry entry of a log with this content, if any."""
        return self.snapshot().by_sha().get(sha256)

    # -- reading ----------------------------------------------------------------------
    def connect(self) -> duckdb.DuckDBPyConnection:
        """A DuckDB connection with every view over this store. Never locks, never
        writes; each query sees every lot as its newest published generation."""
        from .catalog import memory_catalog, open_catalog

        self.require()
        return open_catalog(self.path) or memory_catalog(self.path)

    def sql(self, query: str, params: list[Any] | None = None) -> pl.DataFrame:
        """One query over the catalog's views, as a polars DataFrame."""
        con = self.connect()
        try:
            return to_frame(con.sql(query, params=params or None))
        finally:
            con.close()

    def rows(self, query: str, params: list[Any] | None = None
             ) -> tuple[list[str], list[str], list[tuple[Any, ...]]]:
        """One query's column names, DuckDB type names and rows (no polars, no pyarrow:
        what `tandem sql` prints)."""
        con = self.connect()
        try:
            rel = con.sql(query, params=params or None)
            if rel is None:
                return [], [], []
            return list(rel.columns), [str(t) for t in rel.types], rel.fetchall()
        finally:
            con.close()

    def write_catalog(self) -> None:
        from .catalog import write_catalog

        write_catalog(self.path)

    def _write_catalog_quietly(self) -> None:
        try:
            self.write_catalog()
        except Exception as e:  # a reader may hold it open; the views are unchanged
            self.catalog_warning = f"catalog.duckdb not rewritten: {' '.join(str(e).split())}"
