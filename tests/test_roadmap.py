"""The roadmap: the plan as program changes adopted one at a time.

Checked from outside the planner: every step's schedule against the *spec* with the
independent checker of test_plan_solvers (every real limit), plus the serial chain of the
blocks not moved yet, read off the schedule; the last step against the exhaustive
optimum (small cases) or the plan; and a touchdown-wide power limit that binds, against
the exhaustive search and a hand count.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import time
from pathlib import Path

import pytest

from pipeline.errors import ConfigError
from pipeline.plan import build_problem, plan
from pipeline.plan.blockmap import parse_block_map
from pipeline.plan.model import BlockSpec, PlanSpec, PoolSpec
from pipeline.plan.planner import baseline
from pipeline.plan.roadmap import Step, build_roadmap
from pipeline.plan.solvers import solve, solve_exhaustive
from tests.test_plan_solvers import EPS, check_schedule, random_spec
from tests.test_planner import block, measured

SEEDS = range(40)


def chain_breaks(spec: PlanSpec, step: Step, kept: list[str]) -> list[str]:
    """Where the blocks not moved yet leave the program's serial order (program order is
    the spec's block order in these cases)."""
    at = {(b, s): (t0, t1) for b, s, t0, t1 in step.schedule}
    out = []
    for s in spec.sites:
        for x, y in zip(kept, kept[1:], strict=False):
            if at[(y, s)][0] < at[(x, s)][1] - EPS:
                out.append(f"step {step.step}: {y}@{s} starts before {x} ends")
    return out


def check_roadmap(spec: PlanSpec, steps: list[Step], baseline_ms: float,
                  plan_ms: float) -> None:
    prev, moved = baseline_ms, set()
    for k, st in enumerate(steps, 1):
        assert st.step == k
        assert check_schedule(spec, st.schedule) == [], st.step
        moved |= set(st.moved)
        if k < len(steps):  # the last step is the plan itself: every block as planned
            kept = [n for n in spec.names() if n not in moved]
            assert chain_breaks(spec, st, kept) == []
        assert st.touchdown_ms == pytest.approx(max(t1 for *_, t1 in st.schedule), abs=1e-3)
        assert st.touchdown_ms <= prev + 1e-9, "a step made the touchdown longer"
        assert st.saving_ms == pytest.approx(prev - st.touchdown_ms, abs=1e-9)
        prev = st.touchdown_ms
    if steps:
        assert steps[-1].touchdown_ms == pytest.approx(plan_ms, abs=1e-3)
    else:
        assert plan_ms == pytest.approx(baseline_ms, abs=1e-3)


@pytest.mark.parametrize("seed", SEEDS)
def test_every_step_is_feasible_never_longer_and_the_last_is_the_optimum(seed: int) -> None:
    spec = random_spec(seed)
    problem = build_problem(spec)
    best = solve_exhaustive(problem)
    assert best.proven_optimal
    base = baseline(spec)
    steps = build_roadmap(spec, problem, base, best)
    check_roadmap(spec, steps, base.makespan_ms or 0.0, best.makespan_ms or 0.0)
    if steps:
        assert steps[-1].proven


def test_the_sample_like_plan_is_adopted_best_first() -> None:
    # Four scan cores on one scan port and a DC block: the order of the roadmap follows
    # the savings (each step saves no more than the one before, here), and it ends at
    # the plan.
    times = {"contact": 10.0, "dc": 20.0, "scan0": 100.0, "scan1": 100.0, "bist": 60.0,
             "adc": 40.0}
    text = ("[limits]\npower_w = 3.0\n" + block("contact", pinned=True)
            + block("dc", power=0.3, after="contact") + block("scan0", uses="port", power=1.4,
                                                              after="contact")
            + block("scan1", uses="port", power=1.4, after="contact")
            + block("bist", power=0.8, after="contact") + block("adc", power=0.4,
                                                                after="contact"))
    r = plan(parse_block_map(text, "m.toml"), measured(times, sites=(1, 2)), 5.0)
    check_roadmap(r.spec, r.roadmap, r.baseline_ms, r.planned_ms)
    savings = [s.saving_ms for s in r.roadmap]
    assert savings == sorted(savings, reverse=True)
    assert sum(savings) == pytest.approx(r.baseline_ms - r.planned_ms, abs=1e-6)
    doc = r.to_json()["roadmap"]
    assert [set(d) >= {"step", "blocks", "touchdown_ms", "saving_ms", "schedule"} for d in doc]
    assert doc[-1]["touchdown_ms"] == pytest.approx(r.to_json()["planned_ms"], abs=1e-3)
    for d, st in zip(doc, r.roadmap, strict=True):
        assert d["blocks"][:len(st.moved)] == list(st.moved)
        assert {"block", "site", "start_ms", "end_ms"} <= set(d["schedule"][0])


def test_a_step_names_what_it_touches() -> None:
    # radio holds the shared meter; moving it beside dc is the one change.
    sites = (1, 2)
    spec = PlanSpec(sites, (
        BlockSpec("contact", {1: 5.0, 2: 5.0}, 0.1, pinned=True),
        BlockSpec("dc", {1: 30.0, 2: 30.0}, 0.5, (), ("contact",)),
        BlockSpec("radio", {1: 20.0, 2: 20.0}, 0.9, ("meter",), ("contact",))),
        {"meter": PoolSpec(1, True)}, power_w=3.0)
    problem = build_problem(spec)
    best = solve_exhaustive(problem)
    steps = build_roadmap(spec, problem, baseline(spec), best)
    assert len(steps) == 1
    st = steps[0]
    assert set(st.blocks) == {"dc", "radio"} and st.instruments == ("meter (shared)",)
    # the peak, counted by hand from the schedule: dc and radio together on one site
    assert st.peak_site_power_w == pytest.approx(1.4)
    assert st.peak_touchdown_power_w == pytest.approx(max(
        sum(p for b, s, t0, t1 in st.schedule for p in [{"contact": 0.1, "dc": 0.5,
            "radio": 0.9}[b]] if t0 <= t < t1) for _, _, t, _ in st.schedule))


# ------------------------------------------------------------------ touchdown power
def _two_site_spec(limit: float | None) -> PlanSpec:
    sites = (1, 2)
    return PlanSpec(sites, (
        BlockSpec("contact", {1: 1.0, 2: 1.0}, 0.0, pinned=True),
        BlockSpec("a", {1: 10.0, 2: 10.0}, 1.0, (), ("contact",)),
        BlockSpec("b", {1: 10.0, 2: 10.0}, 1.0, (), ("contact",))),
        power_w=3.0, touchdown_power_w=limit)


def test_a_touchdown_power_limit_binds() -> None:
    # By hand: without it, a and b overlap on both sites (4 W in all): 1 + 10 = 11 ms.
    # With 3 W for the whole touchdown, at most three of the four 10 ms blocks run at
    # once, so the fourth runs alone after them: 1 + 10 + 10 = 21 ms.
    free = solve_exhaustive(build_problem(_two_site_spec(None)))
    capped = build_problem(_two_site_spec(3.0))
    exact = solve_exhaustive(capped)
    cp = solve(capped, 5.0)
    assert free.makespan_ms == pytest.approx(11.0)
    assert exact.makespan_ms == pytest.approx(21.0) and cp.makespan_ms == pytest.approx(21.0)
    assert check_schedule(_two_site_spec(3.0), cp.schedule) == []
    assert check_schedule(_two_site_spec(3.0), free.schedule) != []  # it would break it
    assert any(p.kind == "touchdown_power" for p in capped.pools)


def test_the_block_map_carries_the_touchdown_power_limit() -> None:
    text = ("[limits]\npower_w = 3.0\ntouchdown_power_w = 3.0\n" + block("contact", pinned=True)
            + block("a", power=1.0, after="contact") + block("b", power=1.0, after="contact"))
    bm = parse_block_map(text, "m.toml")
    assert bm.limits.touchdown_power_w == 3.0
    assert parse_block_map(bm.to_toml(), "again.toml").limits == bm.limits
    times = {"contact": 1.0, "a": 10.0, "b": 10.0}
    capped = plan(bm, measured(times, sites=(1, 2)), 5.0)
    free = plan(parse_block_map(text.replace("touchdown_power_w = 3.0\n", ""), "m.toml"),
                measured(times, sites=(1, 2)), 5.0)
    assert free.planned_ms == pytest.approx(11.0) and capped.planned_ms == pytest.approx(21.0)
    check_roadmap(capped.spec, capped.roadmap, capped.baseline_ms, capped.planned_ms)


def test_a_block_above_the_touchdown_limit_is_one_line() -> None:
    text = "[limits]\ntouchdown_power_w = 1.0\n" + block("a", power=1.5)
    with pytest.raises(ConfigError) as e:
        parse_block_map(text, "m.toml")
    msg = str(e.value)
    assert "\n" not in msg and msg.startswith("m.toml: [block.a] power_w")
    assert "touchdown" in msg


# ------------------------------------------------------------------ generated maps, whole process
REPO = Path(__file__).parent.parent
sys.path.insert(0, str(REPO / "bench"))
import plan_maps  # noqa: E402 - bench/ is not a package


def _plan_whole_process(tmp_path: Path, spec: PlanSpec, lot: str) -> tuple[dict, float]:
    csv, blocks = plan_maps.write_lot(spec, tmp_path, lot)
    store = tmp_path / "store"
    env = {**os.environ, "PYTHONDONTWRITEBYTECODE": "1"}
    done = subprocess.run([sys.executable, "-m", "pipeline", "ingest", str(csv), "--store",
                           str(store)], capture_output=True, text=True, env=env)
    assert done.returncode == 0, done.stderr
    t0 = time.perf_counter()
    done = subprocess.run([sys.executable, "-m", "pipeline", "plan", "--store", str(store),
                           "--blocks", str(blocks), "--json"], capture_output=True, text=True,
                          env=env)
    took = time.perf_counter() - t0
    assert done.returncode == 0, done.stderr
    return json.loads(done.stdout), took


def _check_generated(spec: PlanSpec, doc: dict) -> None:
    gap = (doc["planned_ms"] - doc["lower_bound_ms"]) / doc["lower_bound_ms"]
    assert doc["proven_optimal"] or gap <= 0.02, gap
    steps = doc["roadmap"]
    assert steps and steps[-1]["touchdown_ms"] == pytest.approx(doc["planned_ms"], abs=1e-3)
    measured_spec = spec.with_blocks(  # the lot's measured means stand in for the spec's
        [BlockSpec(b.name, {s: _mean(doc, b.name, s) for s in spec.sites}, b.power_w, b.uses,
                   b.after, b.pinned) for b in spec.blocks])
    prev = doc["baseline_ms"]
    for st in steps:
        sched = [(r["block"], r["site"], r["start_ms"], r["end_ms"]) for r in st["schedule"]]
        assert check_schedule(measured_spec, sched) == [], st["step"]
        assert st["touchdown_ms"] <= prev + 1e-6
        prev = st["touchdown_ms"]


def _mean(doc: dict, block: str, site: int) -> float:
    row = next(r for r in doc["schedule"] if r["block"] == block and r["site"] == site)
    return row["end_ms"] - row["start_ms"]


def test_a_12_by_4_lot_with_a_shared_rf_meter_plans_fast(tmp_path: Path) -> None:
    spec = plan_maps.rf_lot(1)
    doc, took = _plan_whole_process(tmp_path, spec, "GEN-12X4")
    _check_generated(spec, doc)
    assert took < 10.0


@pytest.mark.slow
def test_a_24_by_8_map_plans_within_ten_seconds(tmp_path: Path) -> None:
    spec = plan_maps.large(7, 24, 8)
    doc, took = _plan_whole_process(tmp_path, spec, "GEN-24X8")
    _check_generated(spec, doc)
    assert took < 10.0
