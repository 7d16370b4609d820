"""The planner end to end from a block map and block times: baseline, plan, candidates,
what-ifs, projection.

Expected values come from outside the planner: hand arithmetic on cases small enough to
do by hand, Amdahl's law (Amdahl 1967), the exhaustive search (itself checked against
brute force in test_plan_solvers.py), the independent schedule checker, and rules of
thumb of test engineering, each marked "common practice" where it is used.
"""

from __future__ import annotations

from dataclasses import replace

import pytest

from pipeline.cli.plan_text import render
from pipeline.plan import CAUTIONS, build_problem, plan
from pipeline.plan.blockmap import parse_block_map
from pipeline.plan.measure import Measured
from pipeline.plan.planner import build_spec
from pipeline.plan.projection import uph
from pipeline.plan.solvers import solve_exhaustive
from tests.test_plan_solvers import check_schedule

# Rules of thumb (common practice; the figures are from memory of test-engineering
# literature, not from this project):
SCAN_SHARE = 0.70          # scan is often ~70 % of test time
FOUR_CORE_SCAN_CUT = 0.75  # testing four identical cores at once cuts scan time ~75 %
DC_SHARE = 0.05            # DC / leakage ~5 % of test time
SCAN_CORE_W = 1.4          # scan draws the most power of any pattern type


def measured(times: dict[str, float], sites: tuple[int, ...] = (1,),
             touchdown_ms: float | None = None) -> Measured:
    """Pooled block times in program order (dict order)."""
    return Measured("TEST", sites, tuple(times), {b: {None: t} for b, t in times.items()},
                    touchdown_ms=touchdown_ms)


def block(name: str, *, uses: str = "", power: float = 0.0, after: str = "",
          pinned: bool = False) -> str:
    u = ", ".join(f'"{x}"' for x in uses.split()) if uses else ""
    a = ", ".join(f'"{x}"' for x in after.split()) if after else ""
    return (f"[block.{name}]\nuses = [{u}]\npower_w = {power}\nafter = [{a}]\n"
            f"pinned = {'true' if pinned else 'false'}\n")


def four_core_map(power_limit: float, core_w: float, port: bool, whatif: str = "") -> str:
    cores = "".join(block(f"scan_core{k}", uses="scan_port" if port else "", power=core_w,
                          after="rest") for k in range(4))
    return (f"[limits]\npower_w = {power_limit}\n[resource.scan_port]\ncount = 1\n"
            + block("rest", power=0.1, pinned=True) + cores + whatif)


def four_core_times() -> dict[str, float]:
    """A 1 s touchdown: four identical scan cores make SCAN_SHARE of it."""
    per_core = 1000.0 * SCAN_SHARE / 4
    return {"rest": 1000.0 - 4 * per_core, **{f"scan_core{k}": per_core for k in range(4)}}


# ------------------------------------------------------------------ rules of thumb


def test_broadcast_to_four_identical_cores_saves_about_half() -> None:
    """Common practice: scan ~70 % of test time; testing four identical cores at once cuts
    scan time ~75 %, so ~52 % overall (0.7 x 0.75 = 0.525). The cores share one scan port,
    so only the broadcast (a design change) lets them run together; 4 x 0.6 W fits."""
    whatif = ('[whatif.broadcast_all]\nkind = "broadcast"\n'
              'blocks = ["scan_core0", "scan_core1", "scan_core2", "scan_core3"]\n'
              'overhead_ms = 0.0\n')
    r = plan(parse_block_map(four_core_map(3.0, 0.6, port=True, whatif=whatif)),
             measured(four_core_times()), 5.0)
    expected = 100 * SCAN_SHARE * FOUR_CORE_SCAN_CUT
    assert r.saving_pct == pytest.approx(0.0, abs=1e-6)  # the program alone cannot overlap
    (w,) = r.whatifs
    assert w.saving_ms / r.baseline_ms * 100 == pytest.approx(expected, abs=0.01)
    # Amdahl 1967 with f = scan share, s = 4 cores at once gives the same.
    amdahl = 100 * (1 - ((1 - SCAN_SHARE) + SCAN_SHARE / 4))
    assert r.combined is not None and r.combined.amdahl is not None
    assert r.combined.amdahl.saving_pct == pytest.approx(amdahl, abs=0.01)
    assert amdahl == pytest.approx(expected)
    (design,) = [c for c in r.candidates if c.change == "design"]
    assert set(design.blocks) == {f"scan_core{k}" for k in range(4)}


@pytest.mark.parametrize("limit_w", [6.0, 3.0])
def test_scan_concurrency_is_power_limited(limit_w: float) -> None:
    """Common practice: scan is the most power-hungry pattern type, so concurrent scan is
    power-limited. No shared port (a program change suffices): with room for all four the
    saving is the ~52 % above; at 3.0 W only two 1.4 W cores fit at once, so scan time
    halves instead: 0.7 x 0.5 = 35 %."""
    r = plan(parse_block_map(four_core_map(limit_w, SCAN_CORE_W, port=False)),
             measured(four_core_times()), 5.0)
    at_once = int(limit_w // SCAN_CORE_W)
    busiest = max(sum(1 for b2, s2, a, z in r.plan.schedule if b2.startswith("scan")
                      and a <= t < z) for b, s, t, _ in r.plan.schedule)
    assert busiest == min(at_once, 4)
    cut = 1 - 1 / min(at_once, 4)
    assert r.saving_pct == pytest.approx(100 * SCAN_SHARE * cut, abs=0.01)
    assert check_schedule(r.spec, r.plan.schedule) == []
    if limit_w == 3.0:
        assert r.saving_pct < 100 * SCAN_SHARE * FOUR_CORE_SCAN_CUT
    assert r.amdahl.saving_pct == pytest.approx(r.saving_pct, abs=0.01)  # one site, no waits


def test_halving_dc_leakage_saves_about_two_and_a_half_percent() -> None:
    """Common practice: DC/leakage is ~5 % of test time; halving it saves ~2.5 %."""
    dc = 1000.0 * DC_SHARE
    bm = parse_block_map(
        "[limits]\npower_w = 3.0\n" + block("rest", pinned=True)
        + block("dc_leakage", power=0.2, after="rest")
        + '[whatif.fast_leakage]\nkind = "alternative"\nblock = "dc_leakage"\noptions = ['
        f'{{ name = "as_is" }}, {{ name = "parallel_pmu", time_ms = {dc / 2} }}]\n')
    r = plan(bm, measured({"rest": 1000.0 - dc, "dc_leakage": dc}), 5.0)
    (w,) = r.whatifs
    assert w.option == "parallel_pmu"
    assert 100 * w.saving_ms / r.baseline_ms == pytest.approx(100 * DC_SHARE / 2, abs=1e-6)


# ------------------------------------------------------------------ by hand


HAND = ("[limits]\npower_w = 3.0\n" + block("contact", power=0.05, pinned=True)
        + block("a", power=1.4, after="contact") + block("b", power=0.9, after="contact"))


def test_a_candidate_is_priced_by_its_marginal_saving() -> None:
    """contact 10 ms, then a (100 ms) and b (60 ms) side by side: 110 ms; kept apart
    they take 170 ms, so the overlap is worth 60 ms."""
    r = plan(parse_block_map(HAND), measured({"contact": 10.0, "a": 100.0, "b": 60.0}), 5.0)
    assert (r.baseline_ms, r.planned_ms) == (pytest.approx(170.0), pytest.approx(110.0))
    (c,) = r.candidates
    assert (c.blocks, c.change, c.saving_ms) == (("a", "b"), "program", pytest.approx(60.0))
    assert c.why == "no shared resource; 1.40 W + 0.90 W within 3.0 W per site"


def test_candidate_savings_match_exhaustive_resolves() -> None:
    text = ("[limits]\npower_w = 2.0\nparallel = 2\n[resource.meter]\ncount = 1\n"
            "shared = true\n" + block("contact", pinned=True)
            + block("tx", uses="meter", power=0.9, after="contact")
            + block("scan", power=1.2, after="contact") + block("dc", power=0.3)
            + block("bist", power=0.8, after="dc"))
    times = {"contact": 5.0, "tx": 30.0, "scan": 50.0, "dc": 20.0, "bist": 25.0}
    r = plan(parse_block_map(text), measured(times, sites=(1, 2)), 5.0)
    assert {c.kind for c in r.candidates} == {"pair", "block"}
    for c in r.candidates:
        x = c.blocks[0]
        pairs = ((x, c.blocks[1]),) if c.kind == "pair" else tuple(
            (x, y) for y in times if y != x)  # a block: apart from every other block
        apart = solve_exhaustive(build_problem(replace(r.spec, forbidden=pairs))).makespan_ms
        assert apart is not None
        assert c.saving_ms == pytest.approx(apart - r.planned_ms, abs=1e-6), c.blocks
    assert check_schedule(r.spec, r.plan.schedule) == []
    assert r.planned_ms == pytest.approx(solve_exhaustive(r.problem).makespan_ms or -1)


def test_baseline_serialises_a_shared_instrument_across_sites() -> None:
    """Two sites, radio (50 ms on the one shared meter) then other (100 ms): as logged,
    site 2 waits 50 ms for the meter, so the touchdown takes 200 ms; planned, each site
    runs other beside radio: 100 ms."""
    bm = parse_block_map("[resource.meter]\ncount = 1\nshared = true\n"
                         + block("radio", uses="meter") + block("other"))
    r = plan(bm, measured({"radio": 50.0, "other": 100.0}, sites=(1, 2)), 5.0)
    assert r.baseline_ms == pytest.approx(200.0)
    assert r.planned_ms == pytest.approx(100.0)


def test_unmapped_blocks_stay_serial_in_measured_order() -> None:
    """'mystery' and 'unassigned' are measured but not mapped: each keeps its slot."""
    bm = parse_block_map(HAND)
    times = {"contact": 10.0, "mystery": 7.0, "a": 100.0, "unassigned": 3.0, "b": 60.0}
    r = plan(bm, measured(times), 5.0)
    assert r.missing_blocks == ["mystery", "unassigned"]
    at = {b: (t0, t1) for b, _, t0, t1 in r.plan.schedule}
    assert at["mystery"] == (pytest.approx(10.0), pytest.approx(17.0))
    assert at["a"][0] >= at["mystery"][1] and at["unassigned"][0] >= at["a"][1]
    assert at["b"][0] >= at["unassigned"][1]
    assert any("kept serial" in n for n in r.notes)


def test_pinned_block_is_a_barrier_on_its_site() -> None:
    bm = parse_block_map(block("x", power=0.1) + block("mid", pinned=True) + block("y"))
    r = plan(bm, measured({"x": 30.0, "mid": 5.0, "y": 40.0}, sites=(1, 2)), 5.0)
    for site in (1, 2):
        at = {b: (t0, t1) for b, s, t0, t1 in r.plan.schedule if s == site}
        assert at["x"][1] <= at["mid"][0] and at["y"][0] >= at["mid"][1]
    assert r.planned_ms == pytest.approx(75.0)  # nothing can overlap across the barrier


def test_after_holds_through_a_block_this_lot_did_not_run() -> None:
    bm = parse_block_map(block("b") + block("u", after="b") + block("a", after="u"))
    r = plan(bm, measured({"a": 10.0, "b": 20.0}), 5.0)
    at = {b: (t0, t1) for b, _, t0, t1 in r.plan.schedule}
    assert at["a"][0] >= at["b"][1]
    assert any("not measured" in n and "u" in n for n in r.notes)


# ------------------------------------------------------------------ what-ifs


RADIO = ("[resource.meter]\ncount = 1\nshared = true\n" + block("radio", uses="meter")
         + '[whatif.second_meter]\nkind = "extra_instrument"\nresource = "meter"\n')


def test_an_extra_instrument_halves_the_shared_queue() -> None:
    """Four sites queue for one meter (4 x 100 ms); a second meter makes it 2 x 100 ms."""
    r = plan(parse_block_map(RADIO), measured({"radio": 100.0}, sites=(1, 2, 3, 4)), 5.0)
    assert r.planned_ms == pytest.approx(400.0)
    (w,) = r.whatifs
    assert (w.makespan_ms, w.saving_ms) == (pytest.approx(200.0), pytest.approx(200.0))


def test_beneficial_whatifs_are_combined() -> None:
    text = (RADIO + block("scan0", uses="port") + block("scan1", uses="port")
            + '[whatif.bc]\nkind = "broadcast"\nblocks = ["scan0", "scan1"]\noverhead_ms = 0.0\n')
    times = {"radio": 100.0, "scan0": 300.0, "scan1": 300.0}
    r = plan(parse_block_map(text), measured(times, sites=(1, 2, 3, 4)), 5.0)
    # Program only: each site runs scan0, scan1 back to back (600) beside its radio turn.
    assert r.planned_ms == pytest.approx(600.0)
    by_name = {w.name: w for w in r.whatifs}
    assert by_name["bc"].makespan_ms == pytest.approx(400.0)      # the meter queue binds
    assert by_name["second_meter"].saving_ms == pytest.approx(0.0)
    assert r.combined is not None and r.combined.makespan_ms == pytest.approx(400.0)
    assert r.combined.detail == "bc"


def test_broadcast_across_a_pinned_block_is_not_evaluated() -> None:
    text = (block("s0") + block("wall", pinned=True) + block("s1")
            + '[whatif.bc]\nkind = "broadcast"\nblocks = ["s0", "s1"]\noverhead_ms = 1.0\n')
    r = plan(parse_block_map(text), measured({"s0": 10.0, "wall": 1.0, "s1": 10.0}), 5.0)
    (w,) = r.whatifs
    assert w.skipped and "wall" in w.skipped and r.combined is None


# ------------------------------------------------------------------ projection and output


def test_projection_follows_the_uph_formula() -> None:
    """UPH = 3600 N / (touchdown_s + index_s); hours = units / UPH; cost = hours x rate.
    The measured touchdown keeps its 10 ms the model does not hold."""
    eco = ("[economics]\nunits_per_year = 1000000\ntester_cost_per_hour = 100.0\n"
           "index_ms = 500.0\n")
    r = plan(parse_block_map(HAND + eco), measured({"contact": 10.0, "a": 100.0, "b": 60.0},
                                                   touchdown_ms=180.0), 5.0)
    t = r.throughput
    assert t["before"]["uph"] == pytest.approx(3600 / 0.68, abs=0.01)
    assert t["after"]["touchdown_ms"] == pytest.approx(180.0 - 60.0)
    assert t["after"]["uph"] == pytest.approx(3600 / 0.62, abs=0.01)
    assert t["after"]["tester_hours_per_year"] == pytest.approx(1e6 * 0.62 / 3600, abs=0.01)
    assert t["after"]["cost_per_year"] == pytest.approx(1e6 * 0.62 / 3600 * 100, abs=1)
    assert t["index_source"].startswith("block map")
    assert uph(4, 1000.0, 500.0) == pytest.approx(9600.0)


def test_every_output_carries_the_cautions() -> None:
    r = plan(parse_block_map(HAND), measured({"contact": 10.0, "a": 100.0, "b": 60.0}), 5.0)
    doc = r.to_json()
    assert doc["cautions"] == list(CAUTIONS)
    text = render(r)
    for c in CAUTIONS:
        assert c in text
    joined = " ".join(CAUTIONS).lower()
    for word in ("power", "temperature", "damage", "escape", "correlation", "change control"):
        assert word in joined


def test_build_spec_uses_per_site_times_and_pools_the_rest() -> None:
    m = Measured("L", (1, 2), ("a",), {"a": {None: 10.0, 2: 12.0}})
    spec, missing, _ = build_spec(parse_block_map(block("a")), m)
    assert spec.block("a").times_ms == {1: 10.0, 2: 12.0} and missing == []
