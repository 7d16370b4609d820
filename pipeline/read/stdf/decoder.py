"""The sans-IO STDF V4 decoder: bytes in, Arrow tables out.

``Decoder.feed(data)`` takes any slice of an uncompressed stream and returns the tables
decoded so far; ``close()`` returns the rest. Memory is bounded by the batch size plus
the rows of parts still open (one touchdown), never by the file size.

Per batch: one C scan finds the record boundaries (``_scan``, with a Python twin), a
vectorised check finds the first record decoding cannot go past, and an *engine* turns
the batch into one table per record type, with context columns (part, section,
touchdown) and default data: the compiled one (``native.py``, one C pass) when the
extension was built, else the numpy one (``walk.py``); both give the same tables. Results
are held back here until their part's PRR gives them a ``part_index`` (PRR order in the
file). ``TANDEM_DECODER=numpy`` (or ``Decoder(path="numpy")``) forces the numpy path.
"""

from __future__ import annotations

import os
from collections import Counter
from dataclasses import dataclass

import numpy as np
import pyarrow as pa

from ...errors import FormatError
from . import native
from .codec import decode_record, detect_endian
from .records import BY_NAME, RECORDS, Record
from .scan import scan
from .walk import RESULT_RECORDS, NumpyEngine

# REC_TYP values the standard defines (STDF V4 "Record Types" and the 2007 addendum).
# Anything else means the stream has lost its record boundaries: stop there.
VALID_TYP = frozenset({0, 1, 2, 5, 10, 15, 20, 50, 180, 181})
_VALID_LUT = np.zeros(256, dtype=bool)
_VALID_LUT[list(VALID_TYP)] = True
STRUCTURAL = ("PIR", "PRR", "BPS", "EPS")
MAX_SECTION_DEPTH = 64
PATHS = ("c", "numpy")


def default_path() -> str:
    """The engine a Decoder uses unless told: ``TANDEM_DECODER`` (c or numpy), else the
    compiled one when it was built."""
    want = os.environ.get("TANDEM_DECODER", "").strip().lower()
    if want == "numpy" or not native.available():
        return "numpy"
    return "c"


@dataclass
class Limits:
    batch_bytes: int = 8 << 20
    max_section_depth: int = MAX_SECTION_DEPTH


class Decoder:
    """Streaming STDF V4 decoder. Raises FormatError only for a stream that is not STDF
    at all; damage part-way is recorded in ``damage`` and decoding stops there.
    ``path``: "c" or "numpy" (default: ``default_path()``); ``self.path`` is the one used."""

    def __init__(self, limits: Limits | None = None, path: str | None = None):
        self.limits = limits or Limits()
        if path is not None and path not in PATHS:
            raise ValueError(f"decoder path must be one of {PATHS}, not {path!r}")
        self.path = path or default_path()
        if self.path == "c" and not native.available():
            raise ValueError("the compiled decoder (pipeline.read.stdf._scan) is not built")
        self.endian: str | None = None
        self.counts: Counter[str] = Counter()
        self.damage: str | None = None
        self.dropped_results = 0
        self.dropped: Counter[str] = Counter()  # results of unfinished parts, by record type
        self.unfinished_parts = 0
        self._buf = bytearray()
        self._base = 0  # file offset of _buf[0]
        self._rec = 0  # records consumed so far
        self._engine: NumpyEngine | native.NativeEngine | None = None
        self._held: dict[str, list[pa.Table]] = {n: [] for n in RESULT_RECORDS}
        self._stopped = False

    # -- public ---------------------------------------------------------------------
    def feed(self, data: bytes) -> list[tuple[str, pa.Table]]:
        if self._stopped:
            return []
        need = max(self.limits.batch_bytes, 6)
        if not self._buf and len(data) >= need:
            # Nothing held over: decode straight from the caller's bytes, keep only the
            # incomplete record at the end (saves copying every batch in and out).
            with memoryview(data) as view:
                out, used = self._process(view)
                if not self._stopped:
                    self._append(view[used:])
            return out
        self._append(data)
        # At least the 6-byte FAR: the byte order is read from it, so a smaller batch
        # must wait for more data rather than call the stream too short.
        if len(self._buf) < need:
            return []
        return self._process_held()

    def close(self) -> list[tuple[str, pa.Table]]:
        out = [] if self._stopped else self._process_held()
        if self._buf and not self._stopped and self.damage is None:
            self.damage = (f"file ends inside a record: {len(self._buf)} bytes after the "
                           f"last complete record at byte {self._base}")
        for name in RESULT_RECORDS:
            held = self._held[name]
            n = sum(t.num_rows for t in held)
            self.dropped[name] += n
            self.dropped_results += n
            self._held[name] = []
        if self._engine is not None:
            _, open_parts, abandoned, _, _ = self._engine.stats()
            self.unfinished_parts = open_parts + abandoned
            sections = self._engine.sections()
            if sections is not None:
                out.append(("sections", sections))
        return out

    @property
    def records(self) -> int:
        return self._rec

    # -- batches --------------------------------------------------------------------
    def _process_held(self) -> list[tuple[str, pa.Table]]:
        with memoryview(self._buf) as view:
            out, used = self._process(view)
        self._drop(used)
        return out

    # The held bytes are resized in place, unless something still views them (a view a
    # caller keeps, an object the garbage collector has not freed yet): then a new
    # buffer takes over and the old one stays as it is for whoever still reads it.
    def _append(self, data: bytes | memoryview) -> None:
        try:
            self._buf += data
        except BufferError:
            self._buf = self._buf + data

    def _drop(self, n: int) -> None:
        try:
            del self._buf[:n]
        except BufferError:
            self._buf = self._buf[n:]

    def _process(self, buf: memoryview) -> tuple[list[tuple[str, pa.Table]], int]:
        """Decode the complete records at the start of ``buf``; returns the tables and
        how many bytes they took."""
        if self.endian is None:
            if len(buf) < 6:
                if not len(buf):
                    raise FormatError("empty file")
                raise FormatError("too short to be STDF (no complete FAR record)")
            self.endian = detect_endian(bytes(buf[:6]))
            engine = native.NativeEngine if self.path == "c" else NumpyEngine
            self._engine = engine(self.endian, self.limits.max_section_depth)
        offs, lens, typ, sub, end = scan(buf, 0, self.endian == ">")
        stop = self._first_damage(buf, offs, lens, typ, sub)
        if stop is not None:
            # Damage at record k: decode the records before it, record why, and stop. Found
            # before any record of the batch is decoded, so the batch's earlier records are
            # kept rather than lost with an exception.
            k, self.damage = stop
            offs, lens = offs[:k], lens[:k]
            end = int(offs[k - 1]) + 4 + int(lens[k - 1]) if k else 0
            self._stopped = True
        first_rec = self._rec
        self._rec += len(offs)
        assert self._engine is not None
        unknown, tables = self._engine.batch(buf[:end], offs, lens, first_rec)
        self._base += end
        return self._outputs(unknown, tables), end

    def _outputs(self, unknown: int,
                 tables: list[tuple[Record, pa.Table | None, int]]) -> list[tuple[str, pa.Table]]:
        assert self._engine is not None
        if unknown:
            self.counts["unknown"] += unknown
        _, _, _, prr_without_pir, eps_without_bps = self._engine.stats()
        for name, n in (("prr_without_pir", prr_without_pir),
                        ("eps_without_bps", eps_without_bps)):
            if n:
                self.counts[name] = n
        out: list[tuple[str, pa.Table]] = []
        decoded: set[str] = set()
        for rec, table, n in tables:
            self.counts[rec.name] += n
            if table is None:
                continue
            if rec.name in RESULT_RECORDS:
                decoded.add(rec.name)
                out.extend(self._release(rec.name, table))
            else:
                out.append(("parts" if rec.name == "PRR" else rec.name.lower(), table))
        # Results held from earlier batches whose PRR came in this one, which has no
        # record of their type: release them now, not never.
        for name in RESULT_RECORDS:
            if self._held[name] and name not in decoded:
                out.extend(self._release(name, None))
        return out

    def _first_damage(self, buf: memoryview, offs: np.ndarray, lens: np.ndarray,
                      typ: np.ndarray, sub: np.ndarray) -> tuple[int, str] | None:
        """The first record of the batch that decoding cannot go past, and why: a REC_TYP
        the standard does not define (the boundaries are lost), a BPS nested deeper than
        ``Limits.max_section_depth``, or a GDR with a V*n type code STDF V4 does not
        define. Each check looks only at the records before the previous one's stop."""
        found = None
        k = len(offs)
        valid = _VALID_LUT[typ]
        if not valid.all():
            k = int(np.argmin(valid))
            found = (k, f"record boundaries lost: REC_TYP {int(typ[k])} is not an STDF V4 "
                        f"record type, at byte {self._base + int(offs[k])}")
        for check in (self._too_deep, self._bad_gdr):
            got = check(buf, offs[:k], lens[:k], typ[:k], sub[:k])
            if got is not None:
                k, why = got
                found = (k, f"{why} ({self._name_of(typ[k], sub[k])} at record "
                            f"{self._rec + k}, byte {self._base + int(offs[k])}): decoding "
                            f"stopped there")
        return found

    @staticmethod
    def _name_of(typ: int, sub: int) -> str:
        return RECORDS[(int(typ), int(sub))].name

    def _too_deep(self, buf: memoryview, offs: np.ndarray, lens: np.ndarray, typ: np.ndarray,
                  sub: np.ndarray) -> tuple[int, str] | None:
        """The BPS that would nest sections deeper than the limit (mirrors the engines'
        sections: an EPS with no section open is ignored)."""
        assert self._engine is not None
        bps, eps = BY_NAME["BPS"], BY_NAME["EPS"]
        at = np.flatnonzero(typ == bps.typ)  # BPS and EPS share REC_TYP 20
        sec = sub[at]
        step = (sec == bps.sub).astype(np.int64) - (sec == eps.sub)
        at, step = at[step != 0], step[step != 0]
        open_now = self._engine.depth
        depth = open_now + np.cumsum(step)  # depth after each BPS/EPS
        limit = self.limits.max_section_depth
        if not at.size or (depth.min() >= 0 and depth.max() <= limit):
            return None  # the usual case, decided without a loop
        d = open_now
        for i, up in zip(at.tolist(), step.tolist(), strict=True):
            if up < 0:
                d = max(d - 1, 0)
            elif d >= limit:
                return i, f"program sections nested deeper than {limit}"
            else:
                d += 1
        return None

    def _bad_gdr(self, buf: memoryview, offs: np.ndarray, lens: np.ndarray, typ: np.ndarray,
                 sub: np.ndarray) -> tuple[int, str] | None:
        """The first GDR whose V*n items use a type code the standard does not define."""
        gdr = BY_NAME["GDR"]
        at = np.flatnonzero(typ == gdr.typ)
        for i in at[sub[at] == gdr.sub]:
            o, n = int(offs[i]) + 4, int(lens[i])
            try:
                decode_record(gdr, bytes(buf[o:o + n]), self.endian or "<")
            except FormatError as e:
                return int(i), str(e)
        return None

    def _release(self, name: str, table: pa.Table | None) -> list[tuple[str, pa.Table]]:
        assert self._engine is not None
        tables = [*self._held[name], *([] if table is None else [table])]
        table = tables[0]
        if len(tables) > 1:
            table = pa.concat_tables(tables, promote_options="default")
        pk = table.column("part_key").to_numpy()
        pi = self._engine.part_index(pk)
        ready = (pi >= 0) | (pk < 0)
        k = int(ready.sum())
        if ready[:k].all():  # the usual case: only the last touchdown's rows wait
            out, rest = table.slice(0, k), table.slice(k)
            pk, pi = pk[:k], pi[:k]
        else:
            out, rest = table.filter(_bools(ready)), table.filter(_bools(~ready))
            pk, pi = pk[ready], pi[ready]
        self._held[name] = [rest] if rest.num_rows else []
        if not k:
            return []
        owned = pk >= 0  # results outside any part have no part_index
        mask = None if owned.all() else pa.py_buffer(np.packbits(owned, bitorder="little"))
        part_index = pa.Array.from_buffers(pa.int64(), k, [
            mask, pa.py_buffer(np.ascontiguousarray(pi, np.int64))])
        out = out.add_column(1, "part_index", part_index)
        return [(name.lower(), out)]


def _bools(mask: np.ndarray) -> pa.Array:
    """numpy booleans as an Arrow array, without pyarrow's pandas-aware conversion."""
    return pa.Array.from_buffers(pa.bool_(), len(mask),
                                 [None, pa.py_buffer(np.packbits(mask, bitorder="little"))])
