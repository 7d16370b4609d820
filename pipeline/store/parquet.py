"""How the store writes Parquet: one place for the options, the schemas and the
write-aside-then-rename that makes every file appear whole."""

from __future__ import annotations

import os
import uuid
from pathlib import Path
from typing import Any

import pyarrow as pa
import pyarrow.parquet as pq

from ..read.schemas import table_schemas


def write_parquet(table: pa.Table, path: Path, **options: Any) -> None:
    """Write aside under a temporary name of its own, then rename into place: two
    processes creating one store at once both write the same schema files."""
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f"{path.name}.{os.getpid()}.{uuid.uuid4().hex[:8]}.tmp")
    pq.write_table(table, tmp, **({"compression": "zstd"} | options))
    os.replace(tmp, path)


# Columns that queries filter or join on keep min/max statistics; others skip them.
STAT_COLUMNS = {"part_index", "part_key", "test_num", "site_num", "head_num", "touchdown",
                "rec_index", "section_id"}
# Record positions only grow, by small steps: DELTA_BINARY_PACKED keeps a few bits of each.
DELTA_COLUMNS = {"rec_index", "pir_rec_index", "begin_rec", "end_rec"}


def parquet_options(schema: pa.Schema) -> dict[str, Any]:
    """Snappy, dictionaries for text only (names, units and formats repeat; text the
    decoder already dictionary-encoded is written as such), statistics only where they
    prune, delta-encoded record positions. Chosen with bench/bench_parquet.py on the dense
    benchmark log (100 MB, 4.4 M rows; load average 1.0; ratios to the setting before it,
    which wrote the dictionary-encoded units and formats plain): write time 0.73, files
    0.62 (63 to 39 MB), a typical DuckDB query 0.46. lz4 was as fast and a third smaller
    again, but not every Parquet reader reads LZ4_RAW, and every one reads snappy; zstd
    level 1 or 3 took 1.2 times as long as before, dictionaries on every column 1.4,
    none at all 0.9 (and slower queries); whole-log row groups saved a little more time
    but would hold a whole log in memory."""
    text = [f.name for f in schema if pa.types.is_large_string(f.type)
            or pa.types.is_string(f.type) or pa.types.is_dictionary(f.type)]
    options: dict[str, Any] = {
        "compression": "snappy", "use_dictionary": text or False,
        "write_statistics": [f.name for f in schema if f.name in STAT_COLUMNS] or False}
    delta = {f.name: "DELTA_BINARY_PACKED" for f in schema
             if f.name in DELTA_COLUMNS and pa.types.is_integer(f.type)}
    if delta:
        options["column_encoding"] = delta
    return options


def target_schema(name: str, schema: pa.Schema) -> pa.Schema:
    """The stored schema of a table: exactly its known columns, so that every file of a
    table has one schema and readers need not open every footer to unify them."""
    return table_schemas().get(name, schema)


def conform(table: pa.Table, schema: pa.Schema) -> pa.Table:
    cols = []
    for f in schema:
        if f.name in table.column_names:
            col = table.column(f.name)
            cols.append(col if col.type == f.type else col.cast(f.type))
        else:
            cols.append(pa.nulls(table.num_rows, f.type))
    return pa.Table.from_arrays(cols, schema=schema)
