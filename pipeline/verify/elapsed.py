"""Time: the touchdown and block times of both lots, the realised saving, and — given the
plan of the baseline lot — what it projected, block by block.

The realised saving is ``1 - candidate / baseline`` of the mean measured touchdown time
(the ``touchdowns`` view: markers, the timing CSV, else the slowest part's test time).
Its 95 % interval comes from the delta method on the ratio of two independent means. A
block is "as planned" when its candidate time is within TOLERANCE_PCT of the time the
plan scheduled for it (the mean over sites of its slot): blocks keep their own duration
in a concurrent plan, so one that takes longer once overlapped is the one to look at.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import polars as pl

TOLERANCE_PCT = 3.0


def _mean_sd(x: pl.Series) -> tuple[float | None, float | None, int]:
    a = x.drop_nulls().to_numpy().astype(float)
    if a.size == 0:
        return None, None, 0
    return float(a.mean()), float(a.std(ddof=1)) if a.size > 1 else 0.0, int(a.size)


def _pct(new: float | None, old: float | None) -> float | None:
    return None if new is None or not old else 100.0 * (1.0 - new / old)


def touchdown_saving(b_td: pl.DataFrame, c_td: pl.DataFrame) -> dict[str, Any]:
    mb, sb, nb = _mean_sd(b_td["touchdown_ms"])
    mc, sc, nc = _mean_sd(c_td["touchdown_ms"])
    out: dict[str, Any] = {
        "baseline_touchdown_ms": mb, "candidate_touchdown_ms": mc,
        "saving_pct": _pct(mc, mb),
        "saving_ms": None if mb is None or mc is None else mb - mc,
        "saving_ci_pct": None, "baseline_touchdowns": nb, "candidate_touchdowns": nc,
        "baseline_method": _mode(b_td["method"]), "candidate_method": _mode(c_td["method"])}
    if mb and mc and nb > 1 and nc > 1:
        r = mc / mb
        se = r * math.sqrt((sb or 0) ** 2 / (nb * mb * mb) + (sc or 0) ** 2 / (nc * mc * mc))
        out["saving_ci_pct"] = [100 * (1 - r - 1.96 * se), 100 * (1 - r + 1.96 * se)]
    bs, cs = _mean_sd(b_td["sites"])[0], _mean_sd(c_td["sites"])[0]
    out["baseline_sites"], out["candidate_sites"] = bs, cs
    # Per unit: a touchdown tests `sites` units; differing site counts change the answer.
    per_b = mb / bs if mb is not None and bs else None
    per_c = mc / cs if mc is not None and cs else None
    out["per_unit_saving_pct"] = _pct(per_c, per_b)
    return out


def _mode(s: pl.Series) -> str | None:
    vals = s.drop_nulls()
    return None if vals.is_empty() else str(vals.mode().sort()[0])


def part_times(b_parts: pl.DataFrame, c_parts: pl.DataFrame) -> dict[str, Any]:
    mb = _mean_sd(b_parts["test_time_ms"])[0]
    mc = _mean_sd(c_parts["test_time_ms"])[0]
    return {"baseline_part_ms": mb, "candidate_part_ms": mc, "part_saving_pct": _pct(mc, mb)}


def planned_block_ms(plan: dict[str, Any]) -> dict[str, float]:
    """Each block's time in the plan's schedule: the mean over sites of its slot."""
    slots: dict[str, list[float]] = {}
    for r in plan.get("schedule") or []:
        slots.setdefault(str(r["block"]), []).append(float(r["end_ms"]) - float(r["start_ms"]))
    return {b: float(np.mean(v)) for b, v in slots.items()}


def block_rows(b_bt: pl.DataFrame, c_bt: pl.DataFrame, plan: dict[str, Any] | None
               ) -> list[dict[str, Any]]:
    base = dict(zip(b_bt["block"].to_list(), b_bt["mean_ms"].to_list(), strict=True))
    cand = dict(zip(c_bt["block"].to_list(), c_bt["mean_ms"].to_list(), strict=True))
    planned = planned_block_ms(plan) if plan else {}
    order = list(dict.fromkeys([*base, *cand]))
    order.sort(key=lambda b: -(base.get(b) or cand.get(b) or 0.0))
    rows = []
    for b in order:
        was, now, plan_ms = base.get(b), cand.get(b), planned.get(b)
        ref = plan_ms if plan else was
        change = None if now is None or not ref else 100.0 * (now / ref - 1.0)
        rows.append({"block": b, "baseline_ms": was, "candidate_ms": now,
                     "planned_ms": plan_ms, "change_pct": None if now is None or not was
                     else 100.0 * (now / was - 1.0),
                     "vs_plan_pct": change if plan else None,
                     "status": _status(now, ref, change, bool(plan))})
    return rows


def _status(now: float | None, ref: float | None, change: float | None, planned: bool) -> str:
    if now is None:
        return "not run"
    if ref is None:
        return "not in the plan" if planned else "new"
    assert change is not None
    if abs(change) <= TOLERANCE_PCT:
        return "as planned" if planned else "as before"
    word = "longer" if change > 0 else "shorter"
    return f"{word} than planned" if planned else word


def projection(plan: dict[str, Any], realised: dict[str, Any]) -> dict[str, Any]:
    """The plan's contract keys beside what the candidate lot measured."""
    saving = realised.get("saving_pct")
    cand = realised.get("candidate_touchdown_ms")
    planned = float(plan["planned_ms"])
    return {"lot_id": plan.get("lot_id"), "baseline_ms": float(plan["baseline_ms"]),
            "planned_ms": planned, "saving_pct": float(plan["saving_pct"]),
            "realised_minus_projected_pct": None if saving is None
            else saving - float(plan["saving_pct"]),
            "candidate_vs_planned_pct": None if cand is None or not planned
            else 100.0 * (cand / planned - 1.0)}


def compare_time(b: Any, c: Any, plan: dict[str, Any] | None) -> dict[str, Any]:
    """The ``time`` object of the verification (b, c: LotData)."""
    out = touchdown_saving(b.touchdowns, c.touchdowns) | part_times(b.parts, c.parts)
    out["projected"] = projection(plan, out) if plan else None
    out["blocks"] = block_rows(b.block_times, c.block_times, plan)
    return out
