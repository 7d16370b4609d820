"""The plan's constraint model, as plain objects: no solver is imported here.

Two levels, PuLP-style (STYLE.md item 8): a ``PlanSpec`` says what the engineer and the log
say — blocks in program order, their time on each site, power, resources held, ``after``,
pinned — and ``build_problem`` compiles it into a ``Problem`` that solvers take: activities
(one per block and site) with integer durations, precedences, and pools. A pool is one
renewable resource: at every instant the amounts of the running activities that draw on
it sum to at most its capacity. Every constraint of the plan is one of those two kinds:

- ``after``: on each site, a block starts once the blocks it names have ended;
- pinned: a pinned block keeps its serial slot. On its site it starts after every block
  before it in program order has ended, and every block after it starts after it ends
  (a barrier), so nothing overlaps it there. Other sites are unaffected: they run at the
  same time in the measured touchdown too;
- a per-site resource (``shared = false``): a pool of ``count`` on each site;
- a touchdown-wide resource (``shared = true``): one pool of ``count`` across all sites;
- the power limit: a pool per site, capacity ``limits.power_w``, each block drawing its
  ``power_w``; the touchdown's power limit (``limits.touchdown_power_w``): one pool over
  every site, each block on each site drawing its ``power_w``; the parallel limit: a
  pool per site, capacity ``limits.parallel``, each block drawing 1;
- a forbidden overlap (used to price a candidate): a pool of 1 per site over two blocks;
- blocks kept serial (a step of the roadmap: the program not yet changed): on each site,
  each of them starts once the one before it in program order has ended, as the
  measured program runs them; the other blocks are free to start beside them.

Time is integer microseconds and power integer milliwatts, fixed here once, so every
solver sees the very same numbers and their optima can be compared exactly. A duration
below 1 us is raised to 1 us (a zero-length block constrains nothing and only makes
ties ambiguous).

Program order is the measured order made consistent with ``after`` (a stable
topological order, ties kept in measured order), so barriers never contradict ``after``.
"""

from __future__ import annotations

import heapq
import math
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field, replace
from functools import cached_property

from .blockmap import topological  # shared: the block map's own order of blocks

US_PER_MS = 1000
MW_PER_W = 1000


# ------------------------------------------------------------------ what the engineer says


@dataclass(frozen=True)
class BlockSpec:
    """One block as planned: its time on each site (ms), what it draws and holds."""

    name: str
    times_ms: Mapping[int, float]
    power_w: float = 0.0
    uses: tuple[str, ...] = ()
    after: tuple[str, ...] = ()
    pinned: bool = False


@dataclass(frozen=True)
class PoolSpec:
    """A resource as declared: ``count`` per site, or one pool of ``count`` if shared."""

    count: int = 1
    shared: bool = False


@dataclass(frozen=True)
class PlanSpec:
    """Everything the plan is about. ``blocks`` is in program order; a ``uses`` name
    missing from ``resources`` is per site, count 1 (the block map's rule)."""

    sites: tuple[int, ...]
    blocks: tuple[BlockSpec, ...]
    resources: Mapping[str, PoolSpec] = field(default_factory=dict)
    power_w: float | None = None
    parallel: int | None = None
    forbidden: tuple[tuple[str, str], ...] = ()   # block pairs that may not overlap
    touchdown_power_w: float | None = None        # all sites together
    kept_serial: tuple[str, ...] = ()             # blocks that keep the program's chain

    def block(self, name: str) -> BlockSpec:
        for b in self.blocks:
            if b.name == name:
                return b
        raise KeyError(name)

    def names(self) -> list[str]:
        return [b.name for b in self.blocks]

    def with_blocks(self, blocks: Iterable[BlockSpec]) -> PlanSpec:
        return replace(self, blocks=tuple(blocks))

    def serial(self) -> PlanSpec:
        """The touchdown as the log runs it: each site's blocks one after another in
        program order (the baseline). Shared pools still serialise sites."""
        chain = [replace(b, after=(prev.name,) if prev else (), pinned=False)
                 for prev, b in zip((None, *self.blocks[:-1]), self.blocks, strict=True)]
        return replace(self, blocks=tuple(chain), forbidden=())


# ------------------------------------------------------------------ what solvers take


@dataclass(frozen=True)
class Activity:
    block: str
    site: int
    duration_us: int
    power_mw: int = 0


@dataclass(frozen=True)
class Pool:
    """A renewable resource: running activities' amounts sum to at most ``capacity``."""

    name: str
    kind: str           # resource | shared | power | touchdown_power | parallel | overlap
    capacity: int
    demands: tuple[tuple[int, int], ...]   # (activity index, amount > 0)


@dataclass(frozen=True)
class Problem:
    activities: tuple[Activity, ...]
    precedences: tuple[tuple[int, int], ...]   # (a, b): b starts once a has ended
    pools: tuple[Pool, ...]

    @cached_property
    def predecessors(self) -> list[list[int]]:
        out: list[list[int]] = [[] for _ in self.activities]
        for a, b in self.precedences:
            out[b].append(a)
        return out

    @cached_property
    def successors(self) -> list[list[int]]:
        out: list[list[int]] = [[] for _ in self.activities]
        for a, b in self.precedences:
            out[a].append(b)
        return out

    @cached_property
    def mirrored(self) -> Problem:
        """The same problem in reversed time: every precedence turned round."""
        return Problem(self.activities, tuple((b, a) for a, b in self.precedences), self.pools)

    @cached_property
    def pools_of(self) -> list[list[tuple[int, int]]]:
        """For each activity, the pools it draws on: (pool index, amount)."""
        out: list[list[tuple[int, int]]] = [[] for _ in self.activities]
        for p, pool in enumerate(self.pools):
            for i, q in pool.demands:
                out[i].append((p, q))
        return out

    @cached_property
    def order(self) -> list[int] | None:
        """A topological order (ties by index), or None when precedences have a cycle."""
        waiting = [len(set(p)) for p in self.predecessors]
        ready = [i for i, w in enumerate(waiting) if w == 0]
        heapq.heapify(ready)
        out = []
        while ready:
            i = heapq.heappop(ready)
            out.append(i)
            for j in set(self.successors[i]):
                waiting[j] -= 1
                if waiting[j] == 0:
                    heapq.heappush(ready, j)
        return out if len(out) == len(self.activities) else None

    def infeasible_reason(self) -> str | None:
        """Why no schedule can exist, or None. Capacities are the only other way."""
        if self.order is None:
            return "the precedences form a cycle"
        for pool in self.pools:
            for i, q in pool.demands:
                if q > pool.capacity:
                    a = self.activities[i]
                    return f"{a.block} on site {a.site} needs {q} of {pool.name} ({pool.capacity})"
        return None


@dataclass(frozen=True)
class Solution:
    """What every solver returns. ``status``: optimal | feasible | infeasible | unknown;
    ``schedule``: (block, site, start_ms, end_ms) in activity order; ``starts_us`` the
    same starts as integers."""

    status: str
    makespan_ms: float | None
    lower_bound_ms: float
    proven_optimal: bool
    schedule: tuple[tuple[str, int, float, float], ...] = ()
    solver: str = ""
    wall_s: float = 0.0
    starts_us: tuple[int, ...] = ()


def make_solution(problem: Problem, status: str, starts: Sequence[int] | None, bound_us: int,
                  solver: str, wall_s: float) -> Solution:
    """A Solution from integer starts; proven optimal when the bound is reached."""
    if starts is None:
        return Solution(status, None, bound_us / US_PER_MS, False, (), solver, wall_s, ())
    acts = problem.activities
    makespan = max((s + a.duration_us for s, a in zip(starts, acts, strict=True)), default=0)
    bound = min(max(bound_us, 0), makespan)
    proven = status == "optimal" or makespan <= bound
    schedule = tuple((a.block, a.site, s / US_PER_MS, (s + a.duration_us) / US_PER_MS)
                     for a, s in zip(acts, starts, strict=True))
    return Solution("optimal" if proven else status, makespan / US_PER_MS, bound / US_PER_MS,
                    proven, schedule, solver, wall_s, tuple(starts))


# ------------------------------------------------------------------ compiling a spec


def to_us(ms: float) -> int:
    return max(1, int(round(ms * US_PER_MS)))


def program_order(blocks: Sequence[BlockSpec]) -> list[BlockSpec]:
    """Measured order made consistent with ``after``: the block map's stable topological
    sort (at each step the earliest block, in measured order, whose ``after`` have run)."""
    known = {b.name for b in blocks}
    by_name = {b.name: b for b in blocks}
    graph = {b.name: [d for d in b.after if d in known] for b in blocks}
    return [by_name[n] for n in topological(graph, "the plan")]


def build_problem(spec: PlanSpec) -> Problem:
    blocks = program_order(spec.blocks)
    sites = spec.sites
    index = {(b.name, s): k * len(sites) + j
             for k, b in enumerate(blocks) for j, s in enumerate(sites)}
    acts = tuple(Activity(b.name, s, to_us(b.times_ms[s]), int(round(b.power_w * MW_PER_W)))
                 for b in blocks for s in sites)
    return Problem(acts, tuple(_precedences(blocks, sites, index, set(spec.kept_serial))),
                   tuple(p for p in _pools(spec, blocks, index, acts) if _binding(p)))


def _precedences(blocks: list[BlockSpec], sites: tuple[int, ...],
                 index: Mapping[tuple[str, int], int],
                 kept: set[str]) -> Iterable[tuple[int, int]]:
    names = [b.name for b in blocks]
    rank = {n: k for k, n in enumerate(names)}
    chain = [n for n in names if n in kept]
    edges: set[tuple[str, str]] = set(zip(chain, chain[1:], strict=False))
    for k, b in enumerate(blocks):
        edges.update((d, b.name) for d in b.after if d in rank)
        if b.pinned:
            edges.update((before, b.name) for before in names[:k])
            edges.update((b.name, later) for later in names[k + 1:])
    for first, then in sorted(edges, key=lambda e: (rank[e[0]], rank[e[1]])):
        for s in sites:
            yield index[(first, s)], index[(then, s)]


def _pools(spec: PlanSpec, blocks: list[BlockSpec], index: Mapping[tuple[str, int], int],
           acts: Sequence[Activity]) -> Iterable[Pool]:
    users: dict[str, list[str]] = {}
    for b in blocks:
        for u in b.uses:
            users.setdefault(u, []).append(b.name)
    for name, holders in users.items():
        res = spec.resources.get(name, PoolSpec())
        if res.shared:
            yield Pool(name, "shared", res.count,
                       tuple((index[(h, s)], 1) for h in holders for s in spec.sites))
        else:
            for s in spec.sites:
                yield Pool(f"{name}@site{s}", "resource", res.count,
                           tuple((index[(h, s)], 1) for h in holders))
    if spec.touchdown_power_w is not None:
        yield Pool("power@touchdown", "touchdown_power",
                   int(round(spec.touchdown_power_w * MW_PER_W)),
                   tuple((i, a.power_mw) for i, a in enumerate(acts) if a.power_mw > 0))
    for s in spec.sites:
        mine = [index[(b.name, s)] for b in blocks]
        if spec.power_w is not None:
            yield Pool(f"power@site{s}", "power", int(round(spec.power_w * MW_PER_W)),
                       tuple((i, acts[i].power_mw) for i in mine if acts[i].power_mw > 0))
        if spec.parallel is not None:
            yield Pool(f"parallel@site{s}", "parallel", spec.parallel,
                       tuple((i, 1) for i in mine))
        for x, y in spec.forbidden:
            if (x, s) in index and (y, s) in index:
                yield Pool(f"apart:{x}|{y}@site{s}", "overlap", 1,
                           ((index[(x, s)], 1), (index[(y, s)], 1)))


def _binding(pool: Pool) -> bool:
    """A pool whose demands together fit its capacity can never be exceeded: left out,
    so solvers carry only the constraints that can bite."""
    return sum(q for _, q in pool.demands) > pool.capacity


# ------------------------------------------------------------------ bounds


def heads_tails(problem: Problem) -> tuple[list[int], list[int]]:
    """Earliest start (longest path in) and tail (longest path out after the end) of each
    activity: the critical-path method on the precedence DAG."""
    order = problem.order or []
    acts = problem.activities
    head = [0] * len(acts)
    for i in order:
        for j in problem.successors[i]:
            head[j] = max(head[j], head[i] + acts[i].duration_us)
    tail = [0] * len(acts)
    for i in reversed(order):
        for j in problem.successors[i]:
            tail[i] = max(tail[i], acts[j].duration_us + tail[j])
    return head, tail


def lower_bound_us(problem: Problem) -> int:
    """A makespan no schedule can beat: the largest of the critical path (longest chain
    of precedences) and, for every pool, its energy bounds. The activities drawing on a
    pool need sum(duration x amount) / capacity of time; those whose head is at least h
    cannot start before h nor end later than makespan minus the smallest of their tails,
    so makespan >= h + their area / capacity + that tail, for every h (and the same
    read backwards, over the activities whose tail is at least t). For the power pool
    the area is power-time over the power limit; for the parallel pool a site's total
    over the parallel limit; for a shared pool its load over its count. Taking every
    threshold, not only the earliest head, is what sees a pinned first block: nothing
    else starts before it ends, so the rest of the site's work comes after it."""
    if not problem.activities:
        return 0
    head, tail = heads_tails(problem)
    acts = problem.activities
    bound = max(h + a.duration_us + t for h, a, t in zip(head, acts, tail, strict=True))
    for pool in problem.pools:
        members = [(i, q) for i, q in pool.demands if q > 0]
        if members:
            bound = max(bound, _energy_bound(members, head, tail, acts, pool.capacity),
                        _energy_bound(members, tail, head, acts, pool.capacity))
    return bound


def _energy_bound(members: Sequence[tuple[int, int]], head: Sequence[int],
                  tail: Sequence[int], acts: Sequence[Activity], capacity: int) -> int:
    """max over h of h + area(members with head >= h) / capacity + their least tail
    (called with heads and tails swapped for the backward reading)."""
    best, area, least = 0, 0, math.inf
    for i, q in sorted(members, key=lambda m: -head[m[0]]):  # latest head first
        area += acts[i].duration_us * q
        least = min(least, tail[i])
        best = max(best, head[i] + math.ceil(area / capacity) + int(least))
    return best
