"""One log's tables being written aside, before the store commits them.

The decoder's tables land in ``<root>/<table>/lot=<key>/part-0.parquet``; once the log's
file id is known (its sha256, often computed while it is decoded), ``finish`` moves them
into the store's own layout under ``<root>/tables/``, so that the derivation reads them
exactly as it will read them once committed, and the commit is a rename per table.
"""

from __future__ import annotations

import queue
import shutil
import threading
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq

from .layout import FILE, LOT, TABLES, lot_from_key, lot_key
from .parquet import conform, parquet_options, target_schema

UNKNOWN_LOT = "unknown"  # the lot of a log whose MIR gives none (parts.sql says the same)


class Staged:
    """A log's tables being written aside; ``pipeline.store.commit`` publishes them.

    Parquet encoding runs on a background thread (pyarrow releases the GIL), so the
    decoder fills the next batch while the last one is compressed and written. ``lot`` is
    the lot every table without one of its own is filed under (the MIR's, for STDF).
    """

    def __init__(self, file_id: str, root: Path, lot: str = UNKNOWN_LOT):
        self.file_id, self.root, self.lot = file_id, root, lot
        self.rows: dict[str, int] = {}
        self._writers: dict[tuple[str, str], tuple[pq.ParquetWriter, pa.Schema]] = {}
        self._queue: queue.Queue[tuple[str, str, pa.Table] | None] = queue.Queue(maxsize=8)
        self._error: BaseException | None = None
        self._thread: threading.Thread | None = None

    def write(self, table_name: str, table: pa.Table, lot: str | None = None) -> None:
        if table.num_rows == 0:
            return
        if self._error is not None:
            raise self._error
        if self._thread is None:
            self._thread = threading.Thread(target=self._drain, daemon=True)
            self._thread.start()
        self.rows[table_name] = self.rows.get(table_name, 0) + table.num_rows
        self._queue.put((table_name, lot_key(self.lot if lot is None else lot), table))

    def _drain(self) -> None:
        while (item := self._queue.get()) is not None:
            if self._error is None:
                try:
                    self._write_now(*item)
                except BaseException as e:  # re-raised in the decoding thread
                    self._error = e

    def _write_now(self, table_name: str, key: str, table: pa.Table) -> None:
        w = self._writers.get((table_name, key))
        if w is None:
            d = self.root / table_name / f"{LOT}={key}"
            d.mkdir(parents=True, exist_ok=True)
            schema = target_schema(table_name, table.schema)
            w = (pq.ParquetWriter(d / "part-0.parquet", schema, **parquet_options(schema)),
                 schema)
            self._writers[(table_name, key)] = w
        w[0].write_table(conform(table, w[1]))

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

    def finish(self, file_id: str) -> dict[str, dict[str, str]]:
        """Close, and move every table into ``<root>/tables/<t>/lot=<k>/file_id=<id>/``.
        Returns lot -> table -> that folder (relative to ``root``)."""
        self.close()
        self.file_id = file_id
        out: dict[str, dict[str, str]] = {}
        for table_dir in sorted(p for p in self.root.iterdir() if p.is_dir()
                                and p.name != TABLES):
            for part in sorted(table_dir.iterdir()):
                target = self.root / TABLES / table_dir.name / part.name / f"{FILE}={file_id}"
                target.parent.mkdir(parents=True, exist_ok=True)
                part.rename(target)
                lot = lot_from_key(part.name.removeprefix(f"{LOT}="))
                out.setdefault(lot, {})[table_dir.name] = str(target.relative_to(self.root))
            table_dir.rmdir()
        return out
