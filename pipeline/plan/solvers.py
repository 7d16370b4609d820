"""Solvers of the plan's ``Problem``; each is ``solve(problem, time_limit_s) -> Solution``.

- ``cpsat``: OR-Tools CP-SAT, exact given time (``solve_cpsat_staged``: when shared pools
  couple the sites, the whole model for a third of the time, then a search that
  re-solves one site at a time with the shared blocks free to move).
  Fixed-size interval variables; a pool of capacity 1 whose members each take 1 becomes
  NoOverlap, any other pool Cumulative;
  precedences are linear. Deterministic: a fixed seed and CP-SAT's interleaved search
  (its portfolio run in fixed batches over a fixed number of workers, 2 by default), so
  the same input gives the same schedule whenever the solve ends before the time limit;
  a solve the limit stops may find more or less on a faster or slower machine. The
  greedy schedule is its hint and its horizon (an upper bound known to be reachable).
- ``greedy``: serial SGS under a few priority rules, each schedule improved by
  forward-backward justification, the best kept — always feasible when a schedule
  exists; the fallback when CP-SAT finds nothing.
- ``exhaustive``: serial SGS over every precedence-feasible activity list, branch and
  bound — exact, for the small cases the tests check the others against.

Every solver reports a lower bound: the model's own (``model.lower_bound_us``) or, for
CP-SAT, the larger of that and the solver's proven bound; and ``proven_optimal`` when the
makespan meets it.
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable, Mapping, Sequence
from typing import Any

from .model import Problem, Solution, heads_tails, lower_bound_us, make_solution
from .sgs import SerialSGS, justify, left_shift, schedule_by_priority

Solver = Callable[[Problem, float], Solution]


def _infeasible(problem: Problem, name: str, t0: float) -> Solution | None:
    if problem.infeasible_reason() is None:
        return None
    return Solution("infeasible", None, 0.0, False, (), name, time.perf_counter() - t0)


# ------------------------------------------------------------------ greedy


def _priority_rules(problem: Problem) -> list[list[float]]:
    """Priority values, smaller first: longest path to the end first (a critical-path
    rule); program order (activity index); most pool work first (a resource rule)."""
    _, tail = heads_tails(problem)
    acts = problem.activities
    work = [sum(acts[i].duration_us * q / problem.pools[p].capacity
                for p, q in problem.pools_of[i]) for i in range(len(acts))]
    return [[-(a.duration_us + t) for a, t in zip(acts, tail, strict=True)],
            [float(i) for i in range(len(acts))],
            [-w for w in work]]


def greedy_starts(problem: Problem) -> list[int]:
    """The best serial-SGS schedule over the priority rules (first rule on ties), each
    improved by forward-backward justification."""
    best: list[int] | None = None
    best_ms = math.inf
    for prio in _priority_rules(problem):
        starts = justify(problem, schedule_by_priority(problem, prio))
        ms = max((s + a.duration_us for s, a in zip(starts, problem.activities, strict=True)),
                 default=0)
        if ms < best_ms:
            best, best_ms = starts, ms
    return best or []


def solve_greedy(problem: Problem, time_limit_s: float = 0.0) -> Solution:
    t0 = time.perf_counter()
    bad = _infeasible(problem, "greedy", t0)
    if bad:
        return bad
    starts = greedy_starts(problem)
    return make_solution(problem, "feasible", starts, lower_bound_us(problem), "greedy",
                         time.perf_counter() - t0)


# ------------------------------------------------------------------ exhaustive


def solve_exhaustive(problem: Problem, time_limit_s: float = 60.0) -> Solution:
    """Every precedence-feasible list through serial SGS, kept to lists whose starts
    come out in (start, index) order: serial SGS on an active schedule's activities
    sorted by start rebuilds that very schedule, so those lists reach every active
    schedule, and an optimal schedule is among them. Branch and bound on the partial
    makespan. Status "feasible" (not proven) if the time limit stops it."""
    t0 = time.perf_counter()
    bad = _infeasible(problem, "exhaustive", t0)
    if bad:
        return bad
    n = len(problem.activities)
    bound = lower_bound_us(problem)
    best = greedy_starts(problem)
    dur = [a.duration_us for a in problem.activities]
    best_ms = [max((s + d for s, d in zip(best, dur, strict=True)), default=0)]
    sgs = SerialSGS(problem)
    stopped = [False]
    nodes = [0]

    def walk(depth: int, last: tuple[int, int], span: int) -> None:
        if depth == n:
            if span < best_ms[0]:
                best_ms[0], best[:] = span, sgs.starts()
            return
        for i in range(n):
            if best_ms[0] <= bound or stopped[0] or not sgs.ready(i):
                continue
            t = sgs.earliest(i)
            if (t, i) < last or max(span, t + dur[i]) >= best_ms[0]:
                continue
            nodes[0] += 1
            if nodes[0] % 2000 == 0 and time.perf_counter() - t0 > time_limit_s:
                stopped[0] = True
                return
            sgs.place(i, t)
            walk(depth + 1, (t, i), max(span, t + dur[i]))
            sgs.unplace(i)

    walk(0, (-1, -1), 0)
    status = "feasible" if stopped[0] else "optimal"
    proven_bound = bound if stopped[0] else best_ms[0]
    return make_solution(problem, status, best, proven_bound, "exhaustive",
                         time.perf_counter() - t0)


# ------------------------------------------------------------------ CP-SAT


def _cpsat_model(problem: Problem, horizon: int, starts: Sequence[int],
                 free: Sequence[int] | None = None) -> tuple[Any, dict[int, Any]]:
    """The CP-SAT model of ``problem`` within ``horizon``: a start variable per free
    activity (default: all), the others fixed at ``starts``; only the constraints with a
    free activity in them. The start variables, by activity."""
    from ortools.sat.python import cp_model

    acts = problem.activities
    head, tail = heads_tails(problem)
    move = set(range(len(acts))) if free is None else set(free)
    m = cp_model.CpModel()
    var = {i: m.new_int_var(head[i], horizon - acts[i].duration_us - tail[i], f"s{i}")
           for i in sorted(move)}

    def begin(i: int) -> Any:
        return var[i] if i in move else starts[i]

    interval: dict[int, Any] = {}

    def span(i: int) -> Any:
        if i not in interval:
            interval[i] = m.new_fixed_size_interval_var(begin(i), acts[i].duration_us, f"i{i}")
        return interval[i]

    for first, then in problem.precedences:
        if first in move or then in move:
            m.add(begin(then) >= begin(first) + acts[first].duration_us)
    for pool in problem.pools:
        if not any(i in move for i, _ in pool.demands):
            continue
        members = [span(i) for i, _ in pool.demands]
        if pool.capacity == 1 and all(q == 1 for _, q in pool.demands):
            m.add_no_overlap(members)
        else:
            m.add_cumulative(members, [q for _, q in pool.demands], pool.capacity)
    return m, var


def _cpsat_run(model: Any, time_limit_s: float, workers: int, seed: int,
               gap: float = 0.0, deterministic: bool = True) -> tuple[Any, Any]:
    """``model`` solved with the planner's parameters: the solver and its status code.
    ``deterministic=False``: the wall clock alone limits it and the workers run free."""
    from ortools.sat.python import cp_model

    solver = cp_model.CpSolver()
    solver.parameters.max_time_in_seconds = max(time_limit_s, 0.01)
    # A deterministic work budget that normally ends the search before the wall clock
    # does: then a loaded machine gives the same plan as an idle one.
    if deterministic:
        solver.parameters.max_deterministic_time = max(time_limit_s / 2, 0.005)
    solver.parameters.num_workers = workers
    # Interleaved search runs CP-SAT's portfolio (including its lower-bound and LNS
    # workers) in fixed batches: the same answer for the same input whatever the thread
    # timing, as long as the solve ends before the time limit.
    solver.parameters.interleave_search = deterministic and workers > 1
    solver.parameters.random_seed = seed
    if gap > 0:
        solver.parameters.relative_gap_limit = gap
    return solver, solver.solve(model)


def solve_cpsat(problem: Problem, time_limit_s: float = 10.0, workers: int = 2,
                seed: int = 0, hint: Sequence[int] | None = None,
                known_bound_us: int = 0, gap: float = 0.0) -> Solution:
    """CP-SAT. ``hint``: a feasible schedule to start from (default: the greedy one);
    ``known_bound_us``: a makespan no schedule can beat, known from outside (a pricing
    solve of a restricted plan cannot beat the plan's bound), so a solve stops as soon as
    it meets it; ``gap``: stop once within this relative gap of the bound (0: prove)."""
    from ortools.sat.python import cp_model

    t0 = time.perf_counter()
    bad = _infeasible(problem, "cpsat", t0)
    if bad:
        return bad
    acts = problem.activities
    hint = list(hint) if hint is not None else greedy_starts(problem)
    horizon = max((s + a.duration_us for s, a in zip(hint, acts, strict=True)), default=0)
    bound = max(lower_bound_us(problem), known_bound_us)
    if hint and horizon <= bound:  # the start already meets the bound: nothing to search
        return make_solution(problem, "optimal", hint, bound, "cpsat (start meets bound)",
                             time.perf_counter() - t0)
    m, start = _cpsat_model(problem, horizon, hint)
    makespan = m.new_int_var(min(bound, horizon), horizon, "makespan")
    for i, a in enumerate(acts):
        if not problem.successors[i]:
            m.add(makespan >= start[i] + a.duration_us)
    m.minimize(makespan)
    for i, s in enumerate(hint):
        m.add_hint(start[i], s)
    solver, code = _cpsat_run(m, time_limit_s, workers, seed, gap)
    wall = time.perf_counter() - t0
    if code == cp_model.INFEASIBLE:  # cannot happen when the hint is valid; kept honest
        return Solution("infeasible", None, 0.0, False, (), "cpsat", wall)
    if code not in (cp_model.OPTIMAL, cp_model.FEASIBLE):
        return Solution("unknown", None, bound / 1000, False, (), "cpsat", wall)
    starts = left_shift(problem, [solver.value(start[i]) for i in range(len(acts))])
    bound = max(bound, math.ceil(solver.best_objective_bound - 1e-6))
    # With a gap limit CP-SAT says OPTIMAL once within the gap: then only the bound proves.
    status = "optimal" if code == cp_model.OPTIMAL and gap <= 0 else "feasible"
    return make_solution(problem, status, starts, bound, "cpsat", wall)


def site_ends(problem: Problem, starts: Sequence[int]) -> dict[int, int]:
    """When each site's last activity ends under ``starts``, by site."""
    out: dict[int, int] = {}
    for s, a in zip(starts, problem.activities, strict=True):
        out[a.site] = max(out.get(a.site, 0), s + a.duration_us)
    return out


def resolve_site(problem: Problem, starts: Sequence[int], site: int, time_limit_s: float,
                 workers: int = 8, seed: int = 0) -> list[int]:
    """One neighbourhood of the site search: every activity of ``site`` and every
    activity on a touchdown-wide pool may move, the rest stay where ``starts`` has them;
    CP-SAT shortens the end of ``site``, while each other site's shared blocks may move
    but not end after that site's present end (so no other site grows). The new starts
    (``starts`` itself when nothing better is found): always a schedule of the whole
    problem, never longer. ``workers``: CP-SAT's portfolio on this small model, not
    interleaved (more subsolvers than cores found shorter sites in the same time; the
    neighbourhood is time-limited, so not deterministic either way)."""
    from ortools.sat.python import cp_model

    acts = problem.activities
    mine = [i for i, a in enumerate(acts) if a.site == site]
    free = sorted(set(mine) | {i for p in problem.pools if p.kind == "shared"
                                for i, _ in p.demands})
    site_end = site_ends(problem, starts)
    horizon = max(site_end.values())
    m, var = _cpsat_model(problem, horizon, starts, free)
    end = m.new_int_var(0, horizon, "site_end")
    for i in free:
        if acts[i].site == site:
            m.add(end >= var[i] + acts[i].duration_us)
        else:
            m.add(var[i] + acts[i].duration_us <= site_end[acts[i].site])
        m.add_hint(var[i], starts[i])
    m.minimize(end)
    solver, code = _cpsat_run(m, time_limit_s, workers, seed, deterministic=False)
    if code not in (cp_model.OPTIMAL, cp_model.FEASIBLE):
        return list(starts)
    out = list(starts)
    for i in free:
        out[i] = solver.value(var[i])
    return out


def site_search(problem: Problem, starts: Sequence[int], bound_us: int, time_limit_s: float,
                workers: int = 2, seed: int = 0) -> list[int]:
    """A large-neighbourhood search over sites: the site that ends last is re-solved by
    ``resolve_site`` (each time with a fresh solver seed) and the schedule left-shifted,
    again and again. A site whose neighbourhood finds nothing is set aside (the next
    latest is taken) until some site gains, when every site is back in play: the time
    goes to the sites that set the makespan, and a stuck one gets another try once the
    shared blocks have moved. Sites are near copies coupled only by the touchdown-wide
    pools, so a site's own problem is small enough for CP-SAT to pack tightly while the
    shared blocks of the other sites make room. Stops at ``time_limit_s``, when every
    site is set aside, or when the makespan meets ``bound_us``; never longer than
    ``starts``."""
    t0 = time.perf_counter()
    sites = sorted({a.site for a in problem.activities})
    per = max(time_limit_s / (2 * len(sites)), 0.05) if sites else 0.0
    best = list(starts)
    ends = site_ends(problem, best)
    stuck: set[int] = set()
    attempt = 0
    while True:
        left = time_limit_s - (time.perf_counter() - t0)
        todo = [k for k in sites if k not in stuck]
        if left <= 0.02 or not todo or max(ends.values()) <= bound_us:
            return best
        site = max(todo, key=lambda k: (ends[k], -k))
        best = left_shift(problem, resolve_site(problem, best, site, min(per, left),
                                                4 * workers, seed + attempt))
        attempt += 1
        after = site_ends(problem, best)
        if after[site] < ends[site]:
            stuck.clear()
        else:
            stuck.add(site)
        ends = after


def solve_cpsat_staged(problem: Problem, time_limit_s: float = 10.0, workers: int = 2,
                       seed: int = 0) -> Solution:
    """CP-SAT in two stages when touchdown-wide pools couple the sites: the whole problem
    for a third of the time (the answer, if it is proven; its bound is the bound), then
    ``site_search`` from that schedule for the rest. Without shared pools, or when the
    first stage proves its answer, one stage."""
    t0 = time.perf_counter()
    if not any(p.kind == "shared" for p in problem.pools):
        return solve_cpsat(problem, time_limit_s, workers, seed)
    first = solve_cpsat(problem, time_limit_s / 3, workers, seed)
    if first.makespan_ms is None or first.proven_optimal:
        return first
    bound_us = int(round(first.lower_bound_ms * 1000))
    left = max(time_limit_s - (time.perf_counter() - t0), 0.05)
    starts = site_search(problem, first.starts_us, bound_us, left, workers, seed)
    return make_solution(problem, "feasible", starts, bound_us, "cpsat (site search)",
                         time.perf_counter() - t0)


def solve_warm(problem: Problem, plan_starts: Mapping[tuple[str, int], int],
               time_limit_s: float, known_bound_us: int = 0, backend: str = "cpsat",
               search: bool = True, rounds: int = 3) -> Solution:
    """A variant of a solved plan (an overlap forbidden, a what-if applied), solved from
    the plan's shape: serial SGS taking activities in the order the plan starts them
    (unknown ones at their earliest start), justified, is the start. When it meets the
    known bound (the plan's, which no restriction of it can beat) it is the answer,
    proven; else the backend searches on from it, stopping when it meets that bound
    (``search=False``: the start is the answer, not proven). ``rounds``: of
    justification."""
    t0 = time.perf_counter()
    bad = _infeasible(problem, "warm", t0)
    if bad:
        return bad
    head, _ = heads_tails(problem)
    prio = [float(plan_starts.get((a.block, a.site), head[i]))
            for i, a in enumerate(problem.activities)]
    start = justify(problem, schedule_by_priority(problem, prio), rounds=rounds)
    bound = max(lower_bound_us(problem), known_bound_us)
    span = max((s + a.duration_us for s, a in zip(start, problem.activities, strict=True)),
               default=0)
    if span <= bound or not search:
        return make_solution(problem, "feasible", start, bound, "warm SGS",
                             time.perf_counter() - t0)
    if backend != "cpsat":
        return SOLVERS[backend](problem, time_limit_s)
    sol = solve_cpsat(problem, time_limit_s, hint=start, known_bound_us=bound)
    if sol.makespan_ms is None:  # CP-SAT found nothing in time: the start stands
        return make_solution(problem, "feasible", start, bound, "warm SGS",
                             time.perf_counter() - t0)
    return sol


SOLVERS: dict[str, Solver] = {"cpsat": solve_cpsat_staged, "greedy": solve_greedy,
                              "exhaustive": solve_exhaustive}


def solve(problem: Problem, time_limit_s: float = 10.0, backend: str = "cpsat") -> Solution:
    """Solve with ``backend``; CP-SAT falls back to the greedy schedule if it finds none."""
    sol = SOLVERS[backend](problem, time_limit_s)
    if sol.status == "unknown":
        fallback = solve_greedy(problem)
        return make_solution(problem, "feasible", fallback.starts_us,
                             int(round(sol.lower_bound_ms * 1000)), "greedy (CP-SAT found none)",
                             sol.wall_s + fallback.wall_s)
    return sol
