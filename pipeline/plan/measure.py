"""What the store says about one lot, for the plan: sites, block times, program order,
the measured touchdown and index time. One DuckDB connection for all of it (opening one
costs about a second).

Lot choice: with ``lot=None`` the lot timed by the best source is planned (markers, then
the timing CSV, then TSR summaries, then the estimate), the one with the most parts among
those (ties: the first lot id), and ``Measured.notes`` says so; ``--lot`` chooses another.

Program order is measured: each block's mean rank among the blocks of a part, ranked by
the record where the block's first result sits (STDF) or by start time (timing CSV).
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import polars as pl

from ..errors import InputError, UsageError
from ..store import Store, to_frame

COLUMNS = {"mean": "mean_ms", "p50": "p50_ms", "p95": "p95_ms"}
NOT_BLOCKS = ("overhead",)  # the estimate's intercept: per-part time outside any block


@dataclass(frozen=True)
class Measured:
    """Block times of one lot. ``times[block][site]``; site None = pooled over sites."""

    lot_id: str
    sites: tuple[int, ...]
    order: tuple[str, ...]
    times: Mapping[str, Mapping[int | None, float]]
    column: str = "mean_ms"
    method: str = ""
    parts: int = 0
    touchdowns: int = 0
    touchdown_ms: float | None = None
    index_ms: float | None = None
    notes: tuple[str, ...] = field(default=())

    def time_ms(self, block: str, site: int) -> float:
        per = self.times[block]
        return per[site] if site in per else per[None]


class Session:
    """A store's views on one open connection; quacks like ``Store.sql`` so timing's
    helpers can share it."""

    def __init__(self, store: Store):
        self.store = store
        self.con = store.connect()

    def sql(self, query: str, params: list[Any] | None = None) -> pl.DataFrame:
        return to_frame(self.con.sql(query, params=params or None))

    def reopen(self) -> None:
        self.con.close()
        self.con = self.store.connect()

    def close(self) -> None:
        self.con.close()


METHOD_RANK = {"marker": 1, "csv": 2, "tsr": 3, "estimate": 4}


def choose_lot(db: Any, lot: str | None) -> tuple[str, int, str | None]:
    """(lot_id, parts, a note when the choice was ours). Reads one small summary per lot
    (only that lot's with ``lot`` given). UsageError for a lot the store does not hold."""
    from ..attribute.timing import check_lot

    check_lot(db, lot)
    where, params = ("where lot_id = ?", [lot]) if lot is not None else ("", [])
    lots = db.sql(f"""select lot_id, parts, method,
                             case method {' '.join(f"when '{m}' then {r}"
                                                   for m, r in METHOD_RANK.items())}
                                 else 9 end as rank
                      from site_summary {where}
                      order by rank, parts desc, lot_id""", params)
    if lots.is_empty():
        raise InputError("the store holds no parts: ingest logs first (tandem ingest ...)"
                         if lot is None else f"lot {lot!r} has no parts")
    first, parts, method, _ = lots.row(0)
    note = None
    if lot is None and lots.height > 1:
        note = (f"{lots.height} lots in the store: chose {first}, timed by {method} with "
                f"{parts} parts (the best timing source, then the most parts); choose "
                f"another with --lot")
    return first, int(parts), note


def measure_lot(store: Store, lot: str | None = None, percentile: str = "mean") -> Measured:
    if percentile not in COLUMNS:
        raise UsageError(f"--percentile must be one of {', '.join(COLUMNS)}, not {percentile!r}")
    db = Session(store)
    try:
        return measure_on(db, lot, COLUMNS[percentile])
    finally:
        db.close()


def measure_on(db: Session, lot: str | None, column: str) -> Measured:
    """What ``measure_lot`` measures, on an open Session (``column``: the block-time column)."""
    lot_id, parts, choice = choose_lot(db, lot)
    rows = _block_rows(db, lot_id)
    if rows.is_empty():
        raise InputError(f"lot {lot_id!r} has no block times (no timing markers, timing CSV, "
                         "TSR summaries, or part times the estimate can use)")
    times, fallback = _times(rows, column)
    sites = tuple(int(s) for s in db.sql(
        "select distinct site from parts where lot_id = ? and site is not null order by site",
        [lot_id])["site"].to_list()) or (1,)
    td = db.sql("""select touchdowns as n, touchdown_ms as ms, index_ms from site_summary
                   where lot_id = ?""", [lot_id])
    n = int(td["n"][0]) if not td.is_empty() else 0
    ms = float(td["ms"][0]) if n else None
    index = td["index_ms"][0] if n else None
    notes = [x for x in (choice, fallback) if x]
    return Measured(lot_id, sites, tuple(_program_order(db, lot_id, list(times))), times,
                    column, ", ".join(sorted(set(rows["method"].to_list()))), parts, n,
                    ms, index, tuple(notes))


def _block_rows(db: Session, lot_id: str) -> pl.DataFrame:
    return db.sql(f"""select block, site, mean_ms, p50_ms, p95_ms, method from block_times
                      where lot_id = ? and block not in ({', '.join('?' for _ in NOT_BLOCKS)})
                      and mean_ms is not null order by block, site nulls first""",
                  [lot_id, *NOT_BLOCKS])


def _times(rows: pl.DataFrame, column: str) -> tuple[dict[str, dict[int | None, float]],
                                                     str | None]:
    times: dict[str, dict[int | None, float]] = {}
    short = 0
    for r in rows.iter_rows(named=True):
        value = r[column]
        if value is None:
            short += 1
            value = r["mean_ms"]
        times.setdefault(r["block"], {})[r["site"]] = float(value)
    for per in times.values():
        if None not in per:  # every site measured but no pooled row: pool them
            per[None] = sum(v for v in per.values()) / len(per)
    note = None
    if short:
        note = (f"{column} is not known for {short} of {rows.height} block times (TSR "
                "and estimates give means only): the mean is used there")
    return times, note


def _program_order(db: Session, lot_id: str, blocks: list[str]) -> list[str]:
    ranks = db.sql("""
        with stdf as (
            select block, row_number() over (
                       partition by file_id, part_index order by first_rec) as rk
            from part_blocks where lot_id = ?
        ), csv as (
            select block, row_number() over (
                       partition by file_id, touchdown, site, part_id order by start_ms) as rk
            from csv_times where lot_id = ?
        )
        select block, avg(rk) as rank from (select * from stdf union all select * from csv)
        group by block""", [lot_id, lot_id])
    rank = dict(zip(ranks["block"].to_list(), ranks["rank"].to_list(), strict=True))
    # Blocks no part ranks (none, with the sources we know) go last, by name.
    return sorted(blocks, key=lambda b: (b not in rank, rank.get(b, 0.0), b))
