"""One contract suite over every solver backend (STYLE.md item 8), on small random plans.

References from outside the solvers:
- brute force over every integer start vector (tiny cases) checks the exhaustive search;
- the exhaustive search (tiny to small cases) checks CP-SAT's optimum and every bound;
- ``check_schedule`` below reads the *spec* — blocks, sites, ``after``, pinned barriers,
  resources, power (per site and per touchdown) and parallel limits — and never the
  compiled ``Problem``, so a mistake in ``build_problem`` cannot hide in both.
"""

from __future__ import annotations

import itertools
import random
import time
from collections.abc import Sequence

import pytest

from pipeline.plan.model import (
    BlockSpec,
    PlanSpec,
    PoolSpec,
    Problem,
    Solution,
    build_problem,
    lower_bound_us,
    make_solution,
)
from pipeline.plan.solvers import (
    SOLVERS,
    resolve_site,
    site_ends,
    site_search,
    solve,
    solve_exhaustive,
    solve_greedy,
)

Schedule = Sequence[tuple[str, int, float, float]]
EPS = 1e-6


# ------------------------------------------------------------------ the independent checker


def check_schedule(spec: PlanSpec, schedule: Schedule) -> list[str]:
    """Every way ``schedule`` breaks ``spec``; [] when it is feasible. Program order is
    the spec's block order (the random cases only ever name earlier blocks in after)."""
    problems: list[str] = []
    at = {(b, s): (t0, t1) for b, s, t0, t1 in schedule}
    if len(at) != len(schedule) or set(at) != {(b.name, s) for b in spec.blocks
                                                 for s in spec.sites}:
        return ["not exactly one interval per block and site"]
    names = [b.name for b in spec.blocks]
    for b in spec.blocks:
        for s in spec.sites:
            t0, t1 = at[(b.name, s)]
            if t0 < -EPS or abs((t1 - t0) - max(b.times_ms[s], 0.001)) > 1e-3:
                problems.append(f"{b.name}@{s}: wrong duration or negative start")
            for d in b.after:
                if t0 < at[(d, s)][1] - EPS:
                    problems.append(f"{b.name}@{s} starts before {d} ends")
            if b.pinned:
                k = names.index(b.name)
                if any(at[(x, s)][1] > t0 + EPS for x in names[:k]):
                    problems.append(f"pinned {b.name}@{s}: an earlier block has not ended")
                if any(at[(x, s)][0] < t1 - EPS for x in names[k + 1:]):
                    problems.append(f"pinned {b.name}@{s}: a later block starts too soon")
    for t, _ in sorted({(t0, 0) for _, _, t0, _ in schedule}):
        running = [(spec.block(b), s) for b, s, t0, t1 in schedule
                   if t0 <= t + EPS and t < t1 - EPS]
        problems += _load_problems(spec, running, t)
    return problems


def _load_problems(spec: PlanSpec, running: list[tuple[BlockSpec, int]], t: float) -> list[str]:
    out = []
    for s in spec.sites:
        here = [b for b, site in running if site == s]
        if spec.power_w is not None and sum(b.power_w for b in here) > spec.power_w + 1e-9:
            out.append(f"t={t}: site {s} draws more than {spec.power_w} W")
        if spec.parallel is not None and len(here) > spec.parallel:
            out.append(f"t={t}: site {s} runs more than {spec.parallel} blocks")
    td = spec.touchdown_power_w
    if td is not None and sum(b.power_w for b, _ in running) > td + 1e-9:
        out.append(f"t={t}: the touchdown draws more than {td} W")
    names = {u for b, _ in running for u in b.uses}
    for u in names:
        res = spec.resources.get(u, PoolSpec())
        groups = [None] if res.shared else list(spec.sites)
        for g in groups:
            n = sum(1 for b, s in running if u in b.uses and (g is None or s == g))
            if n > res.count:
                out.append(f"t={t}: {u} used {n} times, {res.count} exist")
    return out


# ------------------------------------------------------------------ random small plans


def random_spec(seed: int, max_acts: int = 8) -> PlanSpec:
    rng = random.Random(seed)
    n_sites = rng.choice([1, 1, 2, 2, 3])
    n_blocks = rng.randint(2, max(2, max_acts // n_sites))
    sites = tuple(range(1, n_sites + 1))
    resources = {"meter": PoolSpec(rng.choice([1, 1, 2]), True),
                 "port": PoolSpec(rng.choice([1, 2]), False)}
    power = rng.choice([None, 2.0, 3.0])
    blocks = []
    for k in range(n_blocks):
        nominal = rng.randint(1, 40)
        times = {s: float(max(1, nominal + rng.randint(-2, 2))) for s in sites}
        uses = tuple(u for u in ("meter", "port", "probe") if rng.random() < 0.3)
        after = tuple(b.name for b in blocks if rng.random() < 0.2)
        watts = rng.choice([0.0, 0.5, 1.0, 1.5, 2.0])
        blocks.append(BlockSpec(f"b{k}", times, min(watts, power or watts), uses, after,
                                pinned=rng.random() < 0.15))
    parallel = rng.choice([None, 1, 2, 3])
    # drawn last, so the draws above (and the cases they made) stay as they were
    touchdown = rng.choice([None, None, None, 3.0, 4.0])
    return PlanSpec(sites, tuple(blocks), resources, power, parallel,
                    touchdown_power_w=touchdown)


SEEDS = range(40)


@pytest.fixture(scope="module")
def optimum() -> dict[int, Solution]:
    """The exhaustive optimum of every random case: the reference for the others."""
    out = {}
    for seed in SEEDS:
        sol = solve_exhaustive(build_problem(random_spec(seed)), 60.0)
        assert sol.status == "optimal", seed
        out[seed] = sol
    return out


# ------------------------------------------------------------------ the contract


@pytest.mark.parametrize("backend", sorted(SOLVERS))
@pytest.mark.parametrize("seed", SEEDS)
def test_backend_contract(backend: str, seed: int, optimum: dict[int, Solution]) -> None:
    spec = random_spec(seed)
    sol = SOLVERS[backend](build_problem(spec), 10.0)
    best = optimum[seed].makespan_ms
    assert best is not None
    assert sol.status in ("optimal", "feasible")
    assert check_schedule(spec, sol.schedule) == []
    assert sol.makespan_ms == pytest.approx(max(t1 for *_, t1 in sol.schedule))
    assert sol.lower_bound_ms <= best + EPS             # a bound never beats the optimum
    assert sol.makespan_ms >= best - EPS               # nothing beats the optimum
    if backend != "greedy":                            # the exact ones find it
        assert sol.proven_optimal and sol.makespan_ms == pytest.approx(best, abs=EPS)
    if sol.proven_optimal:
        assert sol.lower_bound_ms == pytest.approx(sol.makespan_ms)


@pytest.mark.parametrize("backend", sorted(SOLVERS))
def test_same_input_same_schedule(backend: str) -> None:
    for seed in (3, 11, 29):
        a = SOLVERS[backend](build_problem(random_spec(seed)), 10.0)
        b = SOLVERS[backend](build_problem(random_spec(seed)), 10.0)
        assert a.schedule == b.schedule and a.status == b.status


def test_model_bound_never_exceeds_the_optimum(optimum: dict[int, Solution]) -> None:
    for seed in SEEDS:
        best = optimum[seed].makespan_ms
        assert best is not None
        assert lower_bound_us(build_problem(random_spec(seed))) / 1000 <= best + EPS


# ------------------------------------------------------------------ the exhaustive search itself


def brute_force_ms(spec: PlanSpec) -> float:
    """The least makespan M for which some vector of integer-ms starts fits in [0, M]:
    with integer-ms durations some optimal schedule has integer-ms starts."""
    acts = [(b, s) for b in spec.blocks for s in spec.sites]
    dur = [int(b.times_ms[s]) for b, s in acts]
    for m in range(1, sum(dur) + 1):
        for starts in itertools.product(*(range(m - d + 1) for d in dur)):
            sched = [(b.name, s, float(t), float(t + d))
                     for t, (b, s), d in zip(starts, acts, dur, strict=True)]
            if not check_schedule(spec, sched):
                return float(m)
    raise AssertionError("the serial schedule always fits")


def tiny_spec(seed: int) -> PlanSpec:
    rng = random.Random(1000 + seed)
    spec = random_spec(1000 + seed, max_acts=4)
    blocks = [BlockSpec(b.name, {s: float(rng.randint(1, 3)) for s in spec.sites}, b.power_w,
                        b.uses, b.after, b.pinned) for b in spec.blocks[:4 // len(spec.sites)]]
    names = {b.name for b in blocks}
    blocks = [BlockSpec(b.name, b.times_ms, b.power_w, b.uses,
                        tuple(d for d in b.after if d in names), b.pinned) for b in blocks]
    return spec.with_blocks(blocks)


@pytest.mark.parametrize("seed", range(12))
def test_exhaustive_matches_brute_force(seed: int) -> None:
    spec = tiny_spec(seed)
    sol = solve_exhaustive(build_problem(spec))
    assert sol.makespan_ms == pytest.approx(brute_force_ms(spec))


# ------------------------------------------------------------------ statuses and edges


def test_infeasible_when_a_demand_exceeds_its_pool() -> None:
    from pipeline.plan.model import Activity, Pool

    p = Problem((Activity("a", 1, 10),), (), (Pool("power@site1", "power", 5, ((0, 9),)),))
    for backend in SOLVERS:
        sol = solve(p, 1.0, backend)
        assert (sol.status, sol.makespan_ms, sol.schedule) == ("infeasible", None, ())


def test_empty_plan_is_trivially_optimal() -> None:
    p = build_problem(PlanSpec((1,), ()))
    for backend in SOLVERS:
        sol = solve(p, 1.0, backend)
        assert (sol.status, sol.makespan_ms, sol.proven_optimal) == ("optimal", 0.0, True)


def test_shared_pool_serialises_sites_and_the_bound_sees_it() -> None:
    """Four sites share one meter for a 100 ms block: 400 ms whatever the order, and the
    pool's load over its count says so before any search."""
    spec = PlanSpec((1, 2, 3, 4), (BlockSpec("radio", {s: 100.0 for s in (1, 2, 3, 4)},
                                             uses=("meter",)),),
                    {"meter": PoolSpec(1, True)})
    problem = build_problem(spec)
    assert lower_bound_us(problem) == 400_000
    for backend in SOLVERS:
        sol = solve(problem, 5.0, backend)
        assert sol.makespan_ms == pytest.approx(400.0) and sol.proven_optimal
        assert check_schedule(spec, sol.schedule) == []


def test_energy_bound_counts_the_work_after_a_pinned_first_block() -> None:
    """One site, two blocks at a time, a pinned 10 ms contact and four 20 ms blocks: by
    hand, nothing overlaps contact, so the four need 4 x 20 / 2 = 40 ms after it, 50 ms
    in all; the exhaustive search agrees. (Reading the pool from its earliest head
    alone would say ceil(90 / 2) = 45.) The same backwards for a pinned last block."""
    work = [BlockSpec(f"w{k}", {1: 20.0}) for k in range(4)]
    first = PlanSpec((1,), (BlockSpec("contact", {1: 10.0}, pinned=True), *work),
                     parallel=2)
    last = PlanSpec((1,), (*work, BlockSpec("bin_out", {1: 10.0}, pinned=True)),
                    parallel=2)
    for spec in (first, last):
        problem = build_problem(spec)
        assert lower_bound_us(problem) == 50_000
        sol = solve_exhaustive(problem, 10.0)
        assert sol.status == "optimal" and sol.makespan_ms == pytest.approx(50.0)


def _couples_sites(spec: PlanSpec) -> bool:
    return len(spec.sites) > 1 and any(p.kind == "shared" for p in build_problem(spec).pools)


def _coupled_larger(n: int) -> list[PlanSpec]:
    """The first ``n`` random specs of up to 24 activities whose sites share a pool."""
    return [s for s in (random_spec(seed, 24) for seed in range(200)) if _couples_sites(s)][:n]


def test_site_search_keeps_a_feasible_schedule_and_never_lengthens(
        optimum: dict[int, Solution]) -> None:
    """From the greedy schedule, re-solving one site at a time (the shared blocks free):
    every result is a schedule of the spec (the independent checker), never longer than
    the start, and never shorter than the exhaustive optimum on the small cases."""
    cases: list[tuple[PlanSpec, Solution | None]] = [
        (random_spec(k), optimum[k]) for k in SEEDS if _couples_sites(random_spec(k))]
    cases += [(s, None) for s in _coupled_larger(6)]
    assert len(cases) >= 10
    for spec, best in cases:
        problem = build_problem(spec)
        start = solve_greedy(problem)
        starts = site_search(problem, start.starts_us, 0, 1.0)
        after = make_solution(problem, "feasible", starts, 0, "site search", 0.0)
        assert check_schedule(spec, after.schedule) == []
        assert after.makespan_ms is not None and start.makespan_ms is not None
        assert after.makespan_ms <= start.makespan_ms + EPS
        if best is not None and best.makespan_ms is not None:
            assert after.makespan_ms >= best.makespan_ms - EPS


def test_site_search_takes_the_latest_site_and_stops_when_every_site_is_stuck(
        monkeypatch: pytest.MonkeyPatch) -> None:
    """The search's order, with neighbourhoods that never find anything (a stand-in for
    ``resolve_site``): two sites, two 10 ms blocks each, one at a time; site 1's second
    block left 40 ms late. By hand: site 1 (ending at 60 ms) goes first; the left-shift
    after it brings site 1 back to 20 ms, a gain, so site 1 is in play again and goes
    next (a tie at 20 ms, the lower site first), finds nothing, then site 2 finds
    nothing, and with both set aside the search stops, long before its time limit. Each
    neighbourhood gets its own solver seed."""
    import pipeline.plan.solvers as solvers

    spec = PlanSpec((1, 2), (BlockSpec("a", {1: 10.0, 2: 10.0}),
                             BlockSpec("b", {1: 10.0, 2: 10.0})), parallel=1)
    problem = build_problem(spec)
    late = [0] * len(problem.activities)
    for i, act in enumerate(problem.activities):
        if act.block == "b":
            late[i] = 50_000 if act.site == 1 else 10_000
    calls: list[tuple[int, int]] = []

    def nothing_found(problem: Problem, starts: Sequence[int], site: int, limit: float,
                      workers: int = 8, seed: int = 0) -> list[int]:
        calls.append((site, seed))
        return list(starts)

    monkeypatch.setattr(solvers, "resolve_site", nothing_found)
    t0 = time.perf_counter()
    out = site_search(problem, late, 0, 30.0, seed=5)
    assert time.perf_counter() - t0 < 5.0
    assert [site for site, _ in calls] == [1, 1, 2]
    assert [seed for _, seed in calls] == [5, 6, 7]
    assert site_ends(problem, out) == {1: 20_000, 2: 20_000}


def test_resolve_site_lets_no_other_site_end_later() -> None:
    """One neighbourhood moves a site's blocks and every shared block; the other sites'
    ends must not grow (their shared blocks stay within their present ends), and the
    result is still a schedule of the spec (the independent checker)."""
    cases = _coupled_larger(4)
    assert cases
    for spec in cases:
        problem = build_problem(spec)
        starts = list(solve_greedy(problem).starts_us)

        before = site_ends(problem, starts)
        site = max(before, key=lambda k: before[k])
        after_starts = resolve_site(problem, starts, site, 0.5)
        after = site_ends(problem, after_starts)
        assert all(after[k] <= before[k] for k in before)
        done = make_solution(problem, "feasible", after_starts, 0, "resolve", 0.0)
        assert check_schedule(spec, done.schedule) == []
