"""Where the seconds go: block times per lot and site, the multi-site view, drift.

Every figure here is derived when a lot's logs land (``pipeline.store.derive``): the SQL
models in ``sql/`` and the Python models of ``pipeline.attribute.lot_models`` (the estimate and the
site summary). The functions here answer questions by reading what was derived, one lot
or a few small aggregates at a time.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np
import polars as pl

from ..errors import InputError, UsageError
from .lot_models import OVERHEAD, PY_MODELS, multi_site_efficiency

__all__ = ["OVERHEAD", "PY_MODELS", "SiteSummary", "block_table", "check_lot", "drift",
           "multi_site_efficiency", "site_summaries", "unattributed", "warnings"]

if TYPE_CHECKING:
    pass

# -- questions ---------------------------------------------------------------------------
def check_lot(store: Any, lot: str | None) -> None:
    """UsageError (exit 2) for a lot the store does not hold; lists a few it does."""
    if lot is None:
        return
    known = store.sql("select lot from raw_lot_gens order by lot")["lot"].to_list()
    if lot not in known:
        shown = ", ".join(known[:10]) + (f" and {len(known) - 10} more" if len(known) > 10
                                         else "")
        raise UsageError(f"lot {lot!r} is not in the store (lots: {shown or 'none'})")


def block_table(store: Any, lot: str | None = None) -> pl.DataFrame:
    """Per lot, one row per block (pooled over sites) ranked by mean time, with its share
    of part time, the cumulative share (a Pareto), each site's mean and the method."""
    check_lot(store, lot)
    where, params = ("where lot_id = ?", [lot]) if lot else ("", [])
    df = store.sql(f"""
        select lot_id, block, site, parts, mean_ms, p50_ms, p95_ms, total_ms, method,
               share_pct, ci_low_ms, ci_high_ms, identifiable
        from block_times {where} order by lot_id, mean_ms desc, block, site""", params)
    if lot and df.is_empty():
        raise InputError(f"lot {lot!r} has no block times (no timing markers, timing CSV, "
                         "TSR summaries, or part times the estimate can use)")
    pooled = df.filter(pl.col("site").is_null() & (pl.col("block") != OVERHEAD))
    per_site = (df.filter(pl.col("site").is_not_null() & (pl.col("block") != OVERHEAD))
                .with_columns(pl.format("site_{}_ms", pl.col("site")).alias("col"))
                .pivot(on="col", index=["lot_id", "block"], values="mean_ms"))
    site_cols = sorted((c for c in per_site.columns if c.startswith("site_")),
                       key=lambda c: int(c.split("_")[1]))
    # ties (blocks the estimate times together) by name: the same order on every run
    out = (pooled.sort(["lot_id", "mean_ms", "block"], descending=[False, True, False])
           .with_columns(pl.col("share_pct").cum_sum().over("lot_id").alias("cum_pct"))
           .join(per_site.select(["lot_id", "block", *site_cols]), on=["lot_id", "block"],
                 how="left"))
    return out.select(["lot_id", "block", "method", "parts", "mean_ms", "p50_ms", "p95_ms",
                       "share_pct", "cum_pct", *site_cols, "ci_low_ms", "ci_high_ms",
                       "identifiable"])


def unattributed(store: Any, lot: str | None = None) -> pl.DataFrame:
    where, params = ("where lot_id = ?", [lot]) if lot else ("", [])
    return store.sql(f"select * from reconciliation {where} order by lot_id, site nulls last",
                     params)


def warnings(store: Any, lot: str | None = None) -> list[str]:
    """One line per lot and finding: blocks the estimate cannot separate (for lots whose
    best source is the estimate), and lots that could not be estimated."""
    where, params = ("and n.lot_id = ?", [lot]) if lot else ("", [])
    df = store.sql(f"""
        select n.lot_id, n.message from timing_notes n
        left join (select distinct lot_id, method from block_times) b using (lot_id)
        where (n.kind <> 'inseparable' or b.method = 'estimate') {where}
        order by n.lot_id, n.kind, n.blocks""", params)
    return [f"{lot_id}: {m}" for lot_id, m in df.iter_rows()]


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


def site_summaries(store: Any, lot: str | None = None) -> list[SiteSummary]:
    """Touchdown time, one-site time T_1, MSE, per-site imbalance, blocks serialised
    across sites, and index time, per lot.

    T_1 is what one part would cost on its own. With per-block timing (markers, CSV) it is
    the mean part time without its idle gaps (part_spans.alone_ms): waits for a shared
    instrument are not counted, and blocks a concurrent program runs at once count once,
    so MSE stays meaningful for a concurrent program too. Without it (TSR or estimate),
    the sum of the pooled block times plus the per-part overhead: the estimate's
    intercept, else the smallest unattributed time of any site — an upper bound, so MSE is
    then a lower bound."""
    check_lot(store, lot)
    where, params = ("where lot_id = ?", [lot]) if lot else ("", [])
    sums = store.sql(f"select * from site_summary {where} order by lot_id", params)
    if lot and sums.is_empty():
        raise InputError(f"lot {lot!r} has no touchdowns to summarise")
    rec = store.sql(f"""select lot_id, site, parts, part_ms, attributed_ms, unattributed_ms
                        from reconciliation {where} order by lot_id, site""", params)
    out = []
    for s in sums.iter_rows(named=True):
        per_site = rec.filter((pl.col("lot_id") == s["lot_id"]) & pl.col("site").is_not_null()
                              ).drop("lot_id")
        fastest = per_site["part_ms"].min() if not per_site.is_empty() else None
        per_site = per_site.with_columns(
            (100.0 * (pl.col("part_ms") / fastest - 1.0)).alias("imbalance_pct")
            if fastest else pl.lit(None).alias("imbalance_pct"))
        out.append(SiteSummary(
            lot_id=s["lot_id"], sites=int(s["sites"]), touchdowns=int(s["touchdowns"]),
            touchdown_ms=float(s["touchdown_ms"]), one_site_ms=float(s["one_site_ms"]),
            mse=s["mse"], index_ms=s["index_ms"], serialized=list(s["serialized_blocks"]),
            per_site=per_site))
    return out


# -- across lots -------------------------------------------------------------------------
def drift(store: Any, k: float = 3.0, window: int = 10, min_history: int = 3,
          min_change_pct: float = 2.0) -> pl.DataFrame:
    """Block time per lot over the lot start date, each lot compared with the median of
    the `window` lots before it: flagged when it is more than k robust sigmas away
    (sigma = 1.4826 x median absolute deviation, floored at 0.5 % of the median so that
    near-constant histories do not flag noise) and more than min_change_pct from the
    median. Needs min_history earlier lots.

    Only what the data determine is compared: a block the estimate cannot separate is
    never flagged, nor taken as history; where it always runs with others, their sum is
    compared instead (a ``group`` row: the estimate's group total against the sum of the
    members' measured times in other lots), and a group with the per-part overhead is not
    compared at all. For an estimated value, sigma also holds the estimate's own standard
    error (from its bootstrap interval), so its uncertainty counts before drift is called."""
    df = store.sql("""
        select b.block, b.lot_id, l.started_at, b.mean_ms, b.method, b.identifiable,
               b.ci_low_ms, b.ci_high_ms, b.group_blocks, b.group_kind, b.group_ms,
               b.group_ci_low_ms, b.group_ci_high_ms
        from block_times b
        join (select lot_id, min(started_at) as started_at from lots group by lot_id) l
            using (lot_id)
        where b.site is null and b.block <> 'overhead'
        order by l.started_at, b.lot_id, b.block""")
    series = _drift_series(df)
    rows = []
    for _, points in sorted(series.items()):
        points.sort(key=lambda p: (p["started_at"] is None, p["started_at"], p["lot_id"]))
        history: list[float] = []
        for p in points:
            rows.append(_judge(p, np.asarray(history[-window:]), k, min_history,
                               min_change_pct))
            if p["comparable"]:
                history.append(p["mean_ms"])
    if not rows:
        return pl.DataFrame(schema=_DRIFT_SCHEMA)
    return pl.DataFrame(rows, schema=_DRIFT_SCHEMA)


_DRIFT_SCHEMA: dict[str, Any] = {"block": pl.String, "kind": pl.String, "lot_id": pl.String,
                 "started_at": pl.Datetime("us"), "mean_ms": pl.Float64, "method": pl.String,
                 "identifiable": pl.Boolean, "baseline_ms": pl.Float64, "sigma_ms": pl.Float64,
                 "is_flagged": pl.Boolean}


def _drift_series(df: pl.DataFrame) -> dict[tuple[str, str], list[dict[str, Any]]]:
    """(kind, name) -> one point per lot: every block, and each group of blocks the
    estimate could only time together (always-together groups without the overhead)."""
    series: dict[tuple[str, str], list[dict[str, Any]]] = {}
    groups: set[str] = set()
    for r in df.iter_rows(named=True):
        series.setdefault(("block", r["block"]), []).append(
            {**_point(r, "block", r["block"], r["mean_ms"]), "comparable": r["identifiable"],
             "lo": r["ci_low_ms"], "hi": r["ci_high_ms"]})
        g = r["group_blocks"]
        if g and r["group_kind"] == "identical" and OVERHEAD not in g.split(" + "):
            groups.add(g)
    for g in sorted(groups):
        members = g.split(" + ")
        for _, lot_rows in df.group_by(["lot_id"], maintain_order=True):
            by_block = {r["block"]: r for r in lot_rows.iter_rows(named=True)}
            est = next((r for r in by_block.values() if r["group_blocks"] == g), None)
            if est is not None:
                point = {**_point(est, "group", g, est["group_ms"]), "comparable": True,
                         "lo": est["group_ci_low_ms"], "hi": est["group_ci_high_ms"]}
            elif all(m in by_block and by_block[m]["identifiable"] for m in members):
                first = by_block[members[0]]
                point = {**_point(first, "group", g, sum(by_block[m]["mean_ms"]
                                                          for m in members)),
                         "comparable": True, "lo": None, "hi": None, "history_only": True}
            else:
                continue
            series.setdefault(("group", g), []).append(point)
    return series


def _point(r: dict[str, Any], kind: str, name: str, value: float) -> dict[str, Any]:
    return {"block": name, "kind": kind, "lot_id": r["lot_id"], "started_at": r["started_at"],
            "mean_ms": value, "method": r["method"], "identifiable": kind == "group"
            or bool(r["identifiable"])}


def _judge(p: dict[str, Any], hist: np.ndarray, k: float, min_history: int,
           min_change_pct: float) -> dict[str, Any]:
    med = sigma = None
    flagged = False
    if p["comparable"] and not p.get("history_only") and len(hist) >= min_history:
        med = float(np.median(hist))
        sigma = max(1.4826 * float(np.median(np.abs(hist - med))), 0.005 * abs(med))
        if p["method"] == "estimate" and p["lo"] is not None and p["hi"] is not None:
            # The estimate's own standard error (its 95 % interval spans ~3.92 of them),
            # added in quadrature: a difference the estimate cannot resolve is no drift.
            sigma = float(np.hypot(sigma, (p["hi"] - p["lo"]) / 3.92))
        change = 100.0 * (p["mean_ms"] - med) / med if med else 0.0
        flagged = abs(p["mean_ms"] - med) > k * sigma and abs(change) > min_change_pct
    return {key: p[key] for key in ("block", "kind", "lot_id", "started_at", "mean_ms",
                                    "method", "identifiable")} | {
        "baseline_ms": med, "sigma_ms": sigma, "is_flagged": flagged}
