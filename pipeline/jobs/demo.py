"""`tandem demo`: the whole job on the bundled, invented sample logs —
``sample_logs/`` → DIR/store → block times → a plan with ``sample_logs/blocks.toml`` →
the verification of the concurrent program's correlation lot → DIR/report.

Everything here goes through the same API a user calls; the demo adds no logic of its
own beyond choosing the files, the lot and what it prints.
"""

from __future__ import annotations

import shutil
import time
from collections.abc import Callable
from pathlib import Path

from ..errors import InputError
from ..store import Store

SAMPLES = Path(__file__).resolve().parents[2] / "sample_logs"
LOG_PATTERNS = ("*.stdf", "*.stdf.gz", "*.csv")
BLOCK_MAP = SAMPLES / "blocks.toml"
# The lot the demo plans: timed by markers on four sites, so the plan has the most to
# show. (Left to itself the planner takes the lot with the most parts: PF4-L0234, one
# site timed only by part totals.)
DEMO_LOT = "PF4-L0231"
# The same units tested again with the plan applied (the concurrent program, rev B3).
CANDIDATE_LOT = "PF4-L0236"

Progress = Callable[[str, int, int], None]


def sample_logs() -> list[Path]:
    if not SAMPLES.is_dir():
        raise InputError(f"{SAMPLES.name}/: the sample logs are not here (run from a clone "
                         f"of the project)")
    return sorted(p for pat in LOG_PATTERNS for p in SAMPLES.glob(pat))


def run_demo(out: str, say: Callable[[str], None], progress: Progress | None = None) -> int:
    from ..attribute import timing
    from ..plan import make_plan
    from ..report import build_report
    from ..verify import verify
    from .ingest import ingest

    t0 = time.perf_counter()
    out_dir = Path(out)
    store_dir = out_dir / "store"
    if store_dir.exists():
        shutil.rmtree(store_dir)  # the demo always starts from nothing
    store = Store(store_dir)
    step = progress or (lambda s, d, n: None)
    report = ingest(store, sample_logs(),
                    progress=lambda d, n, p: step(f"ingest {Path(p).name}", d, n))
    say(f"1. Ingested {len(report.ingested)} sample logs into {store_dir} "
        f"({sum(r['records'] for r in report.ingested)} records, "
        f"{sum(r['parts'] for r in report.ingested)} parts).")
    step("block times", 0, 1)
    top = timing.block_table(store, DEMO_LOT).head(3)
    say(f"2. Block times of lot {DEMO_LOT}: "
        + ", ".join(f"{b} {s:.1f} %" for b, s in zip(top["block"], top["share_pct"],
                                                     strict=True))
        + " of part time (tandem times --store ... for the full table).")
    step("planning", 0, 1)
    plan = make_plan(store, str(BLOCK_MAP), DEMO_LOT)
    say(f"3. Plan with {BLOCK_MAP.parent.name}/{BLOCK_MAP.name}: one touchdown "
        f"{plan['baseline_ms']:.1f} ms -> {plan['planned_ms']:.1f} ms "
        f"({plan['saving_pct']:.1f} % less"
        f"{', proven optimal' if plan['proven_optimal'] else ''}).")
    step("verifying", 0, 1)
    v = verify(store, DEMO_LOT, CANDIDATE_LOT, plan=plan)
    t = v.time
    moved = ", ".join(x.name for x in v.moved) or "none"
    say(f"4. Verification of {CANDIDATE_LOT} (the plan applied) against {DEMO_LOT}: touchdown "
        f"{t['baseline_touchdown_ms']:.1f} ms -> {t['candidate_touchdown_ms']:.1f} ms "
        f"({t['saving_pct']:.1f} % less, {t['projected']['saving_pct']:.1f} % planned); "
        f"{len(v.moved)} of {len(v.tests)} tests moved ({moved}); "
        f"{len(v.changed_units)} of {v.matched_units} units changed bin.")
    files = build_report(store, out_dir / "report", blocks=str(BLOCK_MAP), lot=DEMO_LOT,
                         plan=plan, progress=progress, verification=v)
    say(f"5. Report: {files.html} ({files.html_bytes / 1e6:.1f} MB, opens offline), "
        f"{files.summary_md} (the one-page proposal), {files.out / 'charts'}/ "
        f"({len(files.charts)} PNG and SVG files).")
    say("   Read its cautions before acting on any of it.")
    say(f"Done in {time.perf_counter() - t0:.0f} s. Open {files.html} in a browser; "
        f"query the store with: tandem sql --store {store_dir} \"select * from parts limit 5\"")
    return report.exit_code
