"""Column-wise field decoding: all records of one type in a batch at once.

Given the payload offsets and REC_LENs of every record of one type, the fields are read in
layout order with one numpy operation per field over all records: a position array moves
through the payloads, and a field is present in a record only while the record's REC_LEN
covers it (STDF V4: omitted trailing fields take their missing meaning; a reader never
reads past REC_LEN). Missing fields come out as nulls.

No Python object is made per record. The two layouts that cannot be read this way (GDR's
V*n fields and PLR's arrays of strings) go to the reference decoder in ``codec.py``.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pyarrow as pa

from .codec import decode_record
from .records import FIXED_SIZE, NUMPY_CODE, Field, Record

_ARROW = {"U1": pa.uint8(), "U2": pa.uint16(), "U4": pa.uint32(), "I1": pa.int8(),
          "I2": pa.int16(), "I4": pa.int32(), "R4": pa.float32(), "R8": pa.float64(),
          "B1": pa.uint8(), "N1": pa.uint8()}


def needs_reference(rec: Record) -> bool:
    return any(f.type == "Vn" or (f.is_array and f.type == "Cn") for f in rec.fields)


def _mask(valid: np.ndarray) -> pa.Buffer | None:
    if valid.all():
        return None
    return pa.py_buffer(np.packbits(valid, bitorder="little"))


class _Cursor:
    """Positions of the next field in every record, and which records have ended."""

    def __init__(self, buf: np.ndarray, offs: np.ndarray, lens: np.ndarray, endian: str):
        self.buf, self.endian = buf, endian
        self.pos = offs.astype(np.int64, copy=True)
        self.end = offs.astype(np.int64) + lens.astype(np.int64)
        self.alive = np.ones(len(offs), dtype=bool)
        self.last = len(buf) - 1

    def fits(self, nbytes: np.ndarray | int) -> np.ndarray:
        ok = self.alive & (self.pos + nbytes <= self.end)
        self.alive = ok
        return ok

    def gather(self, start: np.ndarray, size: int, code: str) -> np.ndarray:
        """Values of `size`-byte fields at `start` (clipped so absent ones read junk)."""
        if size == 1:
            raw = self.buf[np.minimum(start, self.last)]
            return raw.view(np.dtype(code)) if code != "u1" else raw
        idx = np.minimum(start[:, None] + np.arange(size), self.last)
        raw = np.ascontiguousarray(self.buf[idx])
        return raw.view(np.dtype(self.endian + code))[:, 0]

    def bytes_at(self, start: np.ndarray, lengths: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Concatenated bytes of variable-length fields, and their Arrow offsets."""
        offsets = np.zeros(len(lengths) + 1, dtype=np.int64)
        np.cumsum(lengths, out=offsets[1:])
        total = int(offsets[-1])
        if total == 0:
            return np.zeros(0, np.uint8), offsets
        idx = np.repeat(start - offsets[:-1], lengths) + np.arange(total)
        return self.buf[idx], offsets


def _scalar(cur: _Cursor, f: Field) -> pa.Array:
    size = FIXED_SIZE[f.type] if f.type != "N1" else 1
    ok = cur.fits(size)
    if f.type == "C1":
        data = cur.gather(cur.pos, 1, "u1")
        cur.pos += size
        return _strings(data.astype(np.uint8), np.arange(len(ok) + 1, dtype=np.int64), ok)
    vals = cur.gather(cur.pos, size, NUMPY_CODE[f.type])
    if f.type == "N1":
        vals = vals & 0x0F
    cur.pos += size
    return pa.Array.from_buffers(_ARROW[f.type], len(vals),
                                 [_mask(ok), pa.py_buffer(np.ascontiguousarray(vals))])


def _strings(data: np.ndarray, offsets: np.ndarray, valid: np.ndarray,
             binary: bool = False) -> pa.Array:
    n = len(valid)
    if binary:
        return pa.Array.from_buffers(pa.large_binary(), n, [
            _mask(valid), pa.py_buffer(offsets), pa.py_buffer(data)])
    if data.size and (data >= 0x80).any():
        # Latin-1 bytes above 0x7F become two UTF-8 bytes: rare, so done per string.
        raw = data.tobytes()
        vals = [raw[offsets[i]:offsets[i + 1]].decode("latin-1") if valid[i] else None
                for i in range(n)]
        return pa.array(vals, pa.large_string())
    return pa.Array.from_buffers(pa.large_string(), n, [
        _mask(valid), pa.py_buffer(offsets), pa.py_buffer(data)])


def _varlen(cur: _Cursor, f: Field) -> pa.Array:
    """C*n and B*n (U*1 count + bytes), D*n (U*2 bit count + ceil(n/8) bytes)."""
    head = 2 if f.type == "Dn" else 1
    ok = cur.fits(head)
    if f.type == "Dn":
        n = cur.gather(cur.pos, 2, "u2").astype(np.int64)
        n = (n + 7) // 8
    else:
        n = cur.gather(cur.pos, 1, "u1").astype(np.int64)
    n = np.where(ok, n, 0)
    cur.pos += head
    ok = cur.fits(n)
    n = np.where(ok, n, 0)
    data, offsets = cur.bytes_at(cur.pos, n)
    cur.pos += n
    return _strings(data, offsets, ok, binary=f.type != "Cn")


def _array(cur: _Cursor, f: Field, count: np.ndarray) -> pa.Array:
    """k x TYPE with k from an earlier field; N*1 packs two per byte, low nibble first."""
    k = np.where(cur.alive, count, 0).astype(np.int64)
    size = 1 if f.type == "N1" else FIXED_SIZE[f.type]
    nbytes = (k + 1) // 2 if f.type == "N1" else k * size
    ok = cur.fits(nbytes)
    k = np.where(ok, k, 0)
    offsets = np.zeros(len(k) + 1, dtype=np.int64)
    np.cumsum(k, out=offsets[1:])
    item = np.arange(int(offsets[-1])) - np.repeat(offsets[:-1], k)
    base = np.repeat(cur.pos, k)
    if f.type == "N1":
        raw = cur.gather(base + item // 2, 1, "u1")
        vals = (raw >> (4 * (item % 2)).astype(np.uint8)) & 0x0F
    else:
        vals = cur.gather(base + item * size, size, NUMPY_CODE[f.type])
    cur.pos += nbytes
    values = pa.Array.from_buffers(_ARROW[f.type], len(vals),
                                   [None, pa.py_buffer(np.ascontiguousarray(vals))])
    return pa.LargeListArray.from_arrays(pa.array(offsets, pa.int64()), values,
                                         mask=pa.array(~ok))


def decode_columns(rec: Record, buf: np.ndarray, offs: np.ndarray, lens: np.ndarray,
                   endian: str) -> dict[str, pa.Array]:
    """Every field of `rec` for the records whose payloads start at `offs`."""
    if needs_reference(rec):
        return _reference_columns(rec, buf, offs, lens, endian)
    cur = _Cursor(buf, offs, lens, endian)
    cols: dict[str, pa.Array] = {}
    counts: dict[str, np.ndarray] = {}
    for f in rec.fields:
        if f.is_array:
            col = _array(cur, f, counts[f.count])
        elif f.type in ("Cn", "Bn", "Dn"):
            col = _varlen(cur, f)
        else:
            col = _scalar(cur, f)
            if any(g.count == f.name for g in rec.fields):
                counts[f.name] = col.fill_null(0).to_numpy(zero_copy_only=False)
        cols[f.name.lower()] = col
    return cols


def _reference_columns(rec: Record, buf: np.ndarray, offs: np.ndarray, lens: np.ndarray,
                       endian: str) -> dict[str, pa.Array]:
    rows: list[dict[str, Any]] = []
    for o, n in zip(offs.tolist(), lens.tolist(), strict=True):
        d = decode_record(rec, buf[o:o + n].tobytes(), endian)
        if "GEN_DATA" in d:  # V*n: keep each value with its type code, as text
            d["GEN_DATA"] = [f"{t}:{'' if v is None else v!r}" for t, v in d["GEN_DATA"]]
        rows.append(d)
    cols: dict[str, pa.Array] = {}
    for f in rec.fields:
        vals = [r.get(f.name) for r in rows]
        if f.type == "Vn":
            cols[f.name.lower()] = pa.array(vals, pa.large_list(pa.large_string()))
        elif f.is_array and f.type == "Cn":
            cols[f.name.lower()] = pa.array(vals, pa.large_list(pa.large_string()))
        elif f.is_array:
            cols[f.name.lower()] = pa.array(vals, pa.large_list(_ARROW[f.type]))
        elif f.type in ("Cn", "C1"):
            cols[f.name.lower()] = pa.array(vals, pa.large_string())
        elif f.type in ("Bn", "Dn"):
            cols[f.name.lower()] = pa.array(vals, pa.large_binary())
        else:
            cols[f.name.lower()] = pa.array(vals, _ARROW[f.type])
    return cols
