"""Ingest orchestration: find inputs, decide each one's format by content, decode it
into the store's staging area, derive its per-file tables, and commit it with its lot's
refreshed aggregates — one log at a time, atomically.

A bad log never stops the run: it is reported (``rejected``, or ``partial`` when the
parts before the damage were kept) and the next one goes on. Decoding and the per-file
derivation run in worker processes when there is enough to do; the per-lot derivation
and the commit run here, one log after another, while the workers decode the next ones.
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
import shutil
import signal
import sys
import threading
import uuid
import zlib
from collections.abc import Callable, Iterable, Iterator
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path
from typing import IO, TYPE_CHECKING, Any, cast

import zstandard

from . import __version__
from ._lean import keep_pandas_out
from .errors import FormatError, InputError, StoreError, TandemError, UsageError
from .stdf.decoder import Decoder, Limits
from .stdf.records import BY_NAME
from .store import Store
from .store.commit import Incoming, Runner, Share
from .store.layout import STAGING
from .store.staging import UNKNOWN_LOT, Staged

if TYPE_CHECKING:
    from .cluster import Cluster

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


@dataclass
class IngestReport:
    ingested: list[dict[str, Any]] = field(default_factory=list)
    skipped: list[dict[str, Any]] = field(default_factory=list)
    rejected: list[dict[str, Any]] = field(default_factory=list)
    # Inputs not stored because of an internal error (ReconciliationError): not registered,
    # so a rerun retries them; exit code 1.
    failed: list[dict[str, Any]] = field(default_factory=list)

    @property
    def problems(self) -> list[str]:
        """One line per input that was not fully stored."""
        out = [f"{r['path']}: rejected: {r['reason']}" for r in self.rejected]
        out += [f"{r['path']}: partial: {r['error']}" for r in self.ingested
                if r.get("status") == "partial"]
        out += [f"{r['path']}: failed (internal error, not stored): {r['reason']}"
                for r in self.failed]
        return out

    @property
    def exit_code(self) -> int:
        return 1 if self.failed else 3 if self.problems else 0

    def to_json(self) -> dict[str, Any]:
        out = {"ingested": self.ingested, "skipped": self.skipped, "rejected": self.rejected}
        if self.failed:  # only then: the contract's three keys stay as they were
            out["failed"] = self.failed
        return out


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


def ingest(store: Store, paths: Iterable[str | os.PathLike[str]], workers: int | None = None,
           progress: Callable[[int, int, str], None] | None = None,
           limits: InputLimits | None = None, runner: Runner | None = None,
           cluster: Cluster | None = None) -> IngestReport:
    """Store every new log under ``paths``; see IngestReport for what came of each.
    ``limits``: default InputLimits.from_env(). ``runner``: where the per-lot derivation
    runs (default: this process; with ``cluster``, its workers). ``cluster``: decode and
    derive on a Dask cluster (pipeline.cluster_tasks); ``workers`` is then not used."""
    from .derivation import local_runner

    limits = limits or InputLimits.from_env()
    files, missing = find_inputs(paths)
    report = IngestReport(rejected=list(missing))
    with store.writer():
        todo = _new_files(store, files, report)
        rules = store.rules_path(store.snapshot().rules_sha)
        if cluster is not None:
            _ingest_on(cluster, store, todo, limits, rules, report, runner, progress)
            return report
        lots = runner or local_runner()
        for i, decoded in enumerate(_decode_all(store, todo, workers, limits, rules)):
            _commit(store, decoded, report, lots)
            if progress:
                progress(i + 1, len(todo), decoded.entry["path"])
    return report


def _ingest_on(cluster: Cluster, store: Store, todo: list[tuple[Path, str | None]],
               limits: InputLimits, rules: Path | None, report: IngestReport,
               runner: Runner | None, progress: Callable[[int, int, str], None] | None) -> None:
    """Decoded on the cluster; the logs that are ready together committed at once."""
    from .cluster_tasks import cluster_runner, decoded_batches

    lots, done = runner or cluster_runner(cluster), 0
    for batch in decoded_batches(cluster, store.path, todo, limits, rules):
        _commit_batch(store, batch, report, lots)
        for decoded in batch:
            done += 1
            if progress:
                progress(done, len(todo), decoded.entry["path"])


def _new_files(store: Store, files: list[Path],
               report: IngestReport) -> list[tuple[Path, str | None]]:
    """Files not stored yet. A file whose size no stored or queued file has cannot be a
    duplicate: it is hashed while it is decoded (digest None), so it is read once."""
    todo: list[tuple[Path, str | None]] = []
    seen: dict[str, str] = {}
    sizes = store.known_sizes()
    queued: dict[int, list[int]] = {}
    for p in files:
        try:
            size = p.stat().st_size
            if size not in sizes and size not in queued:
                queued[size] = [len(todo)]
                todo.append((p, None))
                continue
            for i in queued.pop(size, []):  # hash the earlier one of this size after all
                todo[i] = (todo[i][0], sha256_of(todo[i][0]))
                seen[todo[i][1]] = str(todo[i][0])  # type: ignore[index]
            digest = sha256_of(p)
        except OSError as e:
            report.rejected.append({"path": str(p), "reason": f"cannot read: {e.strerror}"})
            continue
        known = store.known(digest)
        if known is not None:
            report.skipped.append({"path": str(p), "reason":
                                   f"already stored as {known['file_id']} ({known['status']})"})
        elif digest in seen:
            report.skipped.append({"path": str(p), "reason": f"same content as {seen[digest]}"})
        else:
            seen[digest] = str(p)
            todo.append((p, digest))
    return todo


def _decode_all(store: Store, todo: list[tuple[Path, str | None]], workers: int | None,
                limits: InputLimits, rules: Path | None) -> Iterator[Decoded]:
    n = workers if workers is not None else _default_workers(todo)
    rules_s = str(rules) if rules is not None else None
    if n <= 1 or len(todo) <= 1:
        for p, digest in todo:
            yield decode_to_staging(str(store.path), str(p), digest, limits, rules_s)
        return
    with ProcessPoolExecutor(max_workers=n, initializer=_worker_start,
                             initargs=(os.getpid(),)) as pool:
        futures = [pool.submit(decode_to_staging, str(store.path), str(p), d, limits, rules_s)
                   for p, d in todo]
        for fut in futures:
            yield fut.result()


def _worker_start(parent: int) -> None:
    """A pool worker dies with the ingest that started it: after a kill -9 of the parent,
    idle workers would otherwise wait on their queue forever (Linux: PR_SET_PDEATHSIG)."""
    keep_pandas_out()
    if sys.platform.startswith("linux"):
        import ctypes

        try:
            ctypes.CDLL(None, use_errno=True).prctl(1, signal.SIGKILL)  # PR_SET_PDEATHSIG
        except (OSError, AttributeError):  # no prctl: the workers may outlive a kill -9
            return
    if os.getppid() != parent:  # the parent died before the line above took effect
        os._exit(1)


def _default_workers(todo: list[tuple[Path, str | None]]) -> int:
    # A process pool costs about a second to start; worth it only for a lot of bytes.
    total = sum(p.stat().st_size for p, _ in todo)
    return min(os.cpu_count() or 1, 4) if total > (256 << 20) else 1


def _commit(store: Store, decoded: Decoded, report: IngestReport, runner: Runner) -> None:
    _commit_batch(store, [decoded], report, runner)


def _commit_batch(store: Store, batch: list[Decoded], report: IngestReport,
                  runner: Runner) -> None:
    """Publish the logs of ``batch`` in one commit (atomic per lot, as for one log) and
    record each one's outcome in the report, in the batch's order."""
    ready: list[tuple[Decoded, Incoming]] = []
    stored: dict[str, dict[str, Any]] = {}  # sha256 -> path and file id, in this batch
    for decoded in batch:
        entry = decoded.entry
        known = store.known(entry["sha256"]) or stored.get(entry["sha256"])
        if known is not None:  # hashed while decoding, and the same content is stored already
            if decoded.root:
                shutil.rmtree(decoded.root, ignore_errors=True)
            report.skipped.append({"path": entry["path"], "reason":
                                   f"same content as {known['path']} ({known['file_id']})"})
        elif entry["status"] == "failed":  # not registered: the next run tries it again
            report.failed.append({"path": entry["path"], "reason": entry["error"]})
        else:
            stored[entry["sha256"]] = {"path": entry["path"], "file_id": entry["file_id"]}
            ready.append((decoded, _incoming(decoded)))
    if not ready:
        return
    store.commit([inc for _, inc in ready], runner)
    for decoded, _ in ready:
        entry = decoded.entry
        if entry["status"] == "rejected":
            report.rejected.append({"path": entry["path"], "reason": entry["error"]})
            continue
        item = {k: entry[k] for k in ("path", "file_id", "format", "records", "parts",
                                      "status")}
        if entry["status"] == "partial":
            item["error"] = entry["error"]
        report.ingested.append(item)


def _incoming(decoded: Decoded) -> Incoming:
    entry, root = decoded.entry, decoded.root
    if entry["status"] == "rejected":
        return Incoming(_registry_fields(entry))
    assert root is not None
    base = Path(root)
    shares = [Share(lot, {t: base / d for t, d in tables.items()},
                    {m: base / f for m, f in decoded.derived[lot].items()}
                    if lot in decoded.derived else None)
              for lot, tables in sorted(decoded.shares.items())]
    return Incoming(_registry_fields(entry), shares, base)


def _registry_fields(entry: dict[str, Any]) -> dict[str, Any]:
    from .schemas import FILES

    return {k: entry.get(k) for k in ("file_id", *FILES.names)}


def _stage(store_path: str, name: str) -> Staged:
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
    staged = _stage(store_path, digest[:16] if digest else f"new-{uuid.uuid4().hex}")
    hasher = HashingReader(p) if digest is None else None
    try:
        try:
            entry.update(_decode_into(p, staged, hasher, limits or InputLimits.from_env(),
                                      name))
            root: str | None = str(staged.root)
        except ReconciliationError as e:
            staged.discard()
            entry.update(status="failed", error=_one_line(e), records=0, parts=0)
            entry.setdefault("format", None)
            root = None
        except TandemError as e:
            staged.discard()
            reason = _one_line(e).removeprefix(f"{name}: ")  # the report names the file
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
    return _derive_staged(Path(store_path), staged, entry, rules)


def _derive_staged(store_root: Path, staged: Staged, entry: dict[str, Any],
                   rules: str | None) -> Decoded:
    """Lay the staged tables out as the store does and derive the per-file models. A
    failure here is a bug (exit 1): the log is not stored, and a rerun tries it again."""
    from .store.derive import derive_file
    from .store.layout import lot_key

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
                                            f"{type(e).__name__}: {_one_line(e)}")
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
    from .csvlog import sniff_timing_csv  # polars loads only when a log is not STDF

    return sniff_timing_csv(head)


def _decode_csv(data: bytes, path: str, staged: Staged) -> dict[str, Any]:
    import pyarrow.compute as pc

    from .csvlog import read_timing_csv

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


def _one_line(e: BaseException) -> str:
    return " ".join(str(e).split())


def tty_progress(done: int, total: int, path: str) -> None:
    """A one-line progress bar on stderr, only when stderr is a terminal."""
    if not sys.stderr.isatty():
        return
    width = 30
    fill = int(width * done / max(total, 1))
    name = Path(path).name[:40]
    sys.stderr.write(f"\r[{'#' * fill}{'.' * (width - fill)}] {done}/{total} {name:<40}")
    if done == total:
        sys.stderr.write("\n")
    sys.stderr.flush()
