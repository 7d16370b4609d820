"""summary.md — a one-page proposal — and summary.json (the plan JSON plus the
attribution). Text from logs is escaped with ``md_text``; the page names no machine
path, only files inside the report folder.
"""

from __future__ import annotations

from typing import Any

import polars as pl

from .. import __version__
from .charts import Figure
from .data import ReportData
from .facts import (
    NO_PLAN,
    Table,
    assumptions,
    attribution_table,
    candidates_table,
    headline,
    lots_table,
    notes,
    num,
)
from .plan import PlanView
from .text import CAUTION_HEADLINE, CAUTIONS, md_text

TOP_CANDIDATES = 5
TOP_BLOCKS = 6


def md_table(t: Table, columns: list[str] | None = None) -> list[str]:
    cols = columns or t.columns
    idx = [t.columns.index(c) for c in cols]
    right = [all(isinstance(r[i], int | float) or r[i] is None for r in t.rows) for i in idx]
    out = ["| " + " | ".join(md_text(c) for c in cols) + " |",
           "|" + "|".join("---:" if r else "---" for r in right) + "|"]
    for row in t.rows:
        out.append("| " + " | ".join(_cell(row[i]) for i in idx) + " |")
    return out


def _cell(v: Any) -> str:
    if isinstance(v, float):
        return num(v, 1)
    return md_text(num(v)) if v is not None else ""


def render_md(data: ReportData, plan: PlanView | None, figures: list[Figure],
              section: list[str] | None = None) -> str:
    """The page; ``section``: extra lines before the assumptions (the verification's)."""
    lots = ", ".join(data.lots["lot_id"].to_list())
    focus = data.lots.filter(data.lots["lot_id"] == data.lot_id).to_dicts()
    program = ""
    if focus and focus[0]["program"]:
        program = f" — program {md_text(focus[0]['program'])}"
        if focus[0]["program_rev"]:
            program += f" rev {md_text(focus[0]['program_rev'])}"
    out = [f"# Tandem proposal: lot {md_text(data.lot_id)}{program}", "",
           f"> **{CAUTION_HEADLINE}.**", ">"]
    out += [f"> - {md_text(c)}" for c in CAUTIONS]
    out += ["", f"Lots read: {md_text(lots)}. Figures below are per touchdown of lot "
            f"{md_text(data.lot_id)} unless a table says otherwise.", ""]
    out += ["## Key figures", ""]
    out += [f"- {md_text(k)}: {md_text(v)}" for k, v in headline(data, plan)]
    out += ["", "## The lots", ""] + md_table(lots_table(data)) + [""]
    out += _baseline(data)
    out += _plan(plan) if plan else ["## The plan", "", md_text(NO_PLAN), ""]
    out += section or []
    out += ["## Assumptions", ""] + [f"- {md_text(a)}" for a in assumptions(data, plan)]
    extra = notes(data, plan)
    if extra:
        out += ["", "## Notes", ""] + [f"- {md_text(n)}" for n in extra]
    out += ["", "## Files", "",
            "- `report.html`: every chart and table; opens offline in any browser.",
            "- `charts/`: " + ", ".join(f"`{f.name}`" for f in figures) + " (PNG and SVG).",
            "- `summary.json`: the plan JSON and the attribution; `tables/*.csv`: the tables.",
            "", f"Written by Tandem {__version__}.", ""]
    return "\n".join(out)


def _baseline(data: ReportData) -> list[str]:
    t = attribution_table(data, data.lot_id)
    out = ["## Baseline: where the time goes", ""]
    s = data.focus_site
    if s is not None:
        serial = ", ".join(s.serialized)
        out.append(f"Lot {md_text(data.lot_id)}: {s.sites} site(s), {s.touchdowns} touchdowns, "
                   f"touchdown {num(s.touchdown_ms, 1, 'ms')}, one-site time "
                   f"{num(s.one_site_ms, 1, 'ms')}, multi-site efficiency "
                   + ("n/a (one site)" if s.mse is None else num(100 * s.mse, 1, "%"))
                   + (f"; serialised across sites (a shared instrument?): {md_text(serial)}"
                      if serial else "") + ".")
        out.append("")
    shown = Table(t.name, t.title, t.columns, t.rows[:TOP_BLOCKS])
    out += md_table(shown, ["block", "method", "mean_ms", "share_pct", "cum_pct"])
    share = t.columns.index("share_pct")
    rest = t.rows[TOP_BLOCKS:]
    if rest:
        out.append(f"\n{len(rest)} more blocks take {num(sum(r[share] or 0 for r in rest), 1, '%')}"
                   " of part time (`tables/attribution.csv`).")
    r = data.unattributed.filter((pl.col("lot_id") == data.lot_id) & pl.col("site").is_null())
    if not r.is_empty() and r["unattributed_pct"][0] is not None:
        out.append(f"Unattributed: {num(r['unattributed_ms'][0], 1, 'ms')} per part "
                   f"({num(r['unattributed_pct'][0], 1, '%')}): overhead and waits no block "
                   "accounts for.")
    return out + [""]


def _plan(plan: PlanView) -> list[str]:
    p = plan.projection()
    out = ["## The plan", "",
           f"One touchdown of {len(plan.sites)} site(s): {num(plan.baseline_ms, 1, 'ms')} with "
           f"blocks one after another, {num(plan.planned_ms, 1, 'ms')} as planned — "
           f"{num(plan.baseline_ms - plan.planned_ms, 1, 'ms')} less "
           f"({num(plan.saving_pct, 1, '%')}), "
           + ("proven optimal." if plan.proven_optimal else
              f"not proven optimal (lower bound {num(plan.lower_bound_ms, 1, 'ms')})."), "",
           *_roadmap(plan),
           "## Projected saving", "",
           "| | before | after | saved |", "|---|---:|---:|---:|"]
    before, after, saved = p.get("before", {}), p.get("after", {}), p.get("saved", {})
    cur = md_text(p.get("currency") or "")
    rows = [("touchdown (ms)", "touchdown_ms", "touchdown_ms", 1),
            ("UPH", "uph", None, 0),
            ("tester hours per year", "tester_hours_per_year", "tester_hours_per_year", 0),
            (f"cost per year {cur}".rstrip(), "cost_per_year", "cost_per_year", 0)]
    for label, key, saved_key, d in rows:
        gain = (f"+{num(saved.get('uph_gain_pct'), 1, '%')}" if key == "uph"
                else num(saved.get(saved_key or ""), d))
        out.append(f"| {label} | {num(before.get(key), d)} | {num(after.get(key), d)} | {gain} |")
    extra = p.get("with_whatifs") or {}
    if extra.get("saved"):
        w = extra["saved"]
        out += ["", f"With the beneficial what-ifs as well: touchdown saved "
                f"{num(w.get('touchdown_ms'), 1, 'ms')}, UPH +{num(w.get('uph_gain_pct'), 1, '%')}"
                + (f", {num(w.get('tester_hours_per_year'), 0)} tester hours and "
                   f"{num(w.get('cost_per_year'), 0)}{' ' + cur if cur else ''} of tester "
                   "cost per year"
                   if w.get("tester_hours_per_year") is not None else "") + "."]
    t = candidates_table(plan)
    shown = Table(t.name, t.title, t.columns, t.rows[:TOP_CANDIDATES])
    out += ["", "## Top candidates", ""]
    if not t.rows:
        out += ["The plan proposes no overlap."]
    else:
        out += md_table(shown, ["rank", "blocks", "saving_ms", "overlap_ms", "change", "why"])
        if len(t.rows) > TOP_CANDIDATES:
            out.append(f"\n{len(t.rows) - TOP_CANDIDATES} more in `tables/candidates.csv`.")
        out += ["", "change: *program* = the test program alone changes; *design* = the "
                "device or load board changes too (a what-if)."]
    return out + [""]


def _roadmap(plan: PlanView) -> list[str]:
    """The proposal's list of changes: the roadmap, one numbered line per change."""
    steps = plan.roadmap
    if not steps:
        return []
    out = ["## Changes, in order", "",
           "Each change is one edit of the test program, priced given the ones before it; "
           "adopt them in this order, each with its own correlation run and sign-off.", ""]
    for r in steps:
        held = ", ".join(r.get("instruments") or [])
        out.append(f"{r['step']}. {md_text(r.get('change') or ', '.join(r['blocks']))}: saves "
                   f"{num(r['saving_ms'], 1, 'ms')}, touchdown {num(r['touchdown_ms'], 1, 'ms')}"
                   + (f"; holds {md_text(held)}" if held else "")
                   + (f"; peak {num(r.get('peak_site_power_w'), 2, 'W')} on a site"
                      if r.get("peak_site_power_w") is not None else "") + ".")
    return out + [""]


def summary_json(data: ReportData, plan: dict[str, Any] | None,
                 figures: list[Figure]) -> dict[str, Any]:
    def rows(t: Table) -> list[dict[str, Any]]:
        return [dict(zip(t.columns, r, strict=True)) for r in t.rows]

    return {
        "tandem_version": __version__, "lot_id": data.lot_id,
        "lots": rows(lots_table(data)),
        "plan": plan,
        "attribution": rows(attribution_table(data)),
        "sites": [{"lot_id": s.lot_id, "sites": s.sites, "touchdowns": s.touchdowns,
                   "touchdown_ms": s.touchdown_ms, "one_site_ms": s.one_site_ms, "mse": s.mse,
                   "index_ms": s.index_ms, "serialized_blocks": s.serialized}
                  for s in data.sites],
        "unattributed": data.unattributed.to_dicts(),
        "drift_flags": data.drift.filter(data.drift["is_flagged"]).drop("started_at").to_dicts()
        if not data.drift.is_empty() else [],
        "warnings": data.warnings,
        "notes": notes(data, PlanView.of(plan) if plan else None),
        "cautions": list(CAUTIONS),
        "charts": [{"name": f.name, "title": f.title, "svg": f"charts/{f.name}.svg",
                    "png": f"charts/{f.name}.png"} for f in figures],
    }
