"""Arrow schemas of the stored tables (without ``file_id``: that is the Hive partition).

Record tables take their columns from the catalogue itself (a zero-row columnar decode),
so a field added to a layout in ``stdf/records.py`` reaches the store with no edit here.
"""

from __future__ import annotations

import functools

import numpy as np
import pyarrow as pa

from .stdf.columnar import decode_columns
from .stdf.records import DEFAULTED, RECORDS, Record

_CONTEXT = {
    "result": [("rec_index", pa.int64()), ("part_index", pa.int64()), ("part_key", pa.int64()),
               ("section_id", pa.int32())],
    "PRR": [("rec_index", pa.int64()), ("part_key", pa.int64()), ("part_index", pa.int64()),
            ("touchdown", pa.int32()), ("pir_rec_index", pa.int64())],
    "text": [("rec_index", pa.int64()), ("touchdown", pa.int32()), ("section_id", pa.int32())],
    "other": [("rec_index", pa.int64())],
}


TEXT_DICT = pa.dictionary(pa.int32(), pa.large_string())


def _record_schema(rec: Record) -> pa.Schema:
    empty = np.zeros(0, np.int64)
    cols = decode_columns(rec, np.zeros(1, np.uint8), empty, empty, "<")
    # Defaulted text (units, formats) is stored dictionary-encoded (decoder._choose).
    for f in DEFAULTED.get(rec.name, ()):
        if rec.field(f).type == "Cn":
            cols[f.lower()] = pa.nulls(0, TEXT_DICT)
    kind = ("result" if rec.name in ("PTR", "MPR", "FTR") else
            rec.name if rec.name == "PRR" else
            "text" if rec.name in ("DTR", "GDR") else "other")
    return pa.schema(_CONTEXT[kind] + [(k, v.type) for k, v in cols.items()])


FILES = pa.schema([
    ("path", pa.large_string()), ("sha256", pa.large_string()), ("size_bytes", pa.int64()),
    ("format", pa.large_string()), ("compression", pa.large_string()),
    ("status", pa.large_string()), ("error", pa.large_string()), ("records", pa.int64()),
    ("parts", pa.int64()), ("byte_order", pa.large_string()),
    ("records_by_type", pa.large_string()), ("dropped_results", pa.int64()),
    ("ingested_at", pa.timestamp("us")), ("tandem_version", pa.large_string()),
])

SECTIONS = pa.schema([
    ("section_id", pa.int32()), ("name", pa.large_string()), ("parent_id", pa.int32()),
    ("depth", pa.int32()), ("touchdown", pa.int32()), ("begin_rec", pa.int64()),
    ("end_rec", pa.int64()),
])

TIMING_CSV = pa.schema([
    ("lot_id", pa.large_string()), ("touchdown", pa.int64()), ("site", pa.int64()),
    ("part_id", pa.large_string()), ("block", pa.large_string()), ("start_ms", pa.float64()),
    ("end_ms", pa.float64()), ("head", pa.int64()), ("hard_bin", pa.int64()),
    ("soft_bin", pa.int64()), ("passed", pa.bool_()), ("test_time_ms", pa.float64()),
    ("line", pa.int64()),
])


# The outputs of the per-lot models computed in Python (pipeline/attribute/lot_models.py),
# written beside the SQL models' outputs when a lot's logs change (pipeline/store/derive.py).
# Their names are also in pipeline.store.models.PYTHON_MODELS (start-up needs no pyarrow).
DERIVED: dict[str, pa.Schema] = {
    "block_estimates": pa.schema([
        ("lot_id", pa.large_string()), ("block", pa.large_string()), ("site", pa.int32()),
        ("parts", pa.int64()), ("mean_ms", pa.float64()), ("ci_low_ms", pa.float64()),
        ("ci_high_ms", pa.float64()), ("identifiable", pa.bool_()),
        ("warning", pa.large_string()), ("group_blocks", pa.large_string()),
        ("group_kind", pa.large_string()), ("group_ms", pa.float64()),
        ("group_ci_low_ms", pa.float64()), ("group_ci_high_ms", pa.float64()),
    ]),
    "timing_notes": pa.schema([
        ("lot_id", pa.large_string()), ("kind", pa.large_string()),
        ("blocks", pa.large_string()), ("sites", pa.large_string()),
        ("message", pa.large_string()),
    ]),
    "site_summary": pa.schema([
        ("lot_id", pa.large_string()), ("sites", pa.int32()), ("touchdowns", pa.int64()),
        ("parts", pa.int64()), ("touchdown_ms", pa.float64()), ("one_site_ms", pa.float64()),
        ("overhead_ms", pa.float64()), ("mse", pa.float64()), ("index_ms", pa.float64()),
        ("serialized_blocks", pa.list_(pa.large_string())), ("method", pa.large_string()),
    ]),
}


@functools.cache
def table_schemas() -> dict[str, pa.Schema]:
    """Every stored table's schema, built on first use."""
    out = {"files": FILES, "sections": SECTIONS, "timing_csv": TIMING_CSV}
    for rec in RECORDS.values():
        if rec.name in ("PIR", "BPS", "EPS"):
            continue  # these become parts and sections
        out["parts" if rec.name == "PRR" else rec.name.lower()] = _record_schema(rec)
    return out

