"""Planner benchmark: CP-SAT against the greedy serial-SGS baseline, same run.

A measurement, not a test: it prints what it measured (and writes
``bench/out/plan_last.json``) and exits 0 whether or not the targets are met.

The instance (seeded, invented): 30 blocks x 8 sites. One pinned first block (contact),
sparse ``after`` edges, three per-site resources, two touchdown-wide shared pools (count 1
and 2), per-site power and parallel limits, per-site times jittered by 2 %. Targets: CP-SAT
proven optimal, or within 2 % of the lower bound, in under 10 s.

    python bench/bench_plan.py [--time-limit 8] [--workers 2] [--seeds 7 8 9 10 11]

Each seed is one instance; CP-SAT gets the greedy schedule as its hint.
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))
sys.path.insert(0, str(Path(__file__).resolve().parent))

import plan_maps  # noqa: E402 - bench/ is not a package
from pipeline.plan.model import PlanSpec, build_problem  # noqa: E402
from pipeline.plan.solvers import solve_cpsat, solve_greedy  # noqa: E402

OUT = Path(__file__).resolve().parent / "out"


def instance(seed: int, n_blocks: int = 30, n_sites: int = 8) -> PlanSpec:
    return plan_maps.large(seed, n_blocks, n_sites)


def run(seed: int, time_limit: float, workers: int) -> dict[str, object]:
    problem = build_problem(instance(seed))
    greedy = solve_greedy(problem)
    cp = solve_cpsat(problem, time_limit, workers=workers)
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


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=(__doc__ or "").splitlines()[0])
    ap.add_argument("--time-limit", type=float, default=8.0,
                    help="CP-SAT's limit (default 8 s: with the greedy start, under 10 s)")
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--seeds", type=int, nargs="+", default=[7, 8, 9, 10, 11])
    args = ap.parse_args(argv)
    rows = [run(seed, args.time_limit, args.workers) for seed in args.seeds]
    cols = list(rows[0])
    width = {c: max(len(c), *(len(str(r[c])) for r in rows)) for c in cols}
    print("  ".join(c.rjust(width[c]) for c in cols))
    for r in rows:
        print("  ".join(str(r[c]).rjust(width[c]) for c in cols), flush=True)
    met = sum(bool(r["target_met"]) for r in rows)
    print(f"target (proven optimal or gap <= 2 %, under 10 s) met on {met} of {len(rows)}")
    OUT.mkdir(exist_ok=True)
    (OUT / "plan_last.json").write_text(json.dumps(
        {"time_limit_s": args.time_limit, "workers": args.workers, "runs": rows}, indent=2)
        + "\n")
    return 0


if __name__ == "__main__":
    sys.exit(main())
