"""`tandem sql`, `tandem times` and `tandem sites`: questions put to the store, answered
as tables (the figures come from pipeline/attribute/timing.py; the layout is made here)."""

from __future__ import annotations

import argparse
import sys
from typing import Any

from ..errors import UsageError
from .common import Command, format_opt, lot_opt, open_store, store_opt


# -- sql --------------------------------------------------------------------------------
def _sql_options(p: argparse.ArgumentParser) -> None:
    store_opt(p)
    format_opt(p)
    p.add_argument("query", metavar="QUERY", help="one SQL query over the catalog's views")


def _sql(args: argparse.Namespace) -> int:
    import duckdb

    from ..render import format_rows, is_numeric_type

    store = open_store(args.store)
    try:
        columns, types, rows = store.rows(args.query)
    except duckdb.Error as e:
        raise UsageError(f"query failed: {' '.join(str(e).split())}") from None
    print(format_rows(columns, [is_numeric_type(t) for t in types], rows, args.format,
                      [t.upper() == "VARCHAR" for t in types]), end="")
    return 0


# -- times ------------------------------------------------------------------------------
def _times_options(p: argparse.ArgumentParser) -> None:
    store_opt(p)
    lot_opt(p)
    p.add_argument("--blocks", metavar="FILE",
                   help="block map whose test-number/name rules assign tests that no "
                        "section or TSR places (kept in the store: the lots they change "
                        "are derived again at once)")
    format_opt(p)


def _times(args: argparse.Namespace) -> int:
    from ..attribute import timing
    from ..render import format_frame

    store = open_store(args.store)
    if args.blocks:
        from ..jobs.derivation import set_block_rules
        from ..plan.blockmap import load_block_map

        changed = set_block_rules(store, load_block_map(args.blocks))
        print(f"block rules from {args.blocks}: {len(changed)} lot(s) derived again"
              + (f" ({', '.join(changed[:5])}{' ...' if len(changed) > 5 else ''})"
                 if changed else ""), file=sys.stderr)
    table = timing.block_table(store, args.lot)
    if args.format != "table":
        print(format_frame(table, args.format), end="")
    else:
        print(render_times(store, table, args.lot))
    for line in timing.warnings(store, args.lot):
        print(f"warning: {line}", file=sys.stderr)
    return 0


def render_times(store: Any, table: Any, lot: str | None) -> str:
    """The block times of each lot, ranked, with the part time no block accounts for."""
    import polars as pl

    from ..attribute.timing import unattributed
    from ..render import format_frame

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


# -- sites ------------------------------------------------------------------------------
def _sites_options(p: argparse.ArgumentParser) -> None:
    store_opt(p)
    lot_opt(p)
    format_opt(p)


def _sites(args: argparse.Namespace) -> int:
    from ..attribute import timing
    from ..render import format_frame

    store = open_store(args.store)
    summaries = timing.site_summaries(store, args.lot)
    if args.format != "table":
        print(format_frame(sites_frame(summaries), args.format), end="")
    else:
        print(render_sites(summaries))
    return 0


def sites_frame(summaries: list[Any]) -> Any:
    """One row per lot of SiteSummary figures, for --format csv|json."""
    import polars as pl

    return pl.DataFrame([{
        "lot_id": s.lot_id, "sites": s.sites, "touchdowns": s.touchdowns,
        "touchdown_ms": s.touchdown_ms, "one_site_ms": s.one_site_ms, "mse": s.mse,
        "index_ms": s.index_ms, "serialized_blocks": ", ".join(s.serialized)}
        for s in summaries])


def render_sites(summaries: list[Any]) -> str:
    """Each lot's multi-site figures and its per-site table, for the terminal."""
    import polars as pl

    from ..render import format_frame

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


COMMANDS = [
    Command("sql", "run a SQL query against the store's views",
            "tandem sql --store ./store \"select site, count(*) from parts group by site\"",
            _sql_options, _sql),
    Command("times", "where the seconds go: block times per lot and site, ranked",
            "tandem times --store ./store --lot PF4-L0231", _times_options, _times),
    Command("sites", "the multi-site view: touchdown time, MSE, imbalance, shared instruments",
            "tandem sites --store ./store --lot PF4-L0231", _sites_options, _sites),
]
