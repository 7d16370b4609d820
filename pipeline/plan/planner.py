"""The plan of one touchdown: block map + measured times -> spec -> baseline, plan,
candidates, what-ifs and projection. ``plan`` is the one core path; ``plan_lot`` only
reads the store first.

Blocks measured but missing from the block map (and ``unassigned``, time in tests no
block claims) are kept serial: pinned, in measured order, drawing no power. Blocks the
map describes but this lot did not measure are left out; an ``after`` through one of
them still holds (A after U after B: A waits for B).
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

from ..errors import ConfigError
from ..store import Store
from .blockmap import UNASSIGNED, Alternative, BlockMap, WhatIf
from .candidates import Candidate, price_overlaps
from .measure import Measured, measure_lot
from .model import (
    US_PER_MS,
    BlockSpec,
    PlanSpec,
    PoolSpec,
    Problem,
    Solution,
    build_problem,
    make_solution,
)
from .projection import AmdahlCheck, amdahl_inputs, throughput
from .roadmap import Step, build_roadmap
from .sgs import schedule_in_order
from .solvers import solve, solve_warm
from .whatifs import Variant, describe, touched, variants

CAUTIONS = (
    "Running blocks concurrently raises power draw and die temperature: it can damage "
    "parts, probe cards or tester hardware. Check every overlap against the device's "
    "power and thermal limits.",
    "Dropping, reordering or changing tests can let bad parts escape.",
    "This plan is a proposal computed from logged times, not a qualified test program: "
    "validate it with correlation runs on known-good and known-bad parts, and follow your "
    "quality system and change control.",
)


DEFAULT_TIME_LIMIT_S = 4.0  # the main solve; half as long again for the roadmap and pricing

AMDAHL_NOTE = ("Amdahl's law (Amdahl 1967) over each site's serial block time (serial_ms): "
               "f = share in the blocks the plan overlaps, s = their speed-up. The planned "
               "saving is against the baseline touchdown, which also waits for shared "
               "instruments; the plan removing those waits is the gap between the two.")


@dataclass(frozen=True)
class WhatIfResult:
    name: str
    kind: str
    change: str
    note: str
    blocks: tuple[str, ...]
    saving_ms: float = 0.0
    makespan_ms: float | None = None
    option: str = ""
    detail: str = ""
    proven: bool = False
    skipped: str | None = None
    amdahl: AmdahlCheck | None = None

    def to_json(self, baseline_ms: float) -> dict[str, Any]:
        out: dict[str, Any] = {
            "name": self.name, "kind": self.kind, "change": self.change, "note": self.note,
            "blocks": list(self.blocks), "option": self.option or None, "detail": self.detail,
            "planned_ms": _r(self.makespan_ms), "saving_ms": round(self.saving_ms, 3),
            "saving_pct_of_baseline": round(100 * self.saving_ms / baseline_ms, 3)
            if baseline_ms else None, "proven_optimal": self.proven, "skipped": self.skipped}
        if self.amdahl is not None:
            out["amdahl_saving_pct"] = round(self.amdahl.saving_pct, 3)
        return out


@dataclass(frozen=True)
class PlanResult:
    measured: Measured
    spec: PlanSpec
    problem: Problem
    baseline: Solution
    plan: Solution
    candidates: list[Candidate]
    overlapping_pairs: int
    whatifs: list[WhatIfResult]
    combined: WhatIfResult | None
    amdahl: AmdahlCheck
    throughput: dict[str, Any]
    missing_blocks: list[str]
    notes: list[str] = field(default_factory=list)
    roadmap: list[Step] = field(default_factory=list)

    @property
    def baseline_ms(self) -> float:
        return self.baseline.makespan_ms or 0.0

    @property
    def planned_ms(self) -> float:
        return self.plan.makespan_ms or 0.0

    @property
    def saving_pct(self) -> float:
        return 100.0 * (1.0 - self.planned_ms / self.baseline_ms) if self.baseline_ms else 0.0

    def baseline_check(self) -> dict[str, Any]:
        measured = self.measured.touchdown_ms
        out: dict[str, Any] = {"model_baseline_ms": round(self.baseline_ms, 3),
                               "measured_touchdown_ms": _r(measured),
                               "touchdowns": self.measured.touchdowns}
        if measured:
            diff = measured - self.baseline_ms
            out.update(difference_ms=round(diff, 3), difference_pct=round(100 * diff / measured, 3),
                       note="measured minus model: above 0, time outside every block (per-"
                            "part overhead, handler waits) the model does not hold; below 0, "
                            "parts that stopped on a fail and skipped blocks (the plan is "
                            "of a touchdown that runs every block), or block times above "
                            "the mean (a percentile)")
        return out

    def to_json(self) -> dict[str, Any]:
        return {
            "lot_id": self.measured.lot_id, "sites": len(self.spec.sites),
            "baseline_ms": round(self.baseline_ms, 3), "planned_ms": round(self.planned_ms, 3),
            "saving_pct": round(self.saving_pct, 3),
            "lower_bound_ms": round(self.plan.lower_bound_ms, 3),
            "proven_optimal": self.plan.proven_optimal,
            "candidates": [c.to_json() for c in self.candidates],
            "roadmap": [s.to_json(self.baseline_ms) for s in self.roadmap],
            "schedule": [{"block": b, "site": s, "start_ms": round(t0, 3), "end_ms": round(t1, 3)}
                         for b, s, t0, t1 in self.plan.schedule],
            "throughput": {**self.throughput, "amdahl": {
                "f": round(self.amdahl.f, 4), "s": round(self.amdahl.s, 4),
                "serial_ms": round(self.amdahl.serial_ms, 3),
                "amdahl_ms": round(self.amdahl.touchdown_ms, 3),
                "saving_pct": round(self.amdahl.saving_pct, 3),
                "planned_saving_pct": round(self.saving_pct, 3),
                "note": AMDAHL_NOTE}},
            "site_list": list(self.spec.sites), "status": self.plan.status,
            "solver": self.plan.solver, "solve_s": round(self.plan.wall_s, 3),
            "time_column": self.measured.column, "method": self.measured.method,
            "overlapping_pairs": self.overlapping_pairs,
            "whatifs": [w.to_json(self.baseline_ms) for w in self.whatifs],
            "combined_whatifs": None if self.combined is None
            else self.combined.to_json(self.baseline_ms),
            "missing_blocks": self.missing_blocks, "baseline_check": self.baseline_check(),
            "notes": self.notes, "cautions": list(CAUTIONS)}


def _r(v: float | None) -> float | None:
    return None if v is None else round(v, 3)


# ------------------------------------------------------------------ the spec


def build_spec(bm: BlockMap, m: Measured) -> tuple[PlanSpec, list[str], list[str]]:
    """The spec, the measured blocks kept serial for want of a map entry, and notes."""
    measured = set(m.order)
    missing = bm.missing(m.order) + [b for b in m.order if b == UNASSIGNED]
    memo: dict[str, tuple[str, ...]] = {}

    def after(name: str) -> tuple[str, ...]:  # through blocks this lot did not run
        if name not in memo:
            deps: list[str] = []
            for d in bm.blocks[name].after:
                deps.extend([d] if d in measured else after(d))
            memo[name] = tuple(dict.fromkeys(deps))
        return memo[name]

    blocks = []
    for name in m.order:
        times = {s: m.time_ms(name, s) for s in m.sites}
        b = bm.blocks.get(name)
        blocks.append(BlockSpec(name, times, pinned=True) if b is None else
                      BlockSpec(name, times, b.power_w, b.uses, after(name), b.pinned))
    notes = []
    if missing:
        notes.append(f"kept serial (not in the block map): {', '.join(missing)}")
    unrun = [b for b in bm.blocks if b not in measured]
    if unrun:
        notes.append(f"in the block map but not measured in lot {m.lot_id}: "
                     f"{', '.join(unrun)} (left out)")
    resources = {n: PoolSpec(r.count, r.shared) for n, r in bm.resources.items()}
    return (PlanSpec(m.sites, tuple(blocks), resources, bm.limits.power_w, bm.limits.parallel,
                     touchdown_power_w=bm.limits.touchdown_power_w), missing, notes)


# ------------------------------------------------------------------ the plan


def plan_lot(store: Store, bm: BlockMap, lot: str | None = None, percentile: str = "mean",
             time_limit_s: float = DEFAULT_TIME_LIMIT_S, **options: Any) -> PlanResult:
    """Measure ``lot`` in the store, then ``plan`` it with the block map."""
    return plan(bm, measure_lot(store, lot, percentile), time_limit_s, **options)


def make_plan(store: Store, blocks_file: str, lot: str | None) -> dict[str, Any]:
    """The plan of ``lot`` with the block map in ``blocks_file``, as `tandem plan --json`
    prints it, with the baseline schedule (``baseline_schedule``) the report draws."""
    from .blockmap import load_block_map

    result = plan_lot(store, load_block_map(blocks_file), lot)
    out: dict[str, Any] = result.to_json()
    if "baseline_schedule" not in out:
        out["baseline_schedule"] = [
            {"block": b, "site": s, "start_ms": round(t0, 3), "end_ms": round(t1, 3)}
            for b, s, t0, t1 in result.baseline.schedule]
    return out


def baseline(spec: PlanSpec) -> Solution:
    """Serial per site in program order, shared pools serialising sites: serial SGS over
    blocks in program order, sites in turn within a block — as the log runs them."""
    problem = build_problem(spec.serial())
    starts = schedule_in_order(problem, range(len(problem.activities)))
    return make_solution(problem, "feasible", starts, 0, "serial SGS", 0.0)


def plan(bm: BlockMap, m: Measured, time_limit_s: float = DEFAULT_TIME_LIMIT_S,
         backend: str = "cpsat", max_candidates: int = 12) -> PlanResult:
    """Baseline, plan, roadmap, candidates, what-ifs and projection of one touchdown.
    ``time_limit_s`` bounds the main solve; the roadmap, then the candidates' and the
    what-ifs' solves share half as long again after it (at least 1 s; each starts from
    the plan's schedule and stops at the plan's bound; when the budget is spent, what is
    left is priced from that start alone, and marked not proven)."""
    spec, missing, notes = build_spec(bm, m)
    base = baseline(spec)
    problem = build_problem(spec)
    sol = solve(problem, time_limit_s, backend)
    if sol.makespan_ms is None:
        raise ConfigError(f"{bm.source}: no schedule satisfies the block map "
                          f"({problem.infeasible_reason() or sol.status})")
    after = max(time_limit_s / 2, 1.0)  # the roadmap and the pricing, together
    deadline = time.perf_counter() + after
    road = build_roadmap(spec, problem, base, sol, budget_s=after / 2)
    if road and road[-1].touchdown_ms < (sol.makespan_ms or 0.0) - 1e-9:
        sol = _adopt(problem, road[-1], sol)  # the roadmap found a shorter schedule
    starts = {(a.block, a.site): t for a, t in zip(problem.activities, sol.starts_us,
                                                  strict=True)}
    plan_bound = int(round(sol.lower_bound_ms * US_PER_MS))
    aux_limit = max(0.2, time_limit_s / 10)

    def left() -> float:
        return deadline - time.perf_counter()

    def price(p: Problem) -> Solution:  # a restriction of the plan: never below its bound
        more = left() > 0.05  # past the budget: the start alone prices it, not proven
        return solve_warm(p, starts, min(aux_limit, max(left(), 0.0)), plan_bound, backend,
                          search=more, rounds=3 if more else 1)

    def solve_aux(p: Problem) -> Solution:  # a what-if: may beat the plan
        return solve_warm(p, starts, max(min(aux_limit * 2, left()), 0.3), 0, backend)

    candidates, pairs = price_overlaps(spec, problem, sol, price, max_candidates)
    if pairs > max_candidates:
        notes.append(f"{pairs} block pairs overlap in the plan; the {max_candidates} that "
                     "overlap longest are priced")
    results, combined = _whatifs(bm, spec, sol, solve_aux)
    candidates += [Candidate(w.blocks, w.saving_ms, w.change,
                             f"{w.kind}: {w.detail}" + (f" ({w.note})" if w.note else ""),
                             "whatif", proven=w.proven, source=w.name)
                   for w in results if w.skipped is None and w.saving_ms > 0]
    candidates.sort(key=lambda c: (-c.saving_ms, c.change != "program", -c.overlap_ms,
                                   c.blocks))
    before = m.touchdown_ms or (base.makespan_ms or 0.0)
    base_ms = base.makespan_ms or 0.0
    proj = throughput(len(spec.sites), before, base_ms - (sol.makespan_ms or 0.0), m.index_ms,
                      bm.economics, None if combined is None or combined.makespan_ms is None
                      else base_ms - combined.makespan_ms)
    return PlanResult(m, spec, problem, base, sol, candidates, pairs, results, combined,
                      amdahl_inputs(spec, problem, sol, {}, set()), proj, missing,
                      list(m.notes) + notes, road)


def _adopt(problem: Problem, step: Step, sol: Solution) -> Solution:
    """The last roadmap step's schedule as the plan (it is feasible for the plan's
    problem, a relaxation of every step's); the bound stays the solver's."""
    order = {(a.block, a.site): k for k, a in enumerate(problem.activities)}
    starts = [0] * len(problem.activities)
    for b, s, t0, _ in step.schedule:
        starts[order[(b, s)]] = int(round(t0 * US_PER_MS))
    return make_solution(problem, "feasible", starts, int(round(sol.lower_bound_ms
                         * US_PER_MS)), f"{sol.solver} + roadmap", sol.wall_s)


def _whatifs(bm: BlockMap, spec: PlanSpec, plan: Solution,
             solve_aux: Callable[[Problem], Solution]
             ) -> tuple[list[WhatIfResult], WhatIfResult | None]:
    """Each what-if alone against the program-only plan (an alternative: its best
    option), then every beneficial one together, in file order; one that no longer
    applies once the others are in (a block already merged) is left out and said so."""
    assert plan.makespan_ms is not None
    results, chosen = [], []
    for w in bm.whatifs.values():
        vs = variants(w, spec)
        if isinstance(vs, str):
            results.append(_result(w, spec, skipped=vs))
            continue
        v, s = min(((v, solve_aux(build_problem(v.spec))) for v in vs),
                   key=lambda pair: pair[1].makespan_ms or float("inf"))
        saving = plan.makespan_ms - (s.makespan_ms or plan.makespan_ms)
        results.append(_result(w, spec, v, s, saving))
        if saving > 1e-6:
            chosen.append((w, v, s))
    if not chosen:
        return results, None
    cur, origins, changed = spec, {}, set()
    applied: list[WhatIf] = []
    left_out: list[str] = []
    for w, alone, _ in chosen:
        vs = variants(w, cur)
        if isinstance(vs, str):
            left_out.append(f"{w.name} left out: {vs}")
            continue
        v = next(x for x in vs if x.option == alone.option)
        cur, applied = v.spec, applied + [w]
        origins.update(v.origins)
        if isinstance(w, Alternative):
            changed.add(w.block)
    problem = build_problem(cur)
    s = chosen[0][2] if len(chosen) == 1 else solve_aux(problem)
    combined = WhatIfResult(
        "all beneficial what-ifs", "combined",
        "design" if any(w.change == "design" for w in applied) else "program",
        "; ".join(left_out), tuple(dict.fromkeys(b for w in applied for b in touched(w, spec))),
        plan.makespan_ms - (s.makespan_ms or plan.makespan_ms), s.makespan_ms,
        detail=", ".join(w.name for w in applied), proven=s.proven_optimal,
        amdahl=amdahl_inputs(spec, problem, s, origins, changed))
    return results, combined


def _result(w: WhatIf, spec: PlanSpec, v: Variant | None = None, s: Solution | None = None,
            saving: float = 0.0, skipped: str | None = None) -> WhatIfResult:
    return WhatIfResult(w.name, w.kind, w.change, w.note, touched(w, spec), saving,
                        None if s is None else s.makespan_ms, "" if v is None else v.option,
                        describe(w) if v is None else v.detail,
                        bool(s and s.proven_optimal), skipped)
