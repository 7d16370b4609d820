"""The planner: which serial blocks of a touchdown could run concurrently.

``model`` (plain objects) -> ``solvers`` (CP-SAT, greedy, exhaustive; one interface) ->
``planner`` (baseline, plan, candidates, what-ifs, projection) -> ``report`` (text, JSON).
``measure`` reads a lot from the store; ``draft`` writes a starting block map.
"""

from __future__ import annotations

from .model import BlockSpec, PlanSpec, PoolSpec, Problem, Solution, build_problem
from .planner import CAUTIONS, PlanResult, plan, plan_lot
from .solvers import SOLVERS, solve

__all__ = ["BlockSpec", "CAUTIONS", "PlanResult", "PlanSpec", "PoolSpec", "Problem", "SOLVERS",
           "Solution", "build_problem", "plan", "plan_lot", "solve"]
