"""Column-wise field decoding: all records of one type in a batch at once.

Given the payload offsets and REC_LENs of every record of one type, the fields are read in
layout order with one numpy operation per field over all records: a position array moves
through the payloads, and a field is present in a record only while the record's REC_LEN
covers it (STDF V4: omitted trailing fields take their missing meaning; a reader never
reads past REC_LEN). Missing fields come out as nulls.

No Python object is made per record. The two layouts that cannot be read this way (GDR's
V*n fields and PLR's arrays of strings) go to the reference decoder in ``codec.py``.
When the compiled module is built, ``decode_columns`` runs its C twin instead (the same
columns; the tests compare the two), and ``layout``/``arrow_column`` are the bridge the
compiled batch engine (``native.py``) uses too.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pyarrow as pa

from .codec import decode_record
from .compiled import EXT as _c  # None when not built: the numpy path is used
from .records import (
    DEFAULT_BITS,
    DEFAULTED,
    FIXED_SIZE,
    NO_LIMIT_BITS,
    NUMPY_CODE,
    RECORDS,
    VARIABLE,
    Field,
    Record,
)

_ARROW = {"U1": pa.uint8(), "U2": pa.uint16(), "U4": pa.uint32(), "I1": pa.int8(),
          "I2": pa.int16(), "I4": pa.int32(), "R4": pa.float32(), "R8": pa.float64(),
          "B1": pa.uint8(), "N1": pa.uint8()}


def _widest_run() -> int:
    widest = 0
    for rec in RECORDS.values():
        run = 0
        for f in rec.fields:
            if f.is_array or f.type in VARIABLE:
                run = 0
            else:
                run += 1 if f.type == "N1" else FIXED_SIZE[f.type]
                widest = max(widest, run)
    return widest


# Callers pad the buffer with this many bytes so that a window of fixed fields starting
# anywhere in the data never runs off the end (see _Cursor.rows).
RUN_PAD = _widest_run()

# Field kinds of the compiled decoder (_stdf.h): fixed, C*1, C*n, B*n, D*n, array, N*1 array.
_KIND = {"C1": 2, "Cn": 3, "Bn": 4, "Dn": 5}
_F_DEFAULT, _F_EMPTY, _F_DICT, _NO_BIT = 1, 2, 4, 255


def layout(rec: Record, default_data: bool = False) -> bytes:
    """The compiled decoder's layout of `rec`: 6 bytes per field (kind, size, index of the
    count field, flags, OPT_FLAG bit that makes it invalid, OPT_FLAG bit that says there is
    no such limit). ``default_data``: with the default-data rules of records.py."""
    names = [f.name for f in rec.fields]
    defaulted = DEFAULTED.get(rec.name, ()) if default_data else ()
    bits = DEFAULT_BITS.get(rec.name, {})
    out = bytearray()
    for f in rec.fields:
        ci = names.index(f.count) if f.count else 255
        if f.is_array:
            head = [7 if f.type == "N1" else 6, _size(f), ci]
        elif f.type in _KIND:
            head = [_KIND[f.type], 1 if f.type == "C1" else 0, 255]
        else:
            head = [1, _size(f), 255]
        flags, inv, none = 0, _NO_BIT, _NO_BIT
        if f.name in defaulted:
            flags = _F_DEFAULT | (_F_EMPTY | _F_DICT if f.type == "Cn" else 0)
            inv = bits.get(f.name, _NO_BIT)
            none = NO_LIMIT_BITS.get(f.name, _NO_BIT)
        out += bytes([*head, flags, inv, none])
    return bytes(out)


_LAYOUTS: dict[tuple[int, int], bytes] = {}


def arrow_column(f: Field, got: tuple, n: int, dictionary: pa.Array | None = None) -> pa.Array:
    """One column of the compiled decoder (its tuple, _columns.c col_finish) as Arrow."""
    tag, valid = got[0], got[1]
    mask = None if valid is None else pa.py_buffer(valid)
    if tag == 0:  # fixed-size values, native order
        raw = got[2]
        if f.type == "N1":
            raw = np.frombuffer(raw, np.uint8) & 0x0F
        return pa.Array.from_buffers(_ARROW[f.type], n, [mask, pa.py_buffer(raw)])
    if tag == 1:  # text (UTF-8 already) or bytes
        typ = pa.large_string() if f.type in ("Cn", "C1") else pa.large_binary()
        return pa.Array.from_buffers(typ, n, [mask, pa.py_buffer(got[2]), pa.py_buffer(got[3])])
    if tag == 2:  # dictionary indices
        assert dictionary is not None
        indices = pa.Array.from_buffers(pa.int32(), n, [mask, pa.py_buffer(got[2])])
        return pa.DictionaryArray.from_arrays(indices, dictionary)
    offsets = pa.py_buffer(got[2])
    items = int(np.frombuffer(got[2], np.int64)[-1]) if n else 0
    values = pa.Array.from_buffers(_ARROW[f.type], items, [None, pa.py_buffer(got[3])])
    return pa.Array.from_buffers(pa.large_list(_ARROW[f.type]), n, [mask, offsets],
                                 children=[values])


def _decode_c(rec: Record, buf: np.ndarray, offs: np.ndarray, lens: np.ndarray,
              endian: str) -> dict[str, pa.Array]:
    lay = _LAYOUTS.get(rec.key)
    if lay is None:
        lay = _LAYOUTS[rec.key] = layout(rec)
    parts = _c.decode(buf, np.ascontiguousarray(offs, np.int64),  # type: ignore[union-attr]
                      np.ascontiguousarray(lens, np.int64), lay, int(endian == ">"))
    return {f.name.lower(): arrow_column(f, got, len(offs))
            for f, got in zip(rec.fields, parts, strict=True)}


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

    def rows(self, start: np.ndarray, width: int) -> np.ndarray:
        """An (n, width) copy of the bytes at each start (absent ones read junk)."""
        if width == 1:
            return self.buf[np.minimum(start, self.last)][:, None]
        if len(self.buf) < width:
            return np.zeros((len(start), width), np.uint8)
        windows = np.lib.stride_tricks.sliding_window_view(self.buf, width)
        return windows[np.minimum(start, len(self.buf) - width)]

    def values(self, block: np.ndarray, code: str) -> np.ndarray:
        """Native-endian values from an (n, size) byte block."""
        if block.shape[1] == 1:
            raw = np.ascontiguousarray(block[:, 0])
            return raw.view(np.dtype(code)) if code != "u1" else raw
        vals = np.ascontiguousarray(block).view(np.dtype(self.endian + code))[:, 0]
        # Arrow buffers are native-endian: swap a big-endian file's values once here.
        return vals if vals.dtype.isnative else vals.astype(vals.dtype.newbyteorder("="))

    def gather(self, start: np.ndarray, size: int, code: str) -> np.ndarray:
        return self.values(self.rows(start, size), code)

    def bytes_at(self, start: np.ndarray, lengths: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Concatenated bytes of variable-length fields, and their Arrow offsets."""
        offsets = np.zeros(len(lengths) + 1, dtype=np.int64)
        np.cumsum(lengths, out=offsets[1:])
        total = int(offsets[-1])
        if total == 0:
            return np.zeros(0, np.uint8), offsets
        idx = np.repeat(start - offsets[:-1], lengths) + np.arange(total)
        return self.buf[idx], offsets


def _size(f: Field) -> int:
    return 1 if f.type == "N1" else FIXED_SIZE[f.type]


def _run(cur: _Cursor, fields: list[Field]) -> dict[str, pa.Array]:
    """Consecutive fixed-size scalar fields, read as one (n, width) byte block."""
    width = sum(_size(f) for f in fields)
    block = cur.rows(cur.pos, width)
    start = cur.pos
    out: dict[str, pa.Array] = {}
    off = 0
    for f in fields:
        size = _size(f)
        cur.pos = start + off
        ok = cur.fits(size)
        part = block[:, off:off + size]
        off += size
        if f.type == "C1":
            data = np.ascontiguousarray(part[:, 0])
            out[f.name] = _strings(data, np.arange(len(ok) + 1, dtype=np.int64), ok)
            continue
        vals = cur.values(part, NUMPY_CODE[f.type])
        if f.type == "N1":
            vals = vals & 0x0F
        out[f.name] = pa.Array.from_buffers(
            _ARROW[f.type], len(vals), [_mask(ok), pa.py_buffer(np.ascontiguousarray(vals))])
    cur.pos = start + width
    return out


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
                   endian: str, numpy_only: bool = False) -> dict[str, pa.Array]:
    """Every field of `rec` for the records whose payloads start at `offs`: by the C
    helper when it was built, else column by column in numpy (``numpy_only`` forces
    that path; tests compare the two)."""
    if needs_reference(rec):
        return reference_columns(rec, buf, offs, lens, endian)
    if _c is not None and not numpy_only:
        return _decode_c(rec, buf, offs, lens, endian)
    if len(offs) and len(buf) < int((offs + lens).max()) + RUN_PAD:
        buf = np.concatenate([buf, np.zeros(RUN_PAD, np.uint8)])  # callers normally pad
    cur = _Cursor(buf, offs, lens, endian)
    cols: dict[str, pa.Array] = {}
    counts: dict[str, np.ndarray] = {}
    counted = {f.count for f in rec.fields if f.count}
    fields = list(rec.fields)
    i = 0
    while i < len(fields):
        f = fields[i]
        if f.is_array:
            cols[f.name] = _array(cur, f, counts[f.count])  # type: ignore[index]
            i += 1
        elif f.type in ("Cn", "Bn", "Dn"):
            cols[f.name] = _varlen(cur, f)
            i += 1
        else:
            j = i
            while j < len(fields) and not fields[j].is_array and fields[j].type not in VARIABLE:
                j += 1
            cols.update(_run(cur, fields[i:j]))
            i = j
        for name in counted & cols.keys() - counts.keys():
            counts[name] = cols[name].fill_null(0).to_numpy(zero_copy_only=False)
    return {name.lower(): col for name, col in cols.items()}


def reference_columns(rec: Record, buf: np.ndarray, offs: np.ndarray, lens: np.ndarray,
                       endian: str) -> dict[str, pa.Array]:
    """The columns of one record type decoded by the reference decoder, record by record
    (the layouts the column decoder does not read)."""
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
