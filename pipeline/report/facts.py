"""The report's sentences and tables as plain data, shared by summary.md, report.html,
summary.json and the CSV files, so every output says the same thing in the same words.
Values are raw (untrusted text unescaped); each writer escapes for its own format.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import polars as pl

from .data import ReportData
from .plan import PlanView

NO_PLAN = ("Attribution only: no block map was given (--blocks FILE), so this report has no "
           "plan, no candidates, no before/after touchdown and no projected saving.")


@dataclass(frozen=True)
class Table:
    name: str                        # CSV file stem
    title: str
    columns: list[str]
    rows: list[list[Any]]


def num(v: Any, digits: int = 1, unit: str = "") -> str:
    if v is None:
        return "n/a"
    if isinstance(v, bool):
        return "yes" if v else "no"
    if isinstance(v, int):
        text = f"{v:,}"
    elif isinstance(v, float):
        text = f"{v:,.{digits}f}"
    else:
        return str(v)
    return f"{text} {unit}".rstrip()


def headline(data: ReportData, plan: PlanView | None) -> list[tuple[str, str]]:
    """The key figures, label -> value."""
    s = data.focus_site
    out = [("Lot", data.lot_id)]
    if s is not None:
        out += [("Sites", str(s.sites)), ("Measured touchdown", num(s.touchdown_ms, 1, "ms")),
                ("Multi-site efficiency", "n/a (one site)" if s.mse is None
                 else num(100 * s.mse, 1, "%"))]
    if plan is None:
        return out
    p = plan.projection()
    before, after, saved = p.get("before", {}), p.get("after", {}), p.get("saved", {})
    cur = p.get("currency") or ""
    out += [("Planned saving per touchdown",
             f"{num(plan.baseline_ms - plan.planned_ms, 1, 'ms')} "
             f"({num(plan.saving_pct, 1, '%')})"),
            ("UPH", f"{num(before.get('uph'), 0)} → {num(after.get('uph'), 0)} "
                    f"(+{num(saved.get('uph_gain_pct'), 1, '%')})")]
    if saved.get("tester_hours_per_year") is not None:
        out += [("Tester hours per year saved", num(saved["tester_hours_per_year"], 0, "h")),
                ("Cost per year saved", num(saved.get("cost_per_year"), 0, cur))]
    return out


def lots_table(data: ReportData) -> Table:
    by = {s.lot_id: s for s in data.sites}
    rows = []
    for r in data.lots.iter_rows(named=True):
        s = by.get(r["lot_id"])
        rows.append([r["lot_id"], r["program"], r["program_rev"], r["method"], r["parts"],
                     r["sites"], s.touchdowns if s else None,
                     round(s.touchdown_ms, 1) if s else None,
                     None if s is None or s.mse is None else round(100 * s.mse, 1),
                     None if s is None or s.index_ms is None else round(s.index_ms, 0),
                     r["started_at"].isoformat(sep=" ") if r["started_at"] else None])
    return Table("lots", "Lots in this report",
                 ["lot", "program", "rev", "timing source", "parts", "sites", "touchdowns",
                  "touchdown_ms", "mse_pct", "index_ms", "started_at"], rows)


def attribution_table(data: ReportData, lot: str | None = None) -> Table:
    df = data.blocks if lot is None else data.blocks.filter(pl.col("lot_id") == lot)
    df = df.with_columns(pl.col(pl.Float64).round(2))
    if df["ci_low_ms"].is_null().all():
        df = df.drop("ci_low_ms", "ci_high_ms")
    return Table("attribution", "Where the time goes: block times, ranked"
                 + (f" (lot {lot})" if lot else ""), df.columns,
                 [list(r) for r in df.iter_rows()])


def sites_table(data: ReportData) -> Table:
    rows = []
    for s in data.sites:
        for r in s.per_site.iter_rows(named=True):
            rows.append([s.lot_id, r["site"], r["parts"], _r(r["part_ms"]),
                         _r(r["attributed_ms"]), _r(r["unattributed_ms"]),
                         _r(r["imbalance_pct"])])
    return Table("sites", "Per site: part time, attributed and unattributed",
                 ["lot", "site", "parts", "part_ms", "attributed_ms", "unattributed_ms",
                  "imbalance_pct"], rows)


def candidates_table(plan: PlanView) -> Table:
    rows = [[i, " + ".join(c["blocks"]), _r(c["saving_ms"]), _r(c.get("overlap_ms")),
             c["change"], c.get("source", "plan"), c.get("why", "")]
            for i, c in enumerate(plan.candidates, 1)]
    return Table("candidates", "Candidates, by marginal saving",
                 ["rank", "blocks", "saving_ms", "overlap_ms", "change", "source", "why"], rows)


def roadmap_table(plan: PlanView) -> Table:
    """The roadmap, one row per program change, with the touchdown after it."""
    base = plan.baseline_ms
    rows = [[r["step"], r.get("change") or ", ".join(r["blocks"]), _r(r["saving_ms"]),
             _r(r["touchdown_ms"]), _r(100 * (base - r["touchdown_ms"]) / base) if base else None,
             ", ".join(r.get("instruments") or []), _r(r.get("peak_site_power_w"))]
            for r in plan.roadmap]
    return Table("roadmap", "The roadmap: program changes in order, each priced given the "
                 "ones before it", ["step", "change", "saving_ms", "touchdown_ms",
                                    "cumulative_saving_pct", "instruments", "peak_site_power_w"],
                 rows)


def whatifs_table(plan: PlanView) -> Table:
    rows = [[w.get("name"), w.get("kind"), w.get("change"), _r(w.get("saving_ms")),
             w.get("detail") or w.get("note") or "", w.get("skipped") or ""]
            for w in plan.raw.get("whatifs") or plan.whatifs]
    return Table("whatifs", "What-ifs, each evaluated on its own against the plan",
                 ["what_if", "kind", "change", "saving_ms", "detail", "skipped"], rows)


def schedule_table(rows: list[dict[str, Any]], name: str, title: str) -> Table:
    return Table(name, title, ["block", "site", "start_ms", "end_ms"],
                 [[r["block"], r["site"], _r(r["start_ms"]), _r(r["end_ms"])]
                  for r in sorted(rows, key=lambda r: (r["site"], r["start_ms"], r["block"]))])


def frame_table(df: pl.DataFrame, name: str, title: str) -> Table:
    df = df.with_columns(pl.col(pl.Float64).round(3))
    return Table(name, title, df.columns, [[_plain(v) for v in r] for r in df.iter_rows()])


def tables(data: ReportData, plan: PlanView | None) -> list[Table]:
    """Every table the report writes as CSV."""
    out = [lots_table(data), attribution_table(data), sites_table(data),
           frame_table(data.unattributed, "unattributed", "Reconciliation: part time "
                       "against block time"),
           frame_table(data.part_times, "part_times", f"Part test time per site, lot "
                       f"{data.lot_id}"),
           frame_table(data.drift, "drift", "Block time by lot, with the drift check"),
           frame_table(data.estimates, "estimates", "Estimated block times with 95 % "
                       "intervals")]
    if plan is not None:
        out += [roadmap_table(plan), candidates_table(plan), whatifs_table(plan),
                schedule_table(plan.baseline_schedule, "schedule_before",
                               "Baseline schedule of one touchdown"),
                schedule_table(plan.schedule, "schedule_after", "Planned schedule")]
    return out


def assumptions(data: ReportData, plan: PlanView | None) -> list[str]:
    focus = data.focus_blocks
    method = ", ".join(sorted(set(focus["method"].to_list())))
    out = [f"Block times of lot {data.lot_id} come from {method} "
           f"({_METHOD.get(method, 'see the lots table')}), as the mean per block and site."]
    if plan is not None:
        p = plan.projection()
        check = plan.raw.get("baseline_check") or {}
        if check.get("difference_ms") is not None:
            out.append(f"The model's baseline ({num(plan.baseline_ms, 1, 'ms')}, blocks one "
                       f"after another) is {num(check['difference_ms'], 1, 'ms')} short of the "
                       "measured touchdown: time outside every block, which the plan keeps.")
        out.append("Touchdown after = measured touchdown minus the planned saving; UPH = "
                   "3600 x sites / (touchdown + index time), in seconds.")
        if p.get("index_ms") is not None:
            out.append(f"Index time {num(p['index_ms'], 0, 'ms')}: {p.get('index_source', '')}.")
        if p.get("units_per_year") is not None:
            out.append(f"Economics from the block map: {num(p['units_per_year'], 0)} units per "
                       f"year at {num(p.get('tester_cost_per_hour'), 2)} "
                       f"{p.get('currency') or '(currency units)'} per tester hour.")
        elif p.get("note"):
            out.append(str(p["note"]))
        out.append("A candidate's saving is marginal: what the plan loses without that "
                   "overlap. Savings do not add up; zero means other overlaps do as well.")
        out.append("What-ifs are design changes evaluated one at a time against the plan.")
        proven = "proven optimal" if plan.proven_optimal else "not proven optimal"
        out.append(f"The plan is {proven} for the model (lower bound "
                   f"{num(plan.lower_bound_ms, 1, 'ms')}).")
    for w in data.warnings:
        out.append(f"Estimate warning: {w}")
    return out


def notes(data: ReportData, plan: PlanView | None) -> list[str]:
    out = list(data.notes)
    if plan is not None:
        out += [str(n) for n in plan.raw.get("notes") or []]
        out += [f"What-if {w.get('name')} not evaluated: {w.get('skipped')}"
                for w in plan.skipped_whatifs]
        if plan.raw.get("missing_blocks"):
            out.append("Measured but not in the block map (kept serial): "
                       + ", ".join(plan.raw["missing_blocks"]))
    return out


_METHOD = {"marker": "timing markers, exact per part", "csv": "the timing CSV, exact per part",
           "tsr": "TSR test summaries, means only",
           "estimate": "estimated from part totals, with 95 % intervals"}


def _r(v: Any, digits: int = 3) -> Any:
    return round(v, digits) if isinstance(v, float) else v


def _plain(v: Any) -> Any:
    return v.isoformat(sep=" ") if hasattr(v, "isoformat") else v
