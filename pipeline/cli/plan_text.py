"""`tandem plan` as text for a terminal (the JSON is ``PlanResult.to_json``)."""

from __future__ import annotations

from typing import Any

from ..plan.planner import AMDAHL_NOTE, CAUTIONS, PlanResult


def render(r: PlanResult) -> str:
    """The plan for a terminal: summary, schedule, candidates, what-ifs, projection, cautions."""
    out = _summary(r) + [""] + _schedule(r) + [""] + _roadmap(r) + [""] + _candidates(r)
    out += [""] + _whatifs(r)
    out += [""] + _projection(r) + ["", "Cautions:"] + [f"  ! {c}" for c in CAUTIONS]
    return "\n".join(out) + "\n"


def _summary(r: PlanResult) -> list[str]:
    m, p = r.measured, r.plan
    check = r.baseline_check()
    out = [f"Plan for lot {m.lot_id}: {len(r.spec.sites)} site(s), one touchdown, block times "
           f"from {m.method or 'the map'} ({m.column.removesuffix('_ms')})"]
    out += [f"  note: {n}" for n in r.notes]
    out.append(f"  baseline  {r.baseline_ms:9.1f} ms  serial per site in program order, "
               "shared instruments in turn")
    if "difference_ms" in check:
        out.append(f"  measured  {check['measured_touchdown_ms']:9.1f} ms  mean of "
                   f"{check['touchdowns']} touchdowns, {check['difference_ms']:+.1f} ms "
                   f"({check['difference_pct']:+.1f} %) from the baseline: "
                   + ("time outside every block" if check["difference_ms"] >= 0
                      else "parts that stop on a fail skip blocks" if r.measured.column ==
                      "mean_ms" else f"{r.measured.column[:3]} block times exceed the mean"))
    proof = ("proven optimal" if p.proven_optimal else
             f"not proven: gap {_gap(r):.1f} % to the bound")
    out.append(f"  planned   {r.planned_ms:9.1f} ms  saving {r.saving_pct:.1f} %; lower bound "
               f"{p.lower_bound_ms:.1f} ms ({proof}; {p.solver}, {p.wall_s:.2f} s)")
    return out


def _gap(r: PlanResult) -> float:
    lb = r.plan.lower_bound_ms
    return 100.0 * (r.planned_ms - lb) / lb if lb else 0.0


def _schedule(r: PlanResult) -> list[str]:
    out = ["Schedule (ms from the touchdown's start):"]
    width = max((len(b) for b in r.spec.names()), default=5)
    for site in r.spec.sites:
        out.append(f"  site {site}")
        rows = sorted((t0, t1, b) for b, s, t0, t1 in r.plan.schedule if s == site)
        out += [f"    {b:<{width}}  {t0:8.1f} - {t1:8.1f}" for t0, t1, b in rows]
    return out


def _roadmap(r: PlanResult) -> list[str]:
    out = ["Roadmap: the plan as program changes, the best first (each saving given the "
           "changes before it):"]
    if not r.roadmap:
        return out + ["  none: the plan runs no block beside another"]
    base = r.baseline_ms
    out.append(f"   0. the program as measured: touchdown {base:.1f} ms")
    for st in r.roadmap:
        pct = 100 * (base - st.touchdown_ms) / base if base else 0.0
        out.append(f"  {st.step:2d}. {st.change()}")
        held = f"; holds {', '.join(st.instruments)}" if st.instruments else ""
        out.append(f"      saves {st.saving_ms:.1f} ms -> touchdown {st.touchdown_ms:.1f} ms "
                   f"({pct:.1f} % in all); peak {st.peak_site_power_w:.2f} W on a site, "
                   f"{st.peak_touchdown_power_w:.2f} W per touchdown{held}")
    return out


def _candidates(r: PlanResult) -> list[str]:
    out = ["Candidates, ranked by marginal saving (program: the test program alone changes; "
           "design: needs a design change):"]
    if not r.candidates:
        return out + ["  none: nothing in the plan overlaps, and no what-if helps"]
    shown = [c for c in r.candidates if c.saving_ms > 0]
    for k, c in enumerate(shown, 1):
        out.append(f"  {k:2d}. {c.saving_ms:8.1f} ms  {c.change:<7}  {' + '.join(c.blocks)}")
        out.append(f"      {c.why}" + ("" if c.proven else " (saving not proven optimal)"))
    idle = [c for c in r.candidates if c.saving_ms <= 0]
    if idle:
        pairs = [" + ".join(c.blocks) for c in idle if c.kind == "pair"]
        out.append(f"  {len(idle)} more save nothing on their own (other overlaps do as well)"
                   + (f", among them {'; '.join(pairs[:4])}" if pairs else "")
                   + ": see --json")
    return out


def _whatifs(r: PlanResult) -> list[str]:
    out = ["What-ifs, each alone against the program-only plan:"]
    if not r.whatifs:
        return out + ["  none in the block map ([whatif.<name>])"]
    for w in r.whatifs:
        if w.skipped:
            out.append(f"  {w.name} ({w.kind}): not evaluated: {w.skipped}")
            continue
        out.append(f"  {w.name} ({w.kind}, {w.change}): {w.makespan_ms:.1f} ms, saves "
                   f"{w.saving_ms:.1f} ms — {w.detail}")
    c = r.combined
    if c is not None:
        out.append(f"  all beneficial together ({c.detail}): {c.makespan_ms:.1f} ms, saves "
                   f"{c.saving_ms:.1f} ms" + (f"; {c.note}" if c.note else ""))
    return out


def _projection(r: PlanResult) -> list[str]:
    t: dict[str, Any] = r.throughput
    cur = t["currency"] or "per year"
    out = ["Projection:", f"  index time {t['index_ms']:.0f} ms ({t['index_source']})"]
    rows = [("now", t["before"]), ("with the plan", t["after"])]
    if "with_whatifs" in t:
        rows.append(("plan + what-ifs", t["with_whatifs"]["after"]))
    for label, f in rows:
        line = f"  {label:<16} touchdown {f['touchdown_ms']:8.1f} ms  UPH {f['uph']:9.1f}"
        if f["tester_hours_per_year"] is not None:
            line += (f"  tester hours/year {f['tester_hours_per_year']:9.1f}  cost "
                     f"{f['cost_per_year']:11.2f} {cur}")
        out.append(line)
    if t.get("note"):
        out.append(f"  {t['note']}")
    a = r.amdahl
    out.append(f"  Amdahl cross-check: f = {a.f:.2f}, s = {a.s:.2f} -> {a.saving_pct:.1f} % "
               f"of {a.serial_ms:.1f} ms serial block time per site ({a.touchdown_ms:.1f} ms); "
               f"planned saving {r.saving_pct:.1f} %")
    out.append(f"  ({AMDAHL_NOTE})")
    return out
