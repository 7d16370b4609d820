"""One log, from its path to staged Parquet: open it (compressed or not, capped),
decide its format by content, decode it (STDF or timing CSV), check the record counts,
and derive its per-file tables in the store's staging area. A function of one file that
runs anywhere (this process, a worker process, a cluster worker); committing is
pipeline/jobs/ingest.py's.
"""

from __future__ import annotations

import bz2
import contextlib
import datetime as _dt
import gzip
import hashlib
import io
import json
import lzma
import os
import queue
import threading
import uuid
import zlib
from collections.abc import Iterable, Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import IO, TYPE_CHECKING, Any, cast

import zstandard

from .. import __version__
from ..errors import FormatError, InputError, StoreError, TandemError, UsageError
from ..read.stdf.decoder import Decoder, Limits
from ..read.stdf.records import BY_NAME
from ..store.layout import STAGING
from ..store.staging import UNKNOWN_LOT, Staged

if TYPE_CHECKING:
    pass

READ_BYTES = 8 << 20
MAGIC = [(b"\x1f\x8b", "gzip"), (b"BZh", "bzip2"), (b"\xfd7zXZ\x00", "xz"),
         (b"\x28\xb5\x2f\xfd", "zstd")]


class ReconciliationError(StoreError):
    """Records read and rows stored disagree: a bug, never the input's fault (exit 1).
    The file is not stored and not registered, so the next run tries it again."""


@dataclass(frozen=True)
class InputLimits:
    """What one compressed input may expand to before it is cut (a compression bomb is
    never fully expanded). Real datalogs compress 5-20x (the gzip sample: 9.6x) and
    DEFLATE itself tops out near 1032x, so 200x the compressed size is far past any real
    log; the floor keeps small logs from ever being cut, the ceiling bounds one file.
    ``TANDEM_MAX_DECOMPRESSED`` (bytes) replaces all three with one fixed limit."""

    ratio: float = 200.0
    floor_bytes: int = 256 << 20
    max_bytes: int = 64 << 30

    def max_decompressed(self, compressed_size: int) -> int:
        return int(min(self.max_bytes, max(self.floor_bytes, self.ratio * compressed_size)))

    def describe(self) -> str:
        if self.floor_bytes == self.max_bytes:
            return f"limit {self.max_bytes} bytes"
        return (f"limit {self.ratio:g} x the compressed size, at least {self.floor_bytes} "
                f"and at most {self.max_bytes} bytes")

    @classmethod
    def from_env(cls) -> InputLimits:
        raw = os.environ.get("TANDEM_MAX_DECOMPRESSED")
        if raw is None or not raw.strip():
            return cls()
        try:
            n = int(raw)
            if n < 1:
                raise ValueError
        except ValueError:
            raise UsageError(f"TANDEM_MAX_DECOMPRESSED must be a positive number of bytes, "
                             f"not {raw!r}") from None
        return cls(ratio=0.0, floor_bytes=n, max_bytes=n)


class DecompressionLimit(Exception):
    """Raised by _Capped past the limit; _read returns it like a damaged stream's error."""


class _Capped:
    """A decompressed stream that ends at ``cap`` bytes: one probe byte past the cap tells
    a log that is exactly that long from one that would go on."""

    def __init__(self, stream: Stream, cap: int, note: str):
        self._s, self.left, self.cap, self._note = stream, cap, cap, note

    def read1(self, n: int = -1) -> bytes:
        if self.left <= 0:
            if self._s.read1(1):  # type: ignore[attr-defined]
                raise DecompressionLimit(
                    f"decompressed size limit reached: stopped after {self.cap} bytes "
                    f"({self._note}); the rest was not read")
            return b""
        piece: bytes = self._s.read1(  # type: ignore[attr-defined]
            self.left if n < 0 else min(n, self.left))
        self.left -= len(piece)
        return piece

    def __enter__(self) -> _Capped:
        return self

    def __exit__(self, *exc: object) -> None:
        self._s.close()


def find_inputs(paths: Iterable[str | os.PathLike[str]]) -> tuple[list[Path], list[dict]]:
    """Files as given, folders walked recursively (sorted, hidden entries skipped)."""
    files, missing = [], []
    for p in map(Path, paths):
        if p.is_dir():
            files += sorted(f for f in p.rglob("*") if f.is_file()
                            and not any(part.startswith(".") for part in f.relative_to(p).parts))
        elif p.is_file():
            files.append(p)
        else:
            missing.append({"path": str(p), "reason": "no such file or folder"})
    return files, missing


def sha256_of(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as f:
        while chunk := f.read(READ_BYTES):
            h.update(chunk)
    return h.hexdigest()


class HashingReader(io.RawIOBase):
    """A file read once for two purposes: its bytes feed the decoder (directly or through
    a decompressor) and its sha256 at the same time, so a new log is read only once."""

    def __init__(self, path: Path):
        self._f = open(path, "rb")  # noqa: SIM115 - closed with this reader
        self.hash = hashlib.sha256()

    def readable(self) -> bool:
        return True

    def readinto(self, b: Any) -> int:
        n = self._f.readinto(b)
        if n:
            self.hash.update(memoryview(b)[:n])
        return n or 0

    def finish(self) -> str:
        """Hash what the decoder did not read (it may stop at damage) and return it."""
        while chunk := self._f.read(READ_BYTES):
            self.hash.update(chunk)
        return self.hash.hexdigest()

    def close(self) -> None:
        """Decompressors close their source when done; the hash still needs the rest of
        the file, so the file itself stays open until release()."""
        super().close()

    def release(self) -> None:
        self._f.close()


# What open_input returns: a decompressing reader, or the file's own buffered bytes.
Stream = io.BufferedIOBase | zstandard.ZstdDecompressionReader


def open_input(path: Path, raw: io.RawIOBase | None = None) -> tuple[Stream, str]:
    """The decompressed byte stream, whatever the file's name (magic bytes decide).
    ``raw``: read the file's bytes through this object (a HashingReader, which the
    caller releases) instead of opening the file here."""
    with open(path, "rb") as f:
        head = f.read(6)
    kind = next((k for magic, k in MAGIC if head.startswith(magic)), "none")
    if raw is None:
        if kind == "gzip":
            return gzip.open(path, "rb"), kind
        if kind == "bzip2":
            return bz2.open(path, "rb"), kind
        if kind == "xz":
            return lzma.open(path, "rb"), kind
        if kind == "zstd":
            src = open(path, "rb")  # noqa: SIM115 - closed with the reader
            return zstandard.ZstdDecompressor().stream_reader(src, closefd=True), kind
        return io.BufferedReader(io.FileIO(path, "rb"), READ_BYTES), kind
    fed = cast(IO[bytes], raw)  # a RawIOBase: what the decompressors read from
    if kind == "gzip":
        return gzip.GzipFile(fileobj=fed, mode="rb"), kind
    if kind == "bzip2":
        return bz2.BZ2File(fed, "rb"), kind
    if kind == "xz":
        return lzma.LZMAFile(fed, "rb"), kind
    if kind == "zstd":
        return zstandard.ZstdDecompressor().stream_reader(fed, closefd=False), kind
    return io.BufferedReader(raw, READ_BYTES), kind


@dataclass
class Decoded:
    """What a worker hands back for one log (paths relative to ``root``)."""

    entry: dict[str, Any]
    root: str | None                                   # its staging folder
    shares: dict[str, dict[str, str]] = field(default_factory=dict)   # lot -> table -> dir
    derived: dict[str, dict[str, str]] = field(default_factory=dict)  # lot -> model -> file


def stage(store_path: str, name: str) -> Staged:
    # A folder of its own per attempt: a worker orphaned by a killed run that is still
    # writing can never write into the next run's staging of the same log.
    root = Path(store_path) / STAGING / f"{name}.{os.getpid()}.{uuid.uuid4().hex[:8]}"
    root.mkdir(parents=True)
    return Staged(name, root)


def decode_to_staging(store_path: str, path: str, digest: str | None,
                      limits: InputLimits | None = None,
                      rules: str | None = None, shown: str | None = None) -> Decoded:
    """Decode one log into the store's staging area and derive its per-file tables there
    (runs in a worker process too). ``digest`` None: hash the file while decoding it.
    ``rules``: the store's block-map rules file, if any. ``shown``: the log's name in the
    entry and in messages (default ``path``; a cluster worker opens it by absolute path)."""
    p = Path(path)
    name = shown if shown is not None else path
    entry: dict[str, Any] = {
        "path": name, "size_bytes": p.stat().st_size,
        "ingested_at": _dt.datetime.now().replace(microsecond=0),
        "tandem_version": __version__, "dropped_results": 0,
    }
    staged = stage(store_path, digest[:16] if digest else f"new-{uuid.uuid4().hex}")
    hasher = HashingReader(p) if digest is None else None
    try:
        try:
            entry.update(_decode_into(p, staged, hasher, limits or InputLimits.from_env(),
                                      name))
            root: str | None = str(staged.root)
        except ReconciliationError as e:
            staged.discard()
            entry.update(status="failed", error=one_line(e), records=0, parts=0)
            entry.setdefault("format", None)
            root = None
        except TandemError as e:
            staged.discard()
            reason = one_line(e).removeprefix(f"{name}: ")  # the report names the file
            entry.update(status="rejected", error=reason, records=0, parts=0)
            entry.setdefault("format", None)
            root = None
        if hasher is not None:
            digest = hasher.finish()
    finally:
        if hasher is not None:
            hasher.release()
    assert digest is not None
    entry.update(sha256=digest, file_id=digest[:16])
    if root is None:
        return Decoded(entry, None)
    return derive_staged(Path(store_path), staged, entry, rules)


def derive_staged(store_root: Path, staged: Staged, entry: dict[str, Any],
                   rules: str | None) -> Decoded:
    """Lay the staged tables out as the store does and derive the per-file models. A
    failure here is a bug (exit 1): the log is not stored, and a rerun tries it again."""
    from ..store.derive import derive_file
    from ..store.layout import lot_key

    out = Decoded(entry, str(staged.root))
    try:
        out.shares = staged.finish(entry["file_id"])
        rules_table = None
        if rules is not None:
            import pyarrow.parquet as pq

            rules_table = pq.read_table(rules)
        for lot, tables in out.shares.items():
            made = derive_file(store_root, entry["file_id"],
                               {t: staged.root / d for t, d in tables.items()},
                               staged.root / "derived" / lot_key(lot), rules_table)
            out.derived[lot] = {m: str(f.relative_to(staged.root)) for m, f in made.items()}
    except Exception as e:  # noqa: BLE001 - reported as this log's failure, not fatal
        staged.discard()
        entry.update(status="failed", error=f"deriving its tables failed: "
                                            f"{type(e).__name__}: {one_line(e)}")
        return Decoded(entry, None)
    return out


def _decode_into(p: Path, staged: Staged, raw: HashingReader | None = None,
                 limits: InputLimits | None = None, name: str | None = None) -> dict[str, Any]:
    opened, compression = open_input(p, raw)
    stream: Any = opened
    if compression != "none":  # a bomb is cut at the limit, never fully expanded
        limits = limits or InputLimits.from_env()
        size = p.stat().st_size
        stream = _Capped(opened, limits.max_decompressed(size),
                         f"{compression} file of {size} bytes; {limits.describe()}; "
                         f"TANDEM_MAX_DECOMPRESSED sets it")
    with stream:
        head, err = _read(stream, 65536)
        if err is not None and head[2:4] != b"\x00\x0a" and \
                not isinstance(err, DecompressionLimit):  # past the limit: see below
            raise InputError(f"cannot decompress ({compression}): {err}")
        if not head:
            raise InputError("empty file" if compression == "none" else
                             f"empty after {compression} decompression")
        if head[2:4] == b"\x00\x0a":
            info = _decode_stdf(head, stream, staged, err)
        elif _sniff_csv(head):
            rest, err = _read(stream, -1)
            if isinstance(err, DecompressionLimit):  # a CSV is read whole: no partial CSV
                raise InputError(f"timing CSV not stored: {err}")
            if err is not None:
                raise InputError(f"cannot decompress ({compression}): damaged after "
                                 f"{len(head) + len(rest)} bytes: {err}")
            info = _decode_csv(head + rest, name or str(p), staged)
        else:
            raise InputError("not a datalog: neither STDF V4 (no FAR record at the start) "
                             "nor a timing CSV (no lot_id,touchdown,site,part_id,block,"
                             "start_ms,end_ms header)")
    info["compression"] = compression
    return info


# zlib.error is what a damaged DEFLATE block raises through GzipFile (not an OSError).
_STREAM_ERRORS = (OSError, EOFError, zlib.error, lzma.LZMAError, zstandard.ZstdError,
                  DecompressionLimit)


def _read(stream: IO[bytes], n: int) -> tuple[bytes, BaseException | None]:
    """Up to n bytes (n < 0: to the end), and the error that stopped the read, if any.
    A damaged compressed stream fails part-way through a read; what it decompressed
    before the damage is returned, not lost with the exception."""
    pieces: list[bytes] = []
    got = 0
    try:
        while n < 0 or got < n:
            piece = stream.read1(READ_BYTES if n < 0 else n - got)  # type: ignore[attr-defined]
            if not piece:
                break
            pieces.append(piece)
            got += len(piece)
    except _STREAM_ERRORS as e:
        return b"".join(pieces), e
    return b"".join(pieces), None


def _decode_stdf(head: bytes, stream: IO[bytes], staged: Staged,
                 err: BaseException | None = None) -> dict[str, Any]:
    dec = Decoder(Limits(batch_bytes=READ_BYTES))
    damage = None
    lot_known = False

    def put(batches: list) -> None:
        nonlocal lot_known
        if batches and not lot_known:  # the MIR comes first: it names the lot
            staged.lot = _mir_lot(batches)
            lot_known = True
        for name, table in batches:
            staged.write(name, table)

    try:
        put(dec.feed(head))
        pieces = _read_ahead(stream, READ_BYTES) if err is None else iter(())
        for chunk, piece_err in pieces:
            err = piece_err
            if chunk:
                put(dec.feed(chunk))
        if isinstance(err, DecompressionLimit):
            damage = str(err)
        elif err is not None:
            damage = f"compressed stream damaged after {dec._base + len(dec._buf)} bytes: {err}"
        put(dec.close())
    except FormatError as e:
        if dec.records == 0:
            raise
        damage = str(e)
    return _stdf_entry(dec, staged, damage)


def _mir_lot(batches: list) -> str:
    """The lot a log's rows are filed under: its MIR LOT_ID, else "unknown" (as the
    parts view says)."""
    for name, table in batches:
        if name == "mir" and table.num_rows:
            lot = table.column("lot_id")[0].as_py()
            return lot if lot else UNKNOWN_LOT
    return UNKNOWN_LOT


def _read_ahead(stream: IO[bytes], n: int) -> Iterator[tuple[bytes, BaseException | None]]:
    """``_read(stream, n)`` again and again until the end or an error, the next piece read
    on a thread while the caller decodes the last one: reading, hashing (HashingReader)
    and decompressing overlap decoding, whose compiled pass releases the GIL."""
    pieces: queue.Queue[tuple[bytes, BaseException | None]] = queue.Queue(maxsize=1)
    stop = threading.Event()

    def reader() -> None:
        while not stop.is_set():
            chunk, err = _read(stream, n)
            pieces.put((chunk, err))
            if not chunk or err is not None:
                return

    thread = threading.Thread(target=reader, daemon=True)
    thread.start()
    try:
        while True:
            chunk, err = pieces.get()
            yield chunk, err
            if not chunk or err is not None:
                return
    finally:  # the stream is the caller's again (its hash is finished from it) once done
        stop.set()
        while thread.is_alive():
            with contextlib.suppress(queue.Empty):
                pieces.get_nowait()
            thread.join(0.01)


def _stdf_entry(dec: Decoder, staged: Staged, damage: str | None) -> dict[str, Any]:
    problems = [d for d in (damage, dec.damage) if d]
    unfinished = getattr(dec, "unfinished_parts", 0)
    if unfinished:
        problems.append(f"{unfinished} part(s) never finished (no PRR); their results "
                        f"were not kept")
    if not problems and dec.counts.get("MRR", 0) == 0:
        problems.append("no MRR at the end: the file may have been cut short")
    _reconcile(dec, staged)
    return {
        "format": "stdf", "status": "partial" if problems else "ok",
        "error": "; ".join(problems) if problems else None,
        "records": dec.records, "parts": staged.rows.get("parts", 0),
        "byte_order": {"<": "little", ">": "big"}.get(dec.endian or "", None),
        "records_by_type": json.dumps(dict(sorted(dec.counts.items()))),
        "dropped_results": dec.dropped_results,
    }


def _reconcile(dec: Decoder, staged: Staged) -> None:
    """Records read by type must equal rows stored: one row per record in its table
    (PRR -> parts, BPS -> sections), results of unfinished parts aside (dropped, and
    reported as such). A mismatch is a bug: ReconciliationError, the file is not stored."""
    bad = []
    for name, read in sorted(dec.counts.items()):
        rec = BY_NAME.get(name)
        if rec is None or name in ("PIR", "EPS"):  # unknown types, counters; no table
            continue
        table = {"PRR": "parts", "BPS": "sections"}.get(name, name.lower())
        stored = staged.rows.get(table, 0)
        dropped = dec.dropped.get(name, 0)
        if stored + dropped != read:
            bad.append(f"read {read} {name} records, stored {stored} {table} rows"
                       + (f" ({dropped} dropped with unfinished parts)" if dropped else ""))
    if bad:
        raise ReconciliationError("reconciliation failed: " + "; ".join(bad)
                                  + "; the file was not stored")


def _sniff_csv(head: bytes) -> bool:
    from ..read.csvlog import sniff_timing_csv  # polars loads only when a log is not STDF

    return sniff_timing_csv(head)


def _decode_csv(data: bytes, path: str, staged: Staged) -> dict[str, Any]:
    import pyarrow.compute as pc

    from ..read.csvlog import read_timing_csv

    log = read_timing_csv(data, path)
    t = log.table
    for lot in sorted(set(t.column("lot_id").to_pylist())):  # one share per lot
        staged.write("timing_csv", t.filter(pc.equal(t.column("lot_id"), lot)), lot=lot)
    if staged.rows.get("timing_csv", 0) != t.num_rows:
        raise ReconciliationError(f"reconciliation failed: read {t.num_rows} timing CSV rows, "
                                  f"stored {staged.rows.get('timing_csv', 0)}; the file was "
                                  f"not stored")
    parts = len(set(zip(t.column("lot_id").to_pylist(), t.column("touchdown").to_pylist(),
                        t.column("site").to_pylist(), t.column("part_id").to_pylist(),
                        strict=True)))
    warn = (f"ignored columns: {', '.join(log.ignored_columns)}"
            if log.ignored_columns else None)
    return {"format": "csv", "status": "ok", "error": warn, "records": t.num_rows,
            "parts": parts, "records_by_type": json.dumps({"rows": t.num_rows})}


def one_line(e: BaseException) -> str:
    return " ".join(str(e).split())
