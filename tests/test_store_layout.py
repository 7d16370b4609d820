"""The store's layout: partitioned by lot so a filter on lot_id reads only that lot's
files; any lot id round-trips exactly; a lot spread over several logs; generations that
appear whole; a kill during derivation; a store of the previous release brought up to
date by `tandem upgrade`.
"""

from __future__ import annotations

import os
import re
import shutil
import signal
import time
from pathlib import Path

import duckdb
import polars as pl
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from pipeline.jobs.ingest import ingest
from pipeline.store import Store
from pipeline.store.layout import lot_from_key, lot_key
from tests.conftest import ALL_LOGS, SAMPLES, STDF_LOGS, TIMING_CSV, file_truth, ingest_into
from tests.test_reliability import fingerprint, start_cli, tiny_log

ODD_LOTS = ["A/B", "x=y", "with space", "quote'\"s", "ünïcødé-µ", "%41", "_hidden",
            ".dot", "plus+minus-", "tab\there"]


def test_lot_keys_round_trip_exactly() -> None:
    for lot in ODD_LOTS:
        key = lot_key(lot)
        assert re.fullmatch(r"[A-Za-z0-9%~.\-_]+", key) and not key.startswith(("_", "."))
        assert lot_from_key(key) == lot


@pytest.fixture(scope="module")
def odd_store(tmp_path_factory: pytest.TempPathFactory) -> Path:
    d = tmp_path_factory.mktemp("odd")
    (d / "logs").mkdir()
    for i, lot in enumerate(ODD_LOTS):
        (d / "logs" / f"{i}.stdf").write_bytes(tiny_log(lot, seed=i, touchdowns=2).data)
    assert ingest(Store(d / "store"), [d / "logs"], workers=1).exit_code == 0
    return d / "store"


def test_odd_lot_ids_come_back_exactly_in_every_view(odd_store: Path) -> None:
    store = Store(odd_store)
    for view in ("lots", "parts", "results", "block_times", "touchdowns", "site_summary",
                 "sections"):
        got = set(store.sql(f"select distinct lot_id from {view}")["lot_id"])
        assert got == set(ODD_LOTS), view
    for lot in ODD_LOTS:  # and each one's rows are its own
        n = store.sql("select count(*) from parts where lot_id = ?", [lot]).item()
        assert n == 4, lot  # 2 touchdowns x 2 sites


def _files_scanned(con: duckdb.DuckDBPyConnection, query: str, lot: str) -> list[str]:
    plan = con.execute("explain analyze " + query, [lot]).fetchall()[0][1]
    return re.findall(r"Scanning Files: (\d+)/(\d+)", plan)


@pytest.mark.parametrize("view", ["results", "parts", "block_times", "touchdowns"])
def test_a_filter_on_lot_id_reads_only_that_lots_files(odd_store: Path, view: str) -> None:
    con = Store(odd_store).connect()
    try:
        scans = _files_scanned(con, f"select count(*) from {view} where lot_id = ?", "A/B")
    finally:
        con.close()
    assert any(int(total) > len(ODD_LOTS) for _, total in scans), scans
    for read, _ in scans:
        # one lot's files (its one log, and the schema file at most), out of every lot's
        assert int(read) <= 2, (view, scans)


def test_a_lot_over_several_logs_keeps_each_logs_rows(tmp_path: Path) -> None:
    logs = []
    for i in range(3):
        p = tmp_path / f"w{i}.stdf"
        p.write_bytes(tiny_log("MULTI", seed=i, touchdowns=3, start_t=1_900_000_000 + i,
                               part_prefix=f"w{i}-").data)
        logs.append(p)
    one = ingest_into(tmp_path / "one", *logs)          # one ingest, three commits
    apart = tmp_path / "apart"
    for p in logs:                                      # three ingests
        ingest(Store(apart), [p], workers=1)
    a, b = Store(tmp_path / "one"), Store(apart)
    for q in ("select count(*) from parts where lot_id = 'MULTI'",
              "select count(distinct file_id) from lots where lot_id = 'MULTI'",
              "select sum(parts) from block_times where lot_id = 'MULTI' and site is null"):
        assert a.sql(q).item() == b.sql(q).item(), q
    assert a.sql("select count(distinct file_id) from parts").item() == 3
    # the earlier logs' per-file tables are carried into the lot's newest generation,
    # not derived again: the same file (a hard link)
    gens = sorted((apart / "derived").glob("lot=MULTI/gen=*"), key=lambda d: int(d.name[4:]))
    first, last = gens[0] / "parts", gens[-1] / "parts"
    carried = [f.name for f in first.glob("*.parquet") if (last / f.name).exists()]
    if len(gens) > 1 and carried:  # older generations may already be gone (grace 0)
        assert os.stat(first / carried[0]).st_ino == os.stat(last / carried[0]).st_ino
    one.close()


def test_a_multi_lot_timing_csv_is_split_by_lot(tmp_path: Path) -> None:
    text = (SAMPLES / TIMING_CSV).read_text().splitlines()
    header, rows = text[0], text[1:]
    lot_col = header.split(",").index("lot_id")
    half = len(rows) // 2
    mixed = [header] + rows[:half] + [
        ",".join("PF4-L9999" if i == lot_col else v for i, v in enumerate(r.split(",")))
        for r in rows[half:]]
    p = tmp_path / "two_lots.csv"
    p.write_text("\n".join(mixed) + "\n")
    ing = ingest_into(tmp_path / "s", p)
    assert ing.report.exit_code == 0
    got = dict(ing.store.sql("select lot_id, count(*) from raw_timing_csv group by 1").rows())
    assert sum(got.values()) == len(rows) and set(got) == {"PF4-L0235", "PF4-L9999"}
    files = ing.store.sql("select lot_ids from files").item()
    assert sorted(files) == ["PF4-L0235", "PF4-L9999"]
    ing.close()


def test_plain_parquet_readers_see_each_lot_under_its_partition(odd_store: Path) -> None:
    """Any engine with Hive partitioning reads the tables as they are; the lot partition
    is the lot id, percent-decoded."""
    df = pl.read_parquet(odd_store / "tables" / "parts" / "*" / "*" / "*.parquet",
                         hive_partitioning=True,
                         hive_schema={"lot": pl.String, "file_id": pl.String})
    assert set(df["lot"].unique()) - {"_schema"} == set(ODD_LOTS)


# -- a kill during the derivation ------------------------------------------------------------
def test_a_kill_while_a_lot_is_derived_leaves_it_as_before(tmp_path: Path) -> None:
    inputs = [SAMPLES / n for n in STDF_LOGS[:1]] + [SAMPLES / "pf4_L0234_totals_only.stdf"]
    ref = tmp_path / "ref"
    assert ingest(Store(ref), inputs, workers=1).exit_code == 0
    store_dir = tmp_path / "s"
    ingest(Store(store_dir), inputs[:1], workers=1)
    before = fingerprint(store_dir)
    lots_before = Store(store_dir).snapshot().lots()
    proc = start_cli("ingest", *inputs, "--store", store_dir)
    deadline = time.monotonic() + 60
    hit = False
    while time.monotonic() < deadline and proc.poll() is None:
        staging = store_dir / "staging"
        work = list(staging.glob("commit-*/derived/*/*")) if staging.is_dir() else []
        if work and (store_dir / "meta" / "journal.json").exists():
            proc.send_signal(signal.SIGKILL)  # a generation is being built, not published
            hit = True
            break
    proc.communicate()
    assert hit, "the ingest finished before its derivation could be interrupted"
    assert fingerprint(store_dir) == before  # readers see the store as it was
    assert Store(store_dir).snapshot().lots() == lots_before
    done = start_cli("ingest", *inputs, "--store", store_dir)  # the next writer finishes
    done.communicate(timeout=120)
    assert done.returncode == 0
    assert fingerprint(store_dir) == fingerprint(ref)
    assert not (store_dir / "meta" / "journal.json").exists()


# -- a store of the previous release ---------------------------------------------------------
def _as_layout1(src: Path, dst: Path) -> None:
    """The same logs as the first release stored them: tables/<t>/file_id=<id>/, one
    registry file per log under tables/files/, no store.json, no lot partitions."""
    from pipeline.read.schemas import FILES
    from pipeline.store.registry import Registry

    shutil.copytree(src / "tables", dst / "tables")
    for part in (dst / "tables").glob("*/lot=*/file_id=*"):
        if part.parent.name == "lot=_schema":
            continue
        table = part.parent.parent
        target = table / part.name
        if target.exists():  # a CSV's second lot: merge the rows back into one file
            merged = pa.concat_tables([pq.read_table(target / "part-0.parquet"),
                                       pq.read_table(part / "part-0.parquet")])
            pq.write_table(merged, target / "part-0.parquet")
        else:
            part.rename(target)
    for d in (dst / "tables").glob("*/lot=*"):
        shutil.rmtree(d)
    reg = Registry.read(src)
    for row in reg.table.to_pylist():
        d = dst / "tables" / "files" / f"file_id={row['file_id']}"
        d.mkdir(parents=True, exist_ok=True)
        pq.write_table(pa.Table.from_pylist([{k: row[k] for k in FILES.names}], schema=FILES),
                       d / "part-0.parquet")


def test_a_layout1_store_is_refused_with_what_to_run(tmp_path: Path, cli) -> None:
    ing = ingest_into(tmp_path / "new", SAMPLES)
    ing.close()
    _as_layout1(tmp_path / "new", tmp_path / "old")
    for args in (["sql", "--store", tmp_path / "old", "select 1"],
                 ["ingest", SAMPLES / TIMING_CSV, "--store", tmp_path / "old"]):
        r = cli(*args)
        assert r.code == 2 and len(r.err_lines) == 1, r.err
        assert "tandem upgrade --store" in r.err
    r = cli("upgrade", "--store", tmp_path / "old")
    assert r.code == 0, r.err
    lots = {file_truth(n)["lot_id"] for n in ALL_LOGS}
    assert f"{len(ALL_LOGS)} log(s) moved to layout 2, {len(lots)} lot(s) derived again" in r.out
    assert fingerprint(tmp_path / "old") == fingerprint(tmp_path / "new")
    q = "select lot_id, block, site, round(mean_ms, 6) from block_times order by all"
    assert Store(tmp_path / "old").sql(q).equals(Store(tmp_path / "new").sql(q))
