"""The projection: what a plan saves in touchdown time, UPH, tester hours and cost, with
Amdahl's law as a cross-check of the overall saving.

The model knows block times only; the measured touchdown also holds time no block
accounts for (per-part overhead, waits the model does not see). So the touchdown after
the plan is the measured one minus the time the plan saves: that unmodelled time stays.

    UPH = 3600 * N / (touchdown_s + index_s)         N sites per touchdown
    tester hours per year = units_per_year / UPH
    cost per year = tester hours x tester_cost_per_hour

Amdahl's law (Amdahl 1967): speeding up a fraction f of the work by s gives an overall
speed-up 1 / ((1 - f) + f / s). Here f is the share of the sites' serial block time
(per-site sums) in the blocks the plan changes — those it overlaps with another on their
site, or merges or replaces — and s is that time over the time those blocks then occupy
(the union of their intervals, per site). Waits for shared instruments lie outside this
picture, so the two figures can differ; far apart, they say where to look.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

from .blockmap import Economics
from .model import US_PER_MS, PlanSpec, Problem, Solution


def uph(sites: int, touchdown_ms: float, index_ms: float) -> float:
    """Units per hour: N parts every touchdown plus index."""
    return 3600.0 * sites / ((touchdown_ms + index_ms) / 1000.0)


def amdahl_speedup(f: float, s: float) -> float:
    """Overall speed-up when a fraction f of the time runs s times faster (Amdahl 1967)."""
    return 1.0 / ((1.0 - f) + f / s)


@dataclass(frozen=True)
class AmdahlCheck:
    f: float
    s: float
    serial_ms: float = 0.0   # mean per-site serial block time: what f and s are shares of

    @property
    def saving_pct(self) -> float:
        return 100.0 * (1.0 - 1.0 / amdahl_speedup(self.f, self.s)) if self.f > 0 else 0.0

    @property
    def touchdown_ms(self) -> float:
        """The per-site serial time after the speed-up: Amdahl's estimate of the plan."""
        return self.serial_ms / amdahl_speedup(self.f, self.s) if self.f > 0 else self.serial_ms


def amdahl_inputs(base: PlanSpec, problem: Problem, solution: Solution,
                  origins: Mapping[str, tuple[str, ...]], changed: set[str]) -> AmdahlCheck:
    """f and s of a plan against the serial ``base``. ``origins`` maps a planned block
    that stands for several measured ones (a broadcast) to them; ``changed`` names planned
    blocks that differ from the measured ones (an alternative)."""
    spans: dict[int, list[tuple[int, int, str]]] = {}
    for a, t in zip(problem.activities, solution.starts_us, strict=True):
        spans.setdefault(a.site, []).append((t, t + a.duration_us, a.block))
    times = {b.name: b.times_ms for b in base.blocks}
    occupied_us, work = 0, 0.0
    for site, row in spans.items():
        picked = [(t0, t1, name) for t0, t1, name in row
                  if name in origins or name in changed
                  or any(u0 < t1 and u1 > t0 for u0, u1, other in row if other != name)]
        occupied_us += _union([(t0, t1) for t0, t1, _ in picked])
        work += sum(times[o][site] for *_, name in picked for o in origins.get(name, (name,)))
    total = sum(b.times_ms[s] for b in base.blocks for s in base.sites)
    if not work or not occupied_us or not total:
        return AmdahlCheck(0.0, 1.0, total / max(len(base.sites), 1))
    return AmdahlCheck(work / total, work / (occupied_us / US_PER_MS),
                       total / len(base.sites))


def _union(intervals: list[tuple[int, int]]) -> int:
    covered, reach = 0, None
    for s, e in sorted(intervals):
        if reach is None or s > reach:
            covered += e - s
            reach = e
        elif e > reach:
            covered += e - reach
            reach = e
    return covered


def throughput(sites: int, before_ms: float, saving_ms: float, index_ms: float | None,
               eco: Economics | None, whatif_saving_ms: float | None = None) -> dict[str, Any]:
    """Touchdown, UPH, tester hours and cost before and after; ``index_ms`` is the lot's
    unless the block map's [economics] sets one."""
    if eco is not None and eco.index_ms is not None:
        index, source = eco.index_ms, "block map [economics] index_ms"
    elif index_ms is not None:
        index, source = index_ms, "measured from the lot's wall clock (1 s resolution)"
    else:
        index, source = 0.0, "unknown (no lot wall clock): taken as 0"
    before = _figures(sites, before_ms, index, eco)
    out: dict[str, Any] = {
        "sites": sites, "index_ms": round(index, 3), "index_source": source,
        "units_per_year": eco.units_per_year if eco else None,
        "tester_cost_per_hour": eco.tester_cost_per_hour if eco else None,
        "currency": eco.currency if eco else "", "before": before,
        **_after(sites, before, before_ms - saving_ms, index, eco)}
    if whatif_saving_ms is not None:
        out["with_whatifs"] = _after(sites, before, before_ms - whatif_saving_ms, index, eco)
    if eco is None:
        out["note"] = "no [economics] in the block map: tester hours and cost not projected"
    return out


def _figures(sites: int, touchdown_ms: float, index: float,
             eco: Economics | None) -> dict[str, float | None]:
    rate = uph(sites, touchdown_ms, index)
    hours = None if eco is None else eco.units_per_year / rate
    return {"touchdown_ms": round(touchdown_ms, 3), "uph": round(rate, 2),
            "tester_hours_per_year": None if hours is None else round(hours, 2),
            "cost_per_year": None if eco is None or hours is None
            else round(hours * eco.tester_cost_per_hour, 2)}


def _after(sites: int, before: dict[str, float | None], touchdown_ms: float, index: float,
           eco: Economics | None) -> dict[str, Any]:
    after = _figures(sites, touchdown_ms, index, eco)
    saved: dict[str, float | None] = {
        "touchdown_ms": round(float(before["touchdown_ms"] or 0) - touchdown_ms, 3),
             "uph_gain_pct": round(100.0 * (float(after["uph"] or 0)
                                            / float(before["uph"] or 1) - 1.0), 3)}
    for key in ("tester_hours_per_year", "cost_per_year"):
        b, a = before[key], after[key]
        saved[key] = None if a is None or b is None else round(b - a, 2)
    return {"after": after, "saved": saved}
