"""The compiled batch engine (``_engine.c``): the same tables as ``walk.NumpyEngine``.

One C pass per batch does the structure walk, the context columns, every field and the
default data; this wrapper only turns its buffers into Arrow arrays (no copies) and runs
the reference decoder for the two layouts C does not read (GDR's V*n, PLR's arrays of
strings). Defaulted text comes out dictionary-encoded against one dictionary per field
for the whole file, which only grows, so batches share it and Parquet keeps writing
indices.
"""

from __future__ import annotations

import numpy as np
import pyarrow as pa

from .columnar import arrow_column, layout, needs_reference, reference_columns
from .compiled import EXT as _c  # None when not built: walk.NumpyEngine is used
from .records import DEFAULTED, RECORDS, Record
from .walk import RESULT_RECORDS, SECTION_SCHEMA

_ROLE = {**{n: 1 for n in RESULT_RECORDS}, "PRR": 2, "DTR": 3, "GDR": 3, "PIR": 4,
         "BPS": 4, "EPS": 4}
_CONTEXT = {
    0: [("rec_index", pa.int64())],
    1: [("rec_index", pa.int64()), ("part_key", pa.int64()), ("section_id", pa.int32())],
    2: [("rec_index", pa.int64()), ("part_key", pa.int64()), ("part_index", pa.int64()),
        ("touchdown", pa.int32()), ("pir_rec_index", pa.int64())],
    3: [("rec_index", pa.int64()), ("touchdown", pa.int32()), ("section_id", pa.int32())],
}


def available() -> bool:
    return _c is not None and hasattr(_c, "Engine")


def _specs() -> list[tuple[int, int, bytes | None, int, int]]:
    out = []
    for (typ, sub), rec in sorted(RECORDS.items()):
        role = _ROLE.get(rec.name, 0)
        lay = None if role == 4 or needs_reference(rec) else layout(rec, default_data=True)
        names = [f.name for f in rec.fields]
        test = names.index("TEST_NUM") if rec.name in DEFAULTED else -1
        opt = names.index("OPT_FLAG") if rec.name in DEFAULTED else -1
        out.append((typ * 256 + sub, role, lay, test, opt))
    return out


class NativeEngine:
    def __init__(self, endian: str, max_depth: int):
        assert _c is not None
        self.endian = endian
        self._e = _c.Engine(int(endian == ">"), max_depth, _specs())
        self._dicts: dict[tuple[int, int], pa.Array] = {}

    @property
    def depth(self) -> int:
        return int(self._e.stats()[0])

    def stats(self) -> tuple[int, int, int, int, int]:
        return tuple(int(x) for x in self._e.stats())  # type: ignore[return-value]

    def part_index(self, keys: np.ndarray) -> np.ndarray:
        return np.frombuffer(self._e.part_index(np.ascontiguousarray(keys, np.int64)),
                             np.int64)

    def batch(self, data: bytes | bytearray | memoryview, offs: np.ndarray, lens: np.ndarray,
              first_rec: int) -> tuple[int, list[tuple[Record, pa.Table | None, int]]]:
        offs = np.ascontiguousarray(offs, np.int64)
        lens = np.ascontiguousarray(lens, np.int64)
        unknown, got = self._e.batch(data, offs, lens, first_rec)
        out: list[tuple[Record, pa.Table | None, int]] = []
        for key, n, ctx, cols, pos in got:
            rec = RECORDS[(key >> 8, key & 0xFF)]
            role = _ROLE.get(rec.name, 0)
            if role == 4:
                out.append((rec, None, n))
                continue
            names, arrays = [], []
            for (name, typ), c in zip(_CONTEXT[role], ctx, strict=True):
                names.append(name)
                arrays.append(pa.Array.from_buffers(typ, n, [
                    None if c[1] is None else pa.py_buffer(c[1]), pa.py_buffer(c[2])]))
            if cols is None:
                idx = np.frombuffer(pos, np.int64)
                fields = self._reference(rec, data, offs[idx] + 4, lens[idx])
            else:
                fields = {f.name.lower(): arrow_column(f, c, n, self._dictionary(key, i, c))
                          for i, (f, c) in enumerate(zip(rec.fields, cols, strict=True))}
            names += list(fields)
            arrays += list(fields.values())
            out.append((rec, pa.Table.from_arrays(arrays, names=names), n))
        return unknown, out

    def _reference(self, rec: Record, data: bytes | bytearray | memoryview, offs: np.ndarray,
                   lens: np.ndarray) -> dict[str, pa.Array]:
        buf = np.frombuffer(data, np.uint8)
        return reference_columns(rec, buf, offs, lens, self.endian)

    def _dictionary(self, key: int, field: int, got: tuple) -> pa.Array | None:
        """The field's dictionary, rebuilt only when it has grown (then every batch of the
        file from here on shares the new one)."""
        if got[0] != 2:
            return None
        size = self._e.dict_size(key, field)
        have = self._dicts.get((key, field))
        if have is None or len(have) != size:
            count, offsets, data = self._e.dictionary(key, field)
            have = pa.Array.from_buffers(pa.large_string(), count, [
                None, pa.py_buffer(offsets), pa.py_buffer(data)])
            self._dicts[(key, field)] = have
        return have

    def sections(self) -> pa.Table | None:
        parent, depth, td, begin, end, name_offs, names = self._e.sections()
        n = len(depth) // 4
        if not n:
            return None
        parent_a = np.frombuffer(parent, np.int32)
        end_a = np.frombuffer(end, np.int64)
        if names and (np.frombuffer(names, np.uint8) >= 0x80).any():
            name_a = _names(name_offs, names)
        else:
            name_a = pa.Array.from_buffers(pa.large_string(), n, [
                None, pa.py_buffer(name_offs), pa.py_buffer(names)])
        return pa.table([
            pa.array(np.arange(n, dtype=np.int32)), name_a,
            pa.array(parent_a, mask=parent_a < 0),
            pa.array(np.frombuffer(depth, np.int32)),
            pa.array(np.frombuffer(td, np.int32)),
            pa.array(np.frombuffer(begin, np.int64)),
            pa.array(end_a, mask=end_a < 0),
        ], schema=SECTION_SCHEMA)


def _names(offsets: bytes, raw: bytes) -> pa.Array:
    """Section names with Latin-1 bytes above 0x7F: decoded one by one (rare)."""
    o = np.frombuffer(offsets, np.int64)
    return pa.array([raw[o[i]:o[i + 1]].decode("latin-1") for i in range(len(o) - 1)],
                    pa.large_string())
