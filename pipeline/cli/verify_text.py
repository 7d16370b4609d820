"""The verification as terminal text: the key figures, then the tests ranked (the ones
that moved first), the blocks, the changed units, notes and cautions."""

from __future__ import annotations

from typing import Any

from ..report.text import CAUTIONS as REPORT_CAUTIONS
from ..verify.compare import SAME, TestResult
from ..verify.core import CAUTIONS, Verification

SAME_SHOWN = 8  # 'same' tests listed after the moved ones (the closest calls)


def table(header: list[str], rows: list[list[Any]]) -> list[str]:
    """Aligned columns; numbers right-aligned, text left."""
    cells = [[_cell(v) for v in r] for r in rows]
    widths = [max([len(h)] + [len(r[i]) for r in cells]) for i, h in enumerate(header)]
    num = [all(isinstance(r[i], int | float) or r[i] is None for r in rows) and bool(rows)
           for i in range(len(header))]

    def line(vals: list[str]) -> str:
        return "  ".join(v.rjust(w) if n else v.ljust(w)
                         for v, w, n in zip(vals, widths, num, strict=True)).rstrip()

    return [line(header), line(["-" * w for w in widths])] + [line(r) for r in cells]


def _cell(v: Any) -> str:
    if v is None:
        return ""
    if isinstance(v, float):
        return f"{v:.4g}" if abs(v) < 1e4 else f"{v:.0f}"
    return str(v).replace("\n", " ")


def _ms(v: float | None) -> str:
    return "n/a" if v is None else f"{v:.1f} ms"


def _pct(v: float | None) -> str:
    return "n/a" if v is None else f"{v:.1f} %"


def _program(p: dict[str, Any]) -> str:
    if not p.get("program"):
        return f"lot {p['lot_id']}"
    rev = f" rev {p['program_rev']}" if p.get("program_rev") else ""
    return f"lot {p['lot_id']} ({p['program']}{rev})"


def headline(v: Verification) -> list[str]:
    u, t = v.unit_counts, v.time
    units = (f"{u['matched']} matched by {v.match} (baseline {u['baseline']}, candidate "
             f"{u['candidate']})" if v.match != "none" else
             f"not matched (--match none): baseline {u['baseline']}, candidate "
             f"{u['candidate']}")
    ci = t.get("saving_ci_pct")
    out = [f"Verification of {_program(v.programs['candidate'])} against "
           f"{_program(v.programs['baseline'])}",
           f"  units      {units}",
           f"  time       touchdown {_ms(t['baseline_touchdown_ms'])} -> "
           f"{_ms(t['candidate_touchdown_ms'])}: {_pct(t['saving_pct'])} less"
           + (f" (95 % CI {ci[0]:.1f} to {ci[1]:.1f} %)" if ci else "")]
    p = t.get("projected")
    if p:
        over = p["candidate_vs_planned_pct"]
        gap = p["realised_minus_projected_pct"]
        line = (f"  planned    touchdown {_ms(p['baseline_ms'])} -> {_ms(p['planned_ms'])}: "
                f"{_pct(p['saving_pct'])} less")
        if gap is not None and over is not None:
            line += (f"; realised {abs(gap):.1f} points {'below' if gap < 0 else 'above'} it, "
                     f"the candidate {abs(over):.1f} % {'over' if over > 0 else 'under'} "
                     "the planned touchdown")
        out.append(line)
    r = v.rules
    out.append(f"  tests      {len(v.tests)} compared: {v.count('shifted')} shifted, "
               f"{v.count('same')} same, {v.count('too few')} too few (false discovery "
               f"rate {100 * r.fdr:g} %; shifts from {r.min_shift:g} σ, spreads from "
               f"×{r.min_ratio:g} count)")
    if v.match != "none":
        kinds = [c["change"] for c in v.changed_units]
        out.append(f"  changed    {len(kinds)} unit(s): {kinds.count('pass->fail')} pass->fail,"
                   f" {kinds.count('fail->pass')} fail->pass, {kinds.count('bin')} bin only")
    return out


def _round(v: float | None, digits: int, sig: bool = False) -> float | None:
    if v is None:
        return None
    return (float(f"{v:.{digits}g}") if sig else round(v, digits)) + 0.0  # no "-0"


def _arrow(a: Any, b: Any, fmt: str = "{:.4g}") -> str:
    def one(x: Any) -> str:
        return "n/a" if x is None else fmt.format(x)
    return f"{one(a)} → {one(b)}"


def test_rows(tests: list[TestResult]) -> list[list[Any]]:
    rows = []
    for t in tests:
        j = t.to_json()
        rows.append([t.test_num, t.name, t.verdict, f"{j['n_baseline']}/{j['n_candidate']}",
                     _arrow(j["mean_baseline"], j["mean_candidate"]),
                     _round(j["shift_sigma"], 2), _round(j["sigma_ratio"], 2),
                     _arrow(j["cpk_baseline"], j["cpk_candidate"], "{:.2f}"),
                     _arrow(j["fail_pct_baseline"], j["fail_pct_candidate"], "{:.1f}"),
                     _round(j["q_value"], 2, sig=True), t.reason])
    return rows


TEST_HEADER = ["test_num", "test", "verdict", "n b/c", "mean b → c", "shift_σ",
               "σ_ratio", "cpk b → c", "fail % b → c", "q", "reason"]


def render(v: Verification) -> str:
    out = headline(v) + ["", "Tests, the ones that moved first:"]
    moved = [t for t in v.tests if t.verdict != SAME]
    same = [t for t in v.tests if t.verdict == SAME]
    out += table(TEST_HEADER, test_rows(moved + same[:SAME_SHOWN]))
    if len(same) > SAME_SHOWN:
        out.append(f"... and {len(same) - SAME_SHOWN} more tests 'same' (--json lists "
                   "every test with every column)")
    for side in ("baseline", "candidate"):
        only = v.only[side]
        if only:
            names = ", ".join(f"{o['test_num']} {o['test_name'] or ''}".strip()
                              for o in only[:8])
            out.append(f"Only in the {side}: {len(only)} test(s): {names}"
                       + (" ..." if len(only) > 8 else ""))
    out += _blocks(v) + _changed(v)
    if v.notes:
        out += ["", "Notes:"] + [f"  - {n}" for n in v.notes]
    out += ["", "Cautions:"] + [f"  ! {c}" for c in (*CAUTIONS, *REPORT_CAUTIONS)]
    return "\n".join(out) + "\n"


def _blocks(v: Verification) -> list[str]:
    rows = v.time["blocks"]
    if not rows:
        return ["", "Blocks: no block times in these lots."]
    planned = v.time.get("projected") is not None
    header = ["block", "baseline_ms", "candidate_ms", "change_pct"]
    header += ["planned_ms", "vs_plan_pct", "status"] if planned else ["status"]
    body = [[r["block"], _round(r["baseline_ms"], 1), _round(r["candidate_ms"], 1),
             _round(r["change_pct"], 1)]
            + ([_round(r["planned_ms"], 1), _round(r["vs_plan_pct"], 1)] if planned else [])
            + [r["status"]] for r in rows]
    title = ("Blocks (mean time per part; the plan's slot for each):" if planned
             else "Blocks (mean time per part):")
    return ["", title] + table(header, body)


def _changed(v: Verification) -> list[str]:
    if v.match == "none":
        return ["", "Changed units: not known without matched units (--match part_id or xy)."]
    if not v.changed_units:
        return ["", "Changed units: none (every matched unit kept its bins and pass/fail)."]
    body = [[c["part_id"], c["x"], c["y"], c["change"],
             f"{c['baseline_hard_bin']}/{c['baseline_soft_bin']}",
             f"{c['candidate_hard_bin']}/{c['candidate_soft_bin']}",
             c["first_test_num"], c["first_test_name"],
             _arrow(c["baseline_value"], c["candidate_value"])
             if c["first_test_num"] is not None else None]
            for c in v.changed_units]
    return ["", "Changed units:"] + table(
        ["part_id", "x", "y", "change", "bins before", "bins after", "first_test_num",
         "first_test", "value b → c"], body)
