"""Parquet writing: codec, level, dictionaries, encodings and row-group size, measured.

A measurement, not a test. One benchmark log (``bench_ingest.py`` makes them; default
the dense one) is decoded once in memory; then every table is written under each
candidate setting on one thread, as the store's staging writer does, and read back by
DuckDB with a typical query (one lot's results grouped by test). Each setting's write
time (wall and CPU), bytes on disk and query time are reported as ratios to the first
row (the setting the store used before this benchmark existed), so a loaded machine
still ranks them.
Figures in ``bench/out/parquet.json``.

    python bench/bench_parquet.py [--file dense|standard|dense-be] [--repeat 3]
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import sys
import tempfile
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))
sys.path.insert(0, str(Path(__file__).resolve().parent))

import pyarrow as pa  # noqa: E402
import pyarrow.parquet as pq  # noqa: E402
from bench_ingest import OUT, SLICE, ensure_file  # noqa: E402

from pipeline.read.stdf.decoder import Decoder  # noqa: E402
from pipeline.store.parquet import STAT_COLUMNS as _STAT_COLUMNS  # noqa: E402
from pipeline.store.parquet import conform as _conform  # noqa: E402
from pipeline.store.parquet import target_schema as _target_schema  # noqa: E402

Options = Callable[[pa.Schema], dict[str, Any]]


def _text(schema: pa.Schema) -> list[str]:
    return [f.name for f in schema if pa.types.is_large_string(f.type)
            or pa.types.is_string(f.type) or pa.types.is_dictionary(f.type)]


def _stats(schema: pa.Schema) -> list[str] | bool:
    return [f.name for f in schema if f.name in _STAT_COLUMNS] or False


POSITIONS = ("rec_index", "pir_rec_index", "begin_rec", "end_rec")
PARTS = ("part_index", "part_key", "touchdown")


def _delta(schema: pa.Schema, names: tuple[str, ...]) -> dict[str, str]:
    """DELTA_BINARY_PACKED for columns that only grow, by small steps."""
    return {f.name: "DELTA_BINARY_PACKED" for f in schema if f.name in names}


def setting(codec: str, level: int | None = None, dictionary: str = "text",
            delta: bool = False, parts: bool = False) -> Options:
    def options(schema: pa.Schema) -> dict[str, Any]:
        use_dict: list[str] | bool = {"text": _text(schema) or False, "none": False,
                                      "all": True}[dictionary]
        out: dict[str, Any] = {"compression": codec, "use_dictionary": use_dict,
                               "write_statistics": _stats(schema)}
        if level is not None:
            out["compression_level"] = level
        if delta:
            enc = _delta(schema, POSITIONS + (PARTS if parts else ()))
            if enc:
                if use_dict is True:
                    out["use_dictionary"] = [f.name for f in schema if f.name not in enc]
                out["column_encoding"] = enc
        return out
    return options


def before(schema: pa.Schema) -> dict[str, Any]:
    """The store's setting before this benchmark: dictionaries for plain text columns only
    (so the dictionary-encoded units and formats were written plain)."""
    text = [f.name for f in schema if pa.types.is_large_string(f.type)
            or pa.types.is_string(f.type)]
    return {"compression": "snappy", "use_dictionary": text or False,
            "write_statistics": _stats(schema)}


# (name, options, rows per row group; None: one row group per decoded batch)
SETTINGS: list[tuple[str, Options, int | None]] = [
    ("before: snappy, plain-text dict", before, None),
    ("snappy, text dict", setting("snappy"), None),
    ("snappy, text dict, delta positions", setting("snappy", delta=True), None),
    ("snappy, text dict, delta positions, parts", setting("snappy", delta=True, parts=True),
     None),
    ("lz4, text dict", setting("lz4"), None),
    ("lz4, text dict, delta positions", setting("lz4", delta=True), None),
    ("lz4, text dict, delta positions, parts", setting("lz4", delta=True, parts=True), None),
    ("lz4, no dict, delta positions", setting("lz4", dictionary="none", delta=True), None),
    ("lz4, all dict, delta positions", setting("lz4", dictionary="all", delta=True), None),
    ("zstd 1, text dict, delta positions", setting("zstd", 1, delta=True), None),
    ("zstd 3, text dict, delta positions", setting("zstd", 3, delta=True), None),
    ("none, text dict, delta positions", setting("none", delta=True), None),
    ("snappy, text dict, delta, 1M-row groups", setting("snappy", delta=True), 1 << 20),
    ("snappy, text dict, delta, 128k-row groups", setting("snappy", delta=True), 1 << 17),
]


def decode(path: Path) -> dict[str, list[pa.Table]]:
    data = path.read_bytes()
    dec, out = Decoder(), []
    for i in range(0, len(data), SLICE):
        out += dec.feed(data[i:i + SLICE])
    out += dec.close()
    tables: dict[str, list[pa.Table]] = {}
    for name, t in out:
        tables.setdefault(name, []).append(t)
    return tables


def write(tables: dict[str, list[pa.Table]], folder: Path, options: Options,
          group: int | None) -> tuple[float, float]:
    t0, c0 = time.perf_counter(), time.process_time()
    for name, batches in tables.items():
        schema = _target_schema(name, batches[0].schema)
        d = folder / name
        d.mkdir(parents=True)
        with pq.ParquetWriter(d / "part-0.parquet", schema, **options(schema)) as w:
            if group is None:
                for t in batches:
                    w.write_table(_conform(t, schema))
            else:
                w.write_table(pa.concat_tables([_conform(t, schema) for t in batches]),
                              row_group_size=group)
    return time.perf_counter() - t0, time.process_time() - c0


def query(folder: Path) -> float:
    """A typical read: every PTR's value summarised per test (the results view's work)."""
    import duckdb
    con = duckdb.connect()
    t0 = time.perf_counter()
    con.execute(f"select test_num, count(*), avg(result), min(lo_limit), max(units) "
                f"from read_parquet('{folder}/ptr/*.parquet') group by test_num").fetchall()
    return time.perf_counter() - t0


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--file", default="dense", help="dense, standard or dense-be")
    ap.add_argument("--repeat", type=int, default=3, help="runs per setting (best kept)")
    args = ap.parse_args(argv)
    path, meta = ensure_file(args.file, False)
    tables = decode(path)
    rows = sum(t.num_rows for ts in tables.values() for t in ts)
    print(f"{path.name}: {meta['bytes'] / 1e6:.1f} MB, {rows:,} rows in "
          f"{len(tables)} tables; load {os.getloadavg()[0]:.2f}")
    results = []
    tmp = Path(tempfile.mkdtemp(prefix="tandem-pq-"))
    try:
        for name, options, group in SETTINGS:
            best_w, best_c, best_q, size = 1e9, 1e9, 1e9, 0
            for i in range(args.repeat):
                folder = tmp / f"run{i}"
                wall, cpu = write(tables, folder, options, group)
                best_w, best_c = min(best_w, wall), min(best_c, cpu)
                best_q = min(best_q, query(folder))
                size = sum(f.stat().st_size for f in folder.rglob("*.parquet"))
                shutil.rmtree(folder)
            results.append({"setting": name, "write_s": round(best_w, 3),
                            "write_cpu_s": round(best_c, 3), "mb": round(size / 1e6, 1),
                            "query_s": round(best_q, 4)})
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    base = results[0]
    print(f"{'setting':42s} {'write':>7s} {'x':>5s} {'cpu':>7s} {'x':>5s} {'MB':>6s} "
          f"{'x':>5s} {'query':>7s} {'x':>5s}")
    for r in results:
        r["write_ratio"] = round(r["write_s"] / base["write_s"], 2)
        r["write_cpu_ratio"] = round(r["write_cpu_s"] / base["write_cpu_s"], 2)
        r["size_ratio"] = round(r["mb"] / base["mb"], 2)
        r["query_ratio"] = round(r["query_s"] / base["query_s"], 2)
        print(f"{r['setting']:42s} {r['write_s']:6.3f}s {r['write_ratio']:5.2f} "
              f"{r['write_cpu_s']:6.3f}s {r['write_cpu_ratio']:5.2f} {r['mb']:6.1f} "
              f"{r['size_ratio']:5.2f} {r['query_s']:6.3f}s {r['query_ratio']:5.2f}")
    OUT.mkdir(parents=True, exist_ok=True)
    (OUT / "parquet.json").write_text(json.dumps({
        "file": path.name, "rows": rows, "load_avg": os.getloadavg(),
        "settings": results}, indent=2) + "\n")
    return 0


if __name__ == "__main__":
    sys.exit(main())
