"""The report's charts, as Altair specs: each titled with what it shows (a number from
the data, never fixed text), every quantitative axis with its unit, one palette.

Each builder takes ``ReportData`` and returns a ``Figure`` or None when its data is not
there (no plan, one lot, no estimate). Data passed to Vega-Lite is rounded, so the specs
are stable enough to keep as golden files. Names from logs are only ever data values or
title text, never field names or Vega expressions: a block called ``a.b`` or ``x[0]``
would otherwise be read as a nested field.
"""

from __future__ import annotations

import re
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import altair as alt
import polars as pl

from .data import ReportData
from .plan import PlanView

# The Tandem palette: ink for text, slate for "as measured", teal for "as planned", amber
# for design what-ifs, coral for anything that wants a second look.
INK, SLATE, TEAL, AMBER, CORAL, MIST = ("#22303c", "#6b7a89", "#1f7a74", "#d4951c",
                                        "#c8553d", "#e6ebee")
BLOCK_COLOURS = ("#1f7a74", "#d4951c", "#3f6ea8", "#c8553d", "#76983f", "#8a5a9e",
                 "#2a9db5", "#a8763f", "#c4557d", "#55766a", "#3b3f4a", "#9a8fd1",
                 "#8fc0b9", "#eac38a", "#a8b8d8", "#e7a390")
UNATTRIBUTED = "(unattributed)"
HEADINGS = {  # section headings in report.html; the chart's own title is the finding
    "block_share": "Where the time goes", "touchdown_before_after": "One touchdown, before "
    "and after", "savings_waterfall": "From the baseline to the plan",
    "roadmap": "The roadmap: saving against the number of changes",
    "site_block_heatmap": "Sites against blocks", "part_time_by_site": "Part time per site",
    "block_time_by_lot": "Across lots", "estimate_intervals": "Estimated block times",
    "verify_shift_spread": "Which tests moved", "verify_distributions": "Before and after",
    "verify_time": "Time: realised against planned"}
WIDTH = 640


@dataclass(frozen=True)
class Figure:
    name: str          # file stem under charts/
    title: str         # the finding
    caption: str       # what the chart shows and how to read it
    chart: Any         # an Altair chart

    def spec(self) -> dict[str, Any]:
        return self.chart.to_dict()  # type: ignore[no-any-return]


def theme(chart: Any) -> Any:
    return (chart.configure(font="sans-serif", background="white")
            .configure_title(anchor="start", color=INK, fontSize=15, subtitleColor=SLATE,
                             subtitleFontSize=12, offset=10)
            .configure_axis(labelColor=INK, titleColor=INK, gridColor=MIST, domainColor=SLATE,
                            tickColor=SLATE, labelFontSize=11, titleFontSize=12)
            .configure_legend(labelColor=INK, titleColor=INK, labelLimit=220)
            .configure_view(stroke=None))


def block_scale(data: ReportData) -> alt.Scale:
    order = data.block_order()
    colours = [BLOCK_COLOURS[i % len(BLOCK_COLOURS)] for i in range(len(order))]
    return alt.Scale(domain=order, range=colours)


def _rows(df: pl.DataFrame, digits: int = 3) -> list[dict[str, Any]]:
    """A frame as rounded plain rows (Vega-Lite data, golden-file friendly)."""
    out = df.with_columns(pl.col(pl.Float64, pl.Float32).round(digits))
    return [{k: (v.isoformat() if hasattr(v, "isoformat") else v) for k, v in r.items()}
            for r in out.to_dicts()]


def _ranked(rows: list[dict[str, Any]], key: str, order: list[Any]) -> list[dict[str, Any]]:
    """Rows with a ``rank`` field: the position of row[key] in ``order``. Axes sort on it
    (``BY_RANK``) rather than on a list of names, which Vega-Lite would compile into an
    expression holding every name."""
    pos = {v: i for i, v in enumerate(order)}
    return [{**r, "rank": pos.get(r[key], len(pos))} for r in rows]


BY_RANK = alt.EncodingSortField("rank", op="min", order="ascending")


def chart_title(text: str, subtitle: str | None = None) -> alt.TitleParams:
    """A chart's title (the finding) with an optional subtitle, in the report's style."""
    return alt.TitleParams(text=text, subtitle=subtitle or alt.Undefined)


def _num(v: Any) -> float:
    return float(v) if isinstance(v, int | float) else 0.0


def _pct(v: float) -> str:
    return f"{v:.0f} %" if abs(v) >= 10 else f"{v:.1f} %"


def _ms(v: float) -> str:
    return f"{v:,.0f} ms" if abs(v) >= 100 else f"{v:.1f} ms"


def name_group(names: list[str]) -> str:
    """A short label for a few block names: ``scan_core0–3`` for a numbered family."""
    stems = {re.sub(r"\d+$", "", n) for n in names}
    nums = sorted(int(m.group()) for n in names if (m := re.search(r"\d+$", n)))
    if len(names) > 1 and len(stems) == 1 and len(nums) == len(names):
        stem = stems.pop()
        if nums == list(range(nums[0], nums[-1] + 1)):
            return f"{stem}{nums[0]}–{nums[-1]}"
        return f"{stem}{{{','.join(map(str, nums))}}}"
    if len(names) <= 3:
        return ", ".join(names)
    return f"{', '.join(names[:2])} and {len(names) - 2} more"


# -- where the time goes ------------------------------------------------------------------
def pareto(data: ReportData) -> Figure:
    t = data.focus_blocks.select("block", "mean_ms", "share_pct", "cum_pct", "method")
    basis = "part time"
    if t["share_pct"].null_count() == len(t):  # no part times recorded: share of block time
        basis = "block time"
        t = (t.with_columns((100.0 * pl.col("mean_ms") / pl.col("mean_ms").sum())
                            .alias("share_pct"))
             .with_columns(pl.col("share_pct").cum_sum().alias("cum_pct")))
    unattr = 100.0 - _num(t["share_pct"].sum())
    top = t.filter(pl.col("cum_pct").shift(1, fill_value=0.0) < 50.0)
    title = (f"{len(top)} of {len(t)} blocks ({name_group(top['block'].to_list())}) take "
             f"{_pct(_num(top['share_pct'].sum()))} of {basis}")
    rows = _rows(t.with_columns(pl.lit("block").alias("kind")))
    if unattr > 0.05:
        rows.append({"block": UNATTRIBUTED, "mean_ms": None, "share_pct": round(unattr, 3),
                     "cum_pct": 100.0, "method": "", "kind": "not in any block"})
    rows = _ranked(rows, "block", [r["block"] for r in rows])
    base = alt.Chart(alt.Data(values=rows)).encode(
        x=alt.X("block:N", sort=BY_RANK, title="block (largest share first)",
                axis=alt.Axis(labelAngle=-40)))
    bars = base.mark_bar(color=TEAL).encode(
        y=alt.Y("share_pct:Q", title=f"share of {basis} (%)", scale=alt.Scale(domain=[0, 100])),
        color=alt.Color("kind:N", title=None,
                        scale=alt.Scale(domain=["block", "not in any block"],
                                        range=[TEAL, SLATE])),
        tooltip=[alt.Tooltip("block:N"), alt.Tooltip("share_pct:Q", title="share (%)",
                                                     format=".1f"),
                 alt.Tooltip("mean_ms:Q", title="mean (ms)", format=".1f"),
                 alt.Tooltip("method:N")])
    line = base.mark_line(color=AMBER, point=alt.OverlayMarkDef(color=AMBER)).encode(
        y=alt.Y("cum_pct:Q", title=f"share of {basis} (%)"),
        tooltip=[alt.Tooltip("block:N"), alt.Tooltip("cum_pct:Q", title="cumulative (%)",
                                                      format=".1f")])
    chart = alt.layer(bars, line).properties(
        width=WIDTH, height=300, title=chart_title(title, f"Lot {data.lot_id}: bars = each block's "
                                              "share, line = cumulative share"))
    return Figure("block_share", title, "Pareto of tester time: each block's share of the "
                  "recorded part time, largest first, with the cumulative share; the last "
                  "bar is time no block accounts for.", chart)


def site_heatmap(data: ReportData) -> Figure | None:
    df = data.site_blocks
    if df.is_empty() or df["site"].n_unique() < 2:
        return None
    worst = df.sort(pl.col("vs_mean_pct").abs(), descending=True).row(0, named=True)
    if abs(worst["vs_mean_pct"]) < 1.0:
        title = "Block times agree across sites within 1 %"
    else:
        more = "over" if worst["vs_mean_pct"] > 0 else "under"
        title = (f"{worst['block']} on site {worst['site']} runs "
                 f"{_pct(abs(worst['vs_mean_pct']))} {more} its all-site mean")
    lim = max(1.0, _num(df["vs_mean_pct"].abs().max()))
    order = [b for b in data.block_order() if b in set(df["block"].to_list())]
    base = alt.Chart(alt.Data(values=_ranked(_rows(df), "block", order))).encode(
        x=alt.X("block:N", sort=BY_RANK, title="block", axis=alt.Axis(labelAngle=-40)),
        y=alt.Y("site:O", title="site"))
    cells = base.mark_rect().encode(
        color=alt.Color("vs_mean_pct:Q", title="vs all-site mean (%)",
                        scale=alt.Scale(domain=[-lim, 0, lim], range=[TEAL, "#f6f4ef", CORAL])),
        tooltip=[alt.Tooltip("block:N"), alt.Tooltip("site:O"),
                 alt.Tooltip("mean_ms:Q", title="mean (ms)", format=".2f"),
                 alt.Tooltip("vs_mean_pct:Q", title="vs all-site mean (%)", format="+.2f")])
    text = base.mark_text(fontSize=10, color=INK).encode(
        text=alt.Text("mean_ms:Q", format=".0f"))
    chart = alt.layer(cells, text).properties(
        width=WIDTH, height=40 * df["site"].n_unique(),
        title=chart_title(title, f"Lot {data.lot_id}: mean block time per site (ms, in each cell); "
                     "colour = difference from the block's all-site mean"))
    return Figure("site_block_heatmap", title, "Mean time of each block on each site; the "
                  "colour shows how far a site is from that block's all-site mean, so an "
                  "imbalance stands out.", chart)


def part_times(data: ReportData) -> Figure | None:
    df = data.part_times
    if df.is_empty():
        return None
    lo, hi = df.sort("median_ms").row(0, named=True), df.sort("median_ms").row(-1, named=True)
    gap = 100.0 * (hi["median_ms"] / lo["median_ms"] - 1.0) if lo["median_ms"] else 0.0
    if len(df) == 1:
        title = f"Part test time: median {_ms(lo['median_ms'])} on the one site"
    elif gap < 1.0:
        title = "Part test time is even across sites (medians within 1 %)"
    else:
        title = (f"Site {hi['site']} parts take {_pct(gap)} longer than site {lo['site']} "
                 "(median)")
    base = alt.Chart(alt.Data(values=_rows(df))).encode(
        x=alt.X("site:O", title="site", axis=alt.Axis(labelAngle=0)))
    y = alt.Y("min_ms:Q", title="part test time (ms)", scale=alt.Scale(zero=False))
    tips = [alt.Tooltip("site:O"), alt.Tooltip("parts:Q"),
            *(alt.Tooltip(f"{c}:Q", title=f"{c[:-3]} (ms)", format=".1f")
              for c in ("min_ms", "q1_ms", "median_ms", "mean_ms", "q3_ms", "max_ms"))]
    whisker = base.mark_rule(color=SLATE).encode(y=y, y2="max_ms:Q", tooltip=tips)
    box = base.mark_bar(size=28, color=TEAL, opacity=0.85).encode(
        y=alt.Y("q1_ms:Q"), y2="q3_ms:Q", tooltip=tips)
    median = base.mark_tick(color="white", size=28, thickness=2).encode(y="median_ms:Q")
    mean = base.mark_point(color=AMBER, filled=True, size=40).encode(y="mean_ms:Q",
                                                                     tooltip=tips)
    chart = alt.layer(whisker, box, median, mean).properties(
        width=min(WIDTH, 120 * len(df) + 80), height=300,
        title=chart_title(title, f"Lot {data.lot_id}: box = middle half of parts, line = median, "
                     "dot = mean, whiskers = fastest to slowest"))
    return Figure("part_time_by_site", title, "The spread of recorded part test time "
                  "(PRR TEST_T or the timing CSV) on each site.", chart)


def lots_trend(data: ReportData) -> Figure | None:
    df = data.drift  # blocks only: a group's sum (drift's "group" rows) has no colour
    df = df.filter(pl.col("kind") == "block") if not df.is_empty() else df
    if df.is_empty() or df["lot_id"].n_unique() < 2:
        return None
    lot_order = [x for x in data.lots["lot_id"].to_list() if x in set(df["lot_id"].to_list())]
    df = (df.with_columns(pl.col("mean_ms").median().over("block").alias("median_ms"))
          .with_columns((100.0 * (pl.col("mean_ms") / pl.col("median_ms") - 1.0))
                        .alias("vs_median_pct"))
          .select("block", "lot_id", "mean_ms", "method", "vs_median_pct", "is_flagged"))
    flagged = df.filter(pl.col("is_flagged"))
    if flagged.is_empty():
        title = f"No block time moved beyond its lot-to-lot spread ({len(lot_order)} lots)"
    else:
        blocks = list(dict.fromkeys(flagged["block"].to_list()))
        where = sorted(set(flagged["lot_id"].to_list()))
        title = (f"{len(blocks)} block time{'s' if len(blocks) != 1 else ''} flagged "
                 f"({name_group(blocks)}) in {', '.join(where)}")
        methods = set(flagged["method"].to_list())
        if methods == {"estimate"}:
            title += " (estimated times: compare with care)"
    base = alt.Chart(alt.Data(values=_ranked(_rows(df), "lot_id", lot_order))).encode(
        x=alt.X("lot_id:N", sort=BY_RANK, title="lot (by start date)",
                axis=alt.Axis(labelAngle=0)),
        y=alt.Y("vs_median_pct:Q", title="block time vs its median over lots (%)"),
        color=alt.Color("block:N", scale=block_scale(data), title="block"),
        tooltip=[alt.Tooltip("block:N"), alt.Tooltip("lot_id:N", title="lot"),
                 alt.Tooltip("mean_ms:Q", title="mean (ms)", format=".2f"),
                 alt.Tooltip("vs_median_pct:Q", title="vs median (%)", format="+.2f"),
                 alt.Tooltip("method:N"), alt.Tooltip("is_flagged:N", title="flagged")])
    lines = base.mark_line(point=True, strokeWidth=1.5)
    flags = base.mark_point(shape="diamond", size=160, filled=False, strokeWidth=2,
                            color=CORAL).encode(
        color=alt.value(CORAL),
        opacity=alt.condition(alt.datum.is_flagged, alt.value(1.0), alt.value(0.0)))
    chart = alt.layer(lines, flags).properties(
        width=WIDTH, height=300,
        title=chart_title(title, "Each block's mean per lot against its median over the lots; "
                     "coral diamonds = flagged by the drift check"))
    return Figure("block_time_by_lot", title, "Block time from lot to lot. A flag means more "
                  "than 3 robust sigmas and 2 % from the median of the lots before it; the "
                  "timing source can differ by lot (see the lots table).", chart)


def estimate_ci(data: ReportData) -> Figure | None:
    df = data.estimates
    if df.is_empty():
        return None
    df = df.with_columns(pl.when(pl.col("identifiable")).then(pl.lit("separable"))
                         .otherwise(pl.lit("not separable")).alias("status"),
                         ((pl.col("ci_high_ms") - pl.col("ci_low_ms")) / 2).alias("half_ms"))
    lots = sorted(set(df["lot_id"].to_list()))
    widest = _num(df["half_ms"].max())
    lost = df.filter(~pl.col("identifiable")).height
    title = (f"{', '.join(lots)}: block times estimated from part totals, within "
             f"±{_ms(widest)} (95 % CI)"
             + (f"; {lost} cannot be separated" if lost else ""))
    base = alt.Chart(alt.Data(values=_rows(df))).encode(
        y=alt.Y("block:N", sort=alt.EncodingSortField("mean_ms", order="descending"),
                title="block"),
        tooltip=[alt.Tooltip("lot_id:N", title="lot"), alt.Tooltip("block:N"),
                 alt.Tooltip("mean_ms:Q", title="estimate (ms)", format=".2f"),
                 alt.Tooltip("ci_low_ms:Q", title="95 % CI low (ms)", format=".2f"),
                 alt.Tooltip("ci_high_ms:Q", title="95 % CI high (ms)", format=".2f"),
                 alt.Tooltip("status:N")])
    status = alt.Scale(domain=["separable", "not separable"], range=[TEAL, CORAL])
    bars = base.mark_rule(strokeWidth=2, color=SLATE).encode(
        x=alt.X("ci_low_ms:Q", title="estimated block time (ms)"), x2="ci_high_ms:Q")
    points = base.mark_point(filled=True, size=60).encode(
        x="mean_ms:Q", color=alt.Color("status:N", scale=status, title=None),
        shape=alt.Shape("status:N", scale=alt.Scale(domain=["separable", "not separable"],
                                                    range=["circle", "triangle-up"]),
                        title=None))
    layered = alt.layer(bars, points).properties(width=WIDTH - 120,
                                                 height=22 * df["block"].n_unique())
    chart = layered.facet(row=alt.Row("lot_id:N", title="lot")) if len(lots) > 1 else layered
    chart = chart.properties(title=chart_title(title, "Dot = estimate, line = 95 % bootstrap "
                                          "interval; triangles = blocks the data cannot "
                                          "tell apart (shown as an even split)"))
    return Figure("estimate_intervals", title, "Where a lot records only part totals, block "
                  "times are estimated (non-negative least squares, percentile bootstrap "
                  "over parts). 'overhead' is the per-part time outside any block.", chart)


# -- the plan -------------------------------------------------------------------------------
def touchdown_gantt(data: ReportData, plan: PlanView) -> Figure:
    rows = ([{**r, "phase": "before"} for r in plan.baseline_schedule]
            + [{**r, "phase": "after"} for r in plan.schedule])
    end = max(r["end_ms"] for r in rows)
    title = (f"One touchdown: {_ms(plan.baseline_ms)} → {_ms(plan.planned_ms)} "
             f"(−{_pct(plan.saving_pct)})")
    scale = block_scale(data)
    parts = []
    for phase, label in (("before", f"Before: {plan.baseline_label} — {_ms(plan.baseline_ms)}"),
                         ("after", f"After: the plan — {_ms(plan.planned_ms)}"
                                   f"{' (proven optimal)' if plan.proven_optimal else ''}")):
        data_rows = _round_rows([r for r in rows if r["phase"] == phase])
        lanes = 1 + max((r["lane"] for r in data_rows), default=0)
        parts.append(alt.Chart(alt.Data(values=data_rows)).mark_bar(
            stroke="white", strokeWidth=0.5).encode(
            x=alt.X("start_ms:Q", title="time from touchdown start (ms)",
                    scale=alt.Scale(domain=[0, round(end, 3)])),
            x2="end_ms:Q",
            y=alt.Y("site:O", title="site", scale=alt.Scale(paddingInner=0.25)),
            yOffset=alt.YOffset("lane:O", sort="ascending",
                                scale=alt.Scale(domain=list(range(lanes)))),
            color=alt.Color("block:N", scale=scale, title="block"),
            tooltip=[alt.Tooltip("block:N"), alt.Tooltip("site:O"),
                     alt.Tooltip("start_ms:Q", title="start (ms)", format=".1f"),
                     alt.Tooltip("end_ms:Q", title="end (ms)", format=".1f")])
            .properties(width=WIDTH, height=(14 * lanes + 10) * max(1, len(plan.sites)),
                        title=alt.TitleParams(label, fontSize=12, color=INK)))
    chart = alt.vconcat(*parts, spacing=24).resolve_scale(x="shared", color="shared").properties(
        title=chart_title(title, f"Lot {plan.lot_id}: sites as rows (blocks at the same time "
                     "side by side within a row), one colour per block, one time axis"))
    return Figure("touchdown_before_after", title, "The touchdown as the program runs it "
                  "(before) and as planned (after), each block a bar on its site's row.",
                  chart)


def savings_waterfall(data: ReportData, plan: PlanView) -> Figure:
    steps = plan.waterfall()
    title = (f"The plan saves {_ms(plan.baseline_ms - plan.planned_ms)} per touchdown "
             f"({_pct(plan.saving_pct)})")
    if plan.whatif_best_ms > 0:
        title += f"; what-ifs up to {_ms(plan.whatif_best_ms)} more"
    kinds = ["total", "saving", "interplay", "what-if"]
    rows = [{**r, "rank": i} for i, r in enumerate(_round_rows(steps))]
    base = alt.Chart(alt.Data(values=rows)).encode(
        x=alt.X("step:N", sort=BY_RANK, title=None,
                axis=alt.Axis(labelAngle=-30, labelLimit=200)))
    bars = base.mark_bar(size=30).encode(
        y=alt.Y("from_ms:Q", title="touchdown time (ms)"), y2="to_ms:Q",
        color=alt.Color("kind:N", title=None,
                        scale=alt.Scale(domain=kinds, range=[SLATE, TEAL, MIST, AMBER])),
        tooltip=[alt.Tooltip("step:N"), alt.Tooltip("label:N", title="change"),
                 alt.Tooltip("delta_ms:Q", title="change (ms)", format="+.1f"),
                 alt.Tooltip("to_ms:Q", title="touchdown after (ms)", format=".1f")])
    text = base.mark_text(dy=-8, fontSize=10, color=INK).encode(
        y=alt.Y("top_ms:Q"), text=alt.Text("text:N"))
    chart = alt.layer(bars, text).properties(
        width=WIDTH, height=300,
        title=chart_title(title, f"Lot {plan.lot_id}: the measured touchdown, what each "
                     "candidate overlap saves on its own, the plan; what-ifs one at a time"))
    return Figure("savings_waterfall", title, "From the baseline to the plan: each "
                  "candidate's marginal saving (what the plan loses without it), the rest of "
                  "the overlaps together, then each design what-if evaluated on its own.",
                  chart)


def roadmap_curve(data: ReportData, plan: PlanView) -> Figure | None:
    """Cumulative saving against the number of program changes, in the roadmap's order."""
    points = plan.roadmap_curve()
    if len(points) < 2:
        return None
    total = points[-1]["saving_ms"]
    n = len(points) - 1
    # the fewest changes that reach 80 % of the plan's saving (the Pareto reading)
    k80 = next((p["changes"] for p in points if total > 0 and p["saving_ms"] >= 0.8 * total), n)
    title = (f"{k80} of {n} change{'s' if n != 1 else ''} give "
             f"{_pct(100 * points[k80]['saving_ms'] / total if total else 0)} of the plan's "
             f"saving" if total > 0 else "The roadmap saves nothing")
    rows = _round_rows(points)
    base = alt.Chart(alt.Data(values=rows)).encode(
        x=alt.X("changes:Q", title="program changes adopted, best first (changes)",
                scale=alt.Scale(domain=[0, n]), axis=alt.Axis(tickMinStep=1, format="d")),
        y=alt.Y("saving_ms:Q", title="saving per touchdown (ms)"),
        tooltip=[alt.Tooltip("changes:Q", title="changes"), alt.Tooltip("change:N"),
                 alt.Tooltip("saving_ms:Q", title="saving (ms)", format=".1f"),
                 alt.Tooltip("saving_pct:Q", title="saving (%)", format=".1f"),
                 alt.Tooltip("touchdown_ms:Q", title="touchdown (ms)", format=".1f")])
    line = base.mark_line(color=TEAL, interpolate="step-after")
    dots = base.mark_point(filled=True, color=TEAL, size=50)
    chart = alt.layer(line, dots).properties(
        width=WIDTH, height=260,
        title=chart_title(title, f"Lot {plan.lot_id}: each step one program change, its "
                          "saving given the ones before it; the last step is the plan"))
    return Figure("roadmap", title, "The plan as program changes adopted one at a time, "
                  "the best first: the saving per touchdown after each change.", chart)


def _round_rows(rows: list[dict[str, Any]]) -> list[dict[str, Any]]:
    return [{k: round(v, 3) if isinstance(v, float) else v for k, v in r.items()}
            for r in rows]


ATTRIBUTION: tuple[Callable[[ReportData], Figure | None], ...] = (
    pareto, site_heatmap, part_times, lots_trend, estimate_ci)
PLANNING: tuple[Callable[[ReportData, PlanView], Figure | None], ...] = (
    touchdown_gantt, savings_waterfall, roadmap_curve)


def figures(data: ReportData, plan: PlanView | None) -> list[Figure]:
    """Every chart the data supports, in reading order, themed."""
    first, *rest = [f(data) for f in ATTRIBUTION]
    out = [first] + ([f(data, plan) for f in PLANNING] if plan else [])
    out += [f for f in rest if f is not None]
    return [Figure(f.name, f.title, f.caption, theme(f.chart)) for f in out if f]
