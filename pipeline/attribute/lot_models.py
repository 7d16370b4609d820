"""The per-lot models computed in Python, run by the derivation when a lot's logs change
(``pipeline.store.derive``): the estimate — non-negative least squares of part totals
against the blocks each part ran, with a bootstrap — and the site summary (T_N, T_1,
MSE, index time). They read the lot's derived tables on the derivation's own DuckDB
connection, with numpy only: an ingest loads no dataframe library for them.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING, Any

import numpy as np

from ..errors import InputError
from ..store.derive import LotContext, PyModel

if TYPE_CHECKING:
    import pyarrow as pa

MIN_PARTS_PER_UNKNOWN = 3  # fewer parts than this per unknown: no estimate is made
OVERHEAD = "overhead"      # the estimate's intercept: per-part time outside any block


# -- the estimate method (a Python model, run per lot when its logs change) ---------------
def estimate_model(ctx: LotContext) -> dict[str, pa.Table]:
    """NNLS block estimates of one lot from part totals, and its one-line findings."""
    from ..read.schemas import DERIVED
    from .estimate import estimate_block_times

    rows: list[dict[str, Any]] = []
    notes: list[dict[str, Any]] = []
    try:
        design = _design(ctx)
        if design is not None:
            rows, notes = _estimate_lot(ctx.lot, *design, estimate_block_times)
    except InputError as e:
        notes = [{"lot_id": ctx.lot, "kind": "no_estimate", "blocks": None, "sites": None,
                  "message": f"no estimate: {e}"}]
    import pyarrow as pa

    return {"block_estimates": pa.Table.from_pylist(rows, DERIVED["block_estimates"]),
            "timing_notes": pa.Table.from_pylist(notes, DERIVED["timing_notes"])}


def _design(ctx: LotContext) -> tuple[np.ndarray, np.ndarray, list[str], np.ndarray] | None:
    """Parts x blocks matrix of which blocks each STDF part ran, part times (ms) and
    sites; None for a lot with no STDF parts (nothing to estimate from). Every part with
    a test time is a row: one that ran no block (it stopped at contact, say) is a row of
    the intercept alone, and is what separates the overhead from the first block."""
    con = ctx.con
    parts = con.execute("""
        select test_time_ms, site from parts where source = 'stdf' and test_time_ms is not null
        order by file_id, part_index""").fetchnumpy()
    if len(parts["site"]) == 0:
        any_stdf = _one(con, "select count(*) from parts where source = 'stdf'")
        if any_stdf is None or not any_stdf[0]:
            return None
        raise InputError("no part has a recorded test time (PRR TEST_T)")
    cells = con.execute("""
        with p as (
            select file_id, part_index,
                   row_number() over (order by file_id, part_index) - 1 as r
            from parts where source = 'stdf' and test_time_ms is not null
        ),
        runs as (
            select p.r, b.block, b.first_rec
            from part_blocks b join p using (file_id, part_index)
            where b.block <> 'unassigned'
        ),
        cols as (
            select block, row_number() over (order by min(first_rec), block) - 1 as c
            from runs group by block
        )
        select runs.r, cols.c, cols.block from runs join cols using (block)""").fetchnumpy()
    if len(cells["c"]) == 0:
        raise InputError("no part ran an assigned block (no BPS/EPS section, TSR SEQ_NAME "
                         "or block-map rule places its tests)")
    # columns in program order: by where each block first appears in its log
    names = dict(zip(cells["c"].tolist(), cells["block"].tolist(), strict=True))
    blocks = [names[c] for c in sorted(names)]
    X = np.zeros((len(parts["site"]), len(blocks)))
    X[cells["r"].astype(np.intp), cells["c"].astype(np.intp)] = 1.0
    return X, np.asarray(parts["test_time_ms"], float), blocks, np.asarray(parts["site"])


def _estimate_lot(lot: str, X: np.ndarray, y: np.ndarray, blocks: list[str],
                  sites: np.ndarray, solve: Any) -> tuple[list[dict], list[dict]]:
    """The pooled fit and one per site (when there are parts enough), as rows; findings
    merged across the fits: one per group of blocks, naming the sites where it holds."""
    need = MIN_PARTS_PER_UNKNOWN * (len(blocks) + 1)
    if len(y) < need:
        raise InputError(f"{len(y)} parts for {len(blocks) + 1} unknowns "
                         f"(blocks and overhead); need {MIN_PARTS_PER_UNKNOWN} per unknown")
    site_ids = [int(s) for s in np.unique(sites)] if len(np.unique(sites)) > 1 else []
    fits: list[tuple[int | None, np.ndarray]] = [(None, np.ones(len(y), dtype=bool))]
    fits += [(s, sites == s) for s in site_ids if (sites == s).sum() >= need]
    estimates = [(site, mask, solve(X[mask], y[mask], blocks, seed=0)) for site, mask in fits]
    findings = _merge_findings([(site, est) for site, _, est in estimates],
                               per_site=len(fits) > 1)
    rows = []
    for site, mask, est in estimates:
        member = {name: (kind, tuple(group)) for group, kind in zip(est.groups,
                                                                    est.group_kinds,
                                                                    strict=True)
                  for name in group}
        for name in [OVERHEAD, *blocks]:
            r = est.blocks[name]
            key = member.get(name) if not r.identifiable else None
            group = " + ".join(key[1]) if key else None
            lo, hi = est.group_ci_ms.get(group, (None, None)) if group else (None, None)
            rows.append({
                "lot_id": lot, "block": name, "site": site,
                "parts": int(X[mask][:, blocks.index(name)].sum()) if name in blocks
                else int(mask.sum()),
                "mean_ms": r.value_ms, "ci_low_ms": _finite(r.ci_low_ms),
                "ci_high_ms": _finite(r.ci_high_ms), "identifiable": r.identifiable,
                "warning": findings[key]["message"] if key else None,
                "group_blocks": group, "group_kind": key[0] if key else None,
                "group_ms": _finite(est.group_totals.get(group)) if group else None,
                "group_ci_low_ms": _finite(lo), "group_ci_high_ms": _finite(hi)})
    notes = [{"lot_id": lot, "kind": "inseparable", "blocks": " + ".join(key[1]),
              "sites": ",".join(map(str, f["sites"])) or None, "message": f["message"]}
             for key, f in findings.items()]
    return rows, notes


def _merge_findings(estimates: Sequence[tuple[int | None, Any]],
                    per_site: bool) -> dict[tuple[str, tuple[str, ...]], dict[str, Any]]:
    """(kind, blocks) -> the finding's sentence (from the pooled fit where it has it) and
    the sites whose own fit shows it."""
    out: dict[tuple[str, tuple[str, ...]], dict[str, Any]] = {}
    for site, est in estimates:
        for group, text, kind in zip(est.groups, est.findings, est.group_kinds, strict=True):
            f = out.setdefault((kind, tuple(group)), {"text": text, "sites": []})
            if site is None:
                f["text"] = text
            else:
                f["sites"].append(site)
    n_sites = len(estimates) - 1
    for f in out.values():
        s = f["sites"]
        note = ("" if not per_site else " (on every site)" if len(s) == n_sites
                else f" (site{'s' if len(s) > 1 else ''} {', '.join(map(str, s))})" if s
                else " (in the fit over all sites; no single site shows it)")
        f["message"] = f["text"] + note
    return out


def _finite(v: float | None) -> float | None:
    return None if v is None or not np.isfinite(v) else float(v)


# -- the site summary (a Python model, run per lot) -------------------------------------
def site_model(ctx: LotContext) -> dict[str, pa.Table]:
    """T_N, T_1, MSE, index time and serialised blocks of one lot (see site_summaries)."""
    import pyarrow as pa

    from ..read.schemas import DERIVED

    con = ctx.con
    n, td_ms, n_sites, total = _one(con, """select count(*), avg(touchdown_ms), max(sites),
                                            sum(touchdown_ms) from touchdowns""")
    if not n:
        return {"site_summary": DERIVED["site_summary"].empty_table()}
    overhead = _overhead_ms(con)
    one_site = _one_site_ms(con, overhead)
    serial = [b for (b,) in con.execute("""select block from serialized_blocks
                                          where is_serialized order by block""").fetchall()]
    wall = _one(con, """select sum(epoch(finished_at) - epoch(started_at)) from lots
                        where finished_at > started_at""")[0]
    method = _one(con, "select min(method) from block_times")[0]
    parts = _one(con, "select count(*) from parts")[0]
    row = {"lot_id": ctx.lot, "sites": int(n_sites or 0), "touchdowns": int(n),
           "parts": int(parts),
           "touchdown_ms": float(td_ms or 0.0), "one_site_ms": float(one_site),
           "overhead_ms": overhead,
           "mse": multi_site_efficiency(one_site, float(td_ms or 0.0), int(n_sites or 0)),
           "index_ms": index_ms(wall, float(total or 0.0), int(n)),
           "serialized_blocks": serial, "method": method}
    return {"site_summary": pa.Table.from_pylist([row], DERIVED["site_summary"])}


def _one_site_ms(con: Any, overhead: float | None) -> float:
    """T_1: with per-block timing, the mean part time without its idle gaps (a part
    waiting for a shared instrument is idle; blocks a concurrent program runs at once
    count once); else the block times plus the per-part overhead."""
    alone = _one(con, """select avg(alone_ms) from part_spans
                         where outside_ms >= 0 and alone_ms is not null""")
    if alone is not None and alone[0] is not None:
        return float(alone[0])
    pooled = _one(con, "select attributed_ms from reconciliation where site is null")
    if pooled is None:
        return 0.0
    return (pooled[0] or 0.0) + max(overhead or 0.0, 0.0)


def _one(con: Any, query: str) -> Any:
    """The first row (the whole result is fetched: DuckDB wants it finished)."""
    rows = con.execute(query).fetchall()
    return rows[0] if rows else None


def _overhead_ms(con: Any) -> float | None:
    """Per-part time outside every block: the part time outside the span of its blocks
    (markers, CSV), else the estimate's intercept, else the smallest unattributed time of
    any site (an upper bound, so MSE is then a lower bound)."""
    for query in ("select avg(outside_ms) from part_spans where outside_ms >= 0",
                  "select mean_ms from block_times where block = 'overhead' and site is null",
                  "select min(unattributed_ms) from reconciliation where site is not null"):
        got = _one(con, query)
        if got is not None and got[0] is not None:
            return float(got[0])
    return None


def index_ms(wall_s: float | None, touchdown_total_ms: float, touchdowns: int) -> float | None:
    """(lot wall clock - time under test) / touchdowns. MIR/MRR times have 1 s
    resolution, so over n touchdowns this is good to about 1000/n ms."""
    if wall_s is None or touchdowns == 0:
        return None
    index = (wall_s * 1000.0 - touchdown_total_ms) / touchdowns
    return index if index >= 0 else None


def multi_site_efficiency(t1_ms: float, tn_ms: float, n: int) -> float | None:
    """MSE = 1 - (T_N - T_1) / ((N - 1) * T_1): 1.0 when N sites cost no more than one.
    Common practice in multi-site test; undefined for one site."""
    if n < 2 or t1_ms <= 0:
        return None
    return 1.0 - (tn_ms - t1_ms) / ((n - 1) * t1_ms)


PY_MODELS = (
    PyModel(("block_estimates", "timing_notes"), ("parts", "part_blocks"), estimate_model),
    PyModel(("site_summary",), ("touchdowns", "reconciliation", "part_spans", "block_times",
                                "serialized_blocks", "lots"), site_model),
)
