"""Per-record STDF V4 encoder and reference decoder, driven by the catalogue.

The encoder writes every record in the catalogue (fixtures, sample logs, benchmarks).
The reference decoder turns one record's payload into a dict; the ingest path uses the
batch engines instead and falls back to this one only for the few records whose layout
cannot be decoded column-wise (GDR's V*n fields, PLR's arrays of strings). The stream
reference (``reference.py``, for the tests) is built on it.

Strings are decoded as Latin-1: STDF text is ASCII in practice, and Latin-1 maps every
byte to one character, so no log can fail to decode and nothing is lost.
"""

from __future__ import annotations

import struct
from collections.abc import Mapping, Sequence
from typing import Any

from ...errors import FormatError
from .records import BY_NAME, FIXED_SIZE, RECORDS, VN_TYPES, Field, Record

_STRUCT = {"U1": "B", "U2": "H", "U4": "I", "I1": "b", "I2": "h", "I4": "i", "R4": "f",
           "R8": "d", "B1": "B"}
_VN_CODE = {v: k for k, v in VN_TYPES.items()}


def _zero(f: Field) -> Any:
    if f.is_array:
        return []
    if f.type in ("Cn", "C1"):
        return "" if f.type == "Cn" else " "
    if f.type in ("Bn", "Dn"):
        return b""
    if f.type in ("R4", "R8"):
        return 0.0
    return 0


def _enc_scalar(t: str, v: Any, e: str) -> bytes:
    if t in _STRUCT:
        return struct.pack(e + _STRUCT[t], v)
    if t == "C1":
        return (v or " ").encode("latin-1")[:1]
    if t == "Cn":
        raw = (v or "").encode("latin-1")
        if len(raw) > 255:
            raise ValueError(f"C*n field longer than 255 bytes ({len(raw)})")
        return bytes([len(raw)]) + raw
    if t == "Bn":
        raw = bytes(v or b"")
        return bytes([len(raw)]) + raw
    if t == "Dn":
        raw = bytes(v or b"")
        return struct.pack(e + "H", 8 * len(raw)) + raw
    if t == "N1":
        return bytes([int(v) & 0x0F])
    raise ValueError(f"cannot encode type {t}")


def _enc_vn(items: Sequence[tuple[str, Any]], e: str) -> bytes:
    out = bytearray()
    for t, v in items:
        out.append(_VN_CODE[t])
        if t != "B0":
            out += _enc_scalar(t, v, e)
    return bytes(out)


def _enc_array(f: Field, vals: Sequence[Any], e: str) -> bytes:
    if f.type == "N1":
        packed = bytearray((len(vals) + 1) // 2)
        for i, v in enumerate(vals):
            packed[i // 2] |= (int(v) & 0x0F) << (4 * (i % 2))
        return bytes(packed)
    if f.type == "Vn":
        return _enc_vn(vals, e)
    return b"".join(_enc_scalar(f.type, v, e) for v in vals)


def encode_record(rec: Record | str, values: Mapping[str, Any] | None = None,
                  endian: str = "<") -> bytes:
    """One record with its header. Fields after the last one given are omitted (the
    standard's trailing-field rule); fields before it that are not given are written as
    zero or empty. Array counts are filled from the arrays when not given."""
    rec = BY_NAME[rec] if isinstance(rec, str) else rec
    values = dict(values or {})
    for f in rec.fields:
        if f.count is not None and f.name in values and values.get(f.count) is None:
            values[f.count] = len(values[f.name])
    given = [i for i, f in enumerate(rec.fields) if values.get(f.name) is not None]
    last = max(given) if given else -1
    body = bytearray()
    for f in rec.fields[: last + 1]:
        v = values.get(f.name)
        if v is None:
            v = _zero(f)
            if f.is_array:
                v = [_zero(Field(f.name, f.type))] * int(values.get(f.count or "") or 0)
        body += _enc_array(f, v, endian) if f.is_array else _enc_scalar(f.type, v, endian)
    if len(body) > 0xFFFF:
        raise ValueError(f"{rec.name} body of {len(body)} bytes exceeds REC_LEN")
    return struct.pack(endian + "HBB", len(body), rec.typ, rec.sub) + bytes(body)


class _Reader:
    """Cursor over one payload; every read checks REC_LEN and reports a short field."""

    def __init__(self, data: bytes, endian: str):
        self.data, self.pos, self.e = data, 0, endian

    def left(self) -> int:
        return len(self.data) - self.pos

    def take(self, n: int) -> bytes:
        if self.pos + n > len(self.data):
            raise _Short
        out = self.data[self.pos:self.pos + n]
        self.pos += n
        return out

    def scalar(self, t: str) -> Any:
        if t in _STRUCT:
            (v,) = struct.unpack(self.e + _STRUCT[t], self.take(FIXED_SIZE[t]))
            return v
        if t == "C1":
            return self.take(1).decode("latin-1")
        if t == "Cn":
            return self.take(self.take(1)[0]).decode("latin-1")
        if t == "Bn":
            return self.take(self.take(1)[0])
        if t == "Dn":
            (bits,) = struct.unpack(self.e + "H", self.take(2))
            return self.take((bits + 7) // 8)
        if t == "N1":
            return self.take(1)[0] & 0x0F
        raise FormatError(f"unknown field type {t}")

    def vn(self) -> tuple[str, Any]:
        code = self.take(1)[0]
        t = VN_TYPES.get(code)
        if t is None:
            raise FormatError(f"GDR field type code {code} is not defined by STDF V4")
        return (t, None) if t == "B0" else (t, self.scalar(t))


class _Short(Exception):
    """A field that REC_LEN cuts off: it and every later field take 'missing'."""


def decode_record(rec: Record, payload: bytes, endian: str = "<") -> dict[str, Any]:
    """Fields present in ``payload``; omitted trailing fields are absent from the dict."""
    r = _Reader(payload, endian)
    out: dict[str, Any] = {}
    for f in rec.fields:
        try:
            if not f.is_array:
                out[f.name] = r.scalar(f.type)
                continue
            k = int(out.get(f.count or "") or 0)
            if f.type == "N1":
                raw = r.take((k + 1) // 2)
                out[f.name] = [(raw[i // 2] >> (4 * (i % 2))) & 0x0F for i in range(k)]
            elif f.type == "Vn":
                out[f.name] = [r.vn() for _ in range(k)]
            else:
                out[f.name] = [r.scalar(f.type) for _ in range(k)]
        except _Short:
            break
    return out


def iter_records(data: bytes) -> list[tuple[Record | None, int, int, bytes]]:
    """Reference walk over a whole uncompressed stream: (record, typ, sub, payload).
    Slow and simple; tests and the benchmark baseline use it."""
    endian = detect_endian(data)
    out = []
    pos = 0
    fmt = endian + "HBB"
    while pos + 4 <= len(data):
        ln, typ, sub = struct.unpack_from(fmt, data, pos)
        if pos + 4 + ln > len(data):
            break
        out.append((RECORDS.get((typ, sub)), typ, sub, data[pos + 4:pos + 4 + ln]))
        pos += 4 + ln
    return out


def detect_endian(head: bytes) -> str:
    """Byte order from the FAR's REC_LEN (always 2): ``02 00`` little, ``00 02`` big
    (STDF V4, FAR 0/10). Raises FormatError when the stream does not start with a FAR."""
    if len(head) < 6:
        raise FormatError("too short to hold a FAR record (needs 6 bytes)")
    if head[2:4] != b"\x00\x0a":
        raise FormatError("not STDF: the first record is not a FAR (REC_TYP 0, REC_SUB 10)")
    if head[0:2] == b"\x02\x00":
        endian = "<"
    elif head[0:2] == b"\x00\x02":
        endian = ">"
    else:
        raise FormatError("not STDF: FAR REC_LEN is not 2")
    cpu, ver = head[4], head[5]
    if cpu == 0:
        raise FormatError("FAR.CPU_TYPE 0 (DEC VAX/PDP-11 floats) is not supported")
    if cpu not in (1, 2):
        raise FormatError(f"FAR.CPU_TYPE {cpu} is not defined by STDF V4 (1 or 2)")
    if ver != 4:
        raise FormatError(f"FAR.STDF_VER is {ver}; only STDF V4 is supported")
    return endian
