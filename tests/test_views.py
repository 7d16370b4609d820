"""The catalog's views: each one's grain and not-null columns, agreement with a polars
recomputation straight from the raw Parquet, agreement with the generator's ground truth
(sample_logs/truth.json), a tiny given/expect log, and the store's promises to readers
(relocatable; readable while a writer holds the lock).
"""

from __future__ import annotations

import datetime as dt
import math
import os
import shutil
from collections.abc import Iterator
from pathlib import Path

import duckdb
import polars as pl
import pytest
from polars.testing import assert_frame_equal

from pipeline.errors import StoreError
from pipeline.read.schemas import table_schemas
from pipeline.read.stdf.codec import encode_record
from pipeline.store import SQL_DIR, Store, to_frame
from tests.conftest import (
    ALL_LOGS,
    MARKERS_GZ,
    MARKERS_LE,
    STDF_LOGS,
    TIMING_CSV,
    TSR_ONLY,
    Ingested,
    file_truth,
    ingest_into,
    raw_parquet,
    truth,
)

# -- grain and not-null columns --------------------------------------------------------------
GRAIN: dict[str, tuple[tuple[str, ...], tuple[str, ...]]] = {  # view -> (key, not null)
    "files": (("file_id",), ("file_id", "path", "sha256", "status", "records", "parts")),
    "lots": (("lot_id", "file_id"), ("lot_id", "file_id", "source")),
    "parts": (("file_id", "part_index"),
              ("file_id", "lot_id", "part_index", "touchdown", "head", "site", "hard_bin",
               "passed", "test_time_ms", "source")),
    "results": (("file_id", "rec_index", "element"),
                ("file_id", "part_index", "head", "site", "test_num", "test_name", "block",
                 "record", "failed", "rec_index")),
    "sections": (("file_id", "section_id"), ("file_id", "section_id", "name", "depth",
                                             "begin_rec", "end_rec")),
    "markers": (("file_id", "rec_index"), ("file_id", "rec_index", "touchdown", "block",
                                           "site", "head", "start_us", "end_us", "is_valid")),
    "touchdowns": (("file_id", "touchdown"), ("lot_id", "file_id", "touchdown", "sites",
                                              "touchdown_ms", "method")),
    "test_summaries": (("file_id", "head", "site", "test_num"),
                       ("file_id", "head", "site", "test_num", "test_name", "block",
                        "exec_cnt")),
    "bins": (("file_id", "bin_kind", "head", "site", "bin"),
             ("file_id", "bin_kind", "head", "site", "bin", "parts")),
    "part_counts": (("file_id", "head", "site"), ("file_id", "head", "site", "parts")),
    "pins": (("file_id", "pin_index", "head", "site"), ("file_id", "pin_index")),
    "pin_groups": (("file_id", "group_index", "pin_index"),
                   ("file_id", "group_index", "pin_index")),
    "wafers": (("file_id", "head", "wafer_seq"), ("file_id", "head", "wafer_seq", "wafer_id",
                                                  "parts")),
    "texts": (("file_id", "rec_index"), ("file_id", "rec_index", "record")),
}


def test_documented_views_exist_one_per_sql_file(sample_store: Ingested) -> None:
    views = set(sample_store.sql("select view_name from duckdb_views() "
                                 "where not internal")["view_name"])
    assert set(GRAIN) <= views  # the base views DESIGN.md and the brief list
    assert {p.stem for p in SQL_DIR.glob("*.sql")} <= views  # file name = view name
    assert {f"raw_{t}" for t in table_schemas()} <= views


@pytest.mark.parametrize("view", list(GRAIN))
def test_view_is_unique_on_its_key(sample_store: Ingested, view: str) -> None:
    key = ", ".join(GRAIN[view][0])
    n, dupes = sample_store.sql(
        f"select (select count(*) from {view}), count(*) from "
        f"(select {key} from {view} group by all having count(*) > 1)").row(0)
    assert n > 0, f"{view} is empty for the sample logs"
    assert dupes == 0


@pytest.mark.parametrize("view", list(GRAIN))
def test_view_not_null_columns(sample_store: Ingested, view: str) -> None:
    cols = GRAIN[view][1]
    where = "status <> 'rejected'" if view == "files" else "true"
    nulls = sample_store.sql(
        "select " + ", ".join(f"count(*) filter (where {c} is null) as {c}" for c in cols)
        + f" from {view} where {where}").row(0, named=True)
    assert nulls == dict.fromkeys(cols, 0)


# -- recomputed from the raw Parquet with polars ---------------------------------------------
def raw(ing: Ingested, table: str) -> pl.DataFrame:
    """One stored table, as any Parquet reader sees it, limited to committed logs."""
    return raw_parquet(ing.store.path, table)


def test_parts_per_file_and_site_match_raw_parquet(sample_store: Ingested) -> None:
    prr = raw(sample_store, "parts")
    # STDF V4, PRR 5/20: PART_FLG bit 3 = failed, bit 4 = pass/fail unknown
    want = (prr.group_by("file_id", pl.col("site_num").cast(pl.Int32).alias("site"))
            .agg(pl.len().cast(pl.Int64).alias("parts"),
                 ((pl.col("part_flg") & 0x18) == 0).sum().cast(pl.Int64).alias("good"),
                 pl.col("touchdown").n_unique().cast(pl.Int64).alias("touchdowns"))
            .sort("file_id", "site"))
    got = sample_store.sql(
        "select file_id, site, count(*) as parts, count(*) filter (where passed) as good, "
        "count(distinct touchdown) as touchdowns from parts where source = 'stdf' "
        "group by all order by all")
    assert_frame_equal(got, want, check_dtypes=False)


def test_result_rows_and_values_match_raw_parquet(sample_store: Ingested) -> None:
    ptr, mpr, ftr = (raw(sample_store, t) for t in ("ptr", "mpr", "ftr"))
    want = pl.concat([
        ptr.group_by("file_id").agg(pl.lit("PTR").alias("record"), pl.len().alias("n"),
                                    pl.col("result").cast(pl.Float64).sum().alias("total")),
        mpr.group_by("file_id").agg(
            pl.lit("MPR").alias("record"), pl.col("rtn_rslt").list.len().sum().alias("n"),
            pl.col("rtn_rslt").explode().cast(pl.Float64).sum().alias("total")),
        ftr.group_by("file_id").agg(pl.lit("FTR").alias("record"), pl.len().alias("n"),
                                    pl.lit(None, pl.Float64).alias("total")),
    ], how="vertical_relaxed").sort("file_id", "record")
    got = sample_store.sql("select file_id, record, count(*) as n, sum(value) as total "
                           "from results group by all order by all")
    assert_frame_equal(got, want, check_dtypes=False, rel_tol=1e-12)


def test_markers_parse_every_tt_dtr(sample_store: Ingested) -> None:
    dtr = raw(sample_store, "dtr").filter(pl.col("text_dat").str.starts_with("TT "))
    tok = {k: pl.col("text_dat").str.extract(rf"(?:^|\s){k}=(\S+)", 1)
           for k in ("block", "site", "start_us", "end_us")}
    want = dtr.select("file_id", "rec_index", tok["block"].alias("block"),
                      tok["site"].cast(pl.Int64).alias("site"),
                      tok["start_us"].cast(pl.Int64).alias("start_us"),
                      tok["end_us"].cast(pl.Int64).alias("end_us")).sort("file_id",
                                                                         "rec_index")
    got = sample_store.sql("select file_id, rec_index, block, site, start_us, end_us "
                           "from markers order by all")
    assert_frame_equal(got, want, check_dtypes=False)
    for name in STDF_LOGS:
        n = sample_store.sql("select count(*) from markers where file_id = ? and is_valid",
                             [sample_store.fid(name)]).item()
        assert n == file_truth(name)["records"]["markers"], name


def test_marker_durations_match_the_realised_block_times(sample_store: Ingested) -> None:
    df = sample_store.sql("select block, site, count(*), avg(duration_ms) from markers "
                          "where file_id = ? group by all", [sample_store.fid(MARKERS_LE)])
    want = file_truth(MARKERS_LE)["block_ms"]
    assert df.height == sum(len(v) for v in want.values())
    for block, site, n, mean in df.iter_rows():
        t = want[block][str(site)]
        assert n == t["parts"]
        assert math.isclose(mean, t["realised_mean_ms"], abs_tol=1e-3), (block, site)


# -- against the ground truth ------------------------------------------------------------------
def test_every_result_has_a_test_name(sample_store: Ingested) -> None:
    bad, names = sample_store.sql(
        "select count(*) filter (where test_name is null or test_name = ''), "
        "max(n) from (select *, count(distinct test_name) over "
        "(partition by file_id, record, test_num) as n from results)").row(0)
    assert bad == 0
    assert names == 1  # one name per test number: later records inherit the first's


@pytest.mark.parametrize("name", STDF_LOGS)
def test_block_of_each_test_is_the_generators_block(sample_store: Ingested, name: str) -> None:
    block_of = {n: b["name"] for b in truth()["device"]["blocks"] for n in b["tests"]}
    df = sample_store.sql("select distinct test_num, block from results where file_id = ?",
                          [sample_store.fid(name)])
    assert dict(df.iter_rows()) == {n: block_of[n] for n in df["test_num"]}
    assert df["test_num"].n_unique() == df.height  # each test in exactly one block
    sections = sample_store.sql("select count(*) from sections where file_id = ?",
                                [sample_store.fid(name)]).item()
    assert sections == file_truth(name)["records"]["BPS"]


def test_tsr_only_file_takes_blocks_from_tsr(sample_store: Ingested) -> None:
    fid = sample_store.fid(TSR_ONLY)
    assert file_truth(TSR_ONLY)["has_sections"] is False
    got = sample_store.sql("select count(*) filter (where section_id is not null), "
                           "count(distinct block), count(*) filter (where block = 'unassigned')"
                           " from results where file_id = ?", [fid]).row(0)
    assert got == (0, len(truth()["device"]["blocks"]), 0)


@pytest.mark.parametrize("name", ALL_LOGS)
def test_lots_match_truth(sample_store: Ingested, name: str) -> None:
    t, dev = file_truth(name), truth()["device"]
    row = sample_store.sql("select * from lots where file_id = ?",
                           [sample_store.fid(name)]).row(0, named=True)
    assert row["lot_id"] == t["lot_id"]
    if t["format"] == "csv":
        assert row["source"] == "csv"
        return
    as_local = lambda s: dt.datetime.fromtimestamp(s, dt.UTC).replace(tzinfo=None)  # noqa: E731
    assert (row["part_type"], row["program"], row["program_rev"], row["tester_type"]) == (
        dev["part_typ"], dev["job"], t["job_rev"], dev["tester_type"])
    assert row["started_at"] == as_local(t["start_t"])
    assert row["finished_at"] == as_local(t["finish_t"])


@pytest.mark.parametrize("name", ALL_LOGS)
def test_touchdowns_match_truth(sample_store: Ingested, name: str) -> None:
    t = file_truth(name)
    df = sample_store.sql("select touchdown, sites, method from touchdowns where file_id = ? "
                          "order by touchdown", [sample_store.fid(name)])
    assert df["touchdown"].to_list() == list(range(t["touchdowns"]))
    assert df["sites"].sum() == t["parts"]
    want = "marker" if t["has_markers"] else "csv" if t["format"] == "csv" else "part_time"
    assert set(df["method"]) == {want}
    if t["has_markers"]:
        ms = sample_store.sql("select touchdown_ms from touchdowns where file_id = ? "
                              "order by touchdown", [sample_store.fid(name)])["touchdown_ms"]
        assert ms.to_list() == pytest.approx(t["touchdown_ms"], abs=1e-3)


@pytest.mark.parametrize("name", STDF_LOGS)
def test_wafers_counts_and_bins_match_truth(sample_store: Ingested, name: str) -> None:
    t = file_truth(name)
    fid = sample_store.fid(name)
    good = sum(t["good_per_site"].values())
    w = sample_store.sql("select wafer_id, parts, good from wafers where file_id = ?", [fid])
    assert w.rows() == [(t["wafer_id"], t["parts"], good)]
    pc = sample_store.sql("select site, parts, good from part_counts where file_id = ? "
                          "order by is_summary, site", [fid]).rows()
    assert pc == [(int(s), n, t["good_per_site"][s]) for s, n in t["parts_per_site"].items()] \
        + [(0, t["parts"], good)]
    bins = sample_store.sql("select bin_kind, sum(parts), sum(parts) filter (where bin = 1), "
                            "any_value(pass_fail) filter (where bin = 1) from bins "
                            "where file_id = ? and is_summary group by 1 order by 1", [fid])
    assert bins.rows() == [("hard", t["parts"], good, "P"), ("soft", t["parts"], good, "P")]


@pytest.mark.parametrize("name", STDF_LOGS)
def test_test_summaries_match_truth(sample_store: Ingested, name: str) -> None:
    t = file_truth(name)
    df = sample_store.sql("select test_num, exec_cnt, test_time_s from test_summaries "
                          "where file_id = ? and is_summary", [sample_store.fid(name)])
    tests = [n for b in truth()["device"]["blocks"] for n in b["tests"]]
    assert sorted(df["test_num"]) == sorted(tests)
    if not t["stop_on_fail"]:  # every part ran every test
        assert set(df["exec_cnt"]) == {t["parts"]}
    assert df["test_time_s"].null_count() == (0 if t["tsr_test_time_valid"] else df.height)


def test_texts_pins_and_pin_groups_hold_together(sample_store: Ingested) -> None:
    fid = sample_store.fid(MARKERS_GZ)
    tt = sample_store.sql("select count(*) from texts where file_id = ? and record = 'DTR' "
                          "and text like 'TT %'", [fid]).item()
    assert tt == file_truth(MARKERS_GZ)["records"]["markers"]
    orphans = sample_store.sql("select count(*) from pin_groups g anti join pins p "
                               "using (file_id, pin_index)").item()
    assert orphans == 0
    per_site = sample_store.sql("select site, count(*) from pins where file_id = ? "
                                "group by site", [fid])
    assert sorted(per_site["site"]) == file_truth(MARKERS_GZ)["sites"]
    assert per_site["count_star()"].n_unique() == 1  # the same pins on every site


def test_timing_csv_parts_come_from_its_rows(sample_store: Ingested) -> None:
    csv_rows = raw(sample_store, "timing_csv")
    want = csv_rows.select("lot_id", "touchdown", "site", "part_id").unique().height
    got = sample_store.sql("select count(*) from parts where file_id = ?",
                           [sample_store.fid(TIMING_CSV)]).item()
    assert got == want == file_truth(TIMING_CSV)["parts"]


# -- given/expect: a tiny log whose every value is known ---------------------------------------
START_T = 1_700_000_000
TINY = [
    ("FAR", {"CPU_TYPE": 2, "STDF_VER": 4}),
    ("MIR", {"SETUP_T": START_T, "START_T": START_T, "STAT_NUM": 1, "LOT_ID": "LOT-T1",
             "PART_TYP": "widget", "NODE_NAM": "", "TSTR_TYP": "bench", "JOB_NAM": "prog_a",
             "JOB_REV": "r1"}),
    ("PIR", {"HEAD_NUM": 1, "SITE_NUM": 1}),
    ("BPS", {"SEQ_NAME": "blk_a"}),
    # OPT_FLAG 0x0E: no spec limits (bits 2, 3), limits valid (STDF V4, PTR 15/10)
    ("PTR", {"TEST_NUM": 1, "HEAD_NUM": 1, "SITE_NUM": 1, "TEST_FLG": 0, "PARM_FLG": 0,
             "RESULT": 1.5, "TEST_TXT": "t_one", "ALARM_ID": "", "OPT_FLAG": 0x0E,
             "LO_LIMIT": 1.0, "HI_LIMIT": 2.0, "UNITS": "V"}),
    ("PTR", {"TEST_NUM": 2, "HEAD_NUM": 1, "SITE_NUM": 1, "TEST_FLG": 0x80, "PARM_FLG": 0,
             "RESULT": 9.0, "TEST_TXT": "t_two"}),
    ("BPS", {"SEQ_NAME": "blk_inner"}),
    ("MPR", {"TEST_NUM": 4, "HEAD_NUM": 1, "SITE_NUM": 1, "TEST_FLG": 0, "PARM_FLG": 0,
             "RTN_STAT": [], "RTN_RSLT": [0.25, 0.5, 0.75], "TEST_TXT": "t_four"}),
    ("EPS", {}),
    ("FTR", {"TEST_NUM": 5, "HEAD_NUM": 1, "SITE_NUM": 1, "TEST_FLG": 0x80}),
    ("EPS", {}),
    ("PTR", {"TEST_NUM": 3, "HEAD_NUM": 1, "SITE_NUM": 1, "TEST_FLG": 0x40, "PARM_FLG": 0,
             "RESULT": 0.5}),
    ("DTR", {"TEXT_DAT": "TT block=blk_a site=1 start_us=0 end_us=500 head=1"}),
    ("DTR", {"TEXT_DAT": "TT end_us=900 site=2 block=blk_a start_us=100"}),
    ("DTR", {"TEXT_DAT": "TT block=broken site=1 start_us=50"}),
    ("DTR", {"TEXT_DAT": "operator note: TT is our marker"}),
    # PART_FLG bit 3 = failed; X/Y -32768 = not given; TEST_T 0 = not recorded (PRR 5/20)
    ("PRR", {"HEAD_NUM": 1, "SITE_NUM": 1, "PART_FLG": 0x08, "NUM_TEST": 5, "HARD_BIN": 5,
             "SOFT_BIN": 65535, "X_COORD": -32768, "Y_COORD": -32768, "TEST_T": 0,
             "PART_ID": "A1"}),
    ("PIR", {"HEAD_NUM": 1, "SITE_NUM": 2}),
    ("PTR", {"TEST_NUM": 1, "HEAD_NUM": 1, "SITE_NUM": 2, "TEST_FLG": 0, "PARM_FLG": 0,
             "RESULT": 1.25}),  # stops after RESULT: name, limits and units are the first's
    # PART_FLG bit 4 = no pass/fail indication
    ("PRR", {"HEAD_NUM": 1, "SITE_NUM": 2, "PART_FLG": 0x10, "NUM_TEST": 1, "HARD_BIN": 1,
             "SOFT_BIN": 1, "X_COORD": 3, "Y_COORD": -4, "TEST_T": 120, "PART_ID": "A2"}),
    ("PIR", {"HEAD_NUM": 1, "SITE_NUM": 1}),  # site 1 again: the next touchdown
    ("PRR", {"HEAD_NUM": 1, "SITE_NUM": 1, "PART_FLG": 0, "NUM_TEST": 0, "HARD_BIN": 1,
             "SOFT_BIN": 1, "X_COORD": 0, "Y_COORD": 0, "TEST_T": 7, "PART_ID": "A3"}),
    ("TSR", {"HEAD_NUM": 255, "SITE_NUM": 0, "TEST_TYP": "P", "TEST_NUM": 3, "EXEC_CNT": 1,
             "FAIL_CNT": 0, "ALRM_CNT": 0, "TEST_NAM": "t_three", "SEQ_NAME": "blk_tsr"}),
    ("TSR", {"HEAD_NUM": 255, "SITE_NUM": 0, "TEST_TYP": "F", "TEST_NUM": 5, "EXEC_CNT": 1,
             "FAIL_CNT": 1, "ALRM_CNT": 0, "TEST_NAM": "t_five", "SEQ_NAME": "blk_tsr"}),
    ("MRR", {"FINISH_T": START_T + 100}),
]


@pytest.fixture(scope="module")
def tiny(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Ingested]:
    d = tmp_path_factory.mktemp("tiny")
    (d / "tiny.stdf").write_bytes(b"".join(encode_record(n, v) for n, v in TINY))
    ing = ingest_into(d / "store", d / "tiny.stdf")
    assert [r["status"] for r in ing.report.ingested] == ["ok"], ing.report.problems
    yield ing
    ing.close()


def test_given_tiny_log_expect_parts(tiny: Ingested) -> None:
    got = tiny.sql("select part_index, touchdown, head, site, part_id, x, y, hard_bin, "
                   "soft_bin, passed, test_time_ms, lot_id from parts order by part_index")
    assert got.rows() == [
        (0, 0, 1, 1, "A1", None, None, 5, None, False, None, "LOT-T1"),
        (1, 0, 1, 2, "A2", 3, -4, 1, 1, None, 120.0, "LOT-T1"),
        (2, 1, 1, 1, "A3", 0, 0, 1, 1, True, 7.0, "LOT-T1"),
    ]


def test_given_tiny_log_expect_results(tiny: Ingested) -> None:
    got = tiny.sql("select part_index, site, test_num, test_name, block, record, element, "
                   "value, failed, lo_limit, hi_limit, units from results "
                   "order by rec_index, element")
    assert got.rows() == [
        (0, 1, 1, "t_one", "blk_a", "PTR", None, 1.5, False, 1.0, 2.0, "V"),
        (0, 1, 2, "t_two", "blk_a", "PTR", None, 9.0, True, None, None, None),
        (0, 1, 4, "t_four", "blk_inner", "MPR", 0, 0.25, False, None, None, None),
        (0, 1, 4, "t_four", "blk_inner", "MPR", 1, 0.5, False, None, None, None),
        (0, 1, 4, "t_four", "blk_inner", "MPR", 2, 0.75, False, None, None, None),
        (0, 1, 5, "t_five", "blk_a", "FTR", None, None, True, None, None, None),
        (0, 1, 3, "t_three", "blk_tsr", "PTR", None, 0.5, None, None, None, None),
        (1, 2, 1, "t_one", "unassigned", "PTR", None, 1.25, False, 1.0, 2.0, "V"),
    ]


def test_given_tiny_log_expect_markers_sections_lots(tiny: Ingested) -> None:
    markers = tiny.sql("select touchdown, block, site, head, start_us, end_us, duration_ms, "
                       "is_valid from markers order by rec_index")
    assert markers.rows() == [
        (0, "blk_a", 1, 1, 0, 500, 0.5, True),
        (0, "blk_a", 2, 1, 100, 900, 0.8, True),
        (0, "broken", 1, 1, 50, None, None, False),
    ]
    sections = tiny.sql("select s.name, p.name as parent from sections s left join "
                        "sections p on p.file_id = s.file_id and p.section_id = s.parent_id "
                        "order by s.begin_rec")
    assert sections.rows() == [("blk_a", None), ("blk_inner", "blk_a")]
    lot = tiny.sql("select lot_id, part_type, program, program_rev, tester_type, "
                   "started_at, finished_at from lots").rows()
    start = dt.datetime(2023, 11, 14, 22, 13, 20)  # 1_700_000_000 s after 1970-01-01
    assert lot == [("LOT-T1", "widget", "prog_a", "r1", "bench", start,
                    start + dt.timedelta(seconds=100))]


# -- the store's promises to readers -----------------------------------------------------------
QUERIES = [
    "select site, count(*) as n from parts group by site order by site",
    "select record, count(*) as n, sum(value) as v from results group by 1 order by 1",
    "select block, count(*) as n from markers group by 1 order by 1",
    "select file_id, status, records from files order by file_id",
]


def answers(source: Ingested | Store) -> list[pl.DataFrame]:
    """QUERIES on one connection (building a connection's views is the slow part)."""
    if isinstance(source, Ingested):
        return [source.sql(q) for q in QUERIES]
    con = source.connect()
    try:
        return [to_frame(con.sql(q)) for q in QUERIES]
    finally:
        con.close()


def test_store_copy_gives_the_same_answers(sample_store: Ingested, tmp_path: Path,
                                           monkeypatch: pytest.MonkeyPatch) -> None:
    before = answers(sample_store)
    copy = tmp_path / "elsewhere" / "store"
    shutil.copytree(sample_store.store.path, copy)
    for want, got in zip(before, answers(Store(copy)), strict=True):
        assert_frame_equal(got, want)
    monkeypatch.chdir(copy)
    con = duckdb.connect(str(copy / "catalog.duckdb"), read_only=True)
    try:
        assert con.execute("select count(*) from parts").fetchall() == [
            (sum(file_truth(n)["parts"] for n in ALL_LOGS),)]
    finally:
        con.close()


def test_moved_store_opens_in_tandem_and_in_plain_duckdb(tiny: Ingested, tmp_path: Path,
                                                         monkeypatch: pytest.MonkeyPatch
                                                         ) -> None:
    """Moved, not copied: a path recorded anywhere in the store would now point nowhere."""
    before = answers(tiny)
    home = tiny.store.path
    moved = tmp_path / "moved" / "store"
    moved.parent.mkdir()
    os.rename(home, moved)
    try:
        for want, got in zip(before, answers(Store(moved)), strict=True):
            assert_frame_equal(got, want)
        monkeypatch.chdir(moved)  # catalog.duckdb globs are relative to the store folder
        con = duckdb.connect(str(moved / "catalog.duckdb"), read_only=True)
        try:
            assert con.execute("select count(*) from parts").fetchall() == [(3,)]
            assert con.execute("select count(*) from results").fetchall() == [(8,)]
        finally:
            con.close()
        monkeypatch.undo()
        assert Path.cwd() != moved
    finally:
        os.rename(moved, home)


def test_reader_works_while_a_writer_holds_the_lock(sample_store: Ingested) -> None:
    store = sample_store.store
    total = sum(file_truth(n)["parts"] for n in ALL_LOGS)
    with store.writer():
        assert store.sql("select count(*) from parts").item() == total
        other = Store(store.path, lock_timeout=0.2)
        with pytest.raises(StoreError, match="another writer holds the store lock"):
            with other.writer():
                pass
    with Store(store.path, lock_timeout=0.2).writer():  # released again
        pass
