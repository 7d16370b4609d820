"""Decoder paths held to the reference, shared by test_decoder.py and test_fuzz.py.

``Decoder`` has two engines (the compiled one and the numpy one); ``reference.py`` decodes
the same stream record by record in plain Python. ``assert_same`` compares what a
Decoder returned with what the reference says, table for table and row for row.
"""

from __future__ import annotations

from collections import defaultdict
from typing import Any

import pyarrow as pa

from pipeline.read.stdf import native
from pipeline.read.stdf.decoder import Decoder
from pipeline.read.stdf.reference import Reference

PATHS = [p for p in ("c", "numpy") if p != "c" or native.available()]


def canon(v: Any) -> Any:
    """NaN equals NaN here (fuzzed floats), lists item by item."""
    if isinstance(v, float) and v != v:
        return "nan"
    if isinstance(v, list):
        return [canon(x) for x in v]
    return v


def plain(t: pa.Table) -> pa.Table:
    """Dictionary-encoded text (defaulted units and formats) as plain strings."""
    cols = [c.cast(c.type.value_type) if pa.types.is_dictionary(c.type) else c
            for c in t.columns]
    return pa.table(cols, names=t.column_names)


def collect(batches: list[tuple[str, pa.Table]]) -> dict[str, pa.Table]:
    """All batches of each table as one table, sorted by rec_index (sections by id)."""
    by: dict[str, list[pa.Table]] = defaultdict(list)
    for name, t in batches:
        by[name].append(plain(t))
    out = {}
    for name, ts in by.items():
        t = pa.concat_tables(ts).combine_chunks()
        out[name] = t.sort_by("section_id" if name == "sections" else "rec_index")
    return out


def assert_same(dec: Decoder, tables: dict[str, pa.Table], ref: Reference) -> None:
    assert sorted(tables) == sorted(ref.tables)
    for name, want in ref.tables.items():
        got = tables[name].to_pylist()
        assert len(got) == len(want), name
        for g, w in zip(got, want, strict=True):
            assert {k: canon(v) for k, v in g.items()} == {k: canon(v) for k, v in w.items()}
    assert dict(dec.counts) == dict(ref.counts)
    assert dec.records == ref.records
    assert dec.damage == ref.damage
    assert dec.dropped_results == ref.dropped_results
    assert {k: v for k, v in dec.dropped.items() if v} == {
        k.upper(): v for k, v in ref.dropped.items()}
    assert dec.unfinished_parts == ref.unfinished_parts
