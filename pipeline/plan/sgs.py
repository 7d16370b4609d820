"""The serial schedule generation scheme (serial SGS), the one placement routine the
greedy heuristic, the exhaustive search, the baseline and the left-shift all share.

Serial SGS (Kelley 1963; Kolisch 1996, "Serial and parallel resource-constrained project
scheduling methods revisited"): take activities one at a time in a precedence-feasible
order and start each at the earliest time at which its predecessors have ended and every
pool it draws on has room for its whole duration, given the activities already placed.
It may fill a gap before activities placed earlier. Two textbook facts the solvers lean on:
every schedule it builds is *active* (no activity can start earlier without moving
another), and among the active schedules there is always one of least makespan.
"""

from __future__ import annotations

import heapq
from collections.abc import Iterable, Sequence

from .model import Problem


class SerialSGS:
    """A partial schedule that grows by ``place`` and shrinks by ``unplace`` (last in,
    first out: the exhaustive search walks a tree)."""

    def __init__(self, problem: Problem):
        self.problem = problem
        self.start: list[int | None] = [None] * len(problem.activities)
        self.duration = [a.duration_us for a in problem.activities]
        self.capacity = [p.capacity for p in problem.pools]
        self.busy: list[list[tuple[int, int, int]]] = [[] for _ in problem.pools]  # s, e, q

    def ready(self, i: int) -> bool:
        return self.start[i] is None and all(self.start[p] is not None
                                             for p in self.problem.predecessors[i])

    def earliest(self, i: int) -> int:
        """The earliest start of activity i (its predecessors must be placed)."""
        est = 0
        for p in self.problem.predecessors[i]:
            s = self.start[p]
            assert s is not None, "a predecessor is not placed yet"
            est = max(est, s + self.duration[p])
        pools = self.problem.pools_of[i]
        d = self.duration[i]
        t, moved = est, True
        while moved:  # every pool in turn, until one start suits them all
            moved = False
            for p, q in pools:
                fit = self._fit_from(p, q, t, d)
                if fit > t:
                    t, moved = fit, True
        return t

    def _fit_from(self, p: int, q: int, t: int, d: int) -> int:
        """The earliest start >= t at which pool p has room for q over a duration d.
        Where the load is too high at a point x of [t, t + d), no start before the
        earliest end of the activities running at x can fit (the load stays that high
        until then), so the search jumps there."""
        room = self.capacity[p] - q
        if room < 0:
            raise AssertionError("unreachable: a demand above its pool's capacity")
        busy = self.busy[p]
        while True:
            over = [(s, e, a) for s, e, a in busy if s < t + d and e > t]
            if sum(a for _, _, a in over) <= room:
                return t
            # The load on [t, t + d) is piecewise constant and only rises at a start.
            for x in [t] + sorted(s for s, _, _ in over if s > t):
                here = [(e, a) for s, e, a in over if s <= x < e]
                if sum(a for _, a in here) > room:
                    t = min(e for e, _ in here)
                    break
            else:
                return t

    def place(self, i: int, t: int) -> None:
        self.start[i] = t
        for p, q in self.problem.pools_of[i]:
            self.busy[p].append((t, t + self.duration[i], q))

    def unplace(self, i: int) -> None:
        self.start[i] = None
        for p, _ in self.problem.pools_of[i]:
            self.busy[p].pop()

    def starts(self) -> list[int]:
        assert all(s is not None for s in self.start)
        return [s for s in self.start if s is not None]


def schedule_by_priority(problem: Problem, priority: Sequence[float]) -> list[int]:
    """Serial SGS that takes, at each step, the ready activity (every predecessor
    placed) of least priority, the lower index on ties; the starts."""
    waiting = [len(set(p)) for p in problem.predecessors]
    ready = [(priority[i], i) for i, w in enumerate(waiting) if w == 0]
    heapq.heapify(ready)
    sgs = SerialSGS(problem)
    while ready:
        _, i = heapq.heappop(ready)
        sgs.place(i, sgs.earliest(i))
        for j in set(problem.successors[i]):
            waiting[j] -= 1
            if waiting[j] == 0:
                heapq.heappush(ready, (priority[j], j))
    return sgs.starts()


def schedule_in_order(problem: Problem, order: Iterable[int]) -> list[int]:
    """Serial SGS over a precedence-feasible activity list; the starts."""
    sgs = SerialSGS(problem)
    for i in order:
        sgs.place(i, sgs.earliest(i))
    return sgs.starts()


def left_shift(problem: Problem, starts: Sequence[int]) -> list[int]:
    """Serial SGS over the activities sorted by their start in a feasible schedule: no
    activity starts later than it did, so the makespan never grows (each one still fits
    where it was, because the earlier ones only moved left). It removes idle time a
    solver left in, so overlaps and candidates reflect the schedule's real shape."""
    rank = {i: k for k, i in enumerate(problem.order or range(len(starts)))}
    return schedule_in_order(problem, sorted(range(len(starts)),
                                             key=lambda i: (starts[i], rank[i])))


def justify(problem: Problem, starts: Sequence[int], rounds: int = 10) -> list[int]:
    """Forward-backward improvement (double justification; Tormos & Lova 2001, Valls,
    Ballestin & Quintanilla 2005): schedule the mirrored problem (precedences reversed)
    by serial SGS in order of latest end, mirror it back, left-shift; repeat while the
    makespan drops. Neither pass can lengthen the schedule (the left-shift argument,
    once in each direction)."""
    best = list(starts)
    span = _makespan(problem, best)
    for _ in range(rounds):
        ends = [s + a.duration_us for s, a in zip(best, problem.activities, strict=True)]
        back = left_shift(problem.mirrored, [span - e for e in ends])
        back_span = _makespan(problem, back)
        fwd = left_shift(problem, [back_span - (s + a.duration_us)
                                   for s, a in zip(back, problem.activities, strict=True)])
        new = _makespan(problem, fwd)
        if new >= span:
            break
        best, span = fwd, new
    return best


def _makespan(problem: Problem, starts: Sequence[int]) -> int:
    return max((s + a.duration_us for s, a in zip(starts, problem.activities, strict=True)),
               default=0)
