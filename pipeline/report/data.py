"""What a report shows, gathered once from the store (and the plan, when there is one).

Everything comes from the public timing API and the catalog's views on one DuckDB
connection: reads of what was derived when the logs landed. The report reads every lot's
small aggregates and focuses on one — the plan's, else ``--lot``, else the lot the
planner would choose (the best timing source, then the most parts): the Pareto, the site
charts and the plan are that lot's; the tables and the lot-to-lot chart cover them all.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import polars as pl

from ..attribute import timing
from ..errors import InputError
from ..plan.measure import choose_lot
from ..store import Store, to_frame


class Session:
    """One open connection over a store's views (one snapshot of the store); quacks like
    ``Store`` for the timing helpers, which only call ``.sql``. Every figure is a read of
    what was derived when the logs landed."""

    def __init__(self, store: Store):
        self.store = store
        self.con = store.connect()
        # One thread: DuckDB's parallel sums add in a varying order, and block means that
        # sit exactly on a rounding boundary (integer microseconds over a round number of
        # parts) would then round either way from run to run. The data here is small.
        self.con.execute("set threads = 1")

    def sql(self, query: str, params: list[Any] | None = None) -> pl.DataFrame:
        return to_frame(self.con.sql(query, params=params or None))

    def close(self) -> None:
        self.con.close()


@dataclass
class ReportData:
    lot_id: str                       # the focus lot
    lots: pl.DataFrame                # one row per lot: where it came from, how it was timed
    blocks: pl.DataFrame              # timing.block_table: every lot in scope
    site_blocks: pl.DataFrame         # focus lot, long: block, site, mean_ms, block_mean_ms
    part_times: pl.DataFrame          # focus lot, per site: the spread of part test time
    drift: pl.DataFrame               # timing.drift over every lot
    estimates: pl.DataFrame           # block_times_all method=estimate, lots timed that way
    unattributed: pl.DataFrame        # timing.unattributed
    sites: list[timing.SiteSummary]
    warnings: list[str]
    plan: dict[str, Any] | None = None
    blocks_file: str | None = None
    notes: list[str] = field(default_factory=list)

    @property
    def focus_blocks(self) -> pl.DataFrame:
        return self.blocks.filter(pl.col("lot_id") == self.lot_id)

    @property
    def focus_site(self) -> timing.SiteSummary | None:
        return next((s for s in self.sites if s.lot_id == self.lot_id), None)

    def block_order(self) -> list[str]:
        """Every block name the report shows, largest share of the focus lot first: one
        order, so each block keeps one colour in every chart."""
        names = self.focus_blocks["block"].to_list()
        drifted = self.drift.filter(pl.col("kind") == "block")["block"] \
            if not self.drift.is_empty() else pl.Series([], dtype=pl.String)
        for col in (self.blocks["block"], drifted):
            names += [b for b in col.to_list() if b not in names]
        for row in (self.plan or {}).get("schedule", []):
            if row["block"] not in names:
                names.append(row["block"])
        return list(dict.fromkeys(names))


def gather(store: Store, lot: str | None, plan: dict[str, Any] | None,
           blocks_file: str | None) -> ReportData:
    """Read everything a report needs. ``plan`` is the planner's dict (or None)."""
    db = Session(store)
    try:
        focus = plan["lot_id"] if plan else choose_lot(db, lot)[0]
        scope = None  # every lot: --lot chooses the focus, not what is read
        data = ReportData(
            lot_id=focus,
            lots=_lots(db, scope),
            blocks=timing.block_table(db, scope),  # type: ignore[arg-type]
            site_blocks=_site_blocks(db, focus),
            part_times=_part_times(db, focus),
            drift=timing.drift(db),  # type: ignore[arg-type]
            estimates=_estimates(db, scope),
            unattributed=timing.unattributed(db, scope),  # type: ignore[arg-type]
            sites=timing.site_summaries(db, scope),  # type: ignore[arg-type]
            warnings=timing.warnings(db, scope),  # type: ignore[arg-type]
            plan=plan, blocks_file=blocks_file)
    finally:
        db.close()
    if data.focus_blocks.is_empty():
        raise InputError(f"lot {focus!r} has no block times (no timing markers, timing CSV, "
                         "TSR summaries, or part times the estimate can use)")
    return data


def _lots(db: Session, lot: str | None) -> pl.DataFrame:
    where, params = ("where p.lot_id = ?", [lot]) if lot else ("", [])
    return db.sql(f"""
        with p as (
            select lot_id, parts, sites from site_summary
        ),
        l as (
            select lot_id, any_value(part_type) as part_type, any_value(program) as program,
                   any_value(program_rev) as program_rev,
                   any_value(tester_type) as tester_type, min(started_at) as started_at,
                   count(distinct file_id) as files
            from lots group by lot_id
        ),
        m as (select distinct lot_id, method from block_times)
        select p.lot_id, l.part_type, l.program, l.program_rev, l.tester_type,
               l.started_at, m.method, l.files, p.parts, p.sites
        from p left join l using (lot_id) left join m using (lot_id)
        {where}
        order by l.started_at nulls last, p.lot_id""", params)


def _site_blocks(db: Session, lot: str) -> pl.DataFrame:
    return db.sql("""
        with s as (
            select block, site, mean_ms from block_times
            where lot_id = ? and site is not null and block <> 'overhead'
        ),
        pooled as (
            select block, mean_ms as block_mean_ms from block_times
            where lot_id = ? and site is null and block <> 'overhead'
        )
        select s.block, s.site, s.mean_ms, pooled.block_mean_ms,
               100.0 * (s.mean_ms / nullif(pooled.block_mean_ms, 0) - 1.0) as vs_mean_pct
        from s join pooled using (block)
        order by s.block, s.site""", [lot, lot])


def _part_times(db: Session, lot: str) -> pl.DataFrame:
    return db.sql("""
        select site, count(*) as parts, min(test_time_ms) as min_ms,
               quantile_cont(test_time_ms, 0.25) as q1_ms,
               quantile_cont(test_time_ms, 0.5) as median_ms,
               quantile_cont(test_time_ms, 0.75) as q3_ms,
               max(test_time_ms) as max_ms, avg(test_time_ms) as mean_ms
        from parts
        where lot_id = ? and test_time_ms is not null and site is not null
        group by site order by site""", [lot])


def _estimates(db: Session, lot: str | None) -> pl.DataFrame:
    """Estimated block times of the lots whose best source is the estimate: the ones
    where the estimate is what the report's numbers rest on."""
    where, params = ("and a.lot_id = ?", [lot]) if lot else ("", [])
    return db.sql(f"""
        select a.lot_id, a.block, a.parts, a.mean_ms, a.ci_low_ms, a.ci_high_ms,
               a.identifiable
        from block_times_all a
        join (select distinct lot_id from block_times where method = 'estimate') e
            using (lot_id)
        where a.method = 'estimate' and a.site is null {where}
        order by a.lot_id, a.mean_ms desc, a.block""", params)
