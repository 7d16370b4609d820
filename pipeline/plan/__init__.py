"""The planner: which serial blocks of a touchdown could run concurrently.

``model`` (plain objects) -> ``solvers`` (CP-SAT, greedy, exhaustive; one interface) ->
``planner`` (baseline, plan, roadmap, candidates, what-ifs, projection; the JSON of
``tandem plan``); ``roadmap`` the plan as program changes adopted one at a time.
``blockmap`` reads and checks the block map (TOML); ``measure`` reads a lot from the
store; ``draft`` writes a starting block map.

May import: ``pipeline.attribute``, ``pipeline.store``, ``pipeline.read`` and the shared
modules; never verify, report, jobs or the CLI (the terminal text is ``cli/plan_text``).
"""

from __future__ import annotations

from .model import BlockSpec, PlanSpec, PoolSpec, Problem, Solution, build_problem
from .planner import CAUTIONS, PlanResult, make_plan, plan, plan_lot
from .solvers import SOLVERS, solve

__all__ = ["BlockSpec", "CAUTIONS", "PlanResult", "PlanSpec", "PoolSpec", "Problem", "SOLVERS",
           "Solution", "build_problem", "make_plan", "plan", "plan_lot", "solve"]
