"""Nightly reliability: salvage of damaged logs, limits on hostile input, reconciliation,
untrusted text, the store lock, readers during an ingest, and kill -9 at any moment.

Every log here is invented by ``tiny_log`` below, written only through the project's
encoder (``pipeline.read.stdf.codec.encode_record``), so each test knows what the log holds
(parts, results, their sum) without asking the code under test. Record layouts are STDF
V4's: the record header REC_LEN U*2, REC_TYP U*1, REC_SUB U*1; BPS 20/10 and EPS 20/20
bracket a section; GDR 50/10 is FLD_CNT U*2 then V*n items (one type byte, codes 0-13,
9 undefined); MPR 15/15 carries RTN_ICNT U*2 and RSLT_CNT U*2 before its arrays.
"""

from __future__ import annotations

import bz2
import csv
import gzip
import io
import json
import lzma
import math
import os
import random
import signal
import struct
import subprocess
import sys
import threading
import time
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import duckdb
import pytest
import zstandard

from pipeline.errors import StoreError
from pipeline.jobs.decode import InputLimits, ReconciliationError
from pipeline.jobs.ingest import ingest
from pipeline.read.stdf.codec import encode_record
from pipeline.store import Staged, Store
from tests.conftest import SAMPLES, STDF_LOGS, TIMING_CSV, CliResult

REPO = Path(__file__).parent.parent
FAR_LE = encode_record("FAR", {"CPU_TYPE": 2, "STDF_VER": 4}, "<")


# -- invented logs whose content the test knows ------------------------------------------
@dataclass
class Part:
    lot_id: str
    td: int
    site: int
    part_id: str
    prr_index: int  # index of its PRR in TinyLog.records
    ptrs: int
    ptr_sum: float


@dataclass
class TinyLog:
    records: list[bytes]
    parts: list[Part] = field(default_factory=list)

    @property
    def data(self) -> bytes:
        return b"".join(self.records)

    def with_record(self, at: int, rec: bytes) -> bytes:
        """The log with one extra record inserted before record ``at``."""
        return b"".join(self.records[:at] + [rec] + self.records[at:])

    def offset(self, index: int) -> int:
        return sum(len(r) for r in self.records[:index])

    def before(self, index: int) -> list[Part]:
        """Parts whose PRR comes before record ``index``: what salvage must keep."""
        return [p for p in self.parts if p.prr_index < index]

    def open_at(self, td: int) -> int:
        """Index of the record just after touchdown td's PIRs: its parts are open, no
        section is."""
        last_before = max((p.prr_index for p in self.parts if p.td < td), default=1)
        return last_before + 1 + len({p.site for p in self.parts if p.td == td})


def tiny_log(lot_id: str = "LOT-A", touchdowns: int = 4, sites: tuple[int, ...] = (1, 2),
             seed: int = 0, block_us: dict[str, int] | None = None,
             start_t: int = 1_900_000_000, endian: str = "<",
             test_names: tuple[str, ...] = ("leak", "idd"), part_prefix: str = "p",
             mrr: bool = True) -> TinyLog:
    """FAR, MIR, then per touchdown: a PIR per site, per block a BPS/EPS section with one
    PTR per test per site and a timing marker (DTR ``TT ...``) per site, a PRR per site;
    MRR last. Values are seeded, so the same arguments give the same bytes."""
    rng = random.Random(seed)
    blocks = block_us or {"contact": 800, "dc": 2500}
    e = endian
    recs = [encode_record("FAR", {"CPU_TYPE": 2 if e == "<" else 1, "STDF_VER": 4}, e),
            encode_record("MIR", {"START_T": start_t, "LOT_ID": lot_id, "PART_TYP": "demo",
                                  "JOB_NAM": "prog", "JOB_REV": "A"}, e)]
    log = TinyLog(recs)
    n = 0
    for td in range(touchdowns):
        recs += [encode_record("PIR", {"HEAD_NUM": 1, "SITE_NUM": s}, e) for s in sites]
        clock = dict.fromkeys(sites, 0)
        stats = {s: [0, 0.0] for s in sites}
        for b_i, (block, us) in enumerate(blocks.items()):
            recs.append(encode_record("BPS", {"SEQ_NAME": block}, e))
            for s in sites:
                for k, name in enumerate(test_names):
                    value = struct.unpack("<f", struct.pack("<f", rng.uniform(0, 1)))[0]
                    recs.append(encode_record("PTR", {
                        "TEST_NUM": 100 * (b_i + 1) + k, "HEAD_NUM": 1, "SITE_NUM": s,
                        "TEST_FLG": 0, "PARM_FLG": 0, "RESULT": value,
                        "TEST_TXT": f"{block}_{name}"}, e))
                    stats[s][0] += 1
                    stats[s][1] += value
            recs.append(encode_record("EPS", {}, e))
            for s in sites:
                d = int(us * rng.uniform(0.98, 1.02))
                recs.append(encode_record("DTR", {"TEXT_DAT": f"TT block={block} site={s} "
                                                  f"start_us={clock[s]} "
                                                  f"end_us={clock[s] + d}"}, e))
                clock[s] += d
        for s in sites:
            pid = f"{part_prefix}{n}"
            recs.append(encode_record("PRR", {
                "HEAD_NUM": 1, "SITE_NUM": s, "PART_FLG": 0,
                "NUM_TEST": len(test_names) * len(blocks), "HARD_BIN": 1, "SOFT_BIN": 1,
                "X_COORD": n, "Y_COORD": td, "TEST_T": clock[s] // 1000 + 1,
                "PART_ID": pid}, e))
            log.parts.append(Part(lot_id, td, s, pid, len(recs) - 1, stats[s][0],
                                  stats[s][1]))
            n += 1
    if mrr:
        recs.append(encode_record("MRR", {"FINISH_T": start_t + 60}, e))
    return log


def raw_record(typ: int, sub: int, payload: bytes, rec_len: int | None = None) -> bytes:
    """A record written by hand: header REC_LEN U*2, REC_TYP U*1, REC_SUB U*1 (little
    endian), then the payload."""
    return struct.pack("<HBB", len(payload) if rec_len is None else rec_len, typ, sub) + payload


def compress(kind: str, data: bytes) -> bytes:
    return {"none": lambda d: d, "gzip": lambda d: gzip.compress(d, mtime=0),
            "bzip2": bz2.compress, "xz": lzma.compress,
            "zstd": lambda d: zstandard.ZstdCompressor().compress(d)}[kind](data)


# -- looking at a store ------------------------------------------------------------------
def file_views(con: duckdb.DuckDBPyConnection) -> list[str]:
    return [n for (n,) in con.execute(
        "select distinct table_name from information_schema.columns "
        "where column_name = 'file_id' order by 1").fetchall()]


def per_file_counts(con: duckdb.DuckDBPyConnection,
                    views: list[str]) -> dict[str, dict[str, int]]:
    """view -> {file_id: rows}."""
    return {v: dict(con.execute(f"select file_id, count(*) from {v} group by all").fetchall())
            for v in views}


# Views of which logs count (the registry): compared by content in fingerprint's "files".
REGISTRY_VIEWS = ("raw_files", "raw_lot_files", "raw_committed")


def fingerprint(store_dir: Path) -> dict[str, Any]:
    """What a store holds, independent of when and where it was made: the registry by
    content (sha256, status, counts) and, per raw table and file, the row count and the
    sum of each column's hash."""
    con = Store(store_dir).connect()
    try:
        files = sorted(con.execute(
            "select sha256, status, format, records, parts, records_by_type, error, path "
            "from raw_files").fetchall())
        tables = {}
        for v in file_views(con):
            if v.startswith("raw_") and v not in REGISTRY_VIEWS:
                for row in con.execute(
                        f"select file_id, count(*), sum(hash(columns(* exclude (file_id)))) "
                        f"from {v} group by all").fetchall():
                    tables[(v, row[0])] = row[1:]
    finally:
        con.close()
    return {"files": files, "tables": tables}


def run_cli(*args: str | Path, env: dict[str, str] | None = None,
            timeout: float = 120) -> subprocess.CompletedProcess[str]:
    return subprocess.run([sys.executable, "-m", "pipeline", *map(str, args)], cwd=REPO,
                          capture_output=True, text=True, timeout=timeout,
                          env={**os.environ, **(env or {})})


def start_cli(*args: str | Path, env: dict[str, str] | None = None) -> subprocess.Popen[str]:
    return subprocess.Popen([sys.executable, "-m", "pipeline", *map(str, args)], cwd=REPO,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            env={**os.environ, **(env or {})})


# == 1 and 5. salvage and hostile input: every bad-input class in one mixed run ===========
DEEP = 64  # Limits.max_section_depth's default
CAP = 1 << 20  # the run's decompression limit: far above every good log here


def deep_sections(log: TinyLog, at: int, depth: int = DEEP + 1) -> tuple[bytes, int]:
    """``depth`` BPS records (STDF V4 BPS 20/10: SEQ_NAME C*n, here 7 bytes each) opened
    at record ``at``, where no section is open; the one past the limit is the last."""
    bps = [raw_record(20, 10, bytes([2]) + b"s%d" % (i % 10)) for i in range(depth)]
    return log.with_record(at, b"".join(bps)), log.offset(at) + DEEP * len(bps[0])


def bad_gdr(log: TinyLog, at: int) -> tuple[bytes, int]:
    """A GDR (50/10) with FLD_CNT 2: a U*1 item (code 1) then an item with code 9, which
    STDF V4 does not define."""
    gdr = raw_record(50, 10, struct.pack("<H", 2) + b"\x01\x07\x09\x00")
    return log.with_record(at, gdr), log.offset(at)


def lost_boundaries(log: TinyLog, at: int) -> tuple[bytes, int]:
    """A record header whose REC_TYP (77) the standard does not define."""
    return log.with_record(at, raw_record(77, 1, b"\x00" * 3)), log.offset(at)


def absurd_mpr(site: int = 1) -> bytes:
    """An MPR (15/15) whose RTN_ICNT and RSLT_CNT claim 60000 items each, in a record of
    16 bytes: TEST_NUM U*4, HEAD_NUM, SITE_NUM, TEST_FLG, PARM_FLG U*1, RTN_ICNT U*2,
    RSLT_CNT U*2, then 4 bytes."""
    body = struct.pack("<IBBBBHH", 7, 1, site, 0, 0, 60000, 60000) + b"\x00" * 4
    return raw_record(15, 15, body)


def _bomb(kind: str, prefix: bytes, zeros: int) -> bytes:
    """``prefix`` then ``zeros`` zero bytes, compressed in a stream (never held whole).
    Zero bytes read as empty records (REC_LEN 0, REC_TYP 0, REC_SUB 0): a real log would
    hold nothing like that, a bomb can hold little else."""
    chunk = bytes(1 << 20)
    comp: Any = (zstandard.ZstdCompressor(level=1).compressobj() if kind == "zstd" else
                 __import__("zlib").compressobj(1, wbits=31))
    out = [comp.compress(prefix)] + [comp.compress(chunk) for _ in range(zeros >> 20)]
    return b"".join(out) + comp.flush()


DAMAGE = {  # name -> (damaged bytes and the damaged record's offset, the reason's form)
    "deep_sections": (deep_sections, rf"nested deeper than {DEEP} \(BPS at record \d+, "
                                     r"byte (\d+)\): decoding stopped there"),
    "undefined_gdr_code": (bad_gdr, r"GDR field type code 9 is not defined by STDF V4 "
                                    r"\(GDR at record \d+, byte (\d+)\)"),
    "lost_boundaries": (lost_boundaries, r"record boundaries lost: REC_TYP 77 is not an "
                                         r"STDF V4 record type, at byte (\d+)"),
}
COMPRESSIONS = ("none", "gzip", "zstd", "bzip2", "xz")


@dataclass
class Mixed:
    store: Store
    report: Any
    logs: dict[str, TinyLog]      # file name -> what was written (good and damaged)
    at: dict[str, tuple[int, int]]  # damaged file -> (record index, byte offset) of damage
    items: dict[str, dict[str, Any]] = field(default_factory=dict)
    took: float = 0.0
    _con: Any = None

    def sql(self, query: str, params: list[Any] | None = None) -> Any:
        """On one connection kept open (opening one costs most of a second)."""
        from pipeline.store import to_frame

        if self._con is None:
            self._con = self.store.connect()
        return to_frame(self._con.sql(query, params=params or None))

    def item(self, name: str) -> dict[str, Any]:
        return self.items[name]

    def rejected(self, name: str) -> str:
        [r] = [r["reason"] for r in self.report.rejected if Path(r["path"]).name == name]
        return str(r)

    def parts_of(self, name: str) -> dict[str, tuple[int, float]]:
        df = self.sql(
            "select part_id, count(r.rec_index) as n, coalesce(sum(r.value), 0) as s "
            "from parts p left join results r using (file_id, part_index) "
            "where p.file_id = ? group by part_id", [self.item(name)["file_id"]])
        return {a: (b, c) for a, b, c in df.iter_rows()}


@pytest.fixture(scope="module")
def mixed(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Mixed]:
    """Good logs and every bad-input class, in one folder, in one ingest run."""
    d = tmp_path_factory.mktemp("mixed")
    inbox = d / "inbox"
    inbox.mkdir()
    logs: dict[str, TinyLog] = {}
    at: dict[str, tuple[int, int]] = {}

    def put(name: str, data: bytes, log: TinyLog | None = None) -> None:
        (inbox / name).write_bytes(data)
        if log is not None:
            logs[name] = log

    for i, kind in enumerate(COMPRESSIONS):  # good logs, however they arrive
        log = tiny_log(f"GOOD-{i}", touchdowns=3 + i, seed=100 + i,
                       endian="><"[i % 2])
        put(f"good_{i}.{kind}", compress(kind, log.data), log)
    put("zz_copy_of_good_0.bin", (inbox / "good_0.none").read_bytes())  # same content
    put("timing.csv", (SAMPLES / TIMING_CSV).read_bytes())
    for damage, (make, _) in DAMAGE.items():
        for kind in ("none", "gzip", "zstd"):
            log = tiny_log(f"DMG-{damage}-{kind}", touchdowns=5, seed=len(logs))
            index = log.open_at(3)  # touchdown 3's parts open: 0..2 complete
            data, offset = make(log, index)
            put(f"{damage}.{kind}", compress(kind, data), log)
            at[f"{damage}.{kind}"] = (index, offset)
    log = tiny_log("GDR-FIRST", touchdowns=1)
    put("gdr_first.stdf", bad_gdr(log, 1)[0], log)
    log = tiny_log("MPR-ABSURD", touchdowns=2, seed=7)
    put("absurd_mpr.stdf", log.with_record(log.open_at(1) + 1, absurd_mpr()), log)
    log = tiny_log("PAST-END", touchdowns=2, seed=8, mrr=False)
    put("past_end.stdf", log.data + raw_record(50, 30, b"\x05hello", rec_len=65535), log)
    log = tiny_log("CUT", touchdowns=4, seed=9)
    cut = log.offset(log.parts[5].prr_index) + 3  # inside part 5's PRR
    put("cut_mid_prr.stdf", log.data[:cut], log)
    gz = compress("gzip", tiny_log("CUT-GZ", touchdowns=6, seed=10).data)
    put("cut.gz", gz[: len(gz) * 2 // 3])
    for kind, zeros in (("zstd", 512 << 20), ("gzip", 64 << 20)):
        log = tiny_log(f"BOMB-{kind}", touchdowns=3, seed=11, mrr=False)
        put(f"bomb.{kind}", _bomb(kind, log.data, zeros), log)
    put("bomb_csv.xz", lzma.compress((SAMPLES / TIMING_CSV).read_bytes() * 20))
    put("empty.stdf", b"")
    put("noise.bin", random.Random(5).randbytes(3000))
    put("old_version.stdf", b"\x02\x00\x00\x0a\x02\x03" + tiny_log().data[6:])
    store = Store(d / "store")
    t0 = time.perf_counter()
    rep = ingest(store, [inbox], workers=1, limits=InputLimits(0, CAP, CAP))
    m = Mixed(store, rep, logs, at, took=time.perf_counter() - t0)
    m.items = {Path(r["path"]).name: r for r in rep.ingested}
    yield m
    if m._con is not None:
        m._con.close()


GOOD = [f"good_{i}.{k}" for i, k in enumerate(COMPRESSIONS)]
DAMAGED = [f"{d}.{k}" for d in DAMAGE for k in ("none", "gzip", "zstd")]


def test_mixed_run_outcome_of_every_input(mixed: Mixed) -> None:
    rep = mixed.report
    assert rep.exit_code == 3 and rep.failed == []
    ok = sorted(n for n, r in mixed.items.items() if r["status"] == "ok")
    assert ok == sorted([*GOOD, "timing.csv", "absurd_mpr.stdf"])
    partial = sorted(n for n, r in mixed.items.items() if r["status"] == "partial")
    assert partial == sorted([*DAMAGED, "gdr_first.stdf", "past_end.stdf", "cut_mid_prr.stdf",
                              "cut.gz", "bomb.zstd", "bomb.gzip"])
    assert sorted(Path(r["path"]).name for r in rep.rejected) == sorted(
        ["bomb_csv.xz", "empty.stdf", "noise.bin", "old_version.stdf"])
    assert [Path(r["path"]).name for r in rep.skipped] == ["zz_copy_of_good_0.bin"]
    assert len(rep.problems) == len(partial) + len(rep.rejected)
    for line in rep.problems:  # one line each, naming the file
        assert "\n" not in line and line.split(": ", 1)[0].startswith(str(mixed.store.path.parent))
    # the bombs were cut, not expanded: 512 MiB of empty records would take minutes
    assert mixed.took < 60, mixed.took


@pytest.mark.parametrize("name", GOOD)
def test_mixed_run_good_rows_arrive_exactly_once(mixed: Mixed, name: str) -> None:
    log = mixed.logs[name]
    got = mixed.parts_of(name)
    assert set(got) == {p.part_id for p in log.parts}
    for p in log.parts:
        assert got[p.part_id][0] == p.ptrs
        assert math.isclose(got[p.part_id][1], p.ptr_sum, rel_tol=1e-6)
    fid = mixed.item(name)["file_id"]
    assert mixed.sql("select count(*) from files where file_id = ?", [fid]).item() == 1
    lot = mixed.sql("select lot_id from lots where file_id = ?", [fid]).item()
    assert lot == log.parts[0].lot_id


@pytest.mark.parametrize("name", DAMAGED)
def test_damage_part_way_keeps_every_part_completed_before_it(mixed: Mixed,
                                                              name: str) -> None:
    import re

    log, (index, offset) = mixed.logs[name], mixed.at[name]
    item = mixed.item(name)
    keep = log.before(index)
    assert len(keep) == 6 and item["status"] == "partial" and item["parts"] == len(keep)
    m = re.search(DAMAGE[name.split(".")[0]][1], item["error"])
    assert m, item["error"]
    assert int(m.group(1)) == offset  # the byte where the damaged record starts
    assert "2 part(s) never finished" in item["error"]
    got = mixed.parts_of(name)
    assert set(got) == {p.part_id for p in keep}
    for p in keep:
        assert got[p.part_id][0] == p.ptrs
        assert math.isclose(got[p.part_id][1], p.ptr_sum, rel_tol=1e-6)


def test_damage_right_after_the_far_is_partial_with_nothing(mixed: Mixed) -> None:
    item = mixed.item("gdr_first.stdf")  # a log (it starts with a FAR), damaged at once
    assert (item["status"], item["parts"], item["records"]) == ("partial", 0, 1)
    assert "(GDR at record 1, byte 6)" in item["error"]


def test_array_counts_past_rec_len_leave_fields_absent(mixed: Mixed) -> None:
    fid = mixed.item("absurd_mpr.stdf")["file_id"]
    q = mixed.sql
    row = q("select rtn_icnt, rslt_cnt, rtn_stat, rtn_rslt, test_txt, lo_limit "
            "from raw_mpr where file_id = ?", [fid]).row(0)
    assert row == (60000, 60000, None, None, None, None)
    assert q("select count(*) from results where record = 'MPR' and file_id = ?",
             [fid]).item() == 0
    assert mixed.item("absurd_mpr.stdf")["parts"] == len(mixed.logs["absurd_mpr.stdf"].parts)


def test_record_claiming_more_bytes_than_the_file_has(mixed: Mixed) -> None:
    log = mixed.logs["past_end.stdf"]
    item = mixed.item("past_end.stdf")
    assert item["parts"] == len(log.parts)
    assert item["error"] == (f"file ends inside a record: 10 bytes after the last complete "
                             f"record at byte {len(log.data)}")


def test_cut_logs_keep_their_finished_parts(mixed: Mixed) -> None:
    assert mixed.item("cut_mid_prr.stdf")["parts"] == 5
    assert set(mixed.parts_of("cut_mid_prr.stdf")) == {f"p{i}" for i in range(5)}
    gz = mixed.item("cut.gz")
    assert "compressed stream damaged after" in gz["error"] and 0 < gz["parts"] < 12


@pytest.mark.parametrize("kind", ["zstd", "gzip"])
def test_compression_bomb_is_cut_at_the_limit(mixed: Mixed, kind: str) -> None:
    item = mixed.item(f"bomb.{kind}")
    size = (mixed.store.path.parent / "inbox" / f"bomb.{kind}").stat().st_size
    assert item["error"].startswith(
        f"decompressed size limit reached: stopped after {CAP} bytes ({kind} file of "
        f"{size} bytes; limit {CAP} bytes; TANDEM_MAX_DECOMPRESSED sets it); the rest was "
        f"not read")
    assert item["parts"] == len(mixed.logs[f"bomb.{kind}"].parts)


def test_rejected_inputs_say_why(mixed: Mixed) -> None:
    assert mixed.rejected("bomb_csv.xz").startswith(
        f"timing CSV not stored: decompressed size limit reached: stopped after {CAP} bytes "
        f"(xz file of ")
    assert mixed.rejected("empty.stdf") == "empty file"
    assert mixed.rejected("noise.bin").startswith("not a datalog")
    assert mixed.rejected("old_version.stdf") == "FAR.STDF_VER is 3; only STDF V4 is supported"


def test_default_decompression_limit() -> None:
    lim = InputLimits()
    assert lim.max_decompressed(1_000) == 256 << 20  # small files are never cut
    assert lim.max_decompressed(10 << 20) == 2000 << 20  # 200 x
    assert lim.max_decompressed(1 << 40) == 64 << 30  # the ceiling


def test_decompression_limit_from_the_environment(monkeypatch: pytest.MonkeyPatch,
                                                  cli: Callable[..., CliResult],
                                                  tmp_path: Path) -> None:
    monkeypatch.setenv("TANDEM_MAX_DECOMPRESSED", "4096")
    assert InputLimits.from_env().max_decompressed(10) == 4096
    monkeypatch.setenv("TANDEM_MAX_DECOMPRESSED", "lots")
    (tmp_path / "a.stdf").write_bytes(tiny_log().data)
    r = cli("ingest", tmp_path / "a.stdf", "--store", tmp_path / "s")
    assert r.code == 2 and r.err_lines == [
        "tandem: TANDEM_MAX_DECOMPRESSED must be a positive number of bytes, not 'lots'"]


# == 6. reconciliation ====================================================================
def _drop_first(monkeypatch: pytest.MonkeyPatch, table: str) -> None:
    """Make the staging writer lose the first batch of ``table``: the bug reconciliation
    exists to catch."""
    real = Staged.write
    dropped: set[Path] = set()

    def write(self: Staged, name: str, t: Any) -> None:
        if name == table and self.root not in dropped:  # one staging folder per attempt
            dropped.add(self.root)
            return
        real(self, name, t)

    monkeypatch.setattr(Staged, "write", write)


def test_rows_lost_on_the_way_to_the_store_fail_loudly(tmp_path: Path,
                                                       monkeypatch: pytest.MonkeyPatch,
                                                       cli: Callable[..., CliResult]) -> None:
    log = tiny_log("LOT-R", touchdowns=3)
    good = tiny_log("LOT-G", touchdowns=2, seed=9)
    (tmp_path / "in").mkdir()
    (tmp_path / "in" / "a.stdf").write_bytes(log.data)
    (tmp_path / "in" / "b.stdf").write_bytes(good.data)
    _drop_first(monkeypatch, "ptr")
    store_dir = tmp_path / "s"
    r = cli("ingest", tmp_path / "in", "--store", store_dir, "--json")
    assert r.code == 1 and "Traceback" not in r.err
    out = json.loads(r.out)
    assert [Path(f["path"]).name for f in out["failed"]] == ["a.stdf", "b.stdf"]
    want = len(log.parts) * 4
    assert out["failed"][0]["reason"] == (
        f"reconciliation failed: read {want} PTR records, stored 0 ptr rows; the file "
        f"was not stored")
    assert r.err_lines[0] == (f"{out['failed'][0]['path']}: failed (internal error, not "
                              f"stored): {out['failed'][0]['reason']}")
    store = Store(store_dir)
    assert store.registry().num_rows == 0  # not registered: a rerun tries again
    assert not any((store_dir / "tables").glob("*/file_id=[0-9a-f]*"))
    monkeypatch.undo()
    rep = ingest(store, [tmp_path / "in"], workers=1)
    assert [i["status"] for i in rep.ingested] == ["ok", "ok"] and rep.exit_code == 0
    assert store.sql("select count(*) from results").item() == want + len(good.parts) * 4


def test_reconciliation_error_is_an_internal_error() -> None:
    assert issubclass(ReconciliationError, StoreError) and ReconciliationError.exit_code == 1


# == 7. untrusted text ====================================================================
EVIL = ["'); drop table x; --", 'a"b', "semi;colon", "-- comment", "O'Brien, \"Q\"\nline2",
        "=cmd|' /C calc'!A0", "\\'; select 1; --"]
EVIL_LOTS = [EVIL[0], EVIL[4], EVIL[6]]  # every name is a test name; these are lots,
EVIL_PARTS = [EVIL[1], EVIL[5], EVIL[3]]  # and these start part ids


@pytest.fixture(scope="module")
def evil_store(tmp_path_factory: pytest.TempPathFactory) -> Path:
    d = tmp_path_factory.mktemp("evil")
    for i, (lot, prefix) in enumerate(zip(EVIL_LOTS, EVIL_PARTS, strict=True)):
        log = tiny_log(lot, touchdowns=5, seed=i, test_names=(*EVIL, "plain"),
                       part_prefix=prefix, start_t=1_900_000_000 + 86400 * i)
        (d / "logs").mkdir(exist_ok=True)
        (d / "logs" / f"lot{i}.stdf").write_bytes(log.data)
    # a store folder whose name SQL would choke on if it were pasted in unescaped
    store = d / "it's; a store"
    rep = ingest(Store(store), [d / "logs"], workers=1)
    assert rep.exit_code == 0 and len(rep.ingested) == len(EVIL_LOTS)
    return store


def test_names_with_quotes_and_sql_come_back_exactly(evil_store: Path,
                                                     cli: Callable[..., CliResult]) -> None:
    r = cli("sql", "--store", evil_store, "--format", "json",
            "select distinct lot_id from lots order by lot_id")
    assert r.code == 0, r.err
    assert [x["lot_id"] for x in json.loads(r.out)] == sorted(EVIL_LOTS)
    r = cli("sql", "--store", evil_store, "--format", "csv",
            "select lot_id, test_name, part_id from results join parts "
            "using (lot_id, file_id, part_index) order by all")
    rows = list(csv.DictReader(io.StringIO(r.out)))
    # CSV text that a spreadsheet would run as a formula comes back with a leading quote
    # (the documented guard, report.text.csv_cell); everything else exactly.
    from pipeline.report.text import csv_cell

    assert {row["lot_id"] for row in rows} == {csv_cell(x) for x in EVIL_LOTS}
    assert {row["test_name"].split("_", 1)[1] for row in rows} == {*EVIL, "plain"}
    assert ({row["part_id"][:-1] for row in rows}  # prefix + one digit
            == {csv_cell(x) for x in EVIL_PARTS})
    # the tables are all still there
    assert Store(evil_store).sql("select count(*) from parts").item() == 10 * len(EVIL_LOTS)


@pytest.mark.parametrize("lot", [EVIL[0]])  # each costs seconds; the SQL is the same
def test_lot_options_are_parameters_not_sql(evil_store: Path, lot: str,
                                            cli: Callable[..., CliResult]) -> None:
    r = cli("times", "--store", evil_store, "--lot", lot, "--format", "json")
    assert r.code == 0, r.err
    assert {x["lot_id"] for x in json.loads(r.out)} == {lot}
    r = cli("sites", "--store", evil_store, "--lot", lot, "--format", "json")
    assert r.code == 0, r.err
    assert [x["lot_id"] for x in json.loads(r.out)] == [lot]


def test_unknown_hostile_lot_is_a_clean_error(evil_store: Path,
                                              cli: Callable[..., CliResult]) -> None:
    r = cli("times", "--store", evil_store, "--lot", "x' or '1'='1")
    assert r.code == 2 and len(r.err_lines) == 1  # an unknown lot is a bad argument
    assert r.err_lines[0].startswith("tandem: lot \"x' or '1'='1\" is not in the store")


def test_store_path_with_a_comma_is_refused(tmp_path: Path,
                                            cli: Callable[..., CliResult]) -> None:
    (tmp_path / "a.stdf").write_bytes(tiny_log().data)
    r = cli("ingest", tmp_path / "a.stdf", "--store", tmp_path / "x,y")
    assert r.code == 2 and r.err_lines == [
        f"tandem: {tmp_path / 'x,y'}: a store's path may not contain a comma (DuckDB reads "
        f"it as a list of folders); choose another folder"]
    assert not (tmp_path / "x,y").exists()


# == 3. concurrency: the lock ==============================================================
def _hold_lock(store_dir: Path) -> subprocess.Popen[str]:
    """Another process that holds the store's write lock until its stdin closes."""
    code = ("import sys\nfrom pipeline.store import Store\n"
            f"with Store({str(store_dir)!r}).writer():\n"
            "    print('held', flush=True)\n    sys.stdin.read()\n")
    p = subprocess.Popen([sys.executable, "-c", code], cwd=REPO, stdin=subprocess.PIPE,
                         stdout=subprocess.PIPE, text=True)
    assert p.stdout is not None and p.stdout.readline() == "held\n"
    return p


@pytest.fixture(scope="module")
def held(tmp_path_factory: pytest.TempPathFactory
         ) -> Iterator[tuple[Path, subprocess.Popen[str]]]:
    store_dir = tmp_path_factory.mktemp("held") / "locked"
    Store(store_dir)
    p = _hold_lock(store_dir)
    try:
        yield store_dir, p
    finally:
        _release(p)


def _release(p: subprocess.Popen[str]) -> None:
    assert p.stdin is not None and p.stdout is not None
    p.stdin.close()
    p.wait(timeout=30)
    p.stdout.close()


def test_second_writer_waits_then_names_the_store_and_the_holder(
        held: tuple[Path, subprocess.Popen[str]]) -> None:
    store_dir, p = held
    t0 = time.monotonic()
    with pytest.raises(StoreError) as e, Store(store_dir, lock_timeout=0.5).writer():
        pass
    assert 0.5 <= time.monotonic() - t0 < 5
    assert str(e.value) == (f"{store_dir}: another writer holds the store lock (pid "
                            f"{p.pid}); waited 0.5 s. Try again when it finishes, or wait "
                            f"longer (TANDEM_LOCK_TIMEOUT=seconds)")


def test_ingest_cli_lock_timeout_from_the_environment(
        held: tuple[Path, subprocess.Popen[str]], tmp_path: Path) -> None:
    store_dir, p = held
    (tmp_path / "a.stdf").write_bytes(tiny_log().data)
    r = run_cli("ingest", tmp_path / "a.stdf", "--store", store_dir,
                env={"TANDEM_LOCK_TIMEOUT": "0.2"})
    assert r.returncode == 1 and "Traceback" not in r.stderr
    assert r.stderr.splitlines() == [
        f"tandem: {store_dir}: another writer holds the store lock (pid {p.pid}); waited "
        f"0.2 s. Try again when it finishes, or wait longer (TANDEM_LOCK_TIMEOUT=seconds)"]


def test_writer_waits_for_the_lock_and_then_works(tmp_path: Path) -> None:
    store_dir = tmp_path / "s"
    Store(store_dir)
    p = _hold_lock(store_dir)
    (tmp_path / "a.stdf").write_bytes(tiny_log().data)
    timer = threading.Timer(0.5, lambda: p.stdin.close())  # type: ignore[union-attr]
    timer.start()
    t0 = time.monotonic()
    rep = ingest(Store(store_dir, lock_timeout=30), [tmp_path / "a.stdf"], workers=1)
    assert time.monotonic() - t0 >= 0.4 and rep.exit_code == 0
    timer.join()
    _release(p)


def test_writer_lock_is_reentrant_on_one_store(tmp_path: Path) -> None:
    store = Store(tmp_path / "s", lock_timeout=0)
    (tmp_path / "a.stdf").write_bytes(tiny_log().data)
    with store.writer():
        rep = ingest(store, [tmp_path / "a.stdf"], workers=1)  # takes writer() again
        with pytest.raises(StoreError), Store(tmp_path / "s", lock_timeout=0).writer():
            pass  # another Store object is another writer
    assert rep.exit_code == 0


# == 3. concurrency: two ingests, and readers during one ===================================
def inbox_of_tiny_logs(folder: Path, n: int, first: int = 0) -> list[Path]:
    folder.mkdir(parents=True, exist_ok=True)
    out = []
    for i in range(first, first + n):
        p = folder / f"log{i:03d}.stdf"
        p.write_bytes(tiny_log(f"LOT-{i:03d}", touchdowns=3 + i % 4, seed=i).data)
        out.append(p)
    return out


@pytest.fixture(scope="module")
def tiny_inbox(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, Path]:
    """16 tiny logs, and a clean reference store of them."""
    d = tmp_path_factory.mktemp("tiny")
    inbox_of_tiny_logs(d / "inbox", 16)
    ingest(Store(d / "ref"), [d / "inbox"], workers=1)
    return d / "inbox", d / "ref"


def test_two_concurrent_ingests_store_every_file_exactly_once(
        tmp_path: Path, tiny_inbox: tuple[Path, Path]) -> None:
    inbox, ref = tiny_inbox
    files = sorted(inbox.iterdir())
    store_dir = tmp_path / "s"
    a = start_cli("ingest", *files[:12], "--store", store_dir, "--json")
    b = start_cli("ingest", *files[4:], "--store", store_dir, "--json")
    outs = [p.communicate(timeout=120) for p in (a, b)]
    assert (a.returncode, b.returncode) == (0, 0), [o[1] for o in outs]
    reports = [json.loads(o[0]) for o in outs]
    stored = [r["path"] for rep in reports for r in rep["ingested"]]
    skipped = [r["path"] for rep in reports for r in rep["skipped"]]
    assert sorted(stored) == sorted(map(str, files))  # each file stored by exactly one
    assert len(skipped) == 8 and set(skipped) <= set(map(str, files[4:12]))
    assert fingerprint(store_dir) == fingerprint(ref)


def _poll(query: Callable[[], dict[str, int]], want: dict[str, int], stop: threading.Event,
          seen: list[dict[str, int]], errors: list[str]) -> None:
    while not stop.is_set():
        try:
            got = query()
        except Exception as e:  # noqa: BLE001 - any error is what the test looks for
            errors.append(f"{type(e).__name__}: {e}")
            continue
        bad = {f: n for f, n in got.items() if want.get(f) != n}
        if bad:
            errors.append(f"partial or unknown files visible: {bad}")
        seen.append(got)
        time.sleep(0.1)  # leave the writer most of the (two) cores


def test_readers_during_an_ingest_never_fail_and_see_only_whole_files(
        tmp_path: Path, tiny_inbox: tuple[Path, Path]) -> None:
    inbox, ref = tiny_inbox
    ref_con = Store(ref).connect()
    want = {v: dict(ref_con.execute(f"select file_id, count(*) from {v} group by all")
                    .fetchall()) for v in ("parts", "results", "raw_ptr", "lots")}
    ref_con.close()
    store_dir = tmp_path / "s"
    ingest(Store(store_dir), [], workers=1)  # an empty store with its catalog
    q_results = ("select file_id, count(*) from results where file_id in "
                 "(select file_id from parts) group by all")

    def via_store_sql() -> dict[str, int]:
        df = Store(store_dir).sql("select file_id, count(*) as n from parts group by all")
        return dict(df.iter_rows())

    def via_catalog() -> dict[str, int]:
        con = duckdb.connect(str(store_dir / "catalog.duckdb"), read_only=True)
        try:
            con.execute(f"set file_search_path = '{store_dir}'")
            return dict(con.execute(q_results).fetchall())
        finally:
            con.close()

    con = Store(store_dir).connect()  # one connection kept open through the ingest

    def via_open_connection() -> dict[str, int]:
        return dict(con.execute("select file_id, count(*) from raw_ptr group by all")
                    .fetchall())

    stop = threading.Event()
    polls = {"Store.sql": (via_store_sql, want["parts"]),
             "catalog.duckdb read-only": (via_catalog, want["results"]),
             "open connection": (via_open_connection, want["raw_ptr"])}
    seen: dict[str, list[dict[str, int]]] = {k: [] for k in polls}
    errors: list[str] = []
    threads = [threading.Thread(target=_poll, args=(fn, w, stop, seen[k], errors))
               for k, (fn, w) in polls.items()]
    writer = start_cli("ingest", inbox, "--store", store_dir)
    for t in threads:
        t.start()
    cli_runs = []
    while writer.poll() is None and not cli_runs:  # `tandem sql` as a user would run it
        r = run_cli("sql", "--store", store_dir, "--format", "json",
                    "select file_id, count(*) as n from lots group by all")
        cli_runs.append(r.returncode)
        if r.returncode != 0:
            errors.append(f"tandem sql: {r.stderr}")
        else:
            got = {x["file_id"]: x["n"] for x in json.loads(r.stdout)}
            if any(want["lots"].get(f) != n for f, n in got.items()):
                errors.append(f"tandem sql saw {got}")
    writer.communicate(timeout=120)
    stop.set()
    for t in threads:
        t.join()
    con.close()
    assert writer.returncode == 0
    assert errors == []
    assert cli_runs and all(seen.values())
    # the readers saw the store fill up, not only its first and last states
    sizes = {len(s) for polls_seen in seen.values() for s in polls_seen}
    assert len(sizes) > 3, sizes
    final = via_store_sql()
    assert len(final) == 16 and all(want["parts"][f] == n for f, n in final.items())


# == 2. crash safety: kill -9 at any moment ==============================================
KILL_INPUTS = [SAMPLES / n for n in (*STDF_LOGS, TIMING_CSV)]


@dataclass
class KillLog:
    kills: int = 0
    during_commit: int = 0  # kills that cut a commit short (its journal or folders left)
    random_delay: int = 0
    commit_trigger: int = 0
    completed_before_kill: int = 0
    checks: int = 0
    chains: int = 0
    notes: list[str] = field(default_factory=list)


def _registered(store_dir: Path) -> tuple[set[str], dict[str, int]]:
    """Committed file ids, and each lot's current generation, from the registry."""
    from pipeline.store.registry import Registry

    reg = Registry.read(store_dir)
    return {f for f, st in zip(reg.table.column("file_id").to_pylist(),
                               reg.table.column("status").to_pylist(), strict=True)
            if st in ("ok", "partial")}, reg.lots()


def _orphans(store_dir: Path) -> set[str]:
    """Folders a crashed commit left (a log's tables not registered, or a generation of a
    lot's derived tables that is not the current one and not awaiting removal)."""
    if not (store_dir / "tables").is_dir():
        return set()
    files, gens = _registered(store_dir)
    out = {str(d) for d in (store_dir / "tables").glob("*/lot=[!_]*/file_id=*")
           if d.name.removeprefix("file_id=") not in files}
    gc = (store_dir / "meta" / "gc.json")
    pending = {item["path"] for item in json.loads(gc.read_text())["items"]} \
        if gc.exists() else set()
    from pipeline.store.layout import lot_from_key

    for d in (store_dir / "derived").glob("*/lot=[!_]*/gen=*"):
        lot = lot_from_key(d.parent.name.removeprefix("lot="))
        if int(d.name.removeprefix("gen=")) != gens.get(lot) and \
                str(d.relative_to(store_dir)) not in pending:
            out.add(str(d))
    return out


def _wait_for_commit(store_dir: Path, proc: subprocess.Popen[str], deadline: float) -> bool:
    """Spin until a commit is under way (its journal is written first and removed last),
    and into its last phase when it can be seen: the new logs' tables renamed in, the
    lot's generation not yet published."""
    journal = store_dir / "meta" / "journal.json"
    while time.monotonic() < deadline and proc.poll() is None:
        try:
            j = json.loads(journal.read_text())
        except (OSError, ValueError):
            continue
        end = time.monotonic() + 0.5
        while time.monotonic() < end and proc.poll() is None and journal.exists():
            if any((store_dir / r).exists() for r in j.get("raw", [])):
                return True
        return journal.exists()
    return False


def _cut_short(store_dir: Path) -> bool:
    """A kill left a commit unfinished: its journal is still there."""
    return (store_dir / "meta" / "journal.json").exists()


def _check_after_kill(store_dir: Path, ref: dict[str, dict[str, int]],
                      views: list[str]) -> None:
    """Every view shows only complete, registered files: a registered file has all of its
    rows in every view, and no view shows a row of a file that is not registered."""
    if not (store_dir / "store.json").exists():  # killed before the store was made
        assert not (store_dir / "meta" / "registry.parquet").exists() or \
            not _registered(store_dir)[0]
        return
    con = Store(store_dir).connect()
    try:
        registered = {f for (f,) in con.execute(
            "select file_id from files where status in ('ok', 'partial')").fetchall()}
        got = per_file_counts(con, views)
        lots = lot_fingerprints(con)
        lot_files = files_by_lot(con)
    finally:
        con.close()
    for v in views:
        assert set(got[v]) <= registered, (v, set(got[v]) - registered)
        for f in registered:
            assert got[v].get(f, 0) == ref[v].get(f, 0), (v, f, got[v].get(f), ref[v].get(f))
    # each lot whose logs are all in is exactly as in a clean ingest of them
    want, want_files = ref["_lots"], ref["_lot_files"]
    assert set(lots) <= set(want), set(lots) - set(want)
    for (view, lot), got_lot in lots.items():
        if lot_files.get(lot) == want_files[lot]:
            assert got_lot == want[(view, lot)], (view, lot)


LOT_VIEWS = ("block_times", "reconciliation", "site_summary", "touchdowns")


def files_by_lot(con: duckdb.DuckDBPyConnection) -> dict[str, set[str]]:
    out: dict[str, set[str]] = {}
    for lot, fid in con.execute("select distinct lot_id, file_id from lots").fetchall():
        out.setdefault(lot, set()).add(fid)
    return out


def lot_fingerprints(con: duckdb.DuckDBPyConnection) -> dict[tuple[str, str], Any]:
    """(view, lot) -> row count and a content hash of the lot's derived aggregates."""
    out = {}
    for v in LOT_VIEWS:
        for row in con.execute(
                f"select lot_id, count(*), sum(hash(columns(* exclude (lot_id)))) "
                f"from {v} group by all").fetchall():
            out[(v, row[0])] = row[1:]
    return out


@dataclass
class Reference:
    """A clean ingest of some inputs, to compare killed and resumed stores with."""

    store: Path
    inputs: list[Path]
    seconds: float  # the in-process ingest's duration
    _fp: dict[str, Any] | None = None
    _counts: dict[tuple[str, ...], dict[str, dict[str, int]]] = field(default_factory=dict)

    def fingerprint(self) -> dict[str, Any]:
        if self._fp is None:
            self._fp = fingerprint(self.store)
        return self._fp

    def counts(self, views: list[str]) -> dict[str, Any]:
        key = tuple(views)
        if key not in self._counts:
            con = Store(self.store).connect()
            self._counts[key] = {**per_file_counts(con, views),  # type: ignore[dict-item]
                                 "_lots": lot_fingerprints(con), "_lot_files": files_by_lot(con)}
            con.close()
        return self._counts[key]


def _left_to_do(store_dir: Path, inputs: list[Path]) -> tuple[float, bool]:
    """The share of the input bytes not registered yet, and whether an STDF log (which
    has a FAR table, see _wait_for_commit) is among them."""
    done = set()
    if (store_dir / "meta" / "registry.parquet").exists():
        done = set(Store(store_dir).registry().column("path").to_pylist())
    left = [p for p in inputs if str(p) not in done]
    share = sum(p.stat().st_size for p in left) / sum(p.stat().st_size for p in inputs)
    return share, any(".stdf" in p.name for p in left)


STARTUP_S = 0.4  # a little under what `tandem ingest` takes to import and take the lock


def kill_run(tmp_path: Path, ref: Reference, kills: int, seed: int,
             views: list[str]) -> KillLog:
    """SIGKILL `tandem ingest` ``kills`` times, checking the store after each, resuming
    on the same store; a chain ends with a run that completes (then compared with the
    reference) and the next chain starts empty. Even kills come after a seeded delay drawn
    over what is left of the run (start-up included), odd ones the moment a commit is
    under way."""
    rng = random.Random(seed)
    want = ref.counts(views)
    work = ref.seconds  # delays past the end of a run are wasted: keep inside it
    log = KillLog()
    while log.kills < kills:
        log.chains += 1
        store_dir = tmp_path / f"chain{log.chains}"
        last_left, stalled = 2.0, 0
        while log.kills < kills:
            left, stdf_left = _left_to_do(store_dir, ref.inputs)
            if left == 0:  # every input stored: what is left to kill is a rerun
                break
            proc = start_cli("ingest", *ref.inputs, "--store", store_dir)
            on_commit, hit = log.kills % 2 == 1 and stdf_left, False
            if on_commit:
                hit = _wait_for_commit(store_dir, proc,
                                       time.monotonic() + 2 * (STARTUP_S + work))
                log.notes.append(f"commit:{hit}")
            else:
                # No progress since the last random kill (fixed costs the byte share leaves
                # out, such as loading the CSV reader): widen the window, so the chain ends.
                stalled = stalled + 1 if left == last_left else 0
                delay = rng.uniform(0.0, (STARTUP_S + work * left) * 2 ** max(stalled - 1, 0))
                end = time.monotonic() + delay
                while time.monotonic() < end and proc.poll() is None:
                    time.sleep(0.005)
                log.notes.append(f"after {delay:.2f} s ({left:.0%} left)")
                last_left = left
            if proc.poll() is not None:
                log.notes[-1] += " (done first)"
                log.completed_before_kill += 1
                proc.communicate()
                break
            proc.send_signal(signal.SIGKILL)
            proc.communicate()
            log.kills += 1
            log.commit_trigger += on_commit and hit
            log.random_delay += not on_commit
            log.during_commit += bool(_orphans(store_dir)) or _cut_short(store_dir)
            _check_after_kill(store_dir, want, views)
            log.checks += 1
        done = run_cli("ingest", *ref.inputs, "--store", store_dir)
        assert done.returncode == 0, done.stderr
        assert not _orphans(store_dir)
        assert fingerprint(store_dir) == ref.fingerprint()
    return log


def _reference(tmp_path_factory: pytest.TempPathFactory, inputs: list[Path]) -> Reference:
    store = tmp_path_factory.mktemp("killref") / "store"
    t0 = time.monotonic()
    assert ingest(Store(store), inputs, workers=1).exit_code == 0
    return Reference(store, inputs, time.monotonic() - t0)


# The short test checks these (the base views and the tables most rows land in); the long
# one checks every view with a file_id column.
KILL_VIEWS = ["files", "parts", "results", "lots", "raw_ptr", "raw_dtr", "raw_timing_csv",
              "raw_tsr"]


def test_kill_during_ingest_leaves_the_store_as_it_was(
        tmp_path: Path, tmp_path_factory: pytest.TempPathFactory) -> None:
    # Two STDF logs (the CSV reader's start-up would add half a second to every run).
    ref = _reference(tmp_path_factory, [SAMPLES / n for n in (
        "pf4_L0232_w02_markers.stdf.gz", "pf4_L0233_tsr_only.stdf")])
    log = kill_run(tmp_path, ref, kills=5, seed=1, views=KILL_VIEWS)
    print(f"kill -9 (short): {log}")
    assert log.kills == 5 and log.checks == 5


def _alive(pid: int) -> bool:
    """Running, not a zombie waiting to be reaped (/proc/PID/status, Linux)."""
    try:
        state = Path(f"/proc/{pid}/status").read_text().split("State:")[1].split()[0]
    except (OSError, IndexError):
        return False
    return state != "Z"


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="PR_SET_PDEATHSIG")
def test_kill_of_a_parallel_ingest_takes_its_workers_along(tmp_path: Path) -> None:
    proc = start_cli("ingest", *[SAMPLES / n for n in STDF_LOGS], "--store", tmp_path / "s",
                     "--workers", "2")
    kids: set[int] = set()
    deadline = time.monotonic() + 30
    while len(kids) < 2 and proc.poll() is None and time.monotonic() < deadline:
        ps = subprocess.run(["ps", "-o", "pid=", "--ppid", str(proc.pid)],
                            capture_output=True, text=True).stdout
        kids |= {int(x) for x in ps.split()}
    assert len(kids) == 2 and proc.poll() is None, "the pool did not start"
    proc.send_signal(signal.SIGKILL)
    proc.communicate()
    deadline = time.monotonic() + 5
    while any(_alive(k) for k in kids) and time.monotonic() < deadline:
        time.sleep(0.05)
    assert not any(_alive(k) for k in kids)


@pytest.mark.slow
def test_kill_at_many_moments_every_view_stays_whole(
        tmp_path: Path, tmp_path_factory: pytest.TempPathFactory) -> None:
    ref = _reference(tmp_path_factory, [SAMPLES / n for n in (*STDF_LOGS, TIMING_CSV)])
    con = Store(ref.store).connect()
    views = file_views(con)  # every view with a file_id column
    con.close()
    log = kill_run(tmp_path, ref, kills=20, seed=2, views=views)
    print(f"kill -9 (long): {log}")
    assert log.kills == 20 and log.checks == 20
    assert log.during_commit >= 3, log  # some kills really landed mid-commit
