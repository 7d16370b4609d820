"""Record-boundary scan: the C helper when it was built, else its pure-Python twin.

Both return numpy arrays (header offsets, REC_LENs, REC_TYPs, REC_SUBs) of every complete
record from ``start``, and the offset where the first incomplete record begins.
"""

from __future__ import annotations

import struct

import numpy as np

from .compiled import EXT as _c  # None when not built: slower, same answers

Scan = tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, int]


def scan(buf: bytes | bytearray | memoryview, start: int = 0, big_endian: bool = False) -> Scan:
    if _c is not None:
        offs, lens, typ, sub, end = _c.scan(buf, start, int(big_endian))
        return (np.frombuffer(offs, np.int64), np.frombuffer(lens, np.uint16).astype(np.int64),
                np.frombuffer(typ, np.uint8), np.frombuffer(sub, np.uint8), end)
    return scan_python(buf, start, big_endian)


def scan_python(buf: bytes | bytearray | memoryview, start: int = 0,
                big_endian: bool = False) -> Scan:
    fmt = ">HBB" if big_endian else "<HBB"
    n, pos = len(buf), start
    offs, lens, typs, subs = [], [], [], []
    while pos + 4 <= n:
        ln, t, s = struct.unpack_from(fmt, buf, pos)
        if pos + 4 + ln > n:
            break
        offs.append(pos)
        lens.append(ln)
        typs.append(t)
        subs.append(s)
        pos += 4 + ln
    return (np.array(offs, np.int64), np.array(lens, np.int64), np.array(typs, np.uint8),
            np.array(subs, np.uint8), pos)
