"""The plan as the report reads it: the planner's contract dict (``tandem plan --json``),
read defensively — the keys beyond the contract (what-ifs, the baseline schedule, the
projection's layout) are read where present and left out where not.

The dict comes from ``pipeline.plan.make_plan``: the very function `tandem plan` calls,
with the baseline schedule added.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

MAX_STEPS = 6  # candidates drawn one by one in the waterfall; the rest are lumped


def _schedule(rows: Any) -> list[dict[str, Any]]:
    return with_lanes([{"block": str(r["block"]), "site": int(r["site"]),
                        "start_ms": float(r["start_ms"]), "end_ms": float(r["end_ms"])}
                       for r in rows or []])


def with_lanes(rows: list[dict[str, Any]]) -> list[dict[str, Any]]:
    """Give each row a ``lane`` within its site: blocks running at the same time on one
    site get different lanes (the lowest free one, in start order), so none hides another."""
    out = []
    for site in sorted({r["site"] for r in rows}):
        ends: list[float] = []  # per lane: when it frees up
        for r in sorted((r for r in rows if r["site"] == site),
                        key=lambda r: (r["start_ms"], r["end_ms"], r["block"])):
            lane = next((k for k, e in enumerate(ends) if e <= r["start_ms"] + 1e-9), len(ends))
            if lane == len(ends):
                ends.append(0.0)
            ends[lane] = r["end_ms"]
            out.append({**r, "lane": lane})
    return out


@dataclass
class PlanView:
    raw: dict[str, Any]
    lot_id: str = ""
    sites: list[int] = field(default_factory=list)
    baseline_ms: float = 0.0
    planned_ms: float = 0.0
    saving_pct: float = 0.0
    lower_bound_ms: float = 0.0
    proven_optimal: bool = False
    schedule: list[dict[str, Any]] = field(default_factory=list)
    baseline_schedule: list[dict[str, Any]] = field(default_factory=list)
    baseline_label: str = "the baseline, as the program runs it"

    @classmethod
    def of(cls, plan: dict[str, Any]) -> PlanView:
        schedule = _schedule(plan.get("schedule"))
        sites = plan.get("site_list") or plan.get("sites")
        if not isinstance(sites, list):
            sites = sorted({r["site"] for r in schedule})
        view = cls(plan, str(plan["lot_id"]), [int(s) for s in sites],
                   float(plan["baseline_ms"]), float(plan["planned_ms"]),
                   float(plan["saving_pct"]), float(plan.get("lower_bound_ms") or 0.0),
                   bool(plan.get("proven_optimal")), schedule)
        base = plan.get("baseline_schedule")
        if not base and isinstance(plan.get("baseline"), dict):
            base = plan["baseline"].get("schedule")
        view.baseline_schedule = _schedule(base) or view._serial()
        if not base:
            view.baseline_label = "the plan's blocks one after another (no baseline schedule)"
        return view

    def _serial(self) -> list[dict[str, Any]]:
        """Each site's planned blocks one after another, in planned start order: a
        stand-in when the plan carries no baseline schedule."""
        out = []
        for site in self.sites:
            t = 0.0
            for r in sorted((r for r in self.schedule if r["site"] == site),
                            key=lambda r: (r["start_ms"], r["block"])):
                d = r["end_ms"] - r["start_ms"]
                out.append({"block": r["block"], "site": site, "start_ms": t, "end_ms": t + d})
                t += d
        return with_lanes(out)

    # -- candidates and what-ifs -----------------------------------------------------------
    @property
    def candidates(self) -> list[dict[str, Any]]:
        return list(self.raw.get("candidates") or [])

    @property
    def program_candidates(self) -> list[dict[str, Any]]:
        return [c for c in self.candidates if c.get("source", "plan") == "plan"]

    @property
    def whatifs(self) -> list[dict[str, Any]]:
        """Evaluated what-ifs (each against the plan, one at a time); from ``whatifs``,
        else the design candidates that name a what-if."""
        if isinstance(self.raw.get("whatifs"), list):
            return [w for w in self.raw["whatifs"] if not w.get("skipped")]
        return [{"name": c.get("source"), "saving_ms": c["saving_ms"], "change": c["change"],
                 "detail": c.get("why", ""), "blocks": c["blocks"]}
                for c in self.candidates if c.get("source", "plan") != "plan"]

    @property
    def skipped_whatifs(self) -> list[dict[str, Any]]:
        return [w for w in self.raw.get("whatifs") or [] if w.get("skipped")]

    @property
    def whatif_best_ms(self) -> float:
        combined = self.raw.get("combined_whatifs") or {}
        best = max((float(w.get("saving_ms") or 0.0) for w in self.whatifs), default=0.0)
        return max(best, float(combined.get("saving_ms") or 0.0))

    def waterfall(self) -> list[dict[str, Any]]:
        """Steps from the baseline to the plan, then each what-if from the plan.

        A candidate's saving is marginal (what the plan loses without it), so savings do
        not add up: the step "other overlaps, together" closes the gap to the plan (it is
        negative — drawn upward — when the marginal savings overlap one another).
        """
        steps = [_total("baseline (measured order)", self.baseline_ms)]
        level = self.baseline_ms
        paying = [c for c in self.program_candidates if float(c["saving_ms"]) > 0.0]
        for c in paying[:MAX_STEPS]:
            level = _step(steps, short_label(c["blocks"]), level, -float(c["saving_ms"]),
                          "saving", c.get("why", ""))
        rest = self.planned_ms - level
        if abs(rest) > 0.05:
            name = "other overlaps, together" if paying else "all overlaps, together"
            _step(steps, name, level, rest, "saving" if rest < 0 else "interplay",
                  "overlaps that can stand in for one another: no single one is essential, "
                  "so their saving is shown together")
        steps.append(_total("planned", self.planned_ms))
        for w in self.whatifs:
            s = float(w.get("saving_ms") or 0.0)
            if s > 0:
                _step(steps, f"what-if: {w.get('name')}", self.planned_ms, -s, "what-if",
                      w.get("detail") or w.get("note") or "")
        combined = self.raw.get("combined_whatifs") or {}
        if combined.get("planned_ms") is not None and float(combined.get("saving_ms") or 0) > 0 \
                and len([w for w in self.whatifs if float(w.get("saving_ms") or 0) > 0]) > 1:
            steps.append(_total("plan + what-ifs together", float(combined["planned_ms"])))
        return steps

    @property
    def roadmap(self) -> list[dict[str, Any]]:
        """The plan's steps (program changes in order), as the planner wrote them."""
        return [r for r in self.raw.get("roadmap") or [] if isinstance(r, dict)]

    def roadmap_curve(self) -> list[dict[str, Any]]:
        """Point k: the touchdown and the cumulative saving after the first k changes
        (k = 0: the baseline)."""
        out = [{"changes": 0, "touchdown_ms": self.baseline_ms, "saving_ms": 0.0,
                "saving_pct": 0.0, "change": "the program as measured"}]
        for r in self.roadmap:
            td = float(r["touchdown_ms"])
            saved = self.baseline_ms - td
            out.append({"changes": int(r["step"]), "touchdown_ms": td, "saving_ms": saved,
                        "saving_pct": 100 * saved / self.baseline_ms if self.baseline_ms
                        else 0.0, "change": str(r.get("change") or ", ".join(r["blocks"]))})
        return out

    # -- the projection --------------------------------------------------------------------
    def projection(self) -> dict[str, Any]:
        """before / after / saved (and with_whatifs) from the throughput block, whichever
        layout it has (nested, or flat ``*_before`` / ``*_after`` keys)."""
        t = dict(self.raw.get("throughput") or {})
        if "before" in t:
            return t
        def side(tag: str) -> dict[str, Any]:
            return {"touchdown_ms": t.get(f"touchdown_{tag}_ms"), "uph": t.get(f"uph_{tag}"),
                    "tester_hours_per_year": t.get(f"tester_hours_{tag}"),
                    "cost_per_year": t.get(f"cost_{tag}")}
        t["before"], t["after"] = side("before"), side("after")
        t["saved"] = {"touchdown_ms": None, "uph_gain_pct": t.get("uph_gain_pct"),
                      "tester_hours_per_year": t.get("tester_hours_saved"),
                      "cost_per_year": t.get("cost_saved")}
        if t["before"]["touchdown_ms"] is not None and t["after"]["touchdown_ms"] is not None:
            t["saved"]["touchdown_ms"] = t["before"]["touchdown_ms"] - t["after"]["touchdown_ms"]
        return t


def short_label(blocks: list[str]) -> str:
    """An axis label for a candidate: ``a + b`` for a pair; for one block's overlaps with
    several (the planner's larger candidates) ``a beside 6 blocks``."""
    if len(blocks) <= 2:
        return " + ".join(blocks)
    return f"{blocks[0]} beside {len(blocks) - 1} blocks"


def _total(step: str, ms: float) -> dict[str, Any]:
    return {"step": step, "kind": "total", "from_ms": 0.0, "to_ms": ms, "top_ms": ms,
            "delta_ms": ms, "label": step, "text": f"{ms:,.0f} ms"}


def _step(steps: list[dict[str, Any]], name: str, level: float, delta: float, kind: str,
          label: str) -> float:
    taken = {s["step"] for s in steps}
    base, k = name, 2
    while name in taken:  # one axis position per step
        name, k = f"{base} ({k})", k + 1
    steps.append({"step": name, "kind": kind, "from_ms": level, "to_ms": level + delta,
                  "top_ms": max(level, level + delta), "delta_ms": delta, "label": label,
                  "text": f"{delta:+,.0f} ms".replace("-", "\u2212")})
    return level + delta
