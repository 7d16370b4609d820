"""`tandem report` and `tandem demo`."""

from __future__ import annotations

import argparse
import sys
import time

from .common import Command, open_store, store_opt


def tty_steps(step: str, done: int, total: int) -> None:
    """One progress line on stderr, rewritten in place; only when stderr is a terminal."""
    if not sys.stderr.isatty():
        return
    sys.stderr.write(f"\r\033[K{step} ({done}/{total})" if total > 1 else f"\r\033[K{step}")
    if step == "done":
        sys.stderr.write("\r\033[K")
    sys.stderr.flush()


# -- report -----------------------------------------------------------------------------
def _report_options(p: argparse.ArgumentParser) -> None:
    store_opt(p)
    p.add_argument("--blocks", metavar="FILE",
                   help="the block map (TOML): with it the report holds the plan (before/after "
                        "touchdown, savings, candidates, projection); without it, attribution "
                        "only, and it says so")
    p.add_argument("--lot", metavar="LOT",
                   help="the lot to plan and chart (default: the lot with the most parts); "
                        "tables and the lot-to-lot chart cover every lot")
    p.add_argument("--out", required=True, metavar="DIR",
                   help="folder for report.html, charts/*.png and *.svg, summary.md, "
                        "summary.json and tables/*.csv (created; earlier charts replaced)")


def _report(args: argparse.Namespace) -> int:
    from ..report import build_report

    store = open_store(args.store)
    t0 = time.perf_counter()
    r = build_report(store, args.out, blocks=args.blocks, lot=args.lot,
                     progress=tty_steps)
    kind = "with the plan" if r.planned else "attribution only (no --blocks: no plan)"
    print(f"wrote {r.html} ({r.html_bytes / 1e6:.1f} MB, {len(r.charts) // 2} charts, "
          f"{kind}, lot {r.lot_id}) in {time.perf_counter() - t0:.1f} s")
    print(f"  {r.summary_md}  {r.summary_json}  {r.out / 'charts'}/  {r.out / 'tables'}/")
    return 0



# -- demo -------------------------------------------------------------------------------
def _demo_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("--out", default="demo-out", metavar="DIR",
                   help="where the demo writes DIR/store and DIR/report (default: ./demo-out; "
                        "DIR/store is rebuilt from nothing each time)")


def _demo(args: argparse.Namespace) -> int:
    from ..jobs.demo import run_demo

    return run_demo(args.out, print, progress=tty_steps)


COMMANDS = [
    Command("report", "write the report: offline HTML, charts (PNG, SVG), summary.md/json, CSV",
            "tandem report --store ./store --blocks sample_logs/blocks.toml --out ./report",
            _report_options, _report),
    Command("demo", "run the whole job on the bundled sample logs: ingest, times, plan, report",
            "tandem demo --out ./demo-out", _demo_options, _demo),
]
