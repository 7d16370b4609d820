"""The report: Altair charts -> PNG/SVG (vl-convert), one offline HTML page, a one-page
summary.md, summary.json and CSV tables.

``build_report(store, out, blocks=..., lot=...)`` is the one entry point; `tandem report`
and `tandem demo` call it. Without a block map the report is attribution only and says so.

May import: ``pipeline.verify``, ``pipeline.plan``, ``pipeline.attribute``,
``pipeline.store`` and the shared modules (``render`` for CSV cells); never jobs or the CLI.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from ..store import Store

Progress = Callable[[str, int, int], None]


@dataclass(frozen=True)
class ReportFiles:
    out: Path
    html: Path
    summary_md: Path
    summary_json: Path
    charts: list[Path]
    tables: list[Path]
    lot_id: str
    planned: bool
    specs: dict[str, dict[str, Any]]   # chart name -> its Vega-Lite spec
    titles: dict[str, str]             # chart name -> its title (the finding)

    @property
    def html_bytes(self) -> int:
        return self.html.stat().st_size


def build_report(store: Store, out: str | Path, blocks: str | None = None,
                 lot: str | None = None, plan: dict[str, Any] | None = None,
                 progress: Progress | None = None, verification: Any = None) -> ReportFiles:
    """Write the report of ``store`` into ``out`` (created; files there are replaced).

    ``blocks``: the block map; the plan is made with it (``pipeline.plan.plan_lot``, as
    `tandem plan` does) unless ``plan``, a dict from ``tandem plan --json``, is given.
    ``verification``: a ``pipeline.verify.Verification`` (or its JSON dict), reported in
    a section of its own (report/verify.py).
    """
    from ..errors import UsageError
    from ..plan import make_plan
    from .charts import figures
    from .data import gather
    from .export import write_chart
    from .facts import tables
    from .html import render_html
    from .plan import PlanView
    from .summary import render_md, summary_json
    from .text import safe_json, write_csv
    from .verify import section_html, section_md, verify_figures, verify_tables

    say = progress or (lambda step, done, total: None)
    if Path(out).exists() and not Path(out).is_dir():
        raise UsageError(f"{out}: exists and is not a folder; choose another --out")
    if plan is None and blocks is not None:
        say("planning", 0, 1)
        plan = make_plan(store, blocks, lot)
    say("reading the store", 0, 1)
    data = gather(store, lot, plan, blocks)
    view = PlanView.of(plan) if plan else None
    ver = (verification if isinstance(verification, dict) or verification is None
           else verification.to_json())
    main = figures(data, view)
    extra = verify_figures(ver) if ver else []
    figs = main + extra
    out = Path(out)
    _clear(out)
    charts: list[Path] = []
    for i, f in enumerate(figs):
        say(f"chart {f.name}", i, len(figs))
        charts += write_chart(f.spec(), out / "charts" / f.name)
    say("writing report.html", len(figs), len(figs))
    html = out / "report.html"
    section = section_html(ver, extra, len(main)) if ver else ""
    html.write_text(render_html(data, view, main, section), encoding="utf-8")
    md = out / "summary.md"
    md.write_text(render_md(data, view, figs, section_md(ver) if ver else []),
                  encoding="utf-8")
    js = out / "summary.json"
    summary = summary_json(data, plan, figs) | ({"verification": ver} if ver else {})
    js.write_text(safe_json(summary) + "\n", encoding="utf-8")
    every = tables(data, view) + (verify_tables(ver) if ver else [])
    written = [write_csv(t, out / "tables" / f"{t.name}.csv") for t in every]
    say("done", 1, 1)
    return ReportFiles(out, html, md, js, charts, written, data.lot_id, view is not None,
                       {f.name: f.spec() for f in figs}, {f.name: f.title for f in figs})


def _clear(out: Path) -> None:
    """Make the folders and remove what an earlier report wrote there (only our own
    file kinds), so no stale chart survives a report that no longer draws it."""
    for sub, pattern in (("charts", "*.png"), ("charts", "*.svg"), ("tables", "*.csv")):
        (out / sub).mkdir(parents=True, exist_ok=True)
        for old in (out / sub).glob(pattern):
            old.unlink()


__all__ = ["ReportFiles", "build_report"]
