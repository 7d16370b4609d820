"""The per-record codec against the standard's byte layouts (pipeline/read/stdf/codec.py).

The vectors in ``stdf_vectors.py`` are written by hand from the *STDF V4* record tables;
each is checked both ways: our encoder must produce exactly those bytes, and the
reference decoder must read them back into exactly those values. Property tests then
round-trip random values through every record in the catalogue, in both byte orders.
"""

from __future__ import annotations

import struct
from typing import Any

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from pipeline.errors import FormatError
from pipeline.read.stdf.codec import decode_record, detect_endian, encode_record, iter_records
from pipeline.read.stdf.records import BY_NAME, RECORDS, VN_TYPES, Record

from .stdf_vectors import UNKNOWN, VECTORS, Unknown, Vector, by_id, stream


def _header(data: bytes, endian: str) -> tuple[int, int, int]:
    rec_len, typ, sub = struct.unpack(endian + "HBB", data[:4])
    return rec_len, typ, sub


# --- the hand-written vectors ------------------------------------------------------------

@pytest.mark.parametrize("vec", VECTORS + UNKNOWN, ids=lambda v: v.id)
def test_vector_rec_len_counts_the_data(vec: Vector | Unknown) -> None:
    # A check on the hand arithmetic: REC_LEN is the number of bytes after the header.
    rec_len, _, _ = _header(vec.expected, vec.endian)
    assert rec_len == len(vec.expected) - 4


def test_vectors_cover_every_record_in_both_byte_orders() -> None:
    covered = {(v.record, v.endian) for v in VECTORS}
    missing = {(name, e) for name in BY_NAME for e in "<>"} - covered
    assert not missing


@pytest.mark.parametrize("vec", VECTORS, ids=lambda v: v.id)
def test_encode_matches_standard_bytes(vec: Vector) -> None:
    assert encode_record(vec.record, vec.values, vec.endian) == vec.expected


@pytest.mark.parametrize("vec", VECTORS, ids=lambda v: v.id)
def test_decode_standard_bytes(vec: Vector) -> None:
    _, typ, sub = _header(vec.expected, vec.endian)
    rec = RECORDS[(typ, sub)]
    assert rec.name == vec.record
    # Truncated vectors list only the kept fields: the omitted ones must be absent.
    assert decode_record(rec, vec.expected[4:], vec.endian) == vec.values


@pytest.mark.parametrize("vec", VECTORS, ids=lambda v: v.id)
def test_decode_every_cut_keeps_the_complete_prefix(vec: Vector) -> None:
    # REC_LEN cut at any byte: the fields wholly before the cut come back unchanged,
    # the rest are absent; nothing raises and nothing is read past the end.
    rec = BY_NAME[vec.record]
    payload = vec.expected[4:]
    order = [f.name for f in rec.fields if f.name in vec.values]
    for n in range(len(payload)):
        got = decode_record(rec, payload[:n], vec.endian)
        assert list(got) == order[:len(got)], n
        assert len(got) < len(order), n
        assert all(got[k] == vec.values[k] for k in got), n


def test_swapped_twin_matches_the_literal_big_endian_bytes() -> None:
    # The big-endian twins are built by reversing multi-byte rows; two records are also
    # spelled out in big-endian by hand, and the two spellings must agree.
    assert by_id("PTR-full-be").expected == by_id("PTR-full-be-literal").expected
    assert by_id("MPR-full-be").expected == by_id("MPR-full-be-literal").expected


@pytest.mark.parametrize("vec", UNKNOWN, ids=lambda v: v.id)
def test_unknown_vectors_are_not_in_the_catalogue(vec: Unknown) -> None:
    _, typ, sub = _header(vec.expected, vec.endian)
    assert (typ, sub) == (vec.typ, vec.sub)
    assert (typ, sub) not in RECORDS


# --- byte order from the FAR (STDF V4, FAR 0/10) -------------------------------------------

@pytest.mark.parametrize(("head", "endian"), [
    (bytes.fromhex("0200000a0204"), "<"),  # REC_LEN 02 00, CPU_TYPE 2, STDF_VER 4
    (bytes.fromhex("0002000a0104"), ">"),  # REC_LEN 00 02, CPU_TYPE 1, STDF_VER 4
])
def test_detect_endian(head: bytes, endian: str) -> None:
    assert detect_endian(head) == endian
    assert detect_endian(head + by_id(f"PIR-{'le' if endian == '<' else 'be'}").expected) \
        == endian


@pytest.mark.parametrize(("head", "match"), [
    (bytes.fromhex("0200000a0004"), "VAX"),          # CPU_TYPE 0: DEC VAX floats
    (bytes.fromhex("0200000a0304"), "CPU_TYPE"),     # CPU_TYPE 3: not defined
    (bytes.fromhex("0200000a0203"), "STDF_VER"),     # STDF V3
    (bytes.fromhex("0200050a0103"), "FAR"),          # a PIR (5/10) first: not a FAR
    (bytes.fromhex("0300000a020400"), "REC_LEN"),    # FAR with REC_LEN 3
    (bytes.fromhex("0200000a02"), "short"),          # 5 bytes: CPU_TYPE only
    (b"", "short"),
])
def test_detect_endian_refuses(head: bytes, match: str) -> None:
    with pytest.raises(FormatError, match=match):
        detect_endian(head)


# --- iter_records over a small stream -----------------------------------------------------

@pytest.mark.parametrize("endian", ["<", ">"])
@pytest.mark.parametrize("cut", [1, 2, 3, 4, 5, -1], ids=lambda c: f"cut{c}")
def test_iter_records_skips_unknown_and_stops_before_a_cut_record(endian: str,
                                                                   cut: int) -> None:
    sfx = "le" if endian == "<" else "be"
    parts = [by_id(f"PIR-{sfx}"), by_id(f"PTR-full-{sfx}"),
             next(u for u in UNKNOWN if u.id == f"VUR-{sfx}"), by_id(f"PRR-{sfx}")]
    last = by_id(f"MPR-full-{sfx}").expected
    data = stream(endian, *(p.expected for p in parts), last[:cut])
    got = iter_records(data)
    assert [(r.name if r else None, typ, sub) for r, typ, sub, _ in got] == [
        ("FAR", 0, 10), ("PIR", 5, 10), ("PTR", 15, 10), (None, 0, 30), ("PRR", 5, 20)]
    assert [payload for *_, payload in got] == [
        (bytes.fromhex("0204") if endian == "<" else bytes.fromhex("0104")),
        *(p.expected[4:] for p in parts)]
    for (rec, _, _, payload), part in zip(got[1:], parts, strict=True):
        if isinstance(part, Vector):
            assert rec is not None
            assert decode_record(rec, payload, endian) == part.values


def test_iter_records_refuses_a_stream_without_far() -> None:
    with pytest.raises(FormatError):
        iter_records(by_id("PIR-le").expected * 3)


# --- property round-trips over the whole catalogue -----------------------------------------

_LATIN1 = st.characters(min_codepoint=0, max_codepoint=255)
_SCALARS: dict[str, st.SearchStrategy[Any]] = {
    "U1": st.integers(0, 2**8 - 1), "U2": st.integers(0, 2**16 - 1),
    "U4": st.integers(0, 2**32 - 1),
    "I1": st.integers(-(2**7), 2**7 - 1), "I2": st.integers(-(2**15), 2**15 - 1),
    "I4": st.integers(-(2**31), 2**31 - 1),
    "R4": st.floats(width=32, allow_nan=False), "R8": st.floats(allow_nan=False),
    "B1": st.integers(0, 255), "C1": _LATIN1,
    "Cn": st.text(alphabet=_LATIN1, max_size=255),
    "Bn": st.binary(max_size=255), "Dn": st.binary(max_size=64),
    "N1": st.integers(0, 15),
}
_VN_ITEM = st.one_of(st.just(("B0", None)), *(
    st.tuples(st.just(t), _SCALARS[t]) for t in VN_TYPES.values() if t != "B0"))


@st.composite
def _record_values(draw: st.DrawFn, rec: Record) -> dict[str, Any]:
    counts = {f.count for f in rec.fields if f.count}
    values: dict[str, Any] = {}
    for f in rec.fields:
        if f.is_array:
            k = values[f.count]
            item = _VN_ITEM if f.type == "Vn" else _SCALARS[f.type]
            values[f.name] = draw(st.lists(item, min_size=k, max_size=k))
        elif f.name in counts:
            values[f.name] = draw(st.integers(0, 7))  # odd and even, for N*1 packing
        else:
            values[f.name] = draw(_SCALARS[f.type])
    return values


def _readable(rec: Record, kept: dict[str, Any]) -> dict[str, Any]:
    """What a reader finds in the bytes of ``kept``: those fields, plus any zero-count
    arrays right after them (zero bytes wide, they cannot be told from absent)."""
    out = dict(kept)
    for f in rec.fields[len(kept):]:
        if not (f.is_array and out.get(f.count) == 0):
            break
        out[f.name] = []
    return out


def test_count_fields_come_before_their_arrays() -> None:
    # _record_values and truncation by prefix both rely on this.
    for rec in RECORDS.values():
        names = [f.name for f in rec.fields]
        for i, f in enumerate(rec.fields):
            if f.count:
                assert f.count in names[:i], (rec.name, f.name)


@pytest.mark.parametrize("name", sorted(BY_NAME))
@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(data=st.data())
def test_round_trip_every_record(name: str, data: st.DataObject) -> None:
    rec = BY_NAME[name]
    values = data.draw(_record_values(rec), label="values")
    keep = data.draw(st.integers(0, len(rec.fields)), label="keep")
    kept = {f.name: values[f.name] for f in rec.fields[:keep]}
    for endian in "<>":
        raw = encode_record(rec, values, endian)
        rec_len, typ, sub = _header(raw, endian)
        assert (rec_len, typ, sub) == (len(raw) - 4, rec.typ, rec.sub)
        assert decode_record(rec, raw[4:], endian) == values

        short = encode_record(rec, kept, endian)
        assert raw.startswith(short[4:], 4)
        assert decode_record(rec, short[4:], endian) == _readable(rec, kept)
