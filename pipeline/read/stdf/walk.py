"""The pure-numpy batch engine: the structure walk and default data in Python.

The compiled engine (``_engine.c``, wrapped by ``native.py``) does the same work in one C
pass; this one is what runs when the extension did not build, and what the tests hold
the compiled one to, table for table. Both return, per batch, each record type's table
with its context columns and its default data filled in, in key order.

Structure (DESIGN.md attribution rule 2; STDF V4 PIR 5/10, PRR 5/20, BPS 20/10, EPS
20/20): a PIR opens its head/site's part (a PIR on a site whose part is still open
abandons that part); the first PIR after all parts closed starts a new touchdown when
the last one overlapped or this site was already in it; a PRR closes the part and gives
it the next ``part_index`` (a PRR with no PIR is a part of its own); BPS opens a section
inside the innermost open one, EPS closes it (an EPS with none open is counted, then
ignored). Results belong to the open part of their head/site and the innermost section;
DTR/GDR carry the touchdown and section they follow.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pyarrow as pa

from .columnar import RUN_PAD, decode_columns
from .records import BY_NAME, DEFAULT_BITS, DEFAULTED, NO_LIMIT_BITS, RECORDS, Record

RESULT_RECORDS = ("PTR", "MPR", "FTR")
NO_TABLE = ("PIR", "BPS", "EPS")  # they become parts and sections
_KEY_TO_REC = {typ * 256 + sub: rec for (typ, sub), rec in RECORDS.items()}
_PIR, _PRR, _BPS, _EPS = (BY_NAME[n].typ * 256 + BY_NAME[n].sub
                          for n in ("PIR", "PRR", "BPS", "EPS"))

SECTION_SCHEMA = pa.schema([
    ("section_id", pa.int32()), ("name", pa.large_string()), ("parent_id", pa.int32()),
    ("depth", pa.int32()), ("touchdown", pa.int32()), ("begin_rec", pa.int64()),
    ("end_rec", pa.int64())])


class Grow:
    """An int64 array that grows by doubling (parts can number millions)."""

    def __init__(self) -> None:
        self.a = np.zeros(1024, np.int64)
        self.n = 0

    def append(self, v: int) -> None:
        if self.n == len(self.a):
            self.a = np.concatenate([self.a, np.zeros(len(self.a), np.int64)])
        self.a[self.n] = v
        self.n += 1

    def view(self) -> np.ndarray:
        return self.a[:self.n]


@dataclass
class _Structure:
    """What the structural records have said so far (carried across batches)."""

    open_parts: dict[tuple[int, int], int] = field(default_factory=dict)
    part_td: Grow = field(default_factory=Grow)
    part_pir_rec: Grow = field(default_factory=Grow)
    part_index: Grow = field(default_factory=Grow)  # part_key -> index, -1 open
    next_index: int = 0
    touchdown: int = -1
    td_sites: set[tuple[int, int]] = field(default_factory=set)
    td_overlapped: bool = False
    stack: list[int] = field(default_factory=list)
    sections: list[dict] = field(default_factory=list)
    abandoned: int = 0  # parts whose PRR never came (a PIR for the same site reopened)
    prr_without_pir: int = 0
    eps_without_bps: int = 0


class NumpyEngine:
    def __init__(self, endian: str, max_depth: int):
        self.endian, self.max_depth = endian, max_depth
        self.s = _Structure()
        self._defaults: dict[str, pa.Table] = {}

    @property
    def depth(self) -> int:
        return len(self.s.stack)

    def stats(self) -> tuple[int, int, int, int, int]:
        s = self.s
        return (len(s.stack), len(s.open_parts), s.abandoned, s.prr_without_pir,
                s.eps_without_bps)

    def part_index(self, keys: np.ndarray) -> np.ndarray:
        index = np.append(self.s.part_index.view(), -1)  # [-1] for key -1
        return index[np.where(keys < 0, len(index) - 1, keys)]

    def batch(self, data: bytes | bytearray | memoryview, offs: np.ndarray, lens: np.ndarray,
              first_rec: int) -> tuple[int, list[tuple[Record, pa.Table | None, int]]]:
        end = int(offs[-1] + 4 + lens[-1]) if len(offs) else 0
        # PAD zero bytes after the data let the columnar reader take fixed-width windows
        # at any record start without bounds checks (columnar.RUN_PAD).
        buf = np.zeros(end + RUN_PAD, dtype=np.uint8)
        buf[:end] = np.frombuffer(data, dtype=np.uint8, count=end)
        keys = buf[offs + 2].astype(np.int64) * 256 + buf[offs + 3]
        data_offs = offs + 4
        order = np.argsort(keys, kind="stable")
        sk = keys[order]
        bounds = np.flatnonzero(np.diff(sk)) + 1
        groups = {int(sk[a]): order[a:b] for a, b in
                  zip(np.r_[0, bounds], np.r_[bounds, len(sk)], strict=True)} if len(sk) else {}
        tl = _Timeline.start(self.s, first_rec)
        prr_ctx = self._walk(buf, data_offs, lens, groups, first_rec, tl)
        unknown, out = 0, []
        for key, idx in groups.items():
            rec = _KEY_TO_REC.get(key)
            if rec is None:
                unknown += len(idx)
                continue
            if rec.name in NO_TABLE:
                out.append((rec, None, len(idx)))
                continue
            cols = decode_columns(rec, buf, data_offs[idx], lens[idx], self.endian,
                                  numpy_only=True)
            recs = idx.astype(np.int64) + first_rec
            table = self._with_context(rec, cols, recs, tl, prr_ctx)
            if rec.name in DEFAULTED:
                table = self._apply_defaults(rec.name, table)
            out.append((rec, table, len(idx)))
        return unknown, out

    # -- structure ------------------------------------------------------------------
    def _walk(self, buf: np.ndarray, data_offs: np.ndarray, lens: np.ndarray,
              groups: dict[int, np.ndarray], first_rec: int,
              tl: _Timeline) -> dict[int, tuple[int, int, int]]:
        events = sorted((int(i), key) for key in (_PIR, _PRR, _BPS, _EPS)
                        for i in groups.get(key, ()))
        prr_ctx: dict[int, tuple[int, int, int]] = {}
        for i, key in events:
            rec, o, n = first_rec + i, int(data_offs[i]), int(lens[i])
            if key in (_PIR, _PRR):
                h, st = (int(buf[o]), int(buf[o + 1])) if n >= 2 else (0, 0)
                if key == _PIR:
                    self._open_part(h, st, rec, tl)
                else:
                    prr_ctx[rec] = self._close_part(h, st, rec, tl)
            elif key == _BPS:
                self._begin_section(buf, o, n, rec, tl)
            else:
                self._end_section(rec, tl)
        return prr_ctx

    def _open_part(self, h: int, st: int, rec: int, tl: _Timeline) -> None:
        s = self.s
        if (h, st) in s.open_parts:  # the earlier part on this site never got its PRR
            s.abandoned += 1
            s.open_parts.pop((h, st))
        if not s.open_parts:
            if s.touchdown < 0 or s.td_overlapped or (h, st) in s.td_sites:
                s.touchdown += 1
                s.td_sites, s.td_overlapped = set(), False
                tl.td_recs.append(rec)
                tl.td_vals.append(s.touchdown)
        else:
            s.td_overlapped = True
        s.td_sites.add((h, st))
        pk = s.part_td.n
        s.part_td.append(s.touchdown)
        s.part_pir_rec.append(rec)
        s.part_index.append(-1)
        s.open_parts[(h, st)] = pk
        tl.part_keys.append(((h << 8 | st) << 40) | rec)
        tl.part_vals.append(pk)

    def _close_part(self, h: int, st: int, rec: int, tl: _Timeline) -> tuple[int, int, int]:
        s = self.s
        pk = s.open_parts.pop((h, st), None)
        if pk is None:  # a PRR with no PIR: still a part, tested in the current touchdown
            pk = s.part_td.n
            s.part_td.append(max(s.touchdown, 0))
            s.part_pir_rec.append(-1)
            s.part_index.append(-1)
            s.prr_without_pir += 1
        s.part_index.a[pk] = s.next_index
        s.next_index += 1
        tl.part_keys.append(((h << 8 | st) << 40) | rec)
        tl.part_vals.append(-1)
        return pk, int(s.part_index.a[pk]), int(s.part_td.a[pk])

    def _begin_section(self, buf: np.ndarray, o: int, n: int, rec: int, tl: _Timeline) -> None:
        s = self.s
        # The decoder stops a batch before a BPS that would nest deeper than the limit.
        assert len(s.stack) < self.max_depth
        ln = int(buf[o]) if n >= 1 else 0
        name = buf[o + 1:o + 1 + min(ln, n - 1)].tobytes().decode("latin-1") if n else ""
        sid = len(s.sections)
        s.sections.append({"section_id": sid, "name": name,
                           "parent_id": s.stack[-1] if s.stack else None,
                           "depth": len(s.stack), "touchdown": max(s.touchdown, 0),
                           "begin_rec": rec, "end_rec": None})
        s.stack.append(sid)
        tl.sec_recs.append(rec)
        tl.sec_vals.append(sid)

    def _end_section(self, rec: int, tl: _Timeline) -> None:
        s = self.s
        if not s.stack:
            s.eps_without_bps += 1
            return
        s.sections[s.stack.pop()]["end_rec"] = rec
        tl.sec_recs.append(rec)
        tl.sec_vals.append(s.stack[-1] if s.stack else -1)

    def sections(self) -> pa.Table | None:
        if not self.s.sections:
            return None
        return pa.Table.from_pylist(self.s.sections, schema=SECTION_SCHEMA)

    # -- context columns ------------------------------------------------------------
    def _with_context(self, rec: Record, cols: dict[str, pa.Array], recs: np.ndarray,
                      tl: _Timeline, prr_ctx: dict[int, tuple[int, int, int]]) -> pa.Table:
        ctx: dict[str, pa.Array] = {"rec_index": pa.array(recs, pa.int64())}
        if rec.name in RESULT_RECORDS:
            hs = (cols["head_num"].fill_null(0).to_numpy(zero_copy_only=False).astype(np.int64)
                  << 8) | cols["site_num"].fill_null(0).to_numpy(zero_copy_only=False)
            ctx["part_key"] = pa.array(tl.lookup_part(hs, recs), pa.int64())
            ctx["section_id"] = _nullable(_step(tl.sec_recs, tl.sec_vals, recs), pa.int32())
        elif rec.name == "PRR":
            got = [prr_ctx[r] for r in recs.tolist()]
            ctx["part_key"] = pa.array([g[0] for g in got], pa.int64())
            ctx["part_index"] = pa.array([g[1] for g in got], pa.int64())
            ctx["touchdown"] = pa.array([g[2] for g in got], pa.int32())
            pir = self.s.part_pir_rec.view()
            ctx["pir_rec_index"] = pa.array([int(pir[g[0]]) for g in got], pa.int64())
        elif rec.name in ("DTR", "GDR"):
            ctx["touchdown"] = _nullable(_step(tl.td_recs, tl.td_vals, recs), pa.int32())
            ctx["section_id"] = _nullable(_step(tl.sec_recs, tl.sec_vals, recs), pa.int32())
        return pa.table({**ctx, **cols})

    # -- default data (STDF V4, PTR 15/10 and MPR 15/15) ----------------------------
    def _apply_defaults(self, name: str, t: pa.Table) -> pa.Table:
        """records.DEFAULTED, DEFAULT_BITS and NO_LIMIT_BITS; empty TEST_TXT is left as
        written (the results view names it from the first named record of the file). A
        record without TEST_NUM takes no default data."""
        pc = _compute()
        cols = [f.lower() for f in DEFAULTED[name]]
        bits = {k.lower(): b for k, b in DEFAULT_BITS[name].items()}
        keyed = _valid(t.column("test_num").combine_chunks())
        tn = t.column("test_num").fill_null(0).to_numpy()
        opt_col = t.column("opt_flag").combine_chunks()
        opt = opt_col.fill_null(0).to_numpy(zero_copy_only=False)
        invalid = {c: (opt >> b) & 1 == 1 for c, b in bits.items()}
        table = self._defaults.get(name)
        seen = set() if table is None else set(table.column("test_num").to_pylist())
        first = _first_index(tn[keyed], seen)
        if first:
            new = np.flatnonzero(keyed)[first]
            rows = t.take(_ints(new)).select(["test_num", "opt_flag", *cols])
            rows = _null_where(rows, {c: m[new] for c, m in invalid.items()})
            table = rows if table is None else pa.concat_tables([table, rows])
            table = table.combine_chunks()
            self._defaults[name] = table
        if table is None:  # no record of this batch has a test number
            return t
        keys = table.column("test_num").to_numpy()
        order = np.argsort(keys)
        pos = order[np.minimum(np.searchsorted(keys[order], tn), len(keys) - 1)]
        default_opt = table.column("opt_flag").combine_chunks().fill_null(0).to_numpy(
            zero_copy_only=False)
        opt_eff = np.where(_valid(opt_col), opt, np.where(keyed, default_opt[pos], 0))
        for c in cols:
            col = t.column(c).combine_chunks()
            use_default = ~_valid(col) | invalid.get(c, False)
            if pa.types.is_large_string(col.type):  # a C*n of length 0 is missing
                use_default |= (pc.binary_length(col).fill_null(1).to_numpy(
                    zero_copy_only=False) == 0)
            use_default &= keyed
            val = col
            # Text always goes through _choose, defaults used or not, so that every batch
            # has the same (dictionary) type and held batches concatenate.
            if use_default.any() or pa.types.is_large_string(col.type):
                val = _choose(use_default, table.column(c).combine_chunks(), pos, col)
            bit = NO_LIMIT_BITS.get(c.upper())
            if bit is not None:
                none = (opt_eff >> bit) & 1 == 1
                if none.any():
                    val = pc.if_else(_bools(none), pa.nulls(len(val), val.type), val)
            if val is not col:
                t = t.set_column(t.schema.get_field_index(c), c, val)
        return t


@dataclass
class _Timeline:
    """Change points within one batch, for vectorised look-ups by record index."""

    part_keys: list[int] = field(default_factory=list)  # (hs << 40 | rec)
    part_vals: list[int] = field(default_factory=list)
    sec_recs: list[int] = field(default_factory=list)
    sec_vals: list[int] = field(default_factory=list)
    td_recs: list[int] = field(default_factory=list)
    td_vals: list[int] = field(default_factory=list)

    @classmethod
    def start(cls, s: _Structure, first_rec: int) -> _Timeline:
        tl = cls()
        for (h, st), pk in s.open_parts.items():
            tl.part_keys.append(((h << 8 | st) << 40) | first_rec)
            tl.part_vals.append(pk)
        tl.sec_recs.append(first_rec - 1)
        tl.sec_vals.append(s.stack[-1] if s.stack else -1)
        tl.td_recs.append(first_rec - 1)
        tl.td_vals.append(s.touchdown)
        return tl

    def lookup_part(self, hs: np.ndarray, recs: np.ndarray) -> np.ndarray:
        if not self.part_keys:
            return np.full(len(recs), -1, dtype=np.int64)
        k = np.asarray(self.part_keys, dtype=np.int64)
        v = np.asarray(self.part_vals, dtype=np.int64)
        order = np.argsort(k, kind="stable")
        k, v = k[order], v[order]
        q = (hs << 40) | recs
        i = np.searchsorted(k, q, side="right") - 1
        j = np.maximum(i, 0)
        same = (i >= 0) & ((k[j] >> 40) == hs)
        return np.where(same, v[j], -1)


# -- helpers ------------------------------------------------------------------------
def _compute() -> Any:
    """pyarrow.compute, imported when first needed: it takes a while, and only this path
    uses it."""
    import pyarrow.compute

    return pyarrow.compute


def _first_index(keys: np.ndarray, seen: set[int]) -> list[int]:
    """Row of the first occurrence of each key not yet seen (stream order)."""
    if keys.size == 0:
        return []
    uniq, first = np.unique(keys, return_index=True)
    return sorted(int(f) for u, f in zip(uniq.tolist(), first.tolist(), strict=True)
                  if u not in seen)


def _nullable(vals: np.ndarray, typ: pa.DataType) -> pa.Array:
    """-1 (no section, before the first touchdown) is stored as null."""
    return pa.array(vals, typ, mask=vals < 0)


def _step(recs: list[int], vals: list[int], query: np.ndarray) -> np.ndarray:
    r = np.asarray(recs, dtype=np.int64)
    v = np.asarray(vals, dtype=np.int64)
    order = np.argsort(r, kind="stable")
    i = np.searchsorted(r[order], query, side="right") - 1
    out = v[order][np.maximum(i, 0)]
    return np.where(i >= 0, out, -1)


def _choose(use_default: np.ndarray, defaults: pa.Array, pos: np.ndarray,
            col: pa.Array) -> pa.Array:
    """Per row: defaults[pos] where use_default, else col. Text comes out dictionary-
    encoded (a handful of distinct units and formats), which costs indices, not copies."""
    pc = _compute()
    if not pa.types.is_large_string(col.type):
        return pc.if_else(_bools(use_default), defaults.take(_ints(pos)), col)
    own = pc.dictionary_encode(col)
    n_own = len(own.dictionary)
    own_idx = own.indices.fill_null(0).to_numpy(zero_copy_only=False).astype(np.int32)
    idx = np.where(use_default, n_own + pos, own_idx).astype(np.int32)
    valid = np.where(use_default, _valid(defaults)[pos], _valid(col))
    dictionary = pa.concat_arrays([own.dictionary, defaults.fill_null("")])
    indices = pa.Array.from_buffers(pa.int32(), len(idx), [
        None if valid.all() else pa.py_buffer(np.packbits(valid, bitorder="little")),
        pa.py_buffer(idx)])
    return pa.DictionaryArray.from_arrays(indices, dictionary).cast(
        pa.dictionary(pa.int32(), pa.large_string()))


def _valid(col: pa.Array) -> np.ndarray:
    """The validity of an Arrow array as numpy booleans."""
    if col.null_count == 0:
        return np.ones(len(col), dtype=bool)
    bitmap = col.buffers()[0]
    bits = np.unpackbits(np.frombuffer(bitmap, np.uint8), bitorder="little")
    return bits[col.offset:col.offset + len(col)].astype(bool)


def _bools(mask: np.ndarray) -> pa.Array:
    """numpy booleans as an Arrow array, without pyarrow's pandas-aware conversion."""
    return pa.Array.from_buffers(pa.bool_(), len(mask),
                                 [None, pa.py_buffer(np.packbits(mask, bitorder="little"))])


def _ints(vals: np.ndarray) -> pa.Array:
    v = np.ascontiguousarray(vals, dtype=np.int64)
    return pa.Array.from_buffers(pa.int64(), len(v), [None, pa.py_buffer(v)])


def _null_where(t: pa.Table, masks: dict[str, np.ndarray]) -> pa.Table:
    pc = _compute()
    for c, m in masks.items():
        if not m.any():
            continue
        col = t.column(c).combine_chunks()
        t = t.set_column(t.schema.get_field_index(c), c,
                         pc.if_else(_bools(m), pa.nulls(len(col), col.type), col))
    return t
