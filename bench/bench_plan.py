"""Planner benchmark: CP-SAT against the greedy serial-SGS baseline, same run.

A measurement, not a test: it prints what it measured (and writes
``bench/out/plan_last.json``) and exits 0 whether or not the targets are met.

The instance (seeded, invented): 30 blocks x 8 sites. One pinned first block (contact),
sparse ``after`` edges, three per-site resources, two touchdown-wide shared pools (count 1
and 2), per-site power and parallel limits, per-site times jittered by 2 %. Targets: CP-SAT
proven optimal, or within 2 % of the lower bound, in under 10 s.

    python bench/bench_plan.py [--time-limit 8] [--workers 2] [--seeds 7 8 9 10 11]
    python bench/bench_plan.py --maps      # whole `tandem plan --json` on generated lots

Each seed is one instance; the planner's CP-SAT (``solve_cpsat_staged``: the whole model
from the greedy schedule for a third of the time, then the search over sites).

``--maps`` writes the 24 x 8 map (``plan_maps.large(7, 24, 8)``) and the 12 x 4 lot with
a shared RF meter (``plan_maps.rf_lot(1)``) as timing-CSV lots, ingests each into a store
and times the whole `tandem plan --json` process (default options), roadmap and
candidates included; the baseline in the same run is `tandem --help` (the start-up of a
process), so the ratio says how many start-ups the plan costs.
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))
sys.path.insert(0, str(Path(__file__).resolve().parent))

import plan_maps  # noqa: E402 - bench/ is not a package

from pipeline.plan.model import PlanSpec, build_problem  # noqa: E402
from pipeline.plan.solvers import solve_cpsat_staged, solve_greedy  # noqa: E402

OUT = Path(__file__).resolve().parent / "out"


def instance(seed: int, n_blocks: int = 30, n_sites: int = 8) -> PlanSpec:
    return plan_maps.large(seed, n_blocks, n_sites)


def run(seed: int, time_limit: float, workers: int) -> dict[str, object]:
    problem = build_problem(instance(seed))
    greedy = solve_greedy(problem)
    cp = solve_cpsat_staged(problem, time_limit, workers=workers)
    assert greedy.makespan_ms is not None and cp.makespan_ms is not None
    lb = cp.lower_bound_ms
    gap = 100.0 * (cp.makespan_ms - lb) / lb if lb else 0.0
    return {
        "seed": seed, "activities": len(problem.activities), "pools": len(problem.pools),
        "greedy_ms": round(greedy.makespan_ms, 1), "greedy_s": round(greedy.wall_s, 2),
        "cpsat_ms": round(cp.makespan_ms, 1), "cpsat_s": round(cp.wall_s, 2),
        "status": cp.status, "lower_bound_ms": round(lb, 1),
        "model_bound_ms": round(greedy.lower_bound_ms, 1), "gap_pct": round(gap, 2),
        "vs_greedy_pct": round(100.0 * (1 - cp.makespan_ms / greedy.makespan_ms), 2),
        "target_met": (cp.proven_optimal or gap <= 2.0) and cp.wall_s < 10.0,
    }


def _wall(cmd: list[str]) -> tuple[float, str]:
    t0 = time.perf_counter()
    done = subprocess.run(cmd, capture_output=True, text=True, check=True)
    return time.perf_counter() - t0, done.stdout


def run_maps() -> list[dict[str, object]]:
    exe = [sys.executable, "-m", "pipeline"]
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        for name, spec in (("24x8", plan_maps.large(7, 24, 8)), ("12x4", plan_maps.rf_lot(1))):
            folder = Path(tmp) / name
            csv, blocks = plan_maps.write_lot(spec, folder, f"GEN-{name.upper()}")
            _wall([*exe, "ingest", str(csv), "--store", str(folder / "store")])
            start, _ = _wall([*exe, "--help"])
            took, out = _wall([*exe, "plan", "--store", str(folder / "store"), "--blocks",
                               str(blocks), "--json"])
            d = json.loads(out)
            gap = 100 * (d["planned_ms"] - d["lower_bound_ms"]) / d["lower_bound_ms"]
            rows.append({
                "map": name, "plan_s": round(took, 2), "start_up_s": round(start, 2),
                "vs_start_up": round(took / start, 1), "solve_s": d["solve_s"],
                "baseline_ms": d["baseline_ms"], "planned_ms": d["planned_ms"],
                "gap_pct": round(gap, 2), "proven": d["proven_optimal"],
                "roadmap_steps": len(d["roadmap"]), "candidates": len(d["candidates"]),
                "last_step_ms": d["roadmap"][-1]["touchdown_ms"] if d["roadmap"] else None,
                "target_met": took <= 10.0 and (d["proven_optimal"] or gap <= 2.0)})
    return rows


def _print(rows: list[dict[str, object]]) -> None:
    cols = list(rows[0])
    width = {c: max(len(c), *(len(str(r[c])) for r in rows)) for c in cols}
    print("  ".join(c.rjust(width[c]) for c in cols))
    for r in rows:
        print("  ".join(str(r[c]).rjust(width[c]) for c in cols), flush=True)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=(__doc__ or "").splitlines()[0])
    ap.add_argument("--time-limit", type=float, default=8.0,
                    help="CP-SAT's limit (default 8 s: with the greedy start, under 10 s)")
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--seeds", type=int, nargs="+", default=[7, 8, 9, 10, 11])
    ap.add_argument("--maps", action="store_true",
                    help="time the whole tandem plan on the generated 24 x 8 and 12 x 4 lots")
    args = ap.parse_args(argv)
    if args.maps:
        rows = run_maps()
        _print(rows)
        OUT.mkdir(exist_ok=True)
        (OUT / "plan_maps_last.json").write_text(json.dumps({"runs": rows}, indent=2) + "\n")
        return 0
    rows = [run(seed, args.time_limit, args.workers) for seed in args.seeds]
    _print(rows)
    met = sum(bool(r["target_met"]) for r in rows)
    print(f"target (proven optimal or gap <= 2 %, under 10 s) met on {met} of {len(rows)}")
    OUT.mkdir(exist_ok=True)
    (OUT / "plan_last.json").write_text(json.dumps(
        {"time_limit_s": args.time_limit, "workers": args.workers, "runs": rows}, indent=2)
        + "\n")
    return 0


if __name__ == "__main__":
    sys.exit(main())
