"""Where the seconds go: block times per lot and site, the multi-site view, drift.

The measured sources (markers, timing CSV, TSR summaries) are SQL views over the store
(`sql/block_times_all.sql` and friends), always current. The estimate source needs
arithmetic SQL is bad at — non-negative least squares with a bootstrap — so it is
computed here and stored per lot (``derived/block_estimates``); ``refresh_estimates``
recomputes a lot only when the set of its files changed.
"""

from __future__ import annotations

import datetime as _dt
from dataclasses import dataclass
from typing import Any

import numpy as np
import polars as pl
import pyarrow as pa

from .errors import InputError
from .store import Store

MIN_PARTS_PER_UNKNOWN = 3  # fewer parts than this per unknown: no estimate is made


# -- estimate method ---------------------------------------------------------------------
def refresh_estimates(store: Store, force: bool = False) -> list[str]:
    """(Re)compute NNLS block estimates for every lot whose files changed. Returns one
    line per lot that could not be estimated (too few parts, no part times)."""
    from .estimate import estimate_block_times

    lots = store.sql("""
        select lot_id, string_agg(distinct file_id, ',' order by file_id) as file_ids
        from parts where source = 'stdf' group by lot_id order by lot_id""")
    done = store.sql("select distinct lot_id, file_ids from raw_block_estimates")
    have = dict(zip(done["lot_id"].to_list(), done["file_ids"].to_list(), strict=True))
    problems = []
    for lot, file_ids in lots.iter_rows():
        if not force and have.get(lot) == file_ids:
            continue
        try:
            table = _estimate_lot(store, lot, file_ids, estimate_block_times)
        except InputError as e:
            problems.append(f"{lot}: no estimate: {e}")
            table = None
        store.write_derived("block_estimates", lot, table)
    return problems


def _design(store: Store, lot: str) -> tuple[np.ndarray, np.ndarray, list[str], np.ndarray]:
    """Parts x blocks matrix of which blocks each part ran, and part times (ms)."""
    runs = store.sql("""
        select p.file_id, p.part_index, p.site, p.test_time_ms, b.block, b.first_rec
        from parts p join part_blocks b using (file_id, part_index)
        where p.lot_id = ? and p.test_time_ms is not null and b.block <> 'unassigned'
        order by p.file_id, p.part_index""", [lot])
    if runs.is_empty():
        raise InputError("no parts with both a recorded test time and assigned blocks")
    # columns in program order: by where each block first appears in its log
    blocks = (runs.group_by("block").agg(pl.col("first_rec").min())
              .sort("first_rec", "block")["block"].to_list())
    keys = runs.select("file_id", "part_index", "site", "test_time_ms").unique(
        maintain_order=True)
    row = {(f, p): i for i, (f, p, _, _) in enumerate(keys.iter_rows())}
    col = {b: j for j, b in enumerate(blocks)}
    X = np.zeros((len(keys), len(blocks)))
    for f, p, _, _, b, _ in runs.iter_rows():
        X[row[(f, p)], col[b]] = 1.0
    return X, keys["test_time_ms"].to_numpy(), blocks, keys["site"].to_numpy()


def _estimate_lot(store: Store, lot: str, file_ids: str, solve: Any) -> pa.Table:
    X, y, blocks, sites = _design(store, lot)
    rows = []
    groups: list[tuple[int | None, np.ndarray]] = [(None, np.ones(len(y), dtype=bool))]
    groups += [(int(s), sites == s) for s in np.unique(sites)
               if len(np.unique(sites)) > 1
               and (sites == s).sum() >= MIN_PARTS_PER_UNKNOWN * (len(blocks) + 1)]
    for site, mask in groups:
        if mask.sum() < MIN_PARTS_PER_UNKNOWN * (len(blocks) + 1):
            raise InputError(f"{int(mask.sum())} parts for {len(blocks) + 1} unknowns "
                             f"(blocks and overhead); need {MIN_PARTS_PER_UNKNOWN} per unknown")
        est = solve(X[mask], y[mask], blocks, seed=0)
        for name in ["overhead", *blocks]:
            r = est.blocks[name]
            rows.append({"lot_id": lot, "block": name, "site": site,
                         "parts": int(X[mask][:, blocks.index(name)].sum()) if name in blocks
                         else int(mask.sum()),
                         "mean_ms": r.value_ms, "ci_low_ms": _finite(r.ci_low_ms),
                         "ci_high_ms": _finite(r.ci_high_ms), "identifiable": r.identifiable,
                         "warning": est.warning, "file_ids": file_ids,
                         "computed_at": _dt.datetime.now().replace(microsecond=0)})
    return pa.Table.from_pylist(rows)


def _finite(v: float) -> float | None:
    return None if v is None or not np.isfinite(v) else float(v)


# -- the attribution table ---------------------------------------------------------------
def block_table(store: Store, lot: str | None = None) -> pl.DataFrame:
    """Per lot, one row per block (pooled over sites) ranked by mean time, with its share
    of part time, the cumulative share (a Pareto), each site's mean and the method."""
    where, params = ("where lot_id = ?", [lot]) if lot else ("", [])
    df = store.sql(f"""
        select lot_id, block, site, parts, mean_ms, p50_ms, p95_ms, total_ms, method,
               share_pct, ci_low_ms, ci_high_ms, identifiable
        from block_times {where} order by lot_id, mean_ms desc""", params)
    if lot and df.is_empty():
        raise InputError(f"lot {lot!r} has no block times (see `tandem sql ... "
                         f"\"select distinct lot_id from lots\"`)")
    pooled = df.filter(pl.col("site").is_null() & (pl.col("block") != "overhead"))
    per_site = (df.filter(pl.col("site").is_not_null() & (pl.col("block") != "overhead"))
                .with_columns(pl.format("site_{}_ms", pl.col("site")).alias("col"))
                .pivot(on="col", index=["lot_id", "block"], values="mean_ms"))
    site_cols = sorted((c for c in per_site.columns if c.startswith("site_")),
                       key=lambda c: int(c.split("_")[1]))
    out = (pooled.sort(["lot_id", "mean_ms"], descending=[False, True])
           .with_columns(pl.col("share_pct").cum_sum().over("lot_id").alias("cum_pct"))
           .join(per_site.select(["lot_id", "block", *site_cols]), on=["lot_id", "block"],
                 how="left"))
    return out.select(["lot_id", "block", "method", "parts", "mean_ms", "p50_ms", "p95_ms",
                       "share_pct", "cum_pct", *site_cols, "ci_low_ms", "ci_high_ms",
                       "identifiable"])


def unattributed(store: Store, lot: str | None = None) -> pl.DataFrame:
    where, params = ("where lot_id = ?", [lot]) if lot else ("", [])
    return store.sql(f"select * from reconciliation {where} order by lot_id, site nulls last",
                     params)


def warnings(store: Store, lot: str | None = None) -> list[str]:
    where, params = ("and lot_id = ?", [lot]) if lot else ("", [])
    df = store.sql(f"""select distinct lot_id, warning from block_times
                       where warning is not null {where} order by lot_id""", params)
    return [f"{lot_id}: {w}" for lot_id, w in df.iter_rows()]


# -- the multi-site view -----------------------------------------------------------------
@dataclass(frozen=True)
class SiteSummary:
    lot_id: str
    sites: int
    touchdowns: int
    touchdown_ms: float
    one_site_ms: float
    mse: float | None
    index_ms: float | None
    serialized: list[str]
    per_site: pl.DataFrame


def multi_site_efficiency(t1_ms: float, tn_ms: float, n: int) -> float | None:
    """MSE = 1 - (T_N - T_1) / ((N - 1) * T_1): 1.0 when N sites cost no more than one.
    Common practice in multi-site test; undefined for one site."""
    if n < 2 or t1_ms <= 0:
        return None
    return 1.0 - (tn_ms - t1_ms) / ((n - 1) * t1_ms)


def site_summaries(store: Store, lot: str | None = None) -> list[SiteSummary]:
    """Touchdown time, one-site time T_1, MSE, per-site imbalance, blocks serialised
    across sites, and index time, per lot.

    T_1 is what one part would cost on its own: the sum of the pooled block times plus the
    per-part overhead. With per-block timing (markers, CSV) the overhead is the part time
    outside the span of its blocks (part_spans.outside_ms), so waits for a shared
    instrument, which fall inside the span, are not counted in T_1. Without it (TSR or
    estimate) the estimate's intercept is used, else the smallest unattributed time of any
    site — an upper bound, so MSE is then a lower bound."""
    where, params = ("where lot_id = ?", [lot]) if lot else ("", [])
    lots = store.sql(f"select distinct lot_id from touchdowns {where} order by lot_id",
                     params)["lot_id"].to_list()
    if lot and not lots:
        raise InputError(f"lot {lot!r} is not in the store")
    return [_site_summary(store, name) for name in lots]


def _site_summary(store: Store, lot: str) -> SiteSummary:
    td = store.sql("""select count(*) as n, avg(touchdown_ms) as ms, max(sites) as sites,
                             sum(touchdown_ms) as total_ms
                      from touchdowns where lot_id = ?""", [lot]).row(0, named=True)
    rec = store.sql("select * from reconciliation where lot_id = ?", [lot])
    pooled_attr = rec.filter(pl.col("site").is_null())["attributed_ms"].to_list()
    per_site = rec.filter(pl.col("site").is_not_null()).select(
        "site", "parts", "part_ms", "attributed_ms", "unattributed_ms").sort("site")
    fastest = per_site["part_ms"].min() if not per_site.is_empty() else None
    per_site = per_site.with_columns(
        (100.0 * (pl.col("part_ms") / fastest - 1.0)).alias("imbalance_pct")
        if fastest else pl.lit(None).alias("imbalance_pct"))
    overhead = _overhead_ms(store, lot, per_site)
    one_site = (pooled_attr[0] or 0.0) + max(overhead or 0.0, 0.0) if pooled_attr else 0.0
    serial = store.sql("""select block from serialized_blocks
                          where lot_id = ? and is_serialized order by block""", [lot])
    return SiteSummary(
        lot_id=lot, sites=int(td["sites"] or 0), touchdowns=int(td["n"]),
        touchdown_ms=float(td["ms"] or 0.0), one_site_ms=float(one_site),
        mse=multi_site_efficiency(one_site, float(td["ms"] or 0.0), int(td["sites"] or 0)),
        index_ms=_index_ms(store, lot, float(td["total_ms"] or 0.0), int(td["n"])),
        serialized=serial["block"].to_list(), per_site=per_site)


def _overhead_ms(store: Store, lot: str, per_site: pl.DataFrame) -> float | None:
    spans = store.sql("""select avg(outside_ms) as ms from part_spans
                         where lot_id = ? and outside_ms >= 0""", [lot])["ms"][0]
    if spans is not None:
        return float(spans)
    est = store.sql("""select mean_ms from block_times
                       where lot_id = ? and block = 'overhead' and site is null""", [lot])
    if not est.is_empty():
        return float(est["mean_ms"][0])
    if per_site.is_empty():
        return None
    return float(per_site["unattributed_ms"].min())  # type: ignore[arg-type]


def _index_ms(store: Store, lot: str, touchdown_total_ms: float, touchdowns: int) -> float | None:
    """(lot wall clock - time under test) / touchdowns. MIR/MRR times have 1 s
    resolution, so over n touchdowns this is good to about 1000/n ms."""
    wall = store.sql("""select sum(epoch(finished_at) - epoch(started_at)) as s
                        from lots where lot_id = ? and finished_at > started_at""", [lot])
    seconds = wall["s"][0]
    if seconds is None or touchdowns == 0:
        return None
    index = (seconds * 1000.0 - touchdown_total_ms) / touchdowns
    return index if index >= 0 else None


# -- across lots -------------------------------------------------------------------------
def drift(store: Store, k: float = 3.0, window: int = 10, min_history: int = 3,
          min_change_pct: float = 2.0) -> pl.DataFrame:
    """Block time per lot over the lot start date, each lot compared with the median of
    the `window` lots before it: flagged when it is more than k robust sigmas away
    (sigma = 1.4826 x median absolute deviation, floored at 0.5 % of the median so that
    near-constant histories do not flag noise) and more than min_change_pct from the
    median. Needs min_history earlier lots."""
    df = store.sql("""
        select b.block, b.lot_id, min(l.started_at) as started_at, any_value(b.mean_ms) as mean_ms,
               any_value(b.method) as method
        from block_times b join lots l using (lot_id)
        where b.site is null and b.block <> 'overhead'
        group by b.block, b.lot_id
        order by b.block, started_at, b.lot_id""")
    rows = []
    for _, g in df.group_by(["block"], maintain_order=True):
        vals = g["mean_ms"].to_numpy()
        for i, r in enumerate(g.iter_rows(named=True)):
            hist = vals[max(0, i - window):i]
            med = sigma = None
            flagged = False
            if len(hist) >= min_history:
                med = float(np.median(hist))
                sigma = max(1.4826 * float(np.median(np.abs(hist - med))), 0.005 * abs(med))
                change = 100.0 * (r["mean_ms"] - med) / med if med else 0.0
                flagged = abs(r["mean_ms"] - med) > k * sigma and abs(change) > min_change_pct
            rows.append({**r, "baseline_ms": med, "sigma_ms": sigma, "is_flagged": flagged})
    if not rows:
        return pl.DataFrame(schema={"block": pl.String, "lot_id": pl.String,
                                    "started_at": pl.Datetime, "mean_ms": pl.Float64,
                                    "method": pl.String, "baseline_ms": pl.Float64,
                                    "sigma_ms": pl.Float64, "is_flagged": pl.Boolean})
    return pl.DataFrame(rows)


# -- rules and rendering -----------------------------------------------------------------
def save_block_rules(store: Store, blockmap: Any) -> None:
    """Keep the block map's assignment rules in the store: the results view uses them
    for tests that no BPS/EPS section or TSR SEQ_NAME places."""
    rules = [{"priority": i, "block": b, "kind": kind, "lo": lo, "hi": hi, "pattern": pat}
             for i, (b, kind, lo, hi, pat) in enumerate(blockmap.rules())]
    schema = pa.schema([("priority", pa.int32()), ("block", pa.large_string()),
                        ("kind", pa.large_string()), ("lo", pa.int64()), ("hi", pa.int64()),
                        ("pattern", pa.large_string())])
    store.write_derived("block_rules", "current", pa.Table.from_pylist(rules, schema=schema))


def render_times(store: Store, table: pl.DataFrame, lot: str | None) -> str:
    from .cli import format_frame

    out = []
    recon = unattributed(store, lot)
    for (lot_id,), g in table.group_by(["lot_id"], maintain_order=True):
        methods = ", ".join(sorted(set(g["method"].to_list())))
        r = recon.filter((pl.col("lot_id") == lot_id) & pl.col("site").is_null())
        out.append(f"Lot {lot_id} — block times from {methods}, ranked (a Pareto of part "
                   f"time; site_N_ms = that site's mean):")
        shown = g.drop("lot_id").with_columns(pl.col(pl.Float64).round(2))
        if shown["ci_low_ms"].is_null().all():
            shown = shown.drop("ci_low_ms", "ci_high_ms")
        if shown["identifiable"].all():
            shown = shown.drop("identifiable")
        out.append(format_frame(shown, "table").rstrip())
        if not r.is_empty() and r["unattributed_ms"][0] is not None:
            u = r.row(0, named=True)
            out.append(f"Unattributed: {u['unattributed_ms']:.1f} ms per part "
                       f"({u['unattributed_pct']:.1f} % of {u['part_ms']:.1f} ms): overhead "
                       f"and waits no block accounts for.")
        out.append("")
    return "\n".join(out).rstrip() + "\n"


def sites_frame(summaries: list[SiteSummary]) -> pl.DataFrame:
    return pl.DataFrame([{
        "lot_id": s.lot_id, "sites": s.sites, "touchdowns": s.touchdowns,
        "touchdown_ms": s.touchdown_ms, "one_site_ms": s.one_site_ms, "mse": s.mse,
        "index_ms": s.index_ms, "serialized_blocks": ", ".join(s.serialized)}
        for s in summaries])


def render_sites(summaries: list[SiteSummary]) -> str:
    from .cli import format_frame

    out = []
    for s in summaries:
        mse = "n/a (one site)" if s.mse is None else f"{100 * s.mse:.1f} %"
        index = "n/a" if s.index_ms is None else f"{s.index_ms:.0f} ms (from MIR/MRR, 1 s clock)"
        out += [f"Lot {s.lot_id}: {s.sites} site(s), {s.touchdowns} touchdowns",
                f"  touchdown time T_N   {s.touchdown_ms:.1f} ms",
                f"  one-site time T_1    {s.one_site_ms:.1f} ms (block times + overhead)",
                f"  multi-site eff. MSE  {mse}",
                f"  index time           {index}",
                "  serialised across sites (a shared instrument?): "
                + (", ".join(s.serialized) or "none"),
                format_frame(s.per_site.with_columns(pl.col(pl.Float64).round(1)),
                             "table").rstrip(), ""]
    return "\n".join(out).rstrip() + "\n"
