"""How the store writes Parquet: one place for the options, the schemas and the
write-aside-then-rename that makes every file appear whole."""

from __future__ import annotations

import os
import uuid
from pathlib import Path
from typing import Any

import pyarrow as pa
import pyarrow.parquet as pq

from ..schemas import table_schemas


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


def parquet_options(schema: pa.Schema) -> dict[str, Any]:
    """Fast to write and read: snappy, dictionaries for text only (names repeat), and
    statistics only where they prune."""
    text = [f.name for f in schema if pa.types.is_large_string(f.type)
            or pa.types.is_string(f.type)]
    return {"compression": "snappy", "use_dictionary": text or False,
            "write_statistics": [f.name for f in schema if f.name in STAT_COLUMNS] or False}


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
