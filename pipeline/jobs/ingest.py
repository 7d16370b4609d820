"""Ingest orchestration: find inputs, skip what is stored, have each new log decoded
(pipeline/jobs/decode.py: here, in worker processes or on a cluster), and commit it with
its lot's refreshed aggregates — one log at a time, atomically.

A bad log never stops the run: it is reported (``rejected``, or ``partial`` when the
parts before the damage were kept) and the next one goes on. Decoding and the per-file
derivation run in worker processes when there is enough to do; the per-lot derivation
and the commit run here, one log after another, while the workers decode the next ones.
"""

from __future__ import annotations

import os
import shutil
import signal
import sys
from collections.abc import Callable, Iterable, Iterator
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

from ..lean import keep_pandas_out
from ..store import Store
from ..store.commit import Incoming, Runner, Share
from .decode import (
    Decoded,
    InputLimits,
    decode_to_staging,
    find_inputs,
    sha256_of,
)

if TYPE_CHECKING:
    from .cluster import Cluster

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


def ingest(store: Store, paths: Iterable[str | os.PathLike[str]], workers: int | None = None,
           progress: Callable[[int, int, str], None] | None = None,
           limits: InputLimits | None = None, runner: Runner | None = None,
           cluster: Cluster | None = None) -> IngestReport:
    """Store every new log under ``paths``; see IngestReport for what came of each.
    ``limits``: default InputLimits.from_env(). ``runner``: where the per-lot derivation
    runs (default: this process; with ``cluster``, its workers). ``cluster``: decode and
    derive on a Dask cluster (pipeline.jobs.cluster_tasks); ``workers`` is then not used."""
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
        return Incoming(registry_fields(entry))
    assert root is not None
    base = Path(root)
    shares = [Share(lot, {t: base / d for t, d in tables.items()},
                    {m: base / f for m, f in decoded.derived[lot].items()}
                    if lot in decoded.derived else None)
              for lot, tables in sorted(decoded.shares.items())]
    return Incoming(registry_fields(entry), shares, base)


def registry_fields(entry: dict[str, Any]) -> dict[str, Any]:
    from ..read.schemas import FILES

    return {k: entry.get(k) for k in ("file_id", *FILES.names)}


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
