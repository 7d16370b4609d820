"""Ingest orchestration: find inputs, decide each one's format by content, decode it
into the store's staging area, and commit it — one log at a time, atomically.

A bad log never stops the run: it is reported (``rejected``, or ``partial`` when the
parts before the damage were kept) and the next one goes on.
"""

from __future__ import annotations

import bz2
import datetime as _dt
import gzip
import hashlib
import io
import json
import lzma
import os
import shutil
import sys
import uuid
from collections.abc import Callable, Iterable
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path
from typing import IO, Any

import zstandard

from . import __version__
from ._lean import keep_pandas_out
from .errors import FormatError, InputError, TandemError
from .stdf.decoder import RESULT_RECORDS, Decoder, Limits
from .store import Staged, Store

READ_BYTES = 8 << 20
MAGIC = [(b"\x1f\x8b", "gzip"), (b"BZh", "bzip2"), (b"\xfd7zXZ\x00", "xz"),
         (b"\x28\xb5\x2f\xfd", "zstd")]


@dataclass
class IngestReport:
    ingested: list[dict[str, Any]] = field(default_factory=list)
    skipped: list[dict[str, Any]] = field(default_factory=list)
    rejected: list[dict[str, Any]] = field(default_factory=list)

    @property
    def problems(self) -> list[str]:
        """One line per input that was not fully stored."""
        out = [f"{r['path']}: rejected: {r['reason']}" for r in self.rejected]
        out += [f"{r['path']}: partial: {r['error']}" for r in self.ingested
                if r.get("status") == "partial"]
        return out

    @property
    def exit_code(self) -> int:
        return 3 if self.problems else 0

    def to_json(self) -> dict[str, Any]:
        return {"ingested": self.ingested, "skipped": self.skipped, "rejected": self.rejected}


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


def open_input(path: Path, raw: IO[bytes] | None = None) -> tuple[IO[bytes], str]:
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
        return open(path, "rb"), kind
    if kind == "gzip":
        return gzip.GzipFile(fileobj=raw, mode="rb"), kind
    if kind == "bzip2":
        return bz2.BZ2File(raw, "rb"), kind
    if kind == "xz":
        return lzma.LZMAFile(raw, "rb"), kind
    if kind == "zstd":
        return zstandard.ZstdDecompressor().stream_reader(raw, closefd=False), kind
    return io.BufferedReader(raw, READ_BYTES), kind  # type: ignore[arg-type]


def ingest(store: Store, paths: Iterable[str | os.PathLike[str]], workers: int | None = None,
           progress: Callable[[int, int, str], None] | None = None) -> IngestReport:
    """Store every new log under ``paths``; see IngestReport for what came of each."""
    files, missing = find_inputs(paths)
    report = IngestReport(rejected=list(missing))
    with store.writer():
        todo = _new_files(store, files, report)
        for i, (entry, staged_root) in enumerate(_decode_all(store, todo, workers)):
            _commit(store, entry, staged_root, report)
            if progress:
                progress(i + 1, len(todo), entry["path"])
    return report


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


def _decode_all(store: Store, todo: list[tuple[Path, str | None]], workers: int | None):
    n = workers if workers is not None else _default_workers(todo)
    if n <= 1 or len(todo) <= 1:
        for p, digest in todo:
            yield decode_to_staging(str(store.path), str(p), digest)
        return
    with ProcessPoolExecutor(max_workers=n, initializer=keep_pandas_out) as pool:
        futures = [pool.submit(decode_to_staging, str(store.path), str(p), d) for p, d in todo]
        for fut in futures:
            yield fut.result()


def _default_workers(todo: list[tuple[Path, str | None]]) -> int:
    # A process pool costs about a second to start; worth it only for a lot of bytes.
    total = sum(p.stat().st_size for p, _ in todo)
    return min(os.cpu_count() or 1, 4) if total > (256 << 20) else 1


def _commit(store: Store, entry: dict[str, Any], staged_root: str | None,
            report: IngestReport) -> None:
    known = store.known(entry["sha256"])
    if known is not None:  # hashed while decoding, and the same content is stored already
        if staged_root:
            shutil.rmtree(staged_root, ignore_errors=True)
        report.skipped.append({"path": entry["path"], "reason":
                               f"same content as {known['path']} ({known['file_id']})"})
        return
    if entry["status"] == "rejected":
        store.register_only(entry)
        report.rejected.append({"path": entry["path"], "reason": entry["error"]})
        return
    assert staged_root is not None
    staged = Staged(entry["file_id"], Path(staged_root))
    store.commit(staged, entry)
    item = {k: entry[k] for k in ("path", "file_id", "format", "records", "parts", "status")}
    if entry["status"] == "partial":
        item["error"] = entry["error"]
    report.ingested.append(item)


def decode_to_staging(store_path: str, path: str,
                      digest: str | None) -> tuple[dict, str | None]:
    """Decode one log into the store's staging area (runs in a worker process too).
    ``digest`` None: hash the file while decoding it. Returns its registry entry and the
    staging folder (None when rejected)."""
    store = Store(store_path)
    p = Path(path)
    entry: dict[str, Any] = {
        "path": path, "size_bytes": p.stat().st_size,
        "ingested_at": _dt.datetime.now().replace(microsecond=0),
        "tandem_version": __version__, "dropped_results": 0,
    }
    staged = store.stage(digest[:16] if digest else f"new-{uuid.uuid4().hex}")
    hasher = HashingReader(p) if digest is None else None
    try:
        try:
            entry.update(_decode_into(p, staged, hasher))
            root: str | None = str(staged.root)
        except TandemError as e:
            staged.discard()
            reason = _one_line(e).removeprefix(f"{path}: ")  # the report names the file
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
    if root is not None:
        staged.close()
    return entry, root


def _decode_into(p: Path, staged: Staged, raw: IO[bytes] | None = None) -> dict[str, Any]:
    stream, compression = open_input(p, raw)
    with stream:
        head, err = _read(stream, 65536)
        if err is not None and head[2:4] != b"\x00\x0a":
            raise InputError(f"cannot decompress ({compression}): {err}")
        if not head:
            raise InputError("empty file" if compression == "none" else
                             f"empty after {compression} decompression")
        if head[2:4] == b"\x00\x0a":
            info = _decode_stdf(head, stream, staged, err)
        elif _sniff_csv(head):
            rest, err = _read(stream, -1)
            if err is not None:
                raise InputError(f"cannot decompress ({compression}): damaged after "
                                 f"{len(head) + len(rest)} bytes: {err}")
            info = _decode_csv(head + rest, str(p), staged)
        else:
            raise InputError("not a datalog: neither STDF V4 (no FAR record at the start) "
                             "nor a timing CSV (no lot_id,touchdown,site,part_id,block,"
                             "start_ms,end_ms header)")
    info["compression"] = compression
    return info


_STREAM_ERRORS = (OSError, EOFError, lzma.LZMAError, zstandard.ZstdError)


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

    def put(batches: list) -> None:
        for name, table in batches:
            staged.write(name, table)

    try:
        put(dec.feed(head))
        while err is None:
            chunk, err = _read(stream, READ_BYTES)
            if not chunk:
                break
            put(dec.feed(chunk))
        if err is not None:
            damage = f"compressed stream damaged after {dec._base + len(dec._buf)} bytes: {err}"
        put(dec.close())
    except FormatError as e:
        if dec.records == 0:
            raise
        damage = str(e)
    return _stdf_entry(dec, staged, damage)


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
    """Records read by type must equal rows stored (results of unfinished parts aside)."""
    stored = sum(staged.rows.get(n.lower(), 0) for n in RESULT_RECORDS)
    read = sum(dec.counts.get(n, 0) for n in RESULT_RECORDS)
    if stored + dec.dropped_results != read:
        raise AssertionError(f"reconciliation failed: read {read} result records, stored "
                             f"{stored}, dropped {dec.dropped_results}")
    if dec.counts.get("PRR", 0) != staged.rows.get("parts", 0):
        raise AssertionError("reconciliation failed: PRR records and stored parts differ")


def _sniff_csv(head: bytes) -> bool:
    from .csvlog import sniff_timing_csv  # polars loads only when a log is not STDF

    return sniff_timing_csv(head)


def _decode_csv(data: bytes, path: str, staged: Staged) -> dict[str, Any]:
    from .csvlog import read_timing_csv

    log = read_timing_csv(data, path)
    staged.write("timing_csv", log.table)
    t = log.table
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
