"""Candidates: the overlaps a plan proposes, each priced by its marginal saving.

A pair of blocks overlaps when, on some site, the plan runs them at the same time. Its
marginal saving is the makespan with that overlap forbidden (on every site) minus the
plan's makespan: what the plan would lose without it. Zero means other overlaps can do
the same work — common when several blocks could fill the same gap. So each block is
priced too, with all its overlaps at once: the makespan with that block kept apart from
every other block on its site, minus the plan's. Pricing costs one solve each (the
planner's ``solve`` starts it from the plan's schedule and stops it at the plan's
bound), so only the pairs and blocks that overlap longest are priced (``limit`` each);
the rest are counted. For steps that add up to the plan, see ``roadmap``.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, replace

from .model import US_PER_MS, PlanSpec, PoolSpec, Problem, Solution, build_problem


@dataclass(frozen=True)
class Candidate:
    blocks: tuple[str, ...]
    saving_ms: float
    change: str            # program | design
    why: str
    kind: str = "pair"     # pair: two blocks; block: one block and all it overlaps;
    #                        whatif: a what-if of the block map
    overlap_ms: float = 0.0
    sites: tuple[int, ...] = ()
    proven: bool = True    # the saving rests on solves proven optimal
    source: str = "plan"   # "plan", or the name of the what-if

    def to_json(self) -> dict[str, object]:
        return {"blocks": list(self.blocks), "saving_ms": round(self.saving_ms, 3),
                "change": self.change, "why": self.why, "kind": self.kind,
                "overlap_ms": round(self.overlap_ms, 3), "sites": list(self.sites),
                "proven": self.proven, "source": self.source}


def overlaps(problem: Problem, solution: Solution) -> dict[tuple[str, str], tuple[int, list[int]]]:
    """(block a, block b) in program order -> (total overlap in us, the sites)."""
    by_site: dict[int, list[tuple[int, int, int]]] = {}
    for k, (a, s) in enumerate(zip(problem.activities, solution.starts_us, strict=True)):
        by_site.setdefault(a.site, []).append((s, s + a.duration_us, k))
    out: dict[tuple[str, str], tuple[int, list[int]]] = {}
    for site, spans in by_site.items():
        for x, (s1, e1, i) in enumerate(spans):
            for s2, e2, j in spans[x + 1:]:
                both = min(e1, e2) - max(s1, s2)
                if both > 0:
                    key = (problem.activities[i].block, problem.activities[j].block)
                    total, sites = out.get(key, (0, []))
                    out[key] = (total + both, sites + [site])
    return out


def price_overlaps(spec: PlanSpec, problem: Problem, plan: Solution,
                   solve: Callable[[Problem], Solution], limit: int
                   ) -> tuple[list[Candidate], int]:
    """The priced candidates (largest saving first) and how many overlapping pairs
    there are in all."""
    pairs = overlaps(problem, plan)
    ranked = sorted(pairs.items(), key=lambda kv: (-kv[1][0], kv[0]))
    out = []
    for (a, b), (both_us, sites) in ranked[:limit]:
        lost, proven = _lost(spec, ((a, b),), plan, solve)
        out.append(Candidate((a, b), lost, "program", why(spec, a, b, lost), "pair",
                             both_us / US_PER_MS, tuple(sorted(set(sites))), proven))
    out += _price_blocks(spec, pairs, plan, solve, limit)
    out.sort(key=lambda c: (-c.saving_ms, -c.overlap_ms, c.blocks))
    return out, len(pairs)


def _price_blocks(spec: PlanSpec, pairs: dict[tuple[str, str], tuple[int, list[int]]],
                  plan: Solution, solve: Callable[[Problem], Solution], limit: int
                  ) -> list[Candidate]:
    beside: dict[str, dict[str, int]] = {}
    for (a, b), (both_us, _) in pairs.items():
        beside.setdefault(a, {})[b] = both_us
        beside.setdefault(b, {})[a] = both_us
    if len(beside) <= 2:  # two blocks: the one pair says it all
        return []
    ranked = sorted(beside, key=lambda x: (-sum(beside[x].values()), x))[:limit]
    out = []
    for x in ranked:
        lost, proven = _lost(spec, tuple((x, y) for y in spec.names() if y != x), plan, solve)
        partners = sorted(beside[x], key=lambda y: (-beside[x][y], y))
        out.append(Candidate(
            (x, *partners), lost, "program", f"{x} beside {', '.join(partners)}: kept apart "
            f"from every other block, the plan loses {lost:.1f} ms", "block",
            sum(beside[x].values()) / US_PER_MS, (), proven))
    return out


def _lost(spec: PlanSpec, apart: tuple[tuple[str, str], ...], plan: Solution,
          solve: Callable[[Problem], Solution]) -> tuple[float, bool]:
    """How much longer the plan gets with these pairs kept apart (never below 0: a
    plan not proven optimal can be beaten by the re-solve), and whether both solves
    were proven optimal."""
    assert plan.makespan_ms is not None
    again = solve(build_problem(replace(spec, forbidden=spec.forbidden + apart)))
    lost = (again.makespan_ms or plan.makespan_ms) - plan.makespan_ms
    return max(lost, 0.0), again.proven_optimal and plan.proven_optimal


def why(spec: PlanSpec, a: str, b: str, lost_ms: float = 1.0) -> str:
    """One line: why the two may run together, e.g. "no shared resource; 1.40 W + 0.90 W
    within 3.0 W per site"."""
    ba, bb = spec.block(a), spec.block(b)
    common = [u for u in ba.uses if u in bb.uses]
    if common:
        pools = {u: spec.resources.get(u, PoolSpec()) for u in common}
        held = ", ".join(f"{u} ({p.count}{' shared' if p.shared else ' per site'})"
                         for u, p in pools.items())
        parts = [f"both hold {held}: enough of it for two"]
    else:
        parts = ["no shared resource"]
    if spec.power_w is not None:
        parts.append(f"{ba.power_w:.2f} W + {bb.power_w:.2f} W within {spec.power_w:.1f} W "
                     "per site")
    if spec.parallel is not None:
        parts.append(f"at most {spec.parallel} blocks at once per site")
    if lost_ms <= 0:
        parts.append("other overlaps do as well (no marginal saving)")
    return "; ".join(parts)
