"""Shared fixtures: the sample logs, their ground truth, a store that holds them, and an
in-process runner for the CLI.

The sample logs and ``truth.json`` come from ``sample_logs/generate.py``: the truth is what
the generator *meant* to write, so tests compare the store against it rather than against
our own earlier output.
"""

from __future__ import annotations

import json
import struct
import sys
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from functools import cache
from pathlib import Path
from typing import Any

import polars as pl
import pytest

from pipeline import Store

SAMPLES = Path(__file__).parent.parent / "sample_logs"
MARKERS_LE = "pf4_L0231_w01_markers.stdf"
MARKERS_BE = "pf4_L0231_w01_markers_be.stdf"
MARKERS_GZ = "pf4_L0232_w02_markers.stdf.gz"
TSR_ONLY = "pf4_L0233_tsr_only.stdf"
TOTALS_ONLY = "pf4_L0234_totals_only.stdf"
TIMING_CSV = "pf4_L0235_timing.csv"
CONCURRENT = "pf4_L0236_w01_concurrent.stdf.gz"  # lot PF4-L0231's units, the plan applied
STDF_LOGS = (MARKERS_LE, MARKERS_BE, MARKERS_GZ, TSR_ONLY, TOTALS_ONLY, CONCURRENT)
ALL_LOGS = (*STDF_LOGS, TIMING_CSV)
NOT_LOGS = ("blocks.toml", "generate.py", "truth.json")  # in sample_logs/, not datalogs


def walk(data: bytes, endian: str = "<") -> Iterator[tuple[int, tuple[int, int], bytes]]:
    """(offset, (REC_TYP, REC_SUB), payload) of every complete record, from the STDF V4
    record header alone: REC_LEN U*2, REC_TYP U*1, REC_SUB U*1."""
    pos = 0
    while pos + 4 <= len(data):
        ln, typ, sub = struct.unpack_from(endian + "HBB", data, pos)
        if pos + 4 + ln > len(data):
            return
        yield pos, (typ, sub), data[pos + 4:pos + 4 + ln]
        pos += 4 + ln


@cache
def truth() -> dict[str, Any]:
    """sample_logs/truth.json, the generator's own account of what it wrote."""
    return json.loads((SAMPLES / "truth.json").read_text(encoding="utf-8"))


def file_truth(name: str) -> dict[str, Any]:
    return truth()["files"][name]


@dataclass
class Ingested:
    """A store and the report of the one ingest run that filled it.

    ``sql`` runs queries on one connection kept for the store's lifetime: building the
    catalog's views costs a second or more, and ``Store.sql`` pays that on every call
    (that API has tests of its own)."""

    store: Store
    report: Any
    file_ids: dict[str, str]  # file name (no folder) -> file_id
    _con: Any = None

    def fid(self, name: str) -> str:
        return self.file_ids[name]

    def sql(self, query: str, params: list[Any] | None = None) -> pl.DataFrame:
        from pipeline.store import to_frame

        if self._con is None:
            self._con = self.store.connect()
        return to_frame(self._con.sql(query, params=params or None))

    def close(self) -> None:
        if self._con is not None:
            self._con.close()
            self._con = None


def raw_parquet(store_root: Path, table: str) -> pl.DataFrame:
    """One stored table as any Parquet reader sees it (Hive partitions ``lot`` and
    ``file_id`` from the path), limited to the logs the registry lists as committed."""
    newest: dict[str, int] = {}  # each lot's newest generation lists the logs that count
    for d in (store_root / "derived").glob("lot=*/gen=*"):
        if d.parent.name != "lot=_schema":
            newest[d.parent.name] = max(newest.get(d.parent.name, 0), int(d.name[4:]))
    listed = pl.concat([pl.read_parquet(store_root / "derived" / lot / f"gen={gen}" /
                                        "lot_files" / "part-0.parquet")
                        for lot, gen in newest.items()])
    keep = listed.filter(pl.col("status").is_in(["ok", "partial"]))["file_id"]
    df = pl.read_parquet(store_root / "tables" / table / "*" / "*" / "*.parquet",
                         hive_partitioning=True,
                         hive_schema={"lot": pl.String, "file_id": pl.String},
                         missing_columns="insert")
    return df.filter(pl.col("file_id").is_in(keep.implode()))


def ingest_into(root: Path, *paths: Path | str, workers: int | None = None) -> Ingested:
    store = Store(root)
    report = store.ingest([str(p) for p in paths], workers=workers)
    ids = {Path(r["path"]).name: r["file_id"] for r in report.ingested}
    return Ingested(store, report, ids)


@pytest.fixture(scope="module")
def sample_store(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Ingested]:
    """sample_logs/ ingested once per test module (folder input: logs and non-logs)."""
    ing = ingest_into(tmp_path_factory.mktemp("store") / "store", SAMPLES)
    yield ing
    ing.close()


@dataclass
class CliResult:
    code: int
    out: str
    err: str

    @property
    def err_lines(self) -> list[str]:
        return self.err.splitlines()


@pytest.fixture
def cli(capsys: pytest.CaptureFixture[str]) -> Iterator[Callable[..., CliResult]]:
    """Run ``tandem ARGS...`` in-process; returns exit code, stdout and stderr.

    ``ingest`` and ``sql`` install an import hook that keeps pandas out of the process
    (pipeline/lean.py); it is removed again so other tests in this session are unaffected.
    """
    from pipeline.cli import main

    saved = list(sys.meta_path)

    def run(*argv: str | Path) -> CliResult:
        capsys.readouterr()
        code = main([str(a) for a in argv])
        out, err = capsys.readouterr()
        return CliResult(code, out, err)

    try:
        yield run
    finally:
        sys.meta_path[:] = saved
