"""The verification's part of a report: three charts (mean shift against spread ratio per
test, before/after distributions of the tests that moved, block and touchdown time), its
tables, a section for report.html and summary.md, and ``write_verify_report`` — the
stand-alone page `tandem verify --out` writes (verify.html, verify.md, verify.json).

Everything reads the verification's JSON dict (``Verification.to_json()``), as the rest
of the report reads the plan's, so a saved ``verify.json`` could be reported the same way.
Names from logs go through the same escaping as every other part of the report.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import altair as alt

from .. import __version__
from ..verify import CAUTIONS as VERIFY_CAUTIONS
from .charts import AMBER, BY_RANK, CORAL, MIST, SLATE, TEAL, WIDTH, Figure, chart_title, theme
from .facts import Table, num
from .html import figure_html
from .text import CAUTION_HEADLINE, CAUTIONS, html_text, md_text

VERDICT_COLOURS = {"same": SLATE, "shifted": CORAL, "too few": MIST}
SERIES = {"baseline": SLATE, "planned": TEAL, "candidate": AMBER}
TESTS_SHOWN = 12  # rows of the tests table in the page (all of them in the CSV)
RATIO_TICKS = (0.25, 0.33, 0.5, 0.67, 0.8, 0.9, 1.0, 1.1, 1.25, 1.5, 2.0, 3.0, 4.0)


def _sig(v: Any, digits: int = 4) -> Any:
    """Rounded to significant digits (chart data stays small and stable; 3e-12 survives)."""
    if not isinstance(v, float) or not math.isfinite(v) or v == 0:
        return v
    return round(v, digits - 1 - int(math.floor(math.log10(abs(v)))))


def _name(t: dict[str, Any]) -> str:
    base = t.get("test_name") or f"test {t['test_num']}"
    return base if t.get("element") is None else f"{base}[{t['element']}]"


def _moved(v: dict[str, Any]) -> list[dict[str, Any]]:
    return [t for t in v["tests"] if t["verdict"] == "shifted"]


def _effect(t: dict[str, Any]) -> str:
    bits = []
    if "mean" in t["moved"] and t["shift_sigma"] is not None:
        bits.append(f"mean {t['shift_sigma']:+.2f} σ".replace("-", "−"))
    if "spread" in t["moved"] and t["sigma_ratio"] is not None:
        bits.append(f"spread ×{t['sigma_ratio']:.2f}")
    if "fail rate" in t["moved"]:
        bits.append(f"fails {t['fails_baseline']} → {t['fails_candidate']}")
    return ", ".join(bits) or "moved"


# -- charts ---------------------------------------------------------------------------------
def shift_spread(v: dict[str, Any]) -> Figure | None:
    rows = [{"test": _name(t), "test_num": t["test_num"], "verdict": t["verdict"],
             "shift_sigma": _sig(t["shift_sigma"]), "sigma_ratio": _sig(t["sigma_ratio"]),
             "q_value": _sig(t["q_value"], 2)}
            for t in v["tests"] if t["shift_sigma"] is not None and t["sigma_ratio"]]
    if not rows:
        return None
    moved = _moved(v)
    n = len(v["tests"])
    title = (f"{len(moved)} of {n} tests moved: "
             + ", ".join(f"{_name(t)} ({_effect(t)})" for t in moved[:3])
             + (f" and {len(moved) - 3} more" if len(moved) > 3 else "")
             if moved else f"No test moved beyond chance ({n} compared)")
    verdicts = list(VERDICT_COLOURS)
    # Symmetric about "no change" (0, 1), with room for the labels of the far points.
    reach = max(0.25, 1.3 * max(abs(r["shift_sigma"]) for r in rows))
    ratios = [r["sigma_ratio"] for r in rows if r["sigma_ratio"] > 0]
    spread = max(1.25, 1.15 * max([*ratios, *(1.0 / x for x in ratios)], default=1.0))
    base = alt.Chart(alt.Data(values=rows)).encode(
        x=alt.X("shift_sigma:Q", title="mean shift, candidate − baseline (baseline σ)",
                scale=alt.Scale(domain=[-_sig(reach, 2), _sig(reach, 2)], nice=False)),
        y=alt.Y("sigma_ratio:Q", title="spread ratio, candidate / baseline (×)",
                axis=alt.Axis(values=[x for x in RATIO_TICKS if 1 / spread <= x <= spread]),
                scale=alt.Scale(type="log", domain=[_sig(1.0 / spread, 2), _sig(spread, 2)],
                                nice=False, zero=False)))
    points = base.mark_point(filled=True, size=60, opacity=0.8).encode(
        color=alt.Color("verdict:N", title="verdict", legend=alt.Legend(orient="bottom"),
                        scale=alt.Scale(
            domain=verdicts, range=[VERDICT_COLOURS[k] for k in verdicts])),
        tooltip=[alt.Tooltip("test:N"), alt.Tooltip("test_num:Q", title="test number"),
                 alt.Tooltip("verdict:N"),
                 alt.Tooltip("shift_sigma:Q", title="shift (σ)", format="+.2f"),
                 alt.Tooltip("sigma_ratio:Q", title="spread ratio", format=".2f"),
                 alt.Tooltip("q_value:Q", title="q (FDR)", format=".2g")])
    labels = base.mark_text(align="left", dx=7, fontSize=11, color=CORAL).encode(
        text="test:N").transform_filter(alt.datum.verdict == "shifted")
    zero = alt.Chart(alt.Data(values=[{"x": 0}])).mark_rule(color=MIST).encode(x="x:Q")
    one = alt.Chart(alt.Data(values=[{"y": 1}])).mark_rule(color=MIST).encode(y="y:Q")
    chart = alt.layer(zero, one, points, labels).properties(
        width=WIDTH, height=320, title=chart_title(title, f"{v['candidate']} against "
                                              f"{v['baseline']}: one dot per test; coral = "
                                              f"moved at a {100 * v['fdr']:g} % false "
                                              "discovery rate"))
    return Figure("verify_shift_spread", title, "Each test's mean shift (in the baseline's "
                  "standard deviations) against the ratio of its standard deviations, on "
                  "in-limit values. Tests at (0, 1) did not change.", chart)


def distributions(v: dict[str, Any]) -> Figure | None:
    dists = [d for d in v.get("distributions") or [] if d["bins"]]
    if not dists:
        return None
    by = {(t["test_num"], t["element"]): t for t in v["tests"]}
    rows = []
    for rank, d in enumerate(dists):
        t = by.get((d["test_num"], d["element"]), {})
        label = d["test_name"] + (f" ({d['units']})" if d.get("units") else "")
        for b in d["bins"]:
            for lot in ("baseline", "candidate"):
                rows.append({"test": label, "rank": rank, "lot": lot, "lo": _sig(b["lo"]),
                             "hi": _sig(b["hi"]), "pct": round(b[f"{lot}_pct"], 3),
                             "effect": _effect(t) if t else ""})
    title = "Before and after: " + ", ".join(
        f"{d['test_name']} ({_effect(by[(d['test_num'], d['element'])])})"
        for d in dists[:3] if (d["test_num"], d["element"]) in by)
    bars = alt.Chart().mark_bar(opacity=0.55, binSpacing=0).encode(
        x=alt.X("lo:Q", title="value (the test's units)", scale=alt.Scale(zero=False),
                axis=alt.Axis(format=".3~s", labelFlush=True, tickCount=5)),
        x2="hi:Q",
        y=alt.Y("pct:Q", title="share of in-limit values (%)", stack=None),
        y2=alt.datum(0),
        color=alt.Color("lot:N", title=None, scale=alt.Scale(
            domain=["baseline", "candidate"], range=[SLATE, AMBER])),
        tooltip=[alt.Tooltip("test:N"), alt.Tooltip("lot:N"),
                 alt.Tooltip("lo:Q", title="from"), alt.Tooltip("hi:Q", title="to"),
                 alt.Tooltip("pct:Q", title="share (%)", format=".1f")]
    ).properties(width=250, height=160)
    chart = alt.FacetChart(
        data=alt.Data(values=rows), spec=bars,
        facet=alt.Facet("test:N", title=None, sort=BY_RANK), columns=3,
    ).resolve_scale(x="independent", y="independent").properties(
        title=chart_title(title, "Histograms of each lot's in-limit values (grey = baseline, "
                     "amber = candidate), the tests that moved"))
    return Figure("verify_distributions", title, "The distributions of the tests that "
                  "moved, before (the serial program) and after (the concurrent one), as "
                  "shares of each lot's in-limit values.", chart)


def time_chart(v: dict[str, Any]) -> Figure | None:
    t = v["time"]
    blocks = t.get("blocks") or []
    if not blocks or t.get("saving_pct") is None:
        return None
    planned = t.get("projected") is not None
    series = ["baseline", "planned", "candidate"] if planned else ["baseline", "candidate"]
    rows = [{"block": b["block"], "rank": i, "series": s, "ms": _sig(b.get(f"{s}_ms")),
             "status": b["status"]}
            for i, b in enumerate(blocks) for s in series if b.get(f"{s}_ms") is not None]
    off = [b["block"] for b in blocks if b["status"] not in ("as planned", "as before")]
    title = (f"Touchdown {num(t['baseline_touchdown_ms'], 0, 'ms')} → "
             f"{num(t['candidate_touchdown_ms'], 0, 'ms')} (−{num(t['saving_pct'], 1, '%')}"
             + (f"; planned −{num(t['projected']['saving_pct'], 1, '%')}" if planned else "")
             + ")" + (f"; not as {'planned' if planned else 'before'}: {', '.join(off[:3])}"
                      if off else ""))
    chart = alt.Chart(alt.Data(values=rows)).mark_bar().encode(
        y=alt.Y("block:N", sort=BY_RANK, title="block"),
        yOffset=alt.YOffset("series:N", sort=series),
        x=alt.X("ms:Q", title="mean block time per part (ms)"),
        color=alt.Color("series:N", title=None, scale=alt.Scale(
            domain=series, range=[SERIES[s] for s in series])),
        tooltip=[alt.Tooltip("block:N"), alt.Tooltip("series:N", title="time"),
                 alt.Tooltip("ms:Q", title="mean (ms)", format=".1f"),
                 alt.Tooltip("status:N")]
    ).properties(width=WIDTH, height=24 * len(blocks) + 20, title=chart_title(
        title, "Each block's mean time in the baseline lot"
        + (", in the plan's schedule" if planned else "") + " and in the candidate lot"))
    return Figure("verify_time", title, "Blocks keep their own time in a concurrent "
                  "program (they overlap instead); a block that takes longer than planned "
                  "once overlapped is slowed by what runs beside it.", chart)


def verify_figures(v: dict[str, Any]) -> list[Figure]:
    figs = [f(v) for f in (shift_spread, distributions, time_chart)]
    return [Figure(f.name, f.title, f.caption, theme(f.chart)) for f in figs if f]


# -- tables ---------------------------------------------------------------------------------
TEST_COLUMNS = ["test_num", "element", "test_name", "block", "verdict", "reason",
                "n_baseline", "n_candidate", "mean_baseline", "mean_candidate", "sd_baseline",
                "sd_candidate", "shift_sigma", "sigma_ratio", "cpk_baseline", "cpk_candidate",
                "fail_pct_baseline", "fail_pct_candidate", "p_location", "p_spread",
                "p_fail_rate", "q_value", "paired_n", "paired_mean_diff", "repeatability_sd"]
UNIT_COLUMNS = ["part_id", "x", "y", "change", "baseline_hard_bin", "candidate_hard_bin",
                "baseline_soft_bin", "candidate_soft_bin", "first_test_num", "first_test_name",
                "baseline_value", "candidate_value"]
BLOCK_COLUMNS = ["block", "baseline_ms", "candidate_ms", "change_pct", "planned_ms",
                 "vs_plan_pct", "status"]


def verify_tables(v: dict[str, Any]) -> list[Table]:
    def rows(items: list[dict[str, Any]], cols: list[str]) -> list[list[Any]]:
        return [[_sig(i.get(c), 6) for c in cols] for i in items]

    return [Table("verify_tests", "Tests, the ones that moved first", TEST_COLUMNS,
                  rows(v["tests"], TEST_COLUMNS)),
            Table("verify_changed_units", "Units whose bin or pass/fail changed", UNIT_COLUMNS,
                  rows(v["changed_units"], UNIT_COLUMNS)),
            Table("verify_blocks", "Block times: baseline, plan and candidate", BLOCK_COLUMNS,
                  rows(v["time"].get("blocks") or [], BLOCK_COLUMNS))]


# -- the section ----------------------------------------------------------------------------
def key_figures(v: dict[str, Any]) -> list[tuple[str, str]]:
    t, s = v["time"], v["summary"]
    out = [("Realised saving per touchdown",
            f"{num(t['saving_ms'], 1, 'ms')} ({num(t['saving_pct'], 1, '%')})")]
    if t.get("projected"):
        out.append(("Projected by the plan", num(t["projected"]["saving_pct"], 1, "%")))
    out += [("Tests moved", f"{s['shifted']} of {s['tests']}"),
            ("Units matched", f"{v['matched_units']} by {v['match']}"
             if v["match"] != "none" else "not matched")]
    if v["match"] != "none":
        flips = sum(c["change"] == "pass->fail" for c in v["changed_units"])
        out.append(("Units changed bin", f"{len(v['changed_units'])} ({flips} pass → fail)"))
    return out


def _program(p: dict[str, Any]) -> str:
    rev = f" rev {p['program_rev']}" if p.get("program_rev") else ""
    return f"{p['lot_id']} ({p['program']}{rev})" if p.get("program") else str(p["lot_id"])


def heading(v: dict[str, Any], prefix: str = "Verification") -> str:
    return f"{prefix}: lot {v['candidate']} against lot {v['baseline']}"


CHANGE_WORDS = {"pass->fail": "pass → fail", "fail->pass": "fail → pass", "bin": "bin only"}


def _subline(v: dict[str, Any]) -> str:
    return (f"Candidate {_program(v['programs']['candidate'])}, the concurrent program; "
            f"baseline {_program(v['programs']['baseline'])}, the serial one. Tests compared "
            f"on in-limit values at a {100 * v['fdr']:g} % false discovery rate; a test moved "
            f"when a change beyond chance is also at least {v['min_shift_sigma']:g} σ in mean "
            f"or ×{v['min_sigma_ratio']:g} in spread, or its fail rate changed.")


def _cell(x: Any) -> str:
    if isinstance(x, bool) or x is None or not isinstance(x, int | float):
        return f"<td>{html_text('' if x is None else x)}</td>"
    return f'<td class="n">{html_text(f"{x:.4g}" if isinstance(x, float) else x)}</td>'


def _pair(a: Any, b: Any, fmt: str = "{:.4g}") -> str:
    return " → ".join("n/a" if x is None else fmt.format(x) for x in (a, b))


def tests_display(v: dict[str, Any]) -> Table:
    """The tests as the page shows them: one line each, before → after side by side."""
    rows = [[t["test_num"], _name(t), t["block"], t["verdict"],
             f"{t['n_baseline']} / {t['n_candidate']}",
             _pair(t["mean_baseline"], t["mean_candidate"]), t["shift_sigma"], t["sigma_ratio"],
             _pair(t["cpk_baseline"], t["cpk_candidate"], "{:.2f}"),
             _pair(t["fail_pct_baseline"], t["fail_pct_candidate"], "{:.1f}"), t["q_value"],
             t["reason"]] for t in v["tests"]]
    return Table("verify_tests", "Tests, the ones that moved first",
                 ["test_num", "test", "block", "verdict", "n before / after", "mean", "shift (σ)",
                  "spread ratio", "Cpk", "fail %", "q (FDR)", "why"], rows)


def _html_table(t: Table, limit: int | None = None) -> str:
    rows = t.rows if limit is None else t.rows[:limit]
    head = "".join(f"<th>{html_text(c)}</th>" for c in t.columns)
    body = "".join("<tr>" + "".join(_cell(x) for x in r) + "</tr>" for r in rows)
    more = (f'<p class="sub">{len(t.rows) - len(rows)} more rows in tables/'
            f"{html_text(t.name)}.csv</p>" if len(rows) < len(t.rows) else "")
    return (f"<h3>{html_text(t.title)}</h3><div class=\"wide\"><table><thead><tr>{head}</tr>"
            f"</thead><tbody>{body}</tbody></table></div>{more}")


def section_html(v: dict[str, Any], figs: list[Figure], first: int) -> str:
    """The section of report.html (chart ids from ``first`` on)."""
    keys = "".join(f'<div class="key"><div class="k">{html_text(k)}</div>'
                   f'<div class="v">{html_text(x)}</div></div>' for k, x in key_figures(v))
    _, t_units, t_blocks = verify_tables(v)
    t_tests = tests_display(v)
    parts = [f'<section id="verification"><h2>{html_text(heading(v))}</h2>',
             f'<p class="sub">{html_text(_subline(v))}</p>', f'<div class="keys">{keys}</div>',
             '<ul class="verify-cautions">' + "".join(
                 f"<li>{html_text(c)}</li>" for c in VERIFY_CAUTIONS) + "</ul>"]
    parts += [figure_html(first + i, f) for i, f in enumerate(figs)]
    parts.append(_html_table(t_tests, TESTS_SHOWN))
    if v["match"] != "none":
        parts.append(_html_table(t_units) if t_units.rows else
                     "<h3>Units whose bin or pass/fail changed</h3><p>None.</p>")
    if t_blocks.rows:
        parts.append(_html_table(t_blocks))
    if v.get("notes"):
        parts.append("<h3>Notes</h3><ul>" + "".join(f"<li>{html_text(n)}</li>"
                                                     for n in v["notes"]) + "</ul>")
    return "\n".join(parts + ["</section>"])


def section_md(v: dict[str, Any]) -> list[str]:
    out = [f"## {md_text(heading(v))}", "", md_text(_subline(v)), ""]
    out += [f"- {md_text(k)}: {md_text(x)}" for k, x in key_figures(v)]
    moved = _moved(v)
    out += ["", "| test | verdict | shift (σ) | spread ratio | fail % before → after | why |",
            "|---|---|---:|---:|---|---|"]
    for t in moved or v["tests"][:3]:
        fails = f"{num(t['fail_pct_baseline'], 1)} → {num(t['fail_pct_candidate'], 1)}"
        out.append(f"| {md_text(_name(t))} | {md_text(t['verdict'])} | "
                   f"{num(t['shift_sigma'], 2)} | {num(t['sigma_ratio'], 2)} | "
                   f"{md_text(fails)} | {md_text(t['reason'])} |")
    if v["changed_units"]:
        out += ["", "Units whose bin or pass/fail changed:", "",
                "| part | x, y | change | bins before → after | first test that differs |",
                "|---|---|---|---|---|"]
        for c in v["changed_units"]:
            first = c["first_test_name"] or c["first_test_num"] or "none"
            where = f"({c['x']}, {c['y']})"
            bins = f"{c['baseline_hard_bin']} → {c['candidate_hard_bin']}"
            out.append(f"| {md_text(c['part_id'])} | {md_text(where)} | "
                       f"{md_text(CHANGE_WORDS.get(c['change'], c['change']))} | "
                       f"{md_text(bins)} | {md_text(first)} |")
    off = [b for b in v["time"].get("blocks") or []
           if b["status"] not in ("as planned", "as before")]
    if off:
        out += ["", "Blocks not as " + ("planned" if v["time"].get("projected") else "before")
                + ": " + md_text(", ".join(f"{b['block']} ({b['status']}, "
                                         f"{num(b['candidate_ms'], 1, 'ms')})" for b in off))
                + "."]
    out += ["", "> **Before this verification decides anything:**", ">"]
    out += [f"> - {md_text(c)}" for c in VERIFY_CAUTIONS] + [""]
    return out


# -- the stand-alone page -------------------------------------------------------------------
@dataclass(frozen=True)
class VerifyFiles:
    out: Path
    html: Path
    md: Path
    json: Path
    charts: list[Path]
    tables: list[Path]
    specs: dict[str, dict[str, Any]]
    titles: dict[str, str]


def write_verify_report(verification: Any, out: str | Path) -> VerifyFiles:
    """verify.html (self-contained, as report.html), verify.md, verify.json, the charts
    and tables of one verification, into ``out`` (created; earlier verify_* files there
    are replaced, anything else is left alone)."""
    from .export import write_chart
    from .text import safe_json, write_csv

    v = verification if isinstance(verification, dict) else verification.to_json()
    out = Path(out)
    for sub, pattern in (("charts", "verify_*.png"), ("charts", "verify_*.svg"),
                         ("tables", "verify_*.csv")):
        (out / sub).mkdir(parents=True, exist_ok=True)
        for old in (out / sub).glob(pattern):
            old.unlink()
    figs = verify_figures(v)
    charts: list[Path] = []
    for f in figs:
        charts += write_chart(f.spec(), out / "charts" / f.name)
    html = out / "verify.html"
    html.write_text(page_html(v, figs), encoding="utf-8")
    md = out / "verify.md"
    md.write_text(page_md(v, figs), encoding="utf-8")
    js = out / "verify.json"
    js.write_text(safe_json(v) + "\n", encoding="utf-8")
    tables = [write_csv(t, out / "tables" / f"{t.name}.csv") for t in verify_tables(v)]
    return VerifyFiles(out, html, md, js, charts, tables, {f.name: f.spec() for f in figs},
                       {f.name: f.title for f in figs})


def page_html(v: dict[str, Any], figs: list[Figure]) -> str:
    from .export import vega_runtime
    from .html import CSP, RENDER, STYLE

    cautions = "".join(f"<li>{html_text(c)}</li>" for c in CAUTIONS)
    return "\n".join([
        "<!DOCTYPE html>", '<html lang="en"><head><meta charset="utf-8">',
        f'<meta http-equiv="Content-Security-Policy" content="{CSP}">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{html_text(heading(v, 'Tandem verification'))}</title>",
        f"<style>{STYLE}</style></head><body>",
        f"<h1>{html_text(heading(v, 'Tandem verification'))}</h1>",
        f'<section class="cautions" role="note" aria-label="cautions"><strong>'
        f"{html_text(CAUTION_HEADLINE)}</strong><ul>{cautions}</ul></section>",
        section_html(v, figs, 0),
        f"<footer>Written by Tandem {html_text(__version__)}. verify.json and "
        "tables/verify_*.csv hold every number.</footer>",
        f"<script>{vega_runtime()}</script>", f"<script>{RENDER}</script>", "</body></html>",
        ""])


def page_md(v: dict[str, Any], figs: list[Figure]) -> str:
    out = [f"# {md_text(heading(v, 'Tandem verification'))}", "",
           f"> **{CAUTION_HEADLINE}.**", ">"]
    out += [f"> - {md_text(c)}" for c in CAUTIONS]
    out += section_md(v)[1:]
    out += ["## Files", "", "- `verify.html`: the charts and tables; opens offline.",
            "- `charts/`: " + ", ".join(f"`{f.name}`" for f in figs) + " (PNG and SVG).",
            "- `verify.json`: every number; `tables/verify_*.csv`: the tables.", "",
            f"Written by Tandem {__version__}.", ""]
    return "\n".join(out)
