"""Ingest: every sample log arrives whole, by content whatever its name or compression,
once only, and a bad input costs one clear line while the rest of the run goes on.

Expected values come from outside the code under test: the generator's ground truth
(sample_logs/truth.json) and a tiny record walk (conftest.walk) written from the STDF V4
record header (REC_LEN U*2, REC_TYP U*1, REC_SUB U*1) and the first fields of PIR 5/10,
PRR 5/20 and PTR 15/10.
"""

from __future__ import annotations

import bz2
import gzip
import hashlib
import lzma
import math
import random
import re
import struct
import zlib
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import polars as pl
import pytest
import zstandard
from polars.testing import assert_frame_equal

from tests.conftest import (
    ALL_LOGS,
    MARKERS_BE,
    MARKERS_GZ,
    MARKERS_LE,
    NOT_LOGS,
    SAMPLES,
    STDF_LOGS,
    TIMING_CSV,
    Ingested,
    file_truth,
    ingest_into,
    truth,
    walk,
)

PIR, PRR, PTR = (5, 10), (5, 20), (15, 10)


# -- what survives a cut, by an independent record walk ----------------------------
@dataclass
class Prefix:
    """What the standard says survives in the complete records of a cut file."""

    end: int  # byte where the last complete record ends
    parts: int  # PRRs (finished parts)
    ptrs: int  # PTRs of finished parts
    ptr_sum: float  # sum of their RESULT (R*4)


def finished_in(data: bytes) -> Prefix:
    """A part is open from its PIR to the PRR of the same HEAD_NUM/SITE_NUM; its results
    are the PTRs of that head and site in between (STDF V4, PIR 5/10, PRR 5/20)."""
    open_parts: dict[tuple[int, int], list[float]] = {}
    end = parts = ptrs = 0
    total = 0.0
    for pos, key, payload in walk(data):
        end = pos + 4 + len(payload)
        if key == PIR:
            open_parts[(payload[0], payload[1])] = []
        elif key == PTR:  # TEST_NUM U*4, HEAD_NUM U*1, SITE_NUM U*1, TEST_FLG, PARM_FLG, RESULT R*4
            open_parts[(payload[4], payload[5])].append(struct.unpack_from("<f", payload, 8)[0])
        elif key == PRR:
            vals = open_parts.pop((payload[0], payload[1]))
            parts += 1
            ptrs += len(vals)
            total += math.fsum(vals)
    return Prefix(end, parts, ptrs, total)


def cut_inside(data: bytes, want: tuple[int, int], after: int, nth: int = 1) -> bytes:
    """Cut in the middle of the nth record of type `want` that starts at or after `after`."""
    seen = 0
    for pos, key, payload in walk(data):
        if key == want and pos >= after:
            seen += 1
            if seen == nth:
                return data[:pos + 4 + len(payload) // 2]
    raise AssertionError("no such record")


# -- helpers -----------------------------------------------------------------------------
def counts(ing: Ingested, name: str) -> dict[str, int]:
    df = ing.sql("select record, count(*) as n, count(distinct rec_index) as recs "
                 "from results where file_id = ? group by record", [ing.fid(name)])
    out = {r: n for r, n, _ in df.iter_rows()}
    out |= {f"{r}_records": k for r, _, k in df.iter_rows()}
    return out


def frame(ing: Ingested, view: str, name: str, order: str) -> pl.DataFrame:
    return ing.sql(f"select * exclude (file_id) from {view} where file_id = ? "
                   f"order by {order}", [ing.fid(name)])


COMPARED = {"parts": "part_index", "results": "rec_index, element", "markers": "rec_index",
            "sections": "section_id", "test_summaries": "head, site, test_num"}


def assert_same_content(a: Ingested, a_name: str, b: Ingested, b_name: str) -> None:
    for view, order in COMPARED.items():
        fa, fb = frame(a, view, a_name, order), frame(b, view, b_name, order)
        assert fa.height > 0 or view == "markers", view
        assert_frame_equal(fa, fb, check_exact=True)


# -- the sample logs ---------------------------------------------------------------------
def test_every_sample_log_ingests_ok(sample_store: Ingested) -> None:
    rep = sample_store.report
    assert sorted(sample_store.file_ids) == sorted(ALL_LOGS)
    for r in rep.ingested:
        t = file_truth(Path(r["path"]).name)
        assert (r["status"], r["format"], r["parts"]) == ("ok", t["format"], t["parts"]), r
    assert rep.skipped == []
    # the non-log files of sample_logs/ are refused by content, one line each
    assert sorted(Path(r["path"]).name for r in rep.rejected) == sorted(NOT_LOGS)
    assert all(r["reason"].startswith("not a datalog") for r in rep.rejected)
    assert len(rep.problems) == len(NOT_LOGS) and rep.exit_code == 3
    files = sample_store.sql("select path, status from files")
    assert {Path(p).name: s for p, s in files.iter_rows() if Path(p).name in ALL_LOGS} == \
        dict.fromkeys(ALL_LOGS, "ok")


@pytest.mark.parametrize("name", ALL_LOGS)
def test_parts_and_good_parts_per_site_match_truth(sample_store: Ingested, name: str) -> None:
    df = sample_store.sql(
        "select site, count(*) as n, count(*) filter (where passed) as good from parts "
        "where file_id = ? group by site", [sample_store.fid(name)])
    t = file_truth(name)
    assert {str(s): n for s, n, _ in df.iter_rows()} == t["parts_per_site"]
    assert {str(s): g for s, _, g in df.iter_rows()} == t["good_per_site"]


@pytest.mark.parametrize("name", STDF_LOGS)
def test_result_counts_match_truth(sample_store: Ingested, name: str) -> None:
    want = file_truth(name)["records"]
    got = counts(sample_store, name)
    assert got["PTR"] == want["PTR"]
    assert got["FTR"] == want["FTR"]
    assert got["MPR"] == want["MPR_results"]  # one row per returned result
    assert got["MPR_records"] == want["MPR"]


@pytest.mark.parametrize("name", STDF_LOGS)
def test_sum_of_ptr_values_matches_truth(sample_store: Ingested, name: str) -> None:
    got = sample_store.sql("select sum(value) from results where record = 'PTR' "
                           "and file_id = ?", [sample_store.fid(name)]).item()
    assert math.isclose(got, file_truth(name)["ptr_result_sum"], rel_tol=1e-9)


def test_registry_report_and_files_view_agree(sample_store: Ingested) -> None:
    reg = pl.from_arrow(sample_store.store.registry())
    assert isinstance(reg, pl.DataFrame)
    files = sample_store.sql("select file_id, path, sha256, status from files order by 1")
    assert_frame_equal(reg.select(files.columns).sort("file_id"), files, check_dtypes=False)
    for r in reg.iter_rows(named=True):  # file_id: the first 16 hex digits of the sha256
        assert r["sha256"] == hashlib.sha256(Path(r["path"]).read_bytes()).hexdigest()
        assert r["file_id"] == r["sha256"][:16]
    out = sample_store.report.to_json()
    assert list(out) == ["ingested", "skipped", "rejected"]
    assert {r["file_id"] for r in out["ingested"]} == set(
        files.filter(pl.col("status") == "ok")["file_id"])


def test_big_and_little_endian_copies_store_the_same_rows(sample_store: Ingested) -> None:
    assert truth()["files"][MARKERS_BE]["byte_order"] == "big"
    assert_same_content(sample_store, MARKERS_LE, sample_store, MARKERS_BE)
    orders = dict(sample_store.sql(
        "select file_id, byte_order from files where file_id in (?, ?)",
        [sample_store.fid(MARKERS_LE), sample_store.fid(MARKERS_BE)]).iter_rows())
    assert orders == {sample_store.fid(MARKERS_LE): "little",
                      sample_store.fid(MARKERS_BE): "big"}


# -- the same content, however it arrives ---------------------------------------------------
RAW_LE = (SAMPLES / MARKERS_LE).read_bytes()
VARIANTS = {  # misleading names on purpose: the content decides
    "plain_of_gz.stdf": ("none", lambda: gzip.decompress((SAMPLES / MARKERS_GZ).read_bytes())),
    "x.txt": ("bzip2", lambda: bz2.compress(RAW_LE)),
    "readme.csv": ("xz", lambda: lzma.compress(RAW_LE)),
    "log.stdf.gz": ("zstd", lambda: zstandard.ZstdCompressor().compress(RAW_LE)),
}


@pytest.fixture(scope="module")
def variants(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Ingested]:
    folder = tmp_path_factory.mktemp("variants")
    for name, (_, make) in VARIANTS.items():
        (folder / name).write_bytes(make())
    # two worker processes: the pool path must store exactly what the serial path does
    ing = ingest_into(folder / "store", *(folder / n for n in VARIANTS), workers=2)
    yield ing
    ing.close()


def test_gz_log_equals_its_content_decompressed(sample_store: Ingested,
                                                variants: Ingested) -> None:
    assert_same_content(sample_store, MARKERS_GZ, variants, "plain_of_gz.stdf")


@pytest.mark.parametrize("name", [n for n in VARIANTS if n != "plain_of_gz.stdf"])
def test_compressed_and_misnamed_logs_ingest_by_content(sample_store: Ingested,
                                                        variants: Ingested, name: str) -> None:
    [item] = [r for r in variants.report.ingested if Path(r["path"]).name == name]
    assert item["status"] == "ok" and item["format"] == "stdf"
    assert_same_content(sample_store, MARKERS_LE, variants, name)
    compression = variants.sql("select compression from files where file_id = ?",
                               [variants.fid(name)]).item()
    assert compression == VARIANTS[name][0]


def test_variants_run_rejects_nothing(variants: Ingested) -> None:
    assert (variants.report.rejected, variants.report.skipped) == ([], [])
    assert variants.report.exit_code == 0


# -- identical content twice, and bad inputs, in one run ------------------------------------
GOOD = (MARKERS_GZ, TIMING_CSV)
SAME_AS_GZ = "zz_same_as_gz.bin"  # sorts after the original, so the original is stored
CSV_HEAD = "lot_id,touchdown,site,part_id,block,start_ms,end_ms\n"
BAD_CSV = CSV_HEAD + "LOT-A,0,1,p1,warmup,0,1.5\nLOT-A,0,1,p1,main,1.5,2.5\n" \
    "LOT-A,0,2,p2,warmup,0,1.x5\n"
# FAR (STDF V4, FAR 0/10): REC_LEN 2, REC_TYP 0, REC_SUB 10, CPU_TYPE, STDF_VER.
FAR_V3 = b"\x02\x00\x00\x0a\x02\x03"
FAR_VAX = b"\x02\x00\x00\x0a\x00\x04"
CUT_PTR = cut_inside(RAW_LE, PTR, after=len(RAW_LE) // 2)
CUT_PRR = cut_inside(RAW_LE, PRR, after=len(RAW_LE) // 3, nth=3)  # half a touchdown done
GZ = (SAMPLES / MARKERS_GZ).read_bytes()
CUT_GZ = GZ[: len(GZ) // 2]  # an interrupted copy of a gzip log


def _big_csv_gz_cut() -> bytes:
    """A timing CSV larger than one read, gzipped, then cut short."""
    lines = (SAMPLES / TIMING_CSV).read_text().splitlines(keepends=True)
    data = gzip.compress("".join(lines + lines[1:] * 3).encode(), mtime=0)
    assert len(gzip.decompress(data)) > 256 << 10
    return data[: len(data) * 3 // 4]


def _noise() -> bytes:
    data = random.Random(7).randbytes(4096)
    assert data[2:4] != b"\x00\x0a" and data[:2] != b"\x1f\x8b"
    return data


BAD = {  # file name -> (content, what its one line must say)
    "empty.stdf": (b"", r"empty file"),
    "noise.bin": (_noise(), r"not a datalog"),
    "old.stdf": (FAR_V3 + RAW_LE[6:2000], r"STDF_VER is 3.*only STDF V4"),
    "vax.stdf": (FAR_VAX + RAW_LE[6:2000], r"CPU_TYPE 0.*VAX"),
    "bad_number.csv": (BAD_CSV.encode(), r"line 4, column end_ms.*'1\.x5'"),
    "cut_timing.csv.gz": (_big_csv_gz_cut(), r"gzip.*(damaged|decompress)"),
}
# file name -> (content, the decompressed bytes the standard's record walk may use)
PARTIAL = {
    "cut_mid_ptr.stdf": (CUT_PTR, CUT_PTR),
    "cut_mid_prr.stdf": (CUT_PRR, CUT_PRR),
    "cut.stdf.gz": (CUT_GZ, zlib.decompressobj(wbits=31).decompress(CUT_GZ)),
}


@pytest.fixture(scope="module")
def bad_run(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Ingested]:
    folder = tmp_path_factory.mktemp("bad")
    (folder / "in").mkdir()
    for name in GOOD:
        (folder / "in" / name).write_bytes((SAMPLES / name).read_bytes())
    (folder / "in" / SAME_AS_GZ).write_bytes(GZ)
    for name, (data, _) in (BAD | PARTIAL).items():
        (folder / "in" / name).write_bytes(data)
    ing = ingest_into(folder / "store", folder / "in", folder / "missing.stdf")
    yield ing
    ing.close()


def _lines_of(rep: Any, name: str) -> list[str]:
    return [ln for ln in rep.problems if Path(ln.split(": ", 1)[0]).name == name]


def _item(ing: Ingested, name: str) -> dict[str, Any]:
    [item] = [r for r in ing.report.ingested if Path(r["path"]).name == name]
    return item


def test_same_content_twice_in_one_run_is_stored_once(bad_run: Ingested) -> None:
    first = _item(bad_run, MARKERS_GZ)["path"]
    [skip] = bad_run.report.skipped
    assert skip == {"path": str(Path(first).parent / SAME_AS_GZ),
                    "reason": f"same content as {first}"}
    assert bad_run.sql("select count(*) from files where sha256 = ?",
                       [hashlib.sha256(GZ).hexdigest()]).item() == 1
    assert bad_run.sql("select count(*) from raw_parts where file_id = ?",
                       [bad_run.fid(MARKERS_GZ)]).item() == file_truth(MARKERS_GZ)["parts"]


RAW_COUNTED = ("raw_files", "raw_parts", "raw_ptr", "raw_mpr", "raw_ftr", "raw_dtr", "raw_tsr",
               "raw_sections", "raw_timing_csv")


def test_second_run_skips_everything_and_duplicates_nothing(sample_store: Ingested) -> None:
    q = sample_store.sql
    before = {t: q(f"select count(*) from {t}").item() for t in RAW_COUNTED}
    rep = sample_store.store.ingest([str(SAMPLES)])
    assert rep.ingested == [] and rep.rejected == [] and rep.exit_code == 0
    known = {p: (fid, st) for p, fid, st in q(
        "select path, file_id, status from files").iter_rows()}
    assert sorted(r["path"] for r in rep.skipped) == sorted(known)
    for r in rep.skipped:
        fid, status = known[r["path"]]
        assert r["reason"] == f"already stored as {fid} ({status})"
    assert {t: q(f"select count(*) from {t}").item() for t in RAW_COUNTED} == before


@pytest.mark.parametrize("name", list(BAD))
def test_each_bad_input_gets_one_clear_line(bad_run: Ingested, name: str) -> None:
    [line] = _lines_of(bad_run.report, name)
    assert "\n" not in line and "Traceback" not in line
    assert line.split(": ", 2)[1] == "rejected"
    assert re.search(BAD[name][1], line), line
    [rej] = [r for r in bad_run.report.rejected if Path(r["path"]).name == name]
    assert set(rej) == {"path", "reason"}


def test_missing_path_is_rejected_and_not_registered(bad_run: Ingested) -> None:
    [rej] = [r for r in bad_run.report.rejected if r["path"].endswith("missing.stdf")]
    assert rej["reason"] == "no such file or folder"
    assert bad_run.sql("select count(*) from files where path like '%missing.stdf'"
                       ).item() == 0


def test_bad_run_exit_code_and_one_line_per_problem(bad_run: Ingested) -> None:
    rep = bad_run.report
    assert rep.exit_code == 3
    assert len(rep.problems) == len(BAD) + len(PARTIAL) + 1  # + the missing path
    assert sorted(Path(r["path"]).name for r in rep.ingested) == sorted([*GOOD, *PARTIAL])


@pytest.mark.parametrize("name", GOOD)
def test_good_files_beside_bad_ones_are_complete(bad_run: Ingested, name: str) -> None:
    t = file_truth(name)
    df = bad_run.sql("select site, count(*) from parts where file_id = ? group by site",
                     [bad_run.fid(name)])
    assert {str(s): n for s, n in df.iter_rows()} == t["parts_per_site"]
    if t["format"] == "stdf":
        got = counts(bad_run, name)
        assert (got["PTR"], got["FTR"], got["MPR"]) == (
            t["records"]["PTR"], t["records"]["FTR"], t["records"]["MPR_results"])
    assert _item(bad_run, name)["status"] == "ok"


def test_rejected_files_are_listed_and_have_no_rows_elsewhere(bad_run: Ingested) -> None:
    q = bad_run.sql
    rejected = q("select path, file_id, error, records, parts from files "
                 "where status = 'rejected'")
    assert sorted(Path(p).name for p in rejected["path"]) == sorted(BAD)
    reasons = {r["path"]: r["reason"] for r in bad_run.report.rejected}
    for path, _, error, records, parts in rejected.iter_rows():
        assert error == reasons[path] and (records, parts) == (0, 0)
    # every stored table (raw_*) and the base views read from them
    tables = [n for (n,) in q("select distinct table_name from information_schema.columns "
                              "where column_name = 'file_id' and table_name like 'raw\\_%' "
                              "escape '\\' and table_name <> 'raw_files'").iter_rows()]
    assert {"raw_parts", "raw_ptr", "raw_timing_csv"} <= set(tables)
    tables += ["parts", "results", "sections", "markers", "texts", "test_summaries", "lots"]
    union = " union all ".join(f"select '{t}' as t, file_id from {t}" for t in tables)
    hits = q(f"select t, count(*) from ({union}) where file_id in "
             f"(select file_id from files where status = 'rejected') group by t")
    assert hits.height == 0, hits.rows()
    # the files themselves are on disk with rows in no table folder
    ids = set(rejected["file_id"])
    on_disk = {p.name.removeprefix("file_id=")
               for p in (bad_run.store.path / "tables").glob("*/file_id=*")
               if p.parent.name != "files"}
    assert not ids & on_disk


@pytest.mark.parametrize("name", list(PARTIAL))
def test_cut_file_keeps_the_parts_completed_before_the_cut(bad_run: Ingested,
                                                           name: str) -> None:
    want = finished_in(PARTIAL[name][1])
    assert 0 < want.parts < file_truth(MARKERS_LE)["parts"]
    item = _item(bad_run, name)
    assert item["status"] == "partial" and item["parts"] == want.parts, item
    if name.endswith(".gz"):
        assert "compressed stream damaged" in item["error"]
    else:
        assert f"byte {want.end}" in item["error"]  # where the damage starts
    assert _lines_of(bad_run.report, name) == [f"{item['path']}: partial: {item['error']}"]
    fid = bad_run.fid(name)
    q = bad_run.sql
    assert q("select count(*) from parts where file_id = ?", [fid]).item() == want.parts
    n, total = q("select count(*), sum(value) from results where file_id = ? "
                 "and record = 'PTR'", [fid]).row(0)
    assert n == want.ptrs and math.isclose(total, want.ptr_sum, rel_tol=1e-9)
    assert q("select status, error from files where file_id = ?", [fid]).row(0) == (
        "partial", item["error"])
