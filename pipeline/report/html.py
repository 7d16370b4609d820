"""report.html: one self-contained page. The chart library (Vega-Embed) is inlined, each
chart's Vega spec sits in a ``<script type="application/json">`` element, and a few lines of script
render them as SVG. No http(s) address anywhere, and a Content-Security-Policy that
forbids the page any network access, so it opens the same on an air-gapped test floor.

Every piece of text from a log goes through ``html_text`` (element text and attributes)
or ``script_json`` (the specs); nothing else is ever put into the page unescaped.
"""

from __future__ import annotations

from pathlib import Path

from .. import __version__
from .charts import HEADINGS, Figure
from .data import ReportData
from .export import to_vega, vega_runtime
from .facts import NO_PLAN, Table, assumptions, headline, notes, tables
from .plan import PlanView
from .text import CAUTION_HEADLINE, CAUTIONS, html_text, script_json

CSP = ("default-src 'none'; script-src 'unsafe-inline' 'unsafe-eval'; "
       "style-src 'unsafe-inline'; img-src data:; font-src data:")

STYLE = """
:root { --ink:#22303c; --slate:#6b7a89; --teal:#1f7a74; --amber:#d4951c; --coral:#c8553d;
        --mist:#e6ebee; }
body { font: 15px/1.45 system-ui, sans-serif; color: var(--ink); margin: 0 auto;
       max-width: 1040px; padding: 24px; }
h1 { font-size: 26px; margin: 0 0 4px; } h2 { font-size: 18px; margin: 28px 0 8px; }
.sub { color: var(--slate); margin: 0 0 18px; }
.cautions { border: 3px solid var(--coral); background: #fbefe9; padding: 12px 18px;
            border-radius: 6px; margin: 16px 0 22px; }
.cautions strong { color: var(--coral); font-size: 16px; }
.cautions li { margin: 4px 0; }
.noplan { border-left: 4px solid var(--amber); background: #fbf5e6; padding: 8px 14px; }
.keys { display: grid; grid-template-columns: repeat(auto-fill, minmax(190px, 1fr));
        gap: 10px; margin: 12px 0 8px; }
.key { border: 1px solid var(--mist); border-radius: 6px; padding: 8px 12px; }
.key .k { color: var(--slate); font-size: 12px; } .key .v { font-size: 17px; font-weight: 600; }
figure { margin: 26px 0; } figcaption { color: var(--slate); font-size: 13px; }
.chart, .wide { overflow-x: auto; } .chart { min-height: 120px; }
.chart-error { color: var(--coral); }
table { border-collapse: collapse; font-size: 13px; margin: 8px 0 18px; }
th, td { border-bottom: 1px solid var(--mist); padding: 4px 8px; text-align: left;
         vertical-align: top; }
td.n { text-align: right; font-variant-numeric: tabular-nums; }
th { background: #f3f6f7; }
footer { color: var(--slate); font-size: 12px; margin-top: 30px; }
h3 { font-size: 15px; margin: 20px 0 6px; }
#verification { border-top: 2px solid var(--mist); margin-top: 30px; }
.verify-cautions { border-left: 4px solid var(--coral); background: #fbefe9;
                   padding: 8px 14px 8px 30px; }
"""

# Renders each spec; records success on <body data-charts-rendered> and failures on
# data-chart-errors, so a headless browser (and a reader) can tell what happened.
RENDER = """
(function () {
  var body = document.body, done = 0, failed = 0;
  var specs = document.querySelectorAll('script[type="application/json"][data-chart]');
  body.setAttribute('data-charts-expected', String(specs.length));
  specs.forEach(function (el) {
    var target = document.getElementById(el.getAttribute('data-chart'));
    try {
      vegaEmbed(target, JSON.parse(el.textContent),
                {mode: 'vega', renderer: 'svg', actions: false}).then(function () {
        done += 1; body.setAttribute('data-charts-rendered', String(done));
      }).catch(function (e) { fail(target, e); });
    } catch (e) { fail(target, e); }
  });
  function fail(target, e) {
    failed += 1; body.setAttribute('data-chart-errors', String(failed));
    target.textContent = 'This chart could not be drawn: ' + e;
    target.className += ' chart-error';
    console.error(e);
  }
})();
"""


def _table(t: Table, limit: int | None = None) -> str:
    rows = t.rows if limit is None else t.rows[:limit]
    head = "".join(f"<th>{html_text(c)}</th>" for c in t.columns)
    body = []
    for r in rows:
        cells = []
        for v in r:
            if isinstance(v, bool) or v is None or not isinstance(v, int | float):
                cells.append(f"<td>{html_text('' if v is None else v)}</td>")
            else:
                cells.append(f'<td class="n">{html_text(_fmt(v))}</td>')
        body.append("<tr>" + "".join(cells) + "</tr>")
    more = (f"<p class=\"sub\">{len(t.rows) - len(rows)} more rows in "
            f"tables/{html_text(t.name)}.csv</p>" if len(rows) < len(t.rows) else "")
    return (f"<h2>{html_text(t.title)}</h2><table><thead><tr>{head}</tr></thead><tbody>"
            + "".join(body) + "</tbody></table>" + more)


def _fmt(v: int | float) -> str:
    return f"{v:,}" if isinstance(v, int) else f"{v:,.2f}"


def figure_html(i: int, f: Figure) -> str:
    """One chart's ``<figure>`` for the page: heading, the chart's place and its Vega spec."""
    spec = script_json(to_vega(f.spec()))
    return (f'<figure id="{html_text(f.name)}"><h2>{html_text(HEADINGS.get(f.name, f.title))}</h2>'
            f'<div class="chart" id="chart-{i}" role="img" aria-label="{html_text(f.title)}">'
            f"</div><figcaption>{html_text(f.caption)} Files: charts/{html_text(f.name)}.svg, "
            f".png.</figcaption>"
            f'<script type="application/json" data-chart="chart-{i}">{spec}</script></figure>')


def render_html(data: ReportData, plan: PlanView | None, figures: list[Figure],
                section: str = "") -> str:
    """The page; ``section`` is extra HTML after the tables (the verification's, whose
    chart ids continue after ``figures``)."""
    keys = "".join(f'<div class="key"><div class="k">{html_text(k)}</div>'
                   f'<div class="v">{html_text(v)}</div></div>'
                   for k, v in headline(data, plan))
    cautions = "".join(f"<li>{html_text(c)}</li>" for c in CAUTIONS)
    plan_cautions = [c for c in (plan.raw.get("cautions") or [])] if plan else []
    all_tables = {t.name: t for t in tables(data, plan)}
    order = ["candidates", "whatifs", "lots", "attribution", "sites", "unattributed"]
    parts = [
        "<!DOCTYPE html>", '<html lang="en"><head><meta charset="utf-8">',
        f'<meta http-equiv="Content-Security-Policy" content="{CSP}">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>Tandem report: lot {html_text(data.lot_id)}</title>",
        f"<style>{STYLE}</style></head><body>",
        f"<h1>Tandem report: lot {html_text(data.lot_id)}</h1>",
        f'<p class="sub">Lots read: {html_text(", ".join(data.lots["lot_id"].to_list()))}'
        + (f" · block map {html_text(Path(data.blocks_file).name)}" if data.blocks_file else "")
        + "</p>",
        f'<section class="cautions" role="note" aria-label="cautions"><strong>'
        f"{html_text(CAUTION_HEADLINE)}</strong><ul>{cautions}</ul></section>",
        "" if plan else f'<p class="noplan">{html_text(NO_PLAN)}</p>',
        f'<div class="keys">{keys}</div>',
        '<noscript><p class="noplan">Charts need JavaScript; the same charts are in the '
        "charts/ folder as SVG and PNG.</p></noscript>",
    ]
    parts += [figure_html(i, f) for i, f in enumerate(figures)]
    for name in order:
        if name in all_tables and all_tables[name].rows:
            parts.append(f'<div class="wide">{_table(all_tables[name], 40)}</div>')
    if section:
        parts.append(section)
    if plan_cautions:
        parts.append("<h2>The planner's cautions for this plan</h2><ul>"
                     + "".join(f"<li>{html_text(c)}</li>" for c in plan_cautions) + "</ul>")
    parts.append("<h2>Assumptions</h2><ul>" + "".join(
        f"<li>{html_text(a)}</li>" for a in assumptions(data, plan)) + "</ul>")
    extra = notes(data, plan)
    if extra:
        parts.append("<h2>Notes</h2><ul>" + "".join(f"<li>{html_text(n)}</li>"
                                                    for n in extra) + "</ul>")
    parts += [f"<footer>Written by Tandem {html_text(__version__)}. summary.md is the one-page "
              "proposal; summary.json and tables/*.csv hold the numbers.</footer>",
              f"<script>{vega_runtime()}</script>", f"<script>{RENDER}</script>",
              "</body></html>", ""]
    return "\n".join(parts)


def page_figures(html: str) -> int:
    """How many charts a page holds (for checks)."""
    return html.count('type="application/json" data-chart=')

