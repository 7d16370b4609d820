"""The roadmap: the plan as program changes an engineer can adopt one at a time.

Each change to a qualified program costs an engineering change, a correlation run and a
sign-off, so the plan is offered as ordered steps from the program as measured (every
block in turn on each site, the baseline) to the plan. A step *moves one block*: from
then on it may start beside other blocks, while the blocks not moved yet keep the
program's serial chain (``PlanSpec.kept_serial``). Every real limit holds at every step
(power, instruments, ``after``, pinned blocks): each step's schedule is feasible for the
program as it stands after that step.

Why the touchdown never grows from one step to the next: moving a block only drops
constraints (a chain a -> x -> b becomes a -> b with x free, and any schedule of the
chain satisfies that), so the schedule of the step before is still feasible and a step
keeps it whenever it finds nothing better. The last step is the plan itself.

Order: best first, the way a Pareto reads. Each step takes the block whose move saves
most given the steps before it, priced by serial SGS with the plan's start order as the
priority (a schedule that leans towards the plan), then improved by forward-backward
justification. The prices are those of a heuristic schedule, so a step's saving is a
saving that is reachable (a feasible schedule shows it), not always the most that move
could give; ``proven`` says when a step's touchdown is the plan's proven optimum. The
search is lazy: a block's price from an earlier step stands until it reaches the top of
the queue, when it is priced again (moves rarely gain from the ones before), so a map of
n blocks costs about 2n schedules, not n^2 / 2. Blocks the plan runs beside no other
block never move; once no single move saves anything the remaining blocks move
together, in the last step.
"""

from __future__ import annotations

import heapq
import time
from collections.abc import Sequence
from dataclasses import dataclass, replace

from .model import US_PER_MS, PlanSpec, PoolSpec, Problem, Solution, build_problem
from .sgs import justify, schedule_by_priority

EPS_US = 1  # savings below 1 us are no saving


@dataclass(frozen=True)
class Step:
    """One program change and the touchdown after it."""

    step: int
    moved: tuple[str, ...]          # the blocks this change moves (one, or the rest)
    beside: tuple[str, ...]         # the blocks they run beside after it
    touchdown_ms: float
    saving_ms: float                # against the step before (step 1: the baseline)
    schedule: tuple[tuple[str, int, float, float], ...]
    instruments: tuple[str, ...]    # what the moved blocks hold ("name (shared)")
    peak_site_power_w: float        # the most any site draws at once, after the step
    peak_touchdown_power_w: float   # the most all sites draw at once, after the step
    proven: bool = False            # touchdown is the proven optimum of the whole plan

    @property
    def blocks(self) -> tuple[str, ...]:
        """What the step touches: the moved blocks, then those they run beside."""
        return self.moved + tuple(b for b in self.beside if b not in self.moved)

    def change(self) -> str:
        """The change in one line, as an engineer names it."""
        who = ", ".join(self.moved)
        if len(self.moved) > 1:
            return f"move the rest together ({who})" + (
                f", beside {', '.join(self.beside)}" if self.beside else "")
        return f"start {who} beside {', '.join(self.beside)}" if self.beside else \
            f"move {who}"

    def to_json(self, baseline_ms: float) -> dict[str, object]:
        """The contract's keys (step, blocks, touchdown_ms, saving_ms, schedule), then ours."""
        return {
            "step": self.step, "blocks": list(self.blocks),
            "touchdown_ms": round(self.touchdown_ms, 3), "saving_ms": round(self.saving_ms, 3),
            "schedule": [{"block": b, "site": s, "start_ms": round(t0, 3),
                          "end_ms": round(t1, 3)} for b, s, t0, t1 in self.schedule],
            "change": self.change(), "moved": list(self.moved), "beside": list(self.beside),
            "cumulative_saving_ms": round(baseline_ms - self.touchdown_ms, 3),
            "cumulative_saving_pct": round(100 * (1 - self.touchdown_ms / baseline_ms), 3)
            if baseline_ms else None,
            "instruments": list(self.instruments),
            "peak_site_power_w": round(self.peak_site_power_w, 3),
            "peak_touchdown_power_w": round(self.peak_touchdown_power_w, 3),
            "proven_optimal": self.proven}


@dataclass
class _State:
    spec: PlanSpec             # the program after the step (its kept_serial chain)
    moved: set[str]
    starts: list[int]          # the current step's schedule, in its problem's activities
    problem: Problem
    span: int


def movable(problem: Problem, plan: Solution) -> list[str]:
    """The blocks the plan runs beside another block on some site, in program order."""
    spans: dict[int, list[tuple[int, int, str]]] = {}
    for a, s in zip(problem.activities, plan.starts_us, strict=True):
        spans.setdefault(a.site, []).append((s, s + a.duration_us, a.block))
    out: set[str] = set()
    for rows in spans.values():
        rows.sort()
        for k, (_, e1, b1) in enumerate(rows):
            for s2, _, b2 in rows[k + 1:]:
                if s2 >= e1:
                    break
                out.update((b1, b2))
    return [b for b in dict.fromkeys(a.block for a in problem.activities) if b in out]


def build_roadmap(spec: PlanSpec, problem: Problem, baseline: Solution, plan: Solution,
                  budget_s: float = 3.0) -> list[Step]:
    """The steps from ``baseline`` to ``plan`` (see the module's note). ``budget_s``
    bounds the pricing: when it runs out, the blocks not moved yet move in the last step."""
    assert plan.makespan_ms is not None and baseline.makespan_ms is not None
    t0 = time.perf_counter()
    names = spec.names()
    free = movable(problem, plan)
    base_us = int(round(baseline.makespan_ms * US_PER_MS))
    if not free:  # nothing overlaps; the plan may still order blocks better around a
        #           shared instrument: then that order is the one change
        free = [b.name for b in spec.blocks if not b.pinned]
        if plan_makespan_us(problem, plan) >= base_us or not free:
            return []
    plan_start = {(a.block, a.site): s for a, s in zip(problem.activities, plan.starts_us,
                                                      strict=True)}
    plan_us = plan_makespan_us(problem, plan)
    # Step 0, the program as measured: the baseline's schedule is feasible for the chain
    # of every block (its own problem holds the same chain and no more).
    cur = _State(replace(spec, kept_serial=tuple(names)), set(), list(baseline.starts_us),
                 build_problem(replace(spec, kept_serial=tuple(names))),
                 base_us)
    steps: list[Step] = []
    prev_ms = baseline.makespan_ms
    queue = [(-(1 << 60), k, b) for k, b in enumerate(free)]  # unpriced: first to look at
    heapq.heapify(queue)
    while queue and cur.span > plan_us and time.perf_counter() - t0 < budget_s:
        found = None
        while queue:
            _, k, b = heapq.heappop(queue)
            trial = _state(spec, cur.moved | {b}, names, plan_start, cur)
            gain = cur.span - trial.span
            if not queue or gain >= -queue[0][0]:  # still the best: take it
                found = (gain, b, trial)
                break
            heapq.heappush(queue, (-gain, k, b))
        if found is None or found[0] < EPS_US:
            break  # no single move saves anything more: the rest move together
        _, b, cur = found
        # A step as short as the plan ends the roadmap (with fewer changes than the plan
        # makes; the blocks not moved stay as they are).
        steps.append(_step(len(steps) + 1, spec, cur, (b,), prev_ms,
                           plan.proven_optimal and cur.span <= plan_us))
        prev_ms = steps[-1].touchdown_ms
    if cur.span > plan_us or not steps:
        rest = tuple(b for b in free if b not in cur.moved) or tuple(free)
        final = _State(spec, set(free), list(plan.starts_us), problem, plan_us)
        steps.append(_step(len(steps) + 1, spec, final, rest, prev_ms, plan.proven_optimal))
    return steps


def plan_makespan_us(problem: Problem, plan: Solution) -> int:
    """The plan's touchdown in integer microseconds, from its starts."""
    return _span(problem, plan.starts_us)


def _state(spec: PlanSpec, moved: set[str], names: Sequence[str],
           plan_start: dict[tuple[str, int], int], before: _State | None) -> _State:
    """The best schedule found for the program with ``moved`` free: serial SGS leaning
    towards the plan, justified; the step before's schedule when that is no worse."""
    s = replace(spec, kept_serial=tuple(n for n in names if n not in moved))
    problem = build_problem(s)
    prio = [float(plan_start.get((a.block, a.site), 0)) for a in problem.activities]
    starts = justify(problem, schedule_by_priority(problem, prio), rounds=3)
    span = _span(problem, starts)
    if before is not None and before.span <= span:
        # same activities in the same order (one block per site each): valid as it is
        return _State(s, moved, list(before.starts), problem, before.span)
    return _State(s, moved, starts, problem, span)


def _span(problem: Problem, starts: Sequence[int]) -> int:
    return max((t + a.duration_us for t, a in zip(starts, problem.activities, strict=True)),
               default=0)


def _step(n: int, spec: PlanSpec, st: _State, moved: tuple[str, ...], prev_ms: float,
          proven: bool) -> Step:
    acts = st.problem.activities
    sched = tuple((a.block, a.site, t / US_PER_MS, (t + a.duration_us) / US_PER_MS)
                  for a, t in zip(acts, st.starts, strict=True))
    beside: list[str] = []
    for b, s, t0, t1 in sched:
        if b not in moved:
            continue
        for c, s2, u0, u1 in sched:
            if s2 == s and c != b and c not in beside and c not in moved \
                    and min(t1, u1) - max(t0, u0) > 1e-9:
                beside.append(c)
    order = {name: k for k, name in enumerate(spec.names())}
    held = []
    for b in moved:
        for u in spec.block(b).uses:
            pool = spec.resources.get(u, PoolSpec())
            label = f"{u} (shared)" if pool.shared else u
            if label not in held:
                held.append(label)
    power = {b.name: b.power_w for b in spec.blocks}
    site_peak, td_peak = _peaks(sched, power)
    span_ms = st.span / US_PER_MS
    return Step(n, moved, tuple(sorted(beside, key=lambda c: order.get(c, 0))), span_ms,
                max(prev_ms - span_ms, 0.0), sched, tuple(held), site_peak, td_peak, proven)


def _peaks(sched: Sequence[tuple[str, int, float, float]],
           power: dict[str, float]) -> tuple[float, float]:
    """The most power one site and the whole touchdown draw at once (W)."""
    events: dict[int | None, list[tuple[float, float]]] = {}
    for b, s, t0, t1 in sched:
        w = power.get(b, 0.0)
        for key in (s, None):
            events.setdefault(key, []).extend([(t0, w), (t1, -w)])
    peaks: dict[int | None, float] = {}
    for key, ev in events.items():
        level = best = 0.0
        for _, w in sorted(ev, key=lambda e: (e[0], e[1])):  # ends before starts on a tie
            level += w
            best = max(best, level)
        peaks[key] = best
    site = max((v for k, v in peaks.items() if k is not None), default=0.0)
    return site, peaks.get(None, 0.0)
