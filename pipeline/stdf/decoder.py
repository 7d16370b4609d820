"""The sans-IO STDF V4 decoder: bytes in, Arrow tables out.

``Decoder.feed(data)`` takes any slice of an uncompressed stream and returns the tables
decoded so far; ``close()`` returns the rest. Memory is bounded by the batch size plus
the rows of parts still open (one touchdown), never by the file size.

Per batch: one C scan finds the record boundaries (``_scan``, with a Python twin), the
structural records (PIR, PRR, BPS, EPS) go through a short loop that tracks parts,
touchdowns and sections, and every other record type is decoded column-wise. Results are
held back until their part's PRR gives them a ``part_index`` (PRR order in the file).
"""

from __future__ import annotations

from collections import Counter
from dataclasses import dataclass, field

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from ..errors import FormatError
from .codec import decode_record, detect_endian
from .columnar import RUN_PAD, decode_columns
from .records import BY_NAME, DEFAULTED, RECORDS, Record
from .scan import scan

# REC_TYP values the standard defines (STDF V4 "Record Types" and the 2007 addendum).
# Anything else means the stream has lost its record boundaries: stop there.
VALID_TYP = frozenset({0, 1, 2, 5, 10, 15, 20, 50, 180, 181})
RESULT_RECORDS = ("PTR", "MPR", "FTR")
STRUCTURAL = ("PIR", "PRR", "BPS", "EPS")
MAX_SECTION_DEPTH = 64
_KEY_TO_REC = {typ * 256 + sub: rec for (typ, sub), rec in RECORDS.items()}


@dataclass
class Limits:
    batch_bytes: int = 8 << 20
    max_section_depth: int = MAX_SECTION_DEPTH


@dataclass
class _Structure:
    """What the structural records have said so far (carried across batches)."""

    open_parts: dict[tuple[int, int], int] = field(default_factory=dict)
    part_td: list[int] = field(default_factory=list)
    part_pir_rec: list[int] = field(default_factory=list)
    part_index: list[int] = field(default_factory=list)  # part_key -> index, -1 open
    next_index: int = 0
    touchdown: int = -1
    td_sites: set[tuple[int, int]] = field(default_factory=set)
    td_overlapped: bool = False
    stack: list[int] = field(default_factory=list)
    sections: list[dict] = field(default_factory=list)
    abandoned: int = 0  # parts whose PRR never came (a PIR for the same site reopened)


@dataclass
class _Timeline:
    """Change points within one batch, for vectorised look-ups by record index."""

    part_keys: list[int] = field(default_factory=list)  # (hs << 40 | rec)
    part_vals: list[int] = field(default_factory=list)
    sec_recs: list[int] = field(default_factory=list)
    sec_vals: list[int] = field(default_factory=list)
    td_recs: list[int] = field(default_factory=list)
    td_vals: list[int] = field(default_factory=list)


class Decoder:
    """Streaming STDF V4 decoder. Raises FormatError only for a stream that is not STDF
    at all; damage part-way is recorded in ``damage`` and decoding stops there."""

    def __init__(self, limits: Limits | None = None):
        self.limits = limits or Limits()
        self.endian: str | None = None
        self.counts: Counter[str] = Counter()
        self.damage: str | None = None
        self.dropped_results = 0
        self.dropped: Counter[str] = Counter()  # results of unfinished parts, by record type
        self._buf = bytearray()
        self._base = 0  # file offset of _buf[0]
        self._rec = 0  # records consumed so far
        self._s = _Structure()
        self._held: dict[str, list[pa.Table]] = {n: [] for n in RESULT_RECORDS}
        self._defaults: dict[str, pa.Table] = {}
        self._stopped = False

    # -- public ---------------------------------------------------------------------
    def feed(self, data: bytes) -> list[tuple[str, pa.Table]]:
        if self._stopped:
            return []
        self._buf += data
        # At least the 6-byte FAR: the byte order is read from it, so a smaller batch
        # must wait for more data rather than call the stream too short.
        if len(self._buf) < max(self.limits.batch_bytes, 6):
            return []
        return self._process()

    def close(self) -> list[tuple[str, pa.Table]]:
        out = [] if self._stopped else self._process()
        if self._buf and not self._stopped and self.damage is None:
            self.damage = (f"file ends inside a record: {len(self._buf)} bytes after the "
                           f"last complete record at byte {self._base}")
        for name in RESULT_RECORDS:
            held = self._held[name]
            n = sum(t.num_rows for t in held)
            self.dropped[name] += n
            self.dropped_results += n
            self._held[name] = []
        self.unfinished_parts = len(self._s.open_parts) + self._s.abandoned
        out.extend(self._section_table())
        return out

    @property
    def records(self) -> int:
        return self._rec

    # -- batches --------------------------------------------------------------------
    def _process(self) -> list[tuple[str, pa.Table]]:
        if self.endian is None:
            if len(self._buf) < 6:
                if not self._buf:
                    raise FormatError("empty file")
                raise FormatError("too short to be STDF (no complete FAR record)")
            self.endian = detect_endian(bytes(self._buf[:6]))
        offs, lens, typ, sub, end = scan(self._buf, 0, self.endian == ">")
        stop = self._first_damage(offs, lens, typ, sub)
        if stop is not None:
            # Damage at record k: decode the records before it, record why, and stop. Found
            # before any record of the batch is decoded, so the batch's earlier records are
            # kept rather than lost with an exception.
            k, self.damage = stop
            offs, lens, typ, sub = offs[:k], lens[:k], typ[:k], sub[:k]
            end = int(offs[k - 1]) + 4 + int(lens[k - 1]) if k else 0
            self._stopped = True
        # PAD zero bytes after the data let the columnar reader take fixed-width windows at
        # any record start without bounds checks (columnar.RUN_PAD).
        chunk = np.zeros(end + RUN_PAD, dtype=np.uint8)
        chunk[:end] = np.frombuffer(self._buf, dtype=np.uint8, count=end)
        del self._buf[:end]
        first_rec = self._rec
        self._rec += len(offs)
        out = self._decode_batch(chunk, offs, lens, typ.astype(np.int64) * 256 + sub, first_rec)
        self._base += end
        return out

    def _first_damage(self, offs: np.ndarray, lens: np.ndarray, typ: np.ndarray,
                      sub: np.ndarray) -> tuple[int, str] | None:
        """The first record of the batch that decoding cannot go past, and why: a REC_TYP
        the standard does not define (the boundaries are lost), a BPS nested deeper than
        ``Limits.max_section_depth``, or a GDR with a V*n type code STDF V4 does not
        define. Each check looks only at the records before the previous one's stop."""
        found = None
        k = len(offs)
        bad = np.flatnonzero(~np.isin(typ, list(VALID_TYP)))
        if bad.size:
            k = int(bad[0])
            found = (k, f"record boundaries lost: REC_TYP {int(typ[k])} is not an STDF V4 "
                        f"record type, at byte {self._base + int(offs[k])}")
        for check in (self._too_deep, self._bad_gdr):
            got = check(offs[:k], lens[:k], typ[:k], sub[:k])
            if got is not None:
                k, why = got
                found = (k, f"{why} ({self._name_of(typ[k], sub[k])} at record "
                            f"{self._rec + k}, byte {self._base + int(offs[k])}): decoding "
                            f"stopped there")
        return found

    @staticmethod
    def _name_of(typ: int, sub: int) -> str:
        return RECORDS[(int(typ), int(sub))].name

    def _too_deep(self, offs: np.ndarray, lens: np.ndarray, typ: np.ndarray,
                  sub: np.ndarray) -> tuple[int, str] | None:
        """The BPS that would nest sections deeper than the limit (mirrors _begin_section
        and _end_section: an EPS with no section open is ignored)."""
        bps, eps = BY_NAME["BPS"], BY_NAME["EPS"]
        step = ((typ == bps.typ) & (sub == bps.sub)).astype(np.int64)
        step -= (typ == eps.typ) & (sub == eps.sub)
        at = np.flatnonzero(step)
        depth = len(self._s.stack) + np.cumsum(step[at])  # depth after each BPS/EPS
        limit = self.limits.max_section_depth
        if not at.size or (depth.min() >= 0 and depth.max() <= limit):
            return None  # the usual case, decided without a loop
        d = len(self._s.stack)
        for i in at:
            if step[i] < 0:
                d = max(d - 1, 0)
            elif d >= limit:
                return int(i), f"program sections nested deeper than {limit}"
            else:
                d += 1
        return None

    def _bad_gdr(self, offs: np.ndarray, lens: np.ndarray, typ: np.ndarray,
                 sub: np.ndarray) -> tuple[int, str] | None:
        """The first GDR whose V*n items use a type code the standard does not define."""
        gdr = BY_NAME["GDR"]
        for i in np.flatnonzero((typ == gdr.typ) & (sub == gdr.sub)):
            o, n = int(offs[i]) + 4, int(lens[i])
            try:
                decode_record(gdr, bytes(self._buf[o:o + n]), self.endian or "<")
            except FormatError as e:
                return int(i), str(e)
        return None

    def _decode_batch(self, buf: np.ndarray, offs: np.ndarray, lens: np.ndarray,
                      keys: np.ndarray, first_rec: int) -> list[tuple[str, pa.Table]]:
        data_offs = offs + 4
        order = np.argsort(keys, kind="stable")
        sk = keys[order]
        bounds = np.flatnonzero(np.diff(sk)) + 1
        groups = {int(sk[a]): order[a:b] for a, b in
                  zip(np.r_[0, bounds], np.r_[bounds, len(sk)], strict=True)} if len(sk) else {}
        structural = {n: groups.get(BY_NAME[n].typ * 256 + BY_NAME[n].sub,
                                    np.zeros(0, np.int64)) for n in STRUCTURAL}
        tl = self._timeline_start(first_rec)
        prr_ctx = self._walk_structure(buf, data_offs, lens, structural, first_rec, tl)
        out: list[tuple[str, pa.Table]] = []
        decoded: set[str] = set()
        for key, idx in groups.items():
            rec = _KEY_TO_REC.get(key)
            if rec is None:
                self.counts["unknown"] += len(idx)
                continue
            self.counts[rec.name] += len(idx)
            if rec.name in ("PIR", "BPS", "EPS"):
                continue
            cols = decode_columns(rec, buf, data_offs[idx], lens[idx], self.endian or "<")
            recs = idx.astype(np.int64) + first_rec
            table = self._with_context(rec, cols, recs, tl, prr_ctx)
            if rec.name in RESULT_RECORDS:
                table = self._fill_defaults(rec, table)
                decoded.add(rec.name)
                out.extend(self._release(rec.name, table))
            else:
                out.append((_table_name(rec), table))
        # Results held from earlier batches whose PRR came in this one, which has no
        # record of their type: release them now, not never.
        for name in RESULT_RECORDS:
            if self._held[name] and name not in decoded:
                out.extend(self._release(name, None))
        return out

    # -- structure ------------------------------------------------------------------
    def _timeline_start(self, first_rec: int) -> _Timeline:
        s, tl = self._s, _Timeline()
        for (h, st), pk in s.open_parts.items():
            tl.part_keys.append(((h << 8 | st) << 40) | first_rec)
            tl.part_vals.append(pk)
        tl.sec_recs.append(first_rec - 1)
        tl.sec_vals.append(s.stack[-1] if s.stack else -1)
        tl.td_recs.append(first_rec - 1)
        tl.td_vals.append(s.touchdown)
        return tl

    def _walk_structure(self, buf: np.ndarray, data_offs: np.ndarray, lens: np.ndarray,
                        groups: dict[str, np.ndarray], first_rec: int,
                        tl: _Timeline) -> dict[int, tuple[int, int, int]]:
        events = sorted((int(i), name) for name, idx in groups.items() for i in idx)
        prr_ctx: dict[int, tuple[int, int, int]] = {}
        for i, name in events:
            rec, o, n = first_rec + i, int(data_offs[i]), int(lens[i])
            if name in ("PIR", "PRR"):
                h, st = (int(buf[o]), int(buf[o + 1])) if n >= 2 else (0, 0)
                if name == "PIR":
                    self._open_part(h, st, rec, tl)
                else:
                    prr_ctx[rec] = self._close_part(h, st, rec, tl)
            elif name == "BPS":
                self._begin_section(buf, o, n, rec, tl)
            else:
                self._end_section(rec, tl)
        return prr_ctx

    def _open_part(self, h: int, st: int, rec: int, tl: _Timeline) -> None:
        s = self._s
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
        pk = len(s.part_td)
        s.part_td.append(s.touchdown)
        s.part_pir_rec.append(rec)
        s.part_index.append(-1)
        s.open_parts[(h, st)] = pk
        tl.part_keys.append(((h << 8 | st) << 40) | rec)
        tl.part_vals.append(pk)

    def _close_part(self, h: int, st: int, rec: int, tl: _Timeline) -> tuple[int, int, int]:
        s = self._s
        pk = s.open_parts.pop((h, st), None)
        if pk is None:  # a PRR with no PIR: still a part, tested in the current touchdown
            pk = len(s.part_td)
            s.part_td.append(max(s.touchdown, 0))
            s.part_pir_rec.append(-1)
            s.part_index.append(-1)
            self.counts["prr_without_pir"] += 1
        s.part_index[pk] = s.next_index
        s.next_index += 1
        tl.part_keys.append(((h << 8 | st) << 40) | rec)
        tl.part_vals.append(-1)
        return pk, s.part_index[pk], s.part_td[pk]

    def _begin_section(self, buf: np.ndarray, o: int, n: int, rec: int, tl: _Timeline) -> None:
        s = self._s
        # _first_damage stops the batch before a BPS that would nest deeper than the limit.
        assert len(s.stack) < self.limits.max_section_depth
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
        s = self._s
        if not s.stack:
            self.counts["eps_without_bps"] += 1
            return
        s.sections[s.stack.pop()]["end_rec"] = rec
        tl.sec_recs.append(rec)
        tl.sec_vals.append(s.stack[-1] if s.stack else -1)

    def _section_table(self) -> list[tuple[str, pa.Table]]:
        if not self._s.sections:
            return []
        t = pa.Table.from_pylist(self._s.sections, schema=pa.schema([
            ("section_id", pa.int32()), ("name", pa.large_string()),
            ("parent_id", pa.int32()), ("depth", pa.int32()), ("touchdown", pa.int32()),
            ("begin_rec", pa.int64()), ("end_rec", pa.int64())]))
        return [("sections", t)]

    # -- context columns ------------------------------------------------------------
    def _with_context(self, rec: Record, cols: dict[str, pa.Array], recs: np.ndarray,
                      tl: _Timeline, prr_ctx: dict[int, tuple[int, int, int]]) -> pa.Table:
        ctx: dict[str, pa.Array] = {"rec_index": pa.array(recs, pa.int64())}
        if rec.name in RESULT_RECORDS:
            hs = (cols["head_num"].fill_null(0).to_numpy(zero_copy_only=False).astype(np.int64)
                  << 8) | cols["site_num"].fill_null(0).to_numpy(zero_copy_only=False)
            ctx["part_key"] = pa.array(_lookup_part(tl, hs, recs), pa.int64())
            ctx["section_id"] = _nullable(_step(tl.sec_recs, tl.sec_vals, recs), pa.int32())
        elif rec.name == "PRR":
            got = [prr_ctx[r] for r in recs.tolist()]
            ctx["part_key"] = pa.array([g[0] for g in got], pa.int64())
            ctx["part_index"] = pa.array([g[1] for g in got], pa.int64())
            ctx["touchdown"] = pa.array([g[2] for g in got], pa.int32())
            ctx["pir_rec_index"] = pa.array(
                [self._s.part_pir_rec[g[0]] for g in got], pa.int64())
        elif rec.name in ("DTR", "GDR"):
            ctx["touchdown"] = _nullable(_step(tl.td_recs, tl.td_vals, recs), pa.int32())
            ctx["section_id"] = _nullable(_step(tl.sec_recs, tl.sec_vals, recs), pa.int32())
        return pa.table({**ctx, **cols})

    # -- default data (STDF V4, PTR 15/10 and MPR 15/15 notes) ------------------------
    def _fill_defaults(self, rec: Record, t: pa.Table) -> pa.Table:
        """Default data (STDF V4, PTR 15/10 and MPR 15/15). Empty TEST_TXT is left as
        written: the results view names it from the first named record of the file."""
        fields = DEFAULTED.get(rec.name)
        if not fields:
            return t
        return self._apply_defaults(rec.name, t, t.column("test_num").to_numpy(), fields)

    def _apply_defaults(self, name: str, t: pa.Table, tn: np.ndarray,
                        fields: tuple[str, ...]) -> pa.Table:
        cols = [f.lower() for f in fields]
        opt_col = t.column("opt_flag").combine_chunks()
        opt = opt_col.fill_null(0).to_numpy(zero_copy_only=False)
        invalid = {c: (opt >> b) & 1 == 1 for c, b in _INVALID_BITS.items()
                   if c in cols and (name == "MPR" or c not in ("start_in", "incr_in"))}
        table = self._defaults.get(name)
        seen = set() if table is None else set(table.column("test_num").to_pylist())
        new = _first_index(tn, seen)
        if new:
            rows = t.take(_ints(np.array(new))).select(["test_num", "opt_flag", *cols])
            rows = _null_where(rows, {c: m[new] for c, m in invalid.items()})
            table = rows if table is None else pa.concat_tables([table, rows])
            table = table.combine_chunks()
            self._defaults[name] = table
        assert table is not None
        keys = table.column("test_num").to_numpy()
        order = np.argsort(keys)
        pos = order[np.searchsorted(keys[order], tn)]
        default_opt = table.column("opt_flag").combine_chunks().fill_null(0).to_numpy(
            zero_copy_only=False)
        opt_eff = np.where(_valid(opt_col), opt, default_opt[pos])
        for c in cols:
            col = t.column(c).combine_chunks()
            use_default = ~_valid(col)
            if c in invalid:
                use_default |= invalid[c]
            val = col
            # Text always goes through _choose, defaults used or not, so that every batch
            # has the same (dictionary) type and held batches concatenate.
            if use_default.any() or pa.types.is_large_string(col.type):
                val = _choose(use_default, table.column(c).combine_chunks(), pos, col)
            bit = _NO_LIMIT_BITS.get(c)
            if bit is not None:
                none = (opt_eff >> bit) & 1 == 1
                if none.any():
                    val = pc.if_else(_bools(none), pa.nulls(len(val), val.type), val)
            if val is not col:
                t = t.set_column(t.schema.get_field_index(c), c, val)
        return t

    def _release(self, name: str, table: pa.Table | None) -> list[tuple[str, pa.Table]]:
        tables = [*self._held[name], *([] if table is None else [table])]
        table = tables[0]
        if len(tables) > 1:
            table = pa.concat_tables(tables, promote_options="default")
        index = np.array(self._s.part_index + [-1], dtype=np.int64)  # [-1] for key -1
        pk = table.column("part_key").to_numpy()
        pi = index[np.where(pk < 0, len(index) - 1, pk)]
        ready = (pi >= 0) | (pk < 0)
        k = int(ready.sum())
        if ready[:k].all():  # the usual case: only the last touchdown's rows wait
            out, rest = table.slice(0, k), table.slice(k)
        else:
            out, rest = table.filter(_bools(ready)), table.filter(_bools(~ready))
        self._held[name] = [rest] if rest.num_rows else []
        if not k:
            return []
        part_index = pa.array(pi[ready], pa.int64(), mask=pk[ready] < 0)
        out = out.add_column(1, "part_index", part_index)
        return [(name.lower(), out)]


# -- helpers ------------------------------------------------------------------------
def _table_name(rec: Record) -> str:
    return "parts" if rec.name == "PRR" else rec.name.lower()


def _first_index(keys: np.ndarray, seen: set[int] | dict[int, str]) -> list[int]:
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


def _lookup_part(tl: _Timeline, hs: np.ndarray, recs: np.ndarray) -> np.ndarray:
    if not tl.part_keys:
        return np.full(len(recs), -1, dtype=np.int64)
    k = np.asarray(tl.part_keys, dtype=np.int64)
    v = np.asarray(tl.part_vals, dtype=np.int64)
    order = np.argsort(k, kind="stable")
    k, v = k[order], v[order]
    q = (hs << 40) | recs
    i = np.searchsorted(k, q, side="right") - 1
    j = np.maximum(i, 0)
    same = (i >= 0) & ((k[j] >> 40) == hs)
    return np.where(same, v[j], -1)


# OPT_FLAG bits that say a field is not valid in this record, so the default applies
# (STDF V4, PTR 15/10: bit 0 RES_SCAL, bit 4 LO_LIMIT, bit 5 HI_LIMIT; MPR 15/15 also
# bit 1 START_IN and INCR_IN).
_INVALID_BITS = {"res_scal": 0, "lo_limit": 4, "hi_limit": 5, "start_in": 1, "incr_in": 1}
# Bits that say there is no such limit at all (bit 2 LO_SPEC, 3 HI_SPEC, 6 low, 7 high).
_NO_LIMIT_BITS = {"lo_spec": 2, "hi_spec": 3, "lo_limit": 6, "hi_limit": 7}


def _choose(use_default: np.ndarray, defaults: pa.Array, pos: np.ndarray,
            col: pa.Array) -> pa.Array:
    """Per row: defaults[pos] where use_default, else col. Text comes out dictionary-
    encoded (a handful of distinct units and formats), which costs indices, not copies."""
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
    for c, m in masks.items():
        if not m.any():
            continue
        col = t.column(c).combine_chunks()
        t = t.set_column(t.schema.get_field_index(c), c,
                         pc.if_else(_bools(m), pa.nulls(len(col), col.type), col))
    return t
