"""`tandem verify` and pipeline.verify: the issue's done-when on generated correlation
lots (tests/correlation_lots.py, whose truth is what was planted), the sample logs'
correlation lot (sample_logs/truth.json), the statistics against scipy and statsmodels on
the very data verify read, and bad input (one line, exit 2)."""

from __future__ import annotations

import json
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np
import polars as pl
import pytest
from scipy import stats as sps
from statsmodels.stats.multitest import multipletests

from pipeline import Store
from pipeline.verify import VERDICTS, Rules, compare_lots, verify
from pipeline.verify.queries import LotData, Reader, read_lot
from tests.conftest import SAMPLES, CliResult, Ingested, truth
from tests.correlation_lots import FLIP_TEST, Pair

MEAN_TEST, SPREAD_TEST = 105, 110   # planted: +0.8 sigma, x1.6
BASELINE, CANDIDATE = "PF4-L0231", "PF4-L0236"
CONCURRENT_LOG = "pf4_L0236_w01_concurrent.stdf.gz"


@pytest.fixture(scope="module")
def planted(tmp_path_factory: pytest.TempPathFactory) -> tuple[Store, Pair]:
    """The done-when pair: 400 units, two tests planted to move, three units flipped."""
    d = tmp_path_factory.mktemp("planted")
    pair = Pair(shift={MEAN_TEST: 0.8}, spread={SPREAD_TEST: 1.6}, flips=3)
    store = Store(d / "store")
    report = store.ingest([str(p) for p in pair.write(d)])
    assert not report.rejected
    return store, pair


def run_json(cli: Callable[..., CliResult], store: Store, *extra: str) -> dict[str, Any]:
    r = cli("verify", "--store", store.path, "--baseline", "CR-B1", "--candidate", "CR-C1",
            "--json", *extra)
    assert r.code == 0, r.err
    return json.loads(r.out)  # type: ignore[no-any-return]


def read_pair(store: Store) -> tuple[LotData, LotData]:
    r = Reader(store)
    try:
        return read_lot(r, "CR-B1"), read_lot(r, "CR-C1")
    finally:
        r.close()


def flagged(out: dict[str, Any]) -> set[int]:
    return {t["test_num"] for t in out["tests"] if t["verdict"] == "shifted"}


# -- the done-when -----------------------------------------------------------------------
def test_flags_exactly_the_two_planted_tests_and_lists_the_three_flipped_units(
        cli: Callable[..., CliResult], planted: tuple[Store, Pair]) -> None:
    store, pair = planted
    out = run_json(cli, store)
    assert flagged(out) == {MEAN_TEST, SPREAD_TEST}
    assert len(out["tests"]) == 36 + 8 + 4            # every PTR, MPR element and FTR
    assert {t["verdict"] for t in out["tests"]} <= set(VERDICTS)
    assert [u["part_id"] for u in out["changed_units"]] == pair.truth["flipped_part_ids"]
    for u in out["changed_units"]:
        assert u["change"] == "pass->fail" and u["first_test_num"] == FLIP_TEST
    assert out["matched_units"] == 400
    truth_pct = pair.truth["saving_pct"]
    assert abs(out["time"]["saving_pct"] - truth_pct) <= 0.01 * truth_pct  # within 1 %
    assert out["time"]["saving_pct"] == pytest.approx(truth_pct, abs=1e-9)
    mean, spread = (next(t for t in out["tests"] if t["test_num"] == n)
                    for n in (MEAN_TEST, SPREAD_TEST))
    assert "mean" in mean["moved"] and mean["shift_sigma"] == pytest.approx(0.8, abs=0.2)
    assert spread["moved"] == ["spread"] and spread["sigma_ratio"] == pytest.approx(1.6, abs=0.2)
    # the flipped test's three new fails stay a fail-rate question, and not a significant one
    flip = next(t for t in out["tests"] if t["test_num"] == FLIP_TEST)
    assert flip["verdict"] == "same"
    assert flip["fails_candidate"] - flip["fails_baseline"] == 3


def test_unmatched_units_still_flag_the_two_tests(cli: Callable[..., CliResult],
                                                  planted: tuple[Store, Pair]) -> None:
    store, pair = planted
    out = run_json(cli, store, "--match", "none")
    assert flagged(out) == {MEAN_TEST, SPREAD_TEST}
    assert out["matched_units"] == 0 and out["changed_units"] == []
    assert all(t["paired_n"] == 0 and t["p_paired"] is None for t in out["tests"])
    assert out["time"]["saving_pct"] == pytest.approx(pair.truth["saving_pct"], abs=1e-9)


def test_matching_by_die_position_finds_the_same_units(cli: Callable[..., CliResult],
                                                       planted: tuple[Store, Pair]) -> None:
    store, pair = planted
    out = run_json(cli, store, "--match", "xy")
    assert out["matched_units"] == 400 and flagged(out) == {MEAN_TEST, SPREAD_TEST}
    assert [u["part_id"] for u in out["changed_units"]] == pair.truth["flipped_part_ids"]


def test_the_json_carries_the_contract_keys(cli: Callable[..., CliResult],
                                            planted: tuple[Store, Pair]) -> None:
    out = run_json(cli, planted[0])
    assert {"baseline", "candidate", "matched_units", "time", "tests", "changed_units"} <= set(out)
    assert (out["baseline"], out["candidate"]) == ("CR-B1", "CR-C1")
    assert {"baseline_touchdown_ms", "candidate_touchdown_ms", "saving_pct"} <= set(out["time"])
    for t in out["tests"]:
        assert {"test_num", "test_name", "verdict"} <= set(t)
    assert all("part_id" in u for u in out["changed_units"])


def test_paired_differences_give_the_repeatability(planted: tuple[Store, Pair]) -> None:
    store, pair = planted
    v = verify(store, "CR-B1", "CR-C1")
    for t in v.tests:
        j = t.to_json()
        if t.record != "PTR" or t.test_num in (MEAN_TEST, SPREAD_TEST):
            continue
        # the pairs differ by sd sigma sqrt(2 (1 - rho)) by construction, so one
        # measurement's test-retest sd is sigma sqrt(1 - rho);
        # ~400 pairs estimate it within about 4 % (one sd): allow 20 %
        want = pair.truth["repeatability_sd"][t.test_num]
        assert j["repeatability_sd"] == pytest.approx(want, rel=0.2), t.name
        assert j["paired_n"] >= 390 and abs(j["paired_mean_diff"]) < 5 * want / np.sqrt(200)


def test_an_identical_candidate_flags_nothing_on_nine_seeds_of_ten(
        tmp_path_factory: pytest.TempPathFactory) -> None:
    """Identical in distribution (no change planted), seeds 0 to 9, a store each."""
    clean = []
    for seed in range(10):
        d = tmp_path_factory.mktemp(f"null{seed}")
        store = Store(d / "store")
        assert not store.ingest([str(p) for p in Pair(seed=seed).write(d)]).rejected
        clean.append(not verify(store, "CR-B1", "CR-C1").moved)
    assert sum(clean) >= 9, clean


# -- the statistics against outside references, on the data verify read --------------------
def test_p_values_are_scipys_and_q_values_statsmodels_on_the_same_data(
        planted: tuple[Store, Pair]) -> None:
    store, _ = planted
    v = verify(store, "CR-B1", "CR-C1")
    for t in v.tests[:6]:
        b, c = t.values
        j = t.to_json()
        if j["p_location"] is None:
            continue
        assert j["p_location"] == pytest.approx(sps.mannwhitneyu(
            b, c, method="asymptotic").pvalue, rel=1e-9, abs=1e-300)
        assert j["p_spread"] == pytest.approx(sps.levene(b, c, center="median").pvalue,
                                              rel=1e-9, abs=1e-300)
        assert j["p_paired"] == pytest.approx(sps.wilcoxon(t.diffs, method="approx",
                                                           correction=True).pvalue,
                                              rel=1e-9, abs=1e-300)
        assert j["p_fail_rate"] == pytest.approx(min(1.0, sps.fisher_exact(
            [[t.fails[0], t.executed[0] - t.fails[0]],
             [t.fails[1], t.executed[1] - t.fails[1]]]).pvalue), rel=1e-9)
        # Cpk by its usual formula, from the values themselves
        lo, hi = j["lo_limit"], j["hi_limit"]
        m, s = float(np.mean(b)), float(np.std(b, ddof=1))
        sides = [x for x in ((hi - m) if hi is not None else None,
                             (m - lo) if lo is not None else None) if x is not None]
        assert j["cpk_baseline"] == pytest.approx(min(sides) / (3 * s), rel=1e-9)
    tested = [t for t in v.tests if t.p_test is not None]
    # statsmodels' Benjamini-Hochberg on the per-test p-values
    reject, q, _, _ = multipletests([t.p_test for t in tested], alpha=0.05, method="fdr_bh")
    np.testing.assert_allclose([t.q_value for t in tested], q, rtol=1e-12)
    assert [t.verdict == "shifted" for t in tested] == list(reject)


def test_in_limit_values_come_straight_from_the_results_view(planted: tuple[Store, Pair]
                                                              ) -> None:
    store, _ = planted
    v = verify(store, "CR-B1", "CR-C1")
    t = next(t for t in v.tests if t.test_num == FLIP_TEST)
    raw = store.sql("""select r.value from results r join parts p using (file_id, part_index)
                       where p.lot_id = ? and r.test_num = ? and not r.failed
                       order by r.value""", ["CR-C1", FLIP_TEST])
    np.testing.assert_array_equal(np.sort(t.values[1]), raw["value"].to_numpy())


# -- the sample logs ------------------------------------------------------------------------
def test_the_sample_correlation_lot_shows_what_was_planted(sample_store: Ingested) -> None:
    t = truth()["files"][CONCURRENT_LOG]["retest"]
    v = verify(sample_store.store, BASELINE, CANDIDATE)
    assert sorted(x.name for x in v.moved) == sorted(t["planted"])
    assert [u["part_id"] for u in v.changed_units] == t["flipped_part_ids"]
    assert {u["first_test_name"] for u in v.changed_units} == {t["flip_test"]}
    assert v.time["saving_pct"] == pytest.approx(t["realised_saving_pct"], abs=1e-3)
    assert v.matched_units == 160
    # the baseline lot's two logs hold the same 160 units: the later copy counts
    assert v.unit_counts["baseline_superseded"] == 160 and v.notes


def test_the_sample_verification_against_the_plan(sample_store: Ingested) -> None:
    plan = json.loads((Path(__file__).parent / "golden" / "sample_plan.json").read_text())
    v = verify(sample_store.store, BASELINE, CANDIDATE, plan=plan)
    p = v.time["projected"]
    assert (p["baseline_ms"], p["planned_ms"], p["saving_pct"]) == (
        plan["baseline_ms"], plan["planned_ms"], plan["saving_pct"])
    status = {b["block"]: b["status"] for b in v.time["blocks"]}
    slowed = truth()["files"][CONCURRENT_LOG]["retest"]["concurrent_slowdown"]
    assert {b for b, s in status.items() if s != "as planned"} == set(slowed)
    assert status["flash_bist"] == "longer than planned"


def test_verify_with_a_block_map_plans_the_baseline(cli: Callable[..., CliResult],
                                                    sample_store: Ingested) -> None:
    r = cli("verify", "--store", sample_store.store.path, "--baseline", BASELINE,
            "--candidate", CANDIDATE, "--blocks", SAMPLES / "blocks.toml")
    assert r.code == 0, r.err
    assert "planned    touchdown 2210.7 ms -> 1214.7 ms: 45.1 % less" in r.out
    table = r.out.split("Tests, the ones that moved first:")[1].strip().splitlines()
    assert "adc_snr" in table[2] and "shifted" in table[2]
    assert "flash_bist" in r.out and "longer than planned" in r.out


# -- retests, dropped tests, changed limits, few units --------------------------------------
def test_dropped_tests_and_changed_limits_are_listed(tmp_path: Path) -> None:
    pair = Pair(seed=3, drop=(130, 601), new_hi={101: 9.0})
    store = Store(tmp_path / "store")
    store.ingest([str(p) for p in pair.write(tmp_path)])
    v = verify(store, "CR-B1", "CR-C1").to_json()
    assert [o["test_num"] for o in v["only_in_baseline"]] == [130, 601]
    assert v["only_in_candidate"] == []
    changed = [t["test_num"] for t in v["tests"] if t["limits_changed"]]
    assert changed == [101] and any("other limits" in n for n in v["notes"])


def test_a_unit_tested_twice_counts_its_last_test(tmp_path: Path) -> None:
    first = Pair(seed=4, units=40)
    again = Pair(seed=5, units=40, baseline_lot="X", candidate_lot="CR-B1")
    first.write(tmp_path)
    (tmp_path / "retest").mkdir()
    again.write(tmp_path / "retest")   # a second log of lot CR-B1: the same 40 part ids
    store = Store(tmp_path / "store")
    store.ingest([str(tmp_path / "CR-B1.stdf"), str(tmp_path / "CR-C1.stdf"),
                  str(tmp_path / "retest" / "CR-B1.stdf")])
    with_retest = verify(store, "CR-B1", "CR-C1")
    assert with_retest.unit_counts["baseline"] == 40
    assert with_retest.unit_counts["baseline_superseded"] == 40
    r = Reader(store)
    try:
        lot = read_lot(r, "CR-B1")
    finally:
        r.close()
    last = lot.files["file_id"][-1]  # files in start order, ties by file_id
    t = next(t for t in with_retest.tests if t.test_num == 100)
    want = lot.results.filter((lot.results["file_id"] == last)
                              & (lot.results["test_num"] == 100))["value"].to_numpy()
    np.testing.assert_allclose(np.sort(t.values[0]), np.sort(want[np.isfinite(want)]))


def test_too_few_units_say_too_few_not_same(tmp_path: Path) -> None:
    store = Store(tmp_path / "store")
    store.ingest([str(p) for p in Pair(seed=6, units=8, base_fails=0).write(tmp_path)])
    v = verify(store, "CR-B1", "CR-C1")
    assert {t.verdict for t in v.tests} == {"too few"}
    assert all("10 needed" in t.reason for t in v.tests)


def test_compare_lots_is_the_pure_core(planted: tuple[Store, Pair]) -> None:
    b, c = read_pair(planted[0])
    v = compare_lots(b, c, "part_id")
    assert {t.test_num for t in v.moved} == {MEAN_TEST, SPREAD_TEST}


# -- bad input: one line, exit 2 --------------------------------------------------------------
def one_line(r: CliResult) -> str:
    assert r.code == 2, (r.code, r.err)
    assert len(r.err_lines) == 1 and "Traceback" not in r.err, r.err
    assert r.out == ""
    return r.err_lines[0]


def test_unknown_lot_is_one_line_exit_2(cli: Callable[..., CliResult],
                                        planted: tuple[Store, Pair]) -> None:
    line = one_line(cli("verify", "--store", planted[0].path, "--baseline", "CR-B1",
                        "--candidate", "NOPE-9"))
    assert "NOPE-9" in line and "no such lot" in line and "CR-C1" in line


def test_the_same_lot_twice_is_one_line_exit_2(cli: Callable[..., CliResult],
                                               planted: tuple[Store, Pair]) -> None:
    line = one_line(cli("verify", "--store", planted[0].path, "--baseline", "CR-B1",
                        "--candidate", "CR-B1"))
    assert "same lot" in line and "CR-B1" in line


def test_lots_with_no_test_in_common_are_one_line_exit_2(cli: Callable[..., CliResult],
                                                         sample_store: Ingested) -> None:
    # PF4-L0235 is a timing CSV: parts and block times, no test results at all
    line = one_line(cli("verify", "--store", sample_store.store.path, "--baseline", BASELINE,
                        "--candidate", "PF4-L0235"))
    assert "no test in common" in line and "PF4-L0235" in line


@pytest.mark.parametrize("args", [("--match", "serial"), ("--fdr", "0"), ("--fdr", "1.5"),
                                  ("--min-shift", "-1"), ("--min-ratio", "0.5")])
def test_bad_options_are_one_line_exit_2(cli: Callable[..., CliResult],
                                         planted: tuple[Store, Pair], args: tuple[str, str]
                                         ) -> None:
    one_line(cli("verify", "--store", planted[0].path, "--baseline", "CR-B1", "--candidate",
                 "CR-C1", *args))


def test_a_missing_store_is_one_line_exit_2(cli: Callable[..., CliResult],
                                            tmp_path: Path) -> None:
    line = one_line(cli("verify", "--store", tmp_path / "none", "--baseline", "A",
                        "--candidate", "B"))
    assert "no store there" in line
    assert not (tmp_path / "none").exists()  # a verification never creates a store


def test_a_change_beyond_chance_but_too_small_to_matter_stays_same(tmp_path: Path) -> None:
    """0.15 sigma planted on matched units (rho 0.9): the paired test sees it at once, but
    it is under the 0.3 sigma that counts by default; with --min-shift 0 it counts."""
    pair = Pair(seed=8, shift={MEAN_TEST: 0.15})
    store = Store(tmp_path / "store")
    store.ingest([str(p) for p in pair.write(tmp_path)])
    small = next(t for t in verify(store, "CR-B1", "CR-C1").tests if t.test_num == MEAN_TEST)
    assert small.verdict == "same" and small.reason.startswith("a small change beyond chance")
    assert small.p["paired"] < 1e-6 and abs(small.shift_sigma or 0) < 0.3
    strict = verify(store, "CR-B1", "CR-C1", rules=Rules(min_shift=0.0, min_ratio=1.0))
    assert MEAN_TEST in {t.test_num for t in strict.moved}


@pytest.mark.slow
def test_false_flags_over_a_hundred_seeds(tmp_path_factory: pytest.TempPathFactory) -> None:
    """Identical in distribution, 100 seeds, units matched and independent between the lots
    (rho 0): at a 5 % false discovery rate, about 5 flagged pairs at most are expected
    (binomial(100, 0.05): 11 or more has probability under 1 %)."""
    d = tmp_path_factory.mktemp("hundred")
    flagged = 0
    for seed in range(100):
        pair = Pair(seed=100 + seed, rho=0.0, baseline_lot=f"H{seed}-B",
                    candidate_lot=f"H{seed}-C")
        store = Store(d / f"s{seed}")
        store.ingest([str(p) for p in pair.write(d)])
        flagged += bool(verify(store, f"H{seed}-B", f"H{seed}-C").moved)
    assert flagged <= 10, flagged


def test_results_that_are_not_numbers_are_left_out(planted: tuple[Store, Pair]) -> None:
    """A NaN or infinite result (R*4 allows them) is not an in-limit value."""
    b, c = read_pair(planted[0])
    bad = c.results.with_columns(
        pl.when((pl.col("test_num") == 100) & (pl.col("part_index") < 3))
        .then(pl.lit(float("nan"))).otherwise(pl.col("value")).alias("value"))
    v = compare_lots(b, LotData(c.lot_id, c.files, c.parts, bad, c.touchdowns, c.block_times))
    t = next(t for t in v.tests if t.test_num == 100)
    assert t.cand.n == 397 and np.isfinite(t.values[1]).all() and t.verdict == "same"
