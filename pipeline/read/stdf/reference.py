"""The reference stream decoder: one record at a time, in plain Python, for the tests.

Slow and simple on purpose. Fields come from the per-record reference decoder
(``codec.decode_record``); parts, touchdowns, sections and default data are the rules
as ``walk.py`` states them, written out record by record with no batching, no arrays and
no C. The tests hold both engines of ``Decoder`` (compiled and numpy) to this, table for
table and row for row, on the hand-written vectors and on the fuzz corpus.
"""

from __future__ import annotations

import struct
from collections import Counter
from dataclasses import dataclass, field
from typing import Any

from ...errors import FormatError
from .codec import decode_record, detect_endian
from .records import DEFAULT_BITS, DEFAULTED, NO_LIMIT_BITS, RECORDS, Record

VALID_TYP = frozenset({0, 1, 2, 5, 10, 15, 20, 50, 180, 181})  # as decoder.VALID_TYP
RESULTS = ("PTR", "MPR", "FTR")

Row = dict[str, Any]


@dataclass
class Reference:
    tables: dict[str, list[Row]] = field(default_factory=dict)
    counts: Counter[str] = field(default_factory=Counter)
    records: int = 0
    damage: str | None = None
    dropped_results: int = 0
    dropped: Counter[str] = field(default_factory=Counter)  # by table
    unfinished_parts: int = 0


@dataclass
class _State:
    open: dict[tuple[int, int], int] = field(default_factory=dict)
    part_td: list[int] = field(default_factory=list)
    part_pir: list[int] = field(default_factory=list)
    part_index: list[int] = field(default_factory=list)
    touchdown: int = -1
    td_sites: set[tuple[int, int]] = field(default_factory=set)
    overlapped: bool = False
    abandoned: int = 0
    stack: list[int] = field(default_factory=list)
    sections: list[Row] = field(default_factory=list)
    next_index: int = 0
    defaults: dict[tuple[str, int], Row] = field(default_factory=dict)
    pending: list[tuple[str, Row]] = field(default_factory=list)


def decode_stream(data: bytes, max_depth: int = 64) -> Reference:
    """Every table of ``data`` as lists of rows (column name -> value), in record order.
    Raises FormatError where the Decoder does: a stream that does not start with a FAR."""
    endian = detect_endian(data)
    out, s = Reference(), _State()
    pos, rec = 0, 0
    while pos + 4 <= len(data):
        ln, typ, sub = struct.unpack_from(endian + "HBB", data, pos)
        if pos + 4 + ln > len(data):
            break
        why = _damage(data, pos, ln, typ, sub, rec, endian, s, max_depth)
        if why:
            out.damage = why
            break
        _record(out, s, RECORDS.get((typ, sub)), data[pos + 4:pos + 4 + ln], rec, endian)
        pos += 4 + ln
        rec += 1
    if out.damage is None and pos < len(data):
        out.damage = (f"file ends inside a record: {len(data) - pos} bytes after the last "
                      f"complete record at byte {pos}")
    out.records = rec
    _finish(out, s)
    return out


def _damage(data: bytes, pos: int, ln: int, typ: int, sub: int, rec: int, endian: str,
            s: _State, max_depth: int) -> str | None:
    if typ not in VALID_TYP:
        return (f"record boundaries lost: REC_TYP {typ} is not an STDF V4 record type, "
                f"at byte {pos}")
    where = f"at record {rec}, byte {pos}): decoding stopped there"
    if (typ, sub) == (20, 10) and len(s.stack) >= max_depth:
        return f"program sections nested deeper than {max_depth} (BPS {where}"
    if (typ, sub) == (50, 10):
        try:
            decode_record(RECORDS[(50, 10)], data[pos + 4:pos + 4 + ln], endian)
        except FormatError as e:
            return f"{e} (GDR {where}"
    return None


def _record(out: Reference, s: _State, r: Record | None, p: bytes, rec: int,
            endian: str) -> None:
    if r is None:
        out.counts["unknown"] += 1
        return
    out.counts[r.name] += 1
    if r.name in ("PIR", "PRR"):
        hs = (p[0], p[1]) if len(p) >= 2 else (0, 0)
        if r.name == "PIR":
            _open_part(s, hs, rec)
            return
        pk = _close_part(out, s, hs)
        row = {"rec_index": rec, "part_key": pk, "part_index": s.part_index[pk],
               "touchdown": s.part_td[pk], "pir_rec_index": s.part_pir[pk]}
        out.tables.setdefault("parts", []).append(row | _fields(r, p, endian))
    elif r.name == "BPS":
        n = p[0] if p else 0
        s.sections.append({"section_id": len(s.sections),
                           "name": p[1:1 + min(n, len(p) - 1)].decode("latin-1"),
                           "parent_id": s.stack[-1] if s.stack else None,
                           "depth": len(s.stack), "touchdown": max(s.touchdown, 0),
                           "begin_rec": rec, "end_rec": None})
        s.stack.append(len(s.sections) - 1)
    elif r.name == "EPS":
        if not s.stack:
            out.counts["eps_without_bps"] += 1
        else:
            s.sections[s.stack.pop()]["end_rec"] = rec
    else:
        _other(out, s, r, p, rec, endian)


def _other(out: Reference, s: _State, r: Record, p: bytes, rec: int, endian: str) -> None:
    fields = _fields(r, p, endian)
    section = s.stack[-1] if s.stack else None
    if r.name in RESULTS:
        hs = (fields["head_num"] or 0, fields["site_num"] or 0)
        row = {"rec_index": rec, "part_key": s.open.get(hs, -1), "section_id": section}
        row |= fields
        if r.name in DEFAULTED:
            _defaults(s, r.name, row)
        s.pending.append((r.name.lower(), row))
        return
    row = {"rec_index": rec}
    if r.name in ("DTR", "GDR"):
        row |= {"touchdown": s.touchdown if s.touchdown >= 0 else None, "section_id": section}
    out.tables.setdefault(r.name.lower(), []).append(row | fields)


def _fields(r: Record, p: bytes, endian: str) -> Row:
    d = decode_record(r, p, endian)
    if "GEN_DATA" in d:  # V*n items as "TYPE:repr" text, as the decoder keeps them
        d["GEN_DATA"] = [f"{t}:{'' if v is None else v!r}" for t, v in d["GEN_DATA"]]
    return {f.name.lower(): d.get(f.name) for f in r.fields}


def _open_part(s: _State, hs: tuple[int, int], rec: int) -> None:
    if hs in s.open:  # the earlier part on this site never got its PRR
        s.abandoned += 1
        del s.open[hs]
    if s.open:
        s.overlapped = True
    elif s.touchdown < 0 or s.overlapped or hs in s.td_sites:
        s.touchdown, s.td_sites, s.overlapped = s.touchdown + 1, set(), False
    s.td_sites.add(hs)
    s.open[hs] = len(s.part_td)
    s.part_td.append(s.touchdown)
    s.part_pir.append(rec)
    s.part_index.append(-1)


def _close_part(out: Reference, s: _State, hs: tuple[int, int]) -> int:
    pk = s.open.pop(hs, None)
    if pk is None:  # a PRR with no PIR: a part of its own, in the current touchdown
        pk = len(s.part_td)
        s.part_td.append(max(s.touchdown, 0))
        s.part_pir.append(-1)
        s.part_index.append(-1)
        out.counts["prr_without_pir"] += 1
    s.part_index[pk] = s.next_index
    s.next_index += 1
    return pk


def _defaults(s: _State, name: str, row: Row) -> None:
    """STDF V4, PTR 15/10 and MPR 15/15 default data, per records.py's rules."""
    if row["test_num"] is None:
        return  # no test number, no default data
    cols = [f.lower() for f in DEFAULTED[name]]
    bits = {k.lower(): b for k, b in DEFAULT_BITS[name].items()}
    opt = row["opt_flag"] or 0

    def invalid(c: str) -> bool:
        return c in bits and (opt >> bits[c]) & 1 == 1

    first = s.defaults.get((name, row["test_num"]))
    if first is None:
        first = {"opt_flag": row["opt_flag"]}
        first |= {c: None if invalid(c) else row[c] for c in cols}
        s.defaults[(name, row["test_num"])] = first
    eff = row["opt_flag"] if row["opt_flag"] is not None else (first["opt_flag"] or 0)
    for c in cols:
        v = row[c]
        if v is None or invalid(c) or v == "":  # "" only for text: a C*n of length 0
            v = first[c]
        bit = NO_LIMIT_BITS.get(c.upper())
        if bit is not None and (eff >> bit) & 1:
            v = None
        row[c] = v


def _finish(out: Reference, s: _State) -> None:
    for table, row in s.pending:
        pk = row["part_key"]
        index = s.part_index[pk] if pk >= 0 else None
        if index is not None and index < 0:  # its part never finished
            out.dropped[table] += 1
            out.dropped_results += 1
            continue
        ordered = {"rec_index": row.pop("rec_index"), "part_index": index}
        out.tables.setdefault(table, []).append(ordered | row)
    if s.sections:
        out.tables["sections"] = s.sections
    out.unfinished_parts = len(s.open) + s.abandoned
