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
import json
import lzma
import os
import sys
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


def open_input(path: Path) -> tuple[IO[bytes], str]:
    """The decompressed byte stream, whatever the file's name (magic bytes decide)."""
    with open(path, "rb") as f:
        head = f.read(6)
    for magic, kind in MAGIC:
        if head.startswith(magic):
            if kind == "gzip":
                return gzip.open(path, "rb"), kind
            if kind == "bzip2":
                return bz2.open(path, "rb"), kind
            if kind == "xz":
                return lzma.open(path, "rb"), kind
            raw = open(path, "rb")  # noqa: SIM115 - closed with the reader
            return zstandard.ZstdDecompressor().stream_reader(raw, closefd=True), kind
    return open(path, "rb"), "none"


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


def _new_files(store: Store, files: list[Path], report: IngestReport) -> list[tuple[Path, str]]:
    todo, seen = [], {}
    for p in files:
        try:
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


def _decode_all(store: Store, todo: list[tuple[Path, str]], workers: int | None):
    n = workers if workers is not None else _default_workers(todo)
    if n <= 1 or len(todo) <= 1:
        for p, digest in todo:
            yield decode_to_staging(str(store.path), str(p), digest)
        return
    with ProcessPoolExecutor(max_workers=n, initializer=keep_pandas_out) as pool:
        futures = [pool.submit(decode_to_staging, str(store.path), str(p), d) for p, d in todo]
        for fut in futures:
            yield fut.result()


def _default_workers(todo: list[tuple[Path, str]]) -> int:
    # A process pool costs about a second to start; worth it only for a lot of bytes.
    total = sum(p.stat().st_size for p, _ in todo)
    return min(os.cpu_count() or 1, 4) if total > (256 << 20) else 1


def _commit(store: Store, entry: dict[str, Any], staged_root: str | None,
            report: IngestReport) -> None:
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


def decode_to_staging(store_path: str, path: str, digest: str) -> tuple[dict, str | None]:
    """Decode one log into the store's staging area (runs in a worker process too).
    Returns its registry entry and the staging folder (None when rejected)."""
    store = Store(store_path)
    file_id = digest[:16]
    p = Path(path)
    entry: dict[str, Any] = {
        "file_id": file_id, "path": path, "sha256": digest, "size_bytes": p.stat().st_size,
        "ingested_at": _dt.datetime.now().replace(microsecond=0),
        "tandem_version": __version__, "dropped_results": 0,
    }
    staged = store.stage(file_id)
    try:
        entry.update(_decode_into(p, staged))
    except TandemError as e:
        staged.discard()
        entry.update(status="rejected", error=_one_line(e), format=entry.get("format"),
                     records=0, parts=0)
        return entry, None
    staged.close()
    return entry, str(staged.root)


def _decode_into(p: Path, staged: Staged) -> dict[str, Any]:
    stream, compression = open_input(p)
    with stream:
        try:
            head = stream.read(65536)
        except (OSError, EOFError, lzma.LZMAError, zstandard.ZstdError) as e:
            raise InputError(f"cannot decompress ({compression}): {e}") from None
        if not head:
            raise InputError("empty file" if compression == "none" else
                             f"empty after {compression} decompression")
        if head[2:4] == b"\x00\x0a":
            info = _decode_stdf(head, stream, staged)
        elif _sniff_csv(head):
            info = _decode_csv(head + stream.read(), str(p), staged)
        else:
            raise InputError("not a datalog: neither STDF V4 (no FAR record at the start) "
                             "nor a timing CSV (no lot_id,touchdown,site,part_id,block,"
                             "start_ms,end_ms header)")
    info["compression"] = compression
    return info


def _decode_stdf(head: bytes, stream: IO[bytes], staged: Staged) -> dict[str, Any]:
    dec = Decoder(Limits(batch_bytes=READ_BYTES))
    damage = None

    def put(batches: list) -> None:
        for name, table in batches:
            staged.write(name, table)

    try:
        put(dec.feed(head))
        while True:
            try:
                chunk = stream.read(READ_BYTES)
            except (OSError, EOFError, lzma.LZMAError, zstandard.ZstdError) as e:
                damage = f"compressed stream damaged after {dec._base + len(dec._buf)} bytes: {e}"
                break
            if not chunk:
                break
            put(dec.feed(chunk))
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
