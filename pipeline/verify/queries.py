"""Every store read of `tandem verify`, in one place: the catalog views ``lots``,
``parts``, ``results``, ``touchdowns`` and ``block_times``, filtered to one lot, with
parameters (never pasted values). ``src`` is anything with ``sql(query, params)``: a
``Store``, or the ``Reader`` below, which keeps one connection for all of them.

Each query filters on ``lot_id``, so it reads only that lot's files, whatever else the
store holds.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Protocol

import polars as pl

from ..store import Store, to_frame


class Source(Protocol):
    def sql(self, query: str, params: list[Any] | None = None) -> pl.DataFrame: ...


LOT_IDS = "select distinct lot_id from lots order by lot_id"

LOT_FILES = """
    select file_id, part_type, program, program_rev, tester_type, started_at
    from lots where lot_id = ? order by started_at nulls first, file_id"""

LOT_PARTS = """
    select file_id, part_index, touchdown, head, site, part_id, x, y, hard_bin, soft_bin,
           passed, test_time_ms
    from parts where lot_id = ?"""

LOT_RESULTS = """
    select r.file_id, r.part_index, r.test_num, r.test_name, r.block, r.record, r.element,
           r.value, r.failed, r.lo_limit, r.hi_limit, r.units, r.rec_index
    from results as r
    where r.lot_id = ?"""

LOT_TOUCHDOWNS = """
    select file_id, touchdown, sites, touchdown_ms, method
    from touchdowns where lot_id = ?"""

LOT_BLOCK_TIMES = """
    select block, parts, mean_ms, p50_ms, p95_ms, method
    from block_times where lot_id = ? and site is null"""


@dataclass(frozen=True)
class LotData:
    """One lot as the verification reads it (frames of the views' columns above)."""

    lot_id: str
    files: pl.DataFrame
    parts: pl.DataFrame
    results: pl.DataFrame
    touchdowns: pl.DataFrame
    block_times: pl.DataFrame


def lot_ids(src: Source) -> list[str]:
    return [str(v) for v in src.sql(LOT_IDS)["lot_id"].to_list()]


def read_lot(src: Source, lot: str) -> LotData:
    return LotData(lot, src.sql(LOT_FILES, [lot]), src.sql(LOT_PARTS, [lot]),
                   src.sql(LOT_RESULTS, [lot]), src.sql(LOT_TOUCHDOWNS, [lot]),
                   src.sql(LOT_BLOCK_TIMES, [lot]))


class Reader:
    """One read-only connection over a store's views for the few queries above (opening
    one per query would rebuild the views each time when the catalog file is stale)."""

    def __init__(self, store: Store):
        self.con = store.connect()

    def sql(self, query: str, params: list[Any] | None = None) -> pl.DataFrame:
        return to_frame(self.con.sql(query, params=params or None))

    def close(self) -> None:
        self.con.close()
