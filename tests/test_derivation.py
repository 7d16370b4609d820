"""Derived when a log lands: every timing view complete straight after `tandem ingest`,
the estimate fitted on every part (parts that ran no block included), one warning per
lot and finding, block rules that re-derive exactly the lots they change, drift only on
what the data determine.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import polars as pl
import pytest

from pipeline.attribute import timing
from pipeline.attribute.estimate import estimate_block_times
from pipeline.read.stdf.codec import encode_record
from pipeline.store import Store
from tests.conftest import ALL_LOGS, SAMPLES, TOTALS_ONLY, Ingested, file_truth, ingest_into

TIMING_VIEWS = ("block_times", "block_times_all", "reconciliation", "site_summary",
                "touchdowns", "parts", "lots")


# -- complete the moment a log lands --------------------------------------------------------
def test_every_lot_has_its_timing_views_straight_after_ingest(tmp_path: Path, cli) -> None:
    """No other command in between: the estimate-only lot has block times at once."""
    ing = ingest_into(tmp_path / "s", SAMPLES)
    lots = set(ing.store.sql("select distinct lot_id from lots")["lot_id"])
    assert file_truth(TOTALS_ONLY)["lot_id"] in lots
    assert lots == {file_truth(n)["lot_id"] for n in ALL_LOGS}
    for view in TIMING_VIEWS:
        got = set(ing.store.sql(f"select distinct lot_id from {view}")["lot_id"])
        assert got == lots, (view, lots - got)
    methods = dict(ing.store.sql("select distinct lot_id, method from block_times").rows())
    assert methods[file_truth(TOTALS_ONLY)["lot_id"]] == "estimate"
    r = cli("sql", "--store", tmp_path / "s", "--format", "json",
            "select lot_id, count(*) as n from reconciliation group by all order by 1")
    assert r.code == 0, r.err
    assert {x["lot_id"] for x in json.loads(r.out)} == lots


# -- the estimate, fitted on every part -------------------------------------------------------
@dataclass
class StopLot:
    path: Path
    truth: dict[str, float]     # block -> realised mean ms over the parts that ran it
    ended_after: dict[str, int]  # block -> parts whose last block it was
    overhead_ms: float


BLOCKS = {"contact": 42.0, "dc_leakage": 80.0, "scan": 300.0, "mem_bist": 60.0,
          "rf": 120.0}


def stop_on_fail_log(path: Path, n_parts: int = 1600, none_share: float = 0.03,
                     per_block: int = 40, seed: int = 7, together: bool = False,
                     sections: bool = True) -> StopLot:
    """One site, stop-on-fail: ``none_share`` of the parts fail continuity (a test
    outside every block) and run no block; ``per_block`` parts end after each block but
    the last; the rest pass. PRR TEST_T = overhead + the blocks run + noise (ms).
    ``together``: mem_bist never fails, so it and rf always run together. ``sections``
    False: no BPS/EPS (test n*100 belongs to the n-th block by number only)."""
    rng = np.random.default_rng(seed)
    names = list(BLOCKS)
    n_none = round(none_share * n_parts)
    stops = [-1] * n_none
    for b, name in enumerate(names[:-1]):
        if not (together and name == "mem_bist"):
            stops += [b] * per_block
    stops += [len(names) - 1] * (n_parts - len(stops))
    stops = [stops[i] for i in rng.permutation(n_parts)]
    recs = [encode_record("FAR", {"CPU_TYPE": 2, "STDF_VER": 4}),
            encode_record("MIR", {"START_T": 1_900_000_000, "LOT_ID": path.stem,
                                  "PART_TYP": "demo", "JOB_NAM": "prog", "JOB_REV": "A"})]
    sums = dict.fromkeys(names, 0.0)
    runs = dict.fromkeys(names, 0)
    overheads = []
    for i, last in enumerate(stops):
        recs.append(encode_record("PIR", {"HEAD_NUM": 1, "SITE_NUM": 1}))
        recs.append(encode_record("PTR", {"TEST_NUM": 1, "HEAD_NUM": 1, "SITE_NUM": 1,
                                          "TEST_FLG": 128 if last < 0 else 0, "PARM_FLG": 0,
                                          "RESULT": 0.5, "TEST_TXT": "continuity"}))
        t = float(rng.normal(15.0, 0.5))
        overheads.append(t)
        for b in range(last + 1):
            name = names[b]
            d = float(rng.normal(BLOCKS[name], 0.01 * BLOCKS[name]))
            sums[name] += d
            runs[name] += 1
            t += d
            ptr = encode_record("PTR", {"TEST_NUM": 100 * (b + 1), "HEAD_NUM": 1,
                                        "SITE_NUM": 1, "PARM_FLG": 0, "RESULT": 1.0,
                                        "TEST_FLG": 128 if b == last < len(names) - 1
                                        else 0, "TEST_TXT": f"{name}_t"})
            recs += ([encode_record("BPS", {"SEQ_NAME": name}), ptr, encode_record("EPS", {})]
                     if sections else [ptr])
        failed = last < len(names) - 1
        recs.append(encode_record("PRR", {
            "HEAD_NUM": 1, "SITE_NUM": 1, "PART_FLG": 8 if failed else 0, "NUM_TEST": 1,
            "HARD_BIN": 5 if failed else 1, "SOFT_BIN": 5 if failed else 1,
            "X_COORD": -32768, "Y_COORD": -32768, "TEST_T": int(round(t)),
            "PART_ID": str(i + 1)}))
    recs.append(encode_record("MRR", {"FINISH_T": 1_900_003_600}))
    path.write_bytes(b"".join(recs))
    ended = {name: sum(1 for s in stops if s == b) for b, name in enumerate(names)}
    return StopLot(path, {n: sums[n] / runs[n] for n in names}, ended,
                   float(np.mean(overheads)))


def test_parts_that_ran_no_block_separate_the_overhead(tmp_path: Path) -> None:
    lot = stop_on_fail_log(tmp_path / "STOP-A.stdf")
    ing = ingest_into(tmp_path / "s", lot.path)
    got = dict(ing.store.sql("""select block, mean_ms from block_times
                                where lot_id = 'STOP-A' and site is null""").rows())
    for block, truth in lot.truth.items():
        if lot.ended_after[block] >= 20:  # the data hold this block's time
            assert got[block] == pytest.approx(truth, rel=0.10), block
    assert got["contact"] == pytest.approx(lot.truth["contact"], rel=0.10)  # the first block
    assert got["overhead"] == pytest.approx(lot.overhead_ms, rel=0.10)
    assert not any("contact" in w for w in timing.warnings(ing.store, "STOP-A"))


def test_without_those_parts_the_first_block_merges_with_the_overhead(tmp_path: Path) -> None:
    """What the fit did before: parts that ran no block were left out, and then every
    part runs the first block, so it cannot be told from the overhead."""
    lot = stop_on_fail_log(tmp_path / "STOP-B.stdf")
    ing = ingest_into(tmp_path / "s", lot.path)
    runs = ing.store.sql("""select p.part_index, p.test_time_ms, b.block
                            from parts p join part_blocks b using (lot_id, file_id, part_index)
                            where b.block <> 'unassigned' order by 1""")
    names = list(BLOCKS)
    parts = runs["part_index"].unique(maintain_order=True).to_list()
    row = {p: i for i, p in enumerate(parts)}
    X = np.zeros((len(parts), len(names)))
    for p, _, b in runs.iter_rows():
        X[row[p], names.index(b)] = 1.0
    y = runs.unique("part_index", maintain_order=True)["test_time_ms"].to_numpy()
    est = estimate_block_times(X, y, names, n_boot=0)
    assert ["overhead", "contact"] in est.groups


def test_a_really_inseparable_block_still_gets_its_one_line(tmp_path: Path) -> None:
    lot = stop_on_fail_log(tmp_path / "STOP-C.stdf", together=True)
    ing = ingest_into(tmp_path / "s", lot.path)
    lines = timing.warnings(ing.store, "STOP-C")
    assert len(lines) == 1, lines
    assert "mem_bist and rf always run together" in lines[0]
    assert "contact" not in lines[0]


def test_each_finding_is_one_line_naming_its_sites(sample_store: Ingested) -> None:
    """A four-site lot's estimate is fitted pooled and per site: one line per finding,
    naming the sites, not one per site."""
    notes = sample_store.sql("select lot_id, kind, blocks, sites, message from timing_notes "
                             "where lot_id = 'PF4-L0231'")
    assert notes.height == notes.unique(["lot_id", "kind", "blocks"]).height >= 1
    assert all("(on every site)" in m for m in notes["message"])


# -- block rules ------------------------------------------------------------------------------
def test_block_rules_rederive_only_the_lots_they_change(tmp_path: Path, cli) -> None:
    from tests.test_reliability import tiny_log

    lot = stop_on_fail_log(tmp_path / "NOSECT.stdf", sections=False)
    (tmp_path / "t.stdf").write_bytes(tiny_log("SECTIONED").data)
    assert cli("ingest", lot.path, tmp_path / "t.stdf", "--store", tmp_path / "s").code == 0
    store = Store(tmp_path / "s")
    before = store.snapshot().lots()
    # No section places NOSECT's tests: nothing to estimate from, and it says so.
    assert any("no part ran an assigned block" in w for w in timing.warnings(store, "NOSECT"))
    blocks = tmp_path / "rules.toml"
    blocks.write_text("".join(f"[block.{name}]\ntests = [[{100 * (b + 1)}, {100 * (b + 1)}]]\n"
                              for b, name in enumerate(BLOCKS)))
    r = cli("times", "--store", tmp_path / "s", "--blocks", blocks, "--lot", "NOSECT")
    assert r.code == 0, r.err
    assert "1 lot(s) derived again (NOSECT)" in r.err
    after = store.snapshot().lots()
    assert after["SECTIONED"] == before["SECTIONED"]  # its tests are all in sections
    assert after["NOSECT"] > before["NOSECT"]
    got = dict(store.sql("""select block, mean_ms from block_times
                            where lot_id = 'NOSECT' and site is null""").rows())
    assert got["scan"] == pytest.approx(lot.truth["scan"], rel=0.10)
    r = cli("times", "--store", tmp_path / "s", "--blocks", blocks, "--lot", "NOSECT")
    assert "0 lot(s) derived again" in r.err  # the same rules again: nothing to do
    assert store.snapshot().lots() == after


# -- drift -----------------------------------------------------------------------------------
def test_no_drift_flag_rests_on_an_inseparable_estimate(sample_store: Ingested) -> None:
    df = timing.drift(sample_store)  # type: ignore[arg-type]
    flagged = df.filter(pl.col("is_flagged"))
    assert flagged.filter(~pl.col("identifiable")).is_empty()
    est = df.filter((pl.col("lot_id") == "PF4-L0234") & (pl.col("kind") == "block")
                    & ~pl.col("identifiable"))
    assert set(est["block"]) == {"contact", "flash_bist", "sram_bist"}
    assert not est["is_flagged"].any()
    group = df.filter(pl.col("kind") == "group")
    assert set(group["block"]) == {"flash_bist + sram_bist"}  # compared as a sum instead


def test_a_planted_drift_in_an_identifiable_block_is_flagged(tmp_path: Path) -> None:
    from tests.test_reliability import tiny_log

    logs = []
    for i in range(6):
        dc = 2500 if i < 5 else 2900  # +16 % in the newest lot
        log = tiny_log(f"DRIFT-{i}", touchdowns=6, seed=i, start_t=1_900_000_000 + 86400 * i,
                       block_us={"contact": 800, "dc": dc})
        p = tmp_path / f"d{i}.stdf"
        p.write_bytes(log.data)
        logs.append(p)
    ing = ingest_into(tmp_path / "s", *logs)
    df = timing.drift(ing.store)
    flagged = df.filter(pl.col("is_flagged"))
    assert flagged.select("lot_id", "block").rows() == [("DRIFT-5", "dc")]
