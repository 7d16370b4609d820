"""Tandem's work as tasks on a Dask cluster: decoding each new log, deriving each lot,
writing each nightly report. ``pipeline.jobs.cluster`` makes the connection.

What runs where. Workers run top-level functions of this package over paths in the
store's folder, which they reach at the same absolute path (a shared filesystem): a
decode task writes the log's Parquet and per-file tables under ``<store>/staging/`` and
returns a small ``Decoded``; a derivation task reads and writes only under staging; a
report task reads the store (readers take no lock) and writes under the nightly's
``--out``. The client alone holds the store lock, renames into place and publishes, as
in a local run (``pipeline.store.commit``).

Faults. A worker that dies takes its running and finished-but-unfetched tasks with it;
the scheduler runs them again on another worker. A rerun decodes into a staging folder
of its own (``decode.stage``), so the folder of the lost attempt is never committed:
only the result the client receives is, once. Folders left behind are removed by the
next writer's recovery, which empties staging/. A log whose task kills a worker on every
try (Dask gives up after ``distributed.scheduler.allowed-failures``, default 3) is
reported as failed (exit 1) and not registered, so the next run tries it again.
"""

from __future__ import annotations

import os
from collections import deque
from collections.abc import Iterator, Sequence
from dataclasses import replace
from pathlib import Path
from typing import Any

from ..store.derive import FileTask, LotTask, Runner
from .cluster import Cluster, ClusterError, worker_release

# Derivation tasks jump the queue of decode tasks: the client is waiting on them to
# commit, while a decode result can wait (Dask runs higher priorities first).
DERIVE_PRIORITY = 10
# Most logs committed at once: decoded logs that are ready together are published in one
# commit, their lots derived side by side on the cluster (see DEVELOPERS.md).
BATCH = 16


def _same_release(release: str) -> None:
    if release != worker_release():
        raise ClusterError(f"worker on {os.uname().nodename} (pid {os.getpid()}) runs Tandem "
                           f"{worker_release()}, the client {release}: install the same "
                           f"release on every worker")


# -- decoding ---------------------------------------------------------------------------
def decode_task(release: str, store_path: str, path: str, shown: str, digest: str | None,
                limits: Any, rules: str | None) -> Any:
    """One log decoded on a worker (``decode.decode_to_staging``), its entry naming it as
    the client was given it."""
    from ..store.layout import STORE_FILE
    from .decode import decode_to_staging

    _same_release(release)
    for what, there in (("the store", os.path.join(store_path, STORE_FILE)), ("the log", path)):
        if not os.path.exists(there):
            raise ClusterError(f"worker on {os.uname().nodename} does not see {what} at "
                               f"{there}: every worker must reach the store and the logs at "
                               f"the same paths as the client (a shared filesystem)")
    return decode_to_staging(store_path, path, digest, limits, rules, shown=shown)


def decoded_batches(cluster: Cluster, store_path: Path, todo: Sequence[tuple[Path, str | None]],
                    limits: Any, rules: Path | None) -> Iterator[list[Any]]:
    """Every log of ``todo`` decoded on the cluster, in ``todo``'s order, as lists of the
    consecutive ones already done (at least one, at most BATCH)."""
    root = os.path.abspath(store_path)
    rules_s = os.path.abspath(rules) if rules is not None else None
    release = worker_release()
    pending = deque((cluster.submit(decode_task, release, root, os.path.abspath(p), str(p), d,
                                    limits, rules_s), p, d) for p, d in todo)
    try:
        while pending:
            batch = [_result(cluster, *pending.popleft())]  # waits for the next in order
            while pending and len(batch) < BATCH and pending[0][0].done():
                batch.append(_result(cluster, *pending.popleft()))
            yield batch
    finally:  # an error, or the caller stopped: nothing more is wanted
        if pending:
            cluster.client.cancel([f for f, _, _ in pending])


def _result(cluster: Cluster, future: Any, path: Path, digest: str | None) -> Any:
    from concurrent.futures import CancelledError

    from distributed import KilledWorker

    from .decode import Decoded

    try:
        return future.result()
    except KilledWorker as e:
        return Decoded({"path": str(path), "sha256": digest or "", "status": "failed",
                        "error": f"its decoding task was lost with a worker on every try "
                                 f"({e.allowed_failures + 1} tries; the log may exhaust a "
                                 f"worker's memory); not stored, a rerun tries it again"},
                       None)
    except (OSError, CancelledError):
        cluster.raise_if_lost(f"decoding {path}")
        raise
    finally:
        future.release()  # its result need not survive a worker: it is here now


# -- derivation -------------------------------------------------------------------------
def cluster_runner(cluster: Cluster) -> Runner:
    """Per-file and per-lot derivation on the cluster, even a single task: the client's
    own time is for committing."""
    from .derivation import file_task, lot_task

    def files(tasks: Sequence[FileTask]) -> list[dict[str, Path]]:
        return _derived(cluster.map(file_task, [absolute(t) for t in tasks], DERIVE_PRIORITY))

    def lots(tasks: Sequence[LotTask]) -> list[dict[str, Path]]:
        return _derived(cluster.map(lot_task, [absolute(t) for t in tasks], DERIVE_PRIORITY))

    return Runner(files, lots)


def _derived(results: list[dict[str, Path]]) -> list[dict[str, Path]]:
    return [{m: Path(p) for m, p in r.items()} for r in results]


def absolute(task: Any) -> Any:
    """A FileTask or LotTask whose paths a worker can open wherever its working folder
    is (the store may have been named relative to the client's)."""
    def a(p: Path) -> Path:
        return Path(os.path.abspath(p))

    rules = None if task.rules is None else a(task.rules)
    if isinstance(task, FileTask):
        return replace(task, root=a(task.root), out=a(task.out), rules=rules,
                       tables={k: a(v) for k, v in task.tables.items()})
    return replace(task, root=a(task.root), out=a(task.out), rules=rules,
                   per_file={k: [a(p) for p in v] for k, v in task.per_file.items()},
                   raw={k: [a(p) for p in v] for k, v in task.raw.items()})


# -- nightly reports --------------------------------------------------------------------
def report_task(store_path: str, folder: str, lot: str, blocks: str | None,
                reporter: Any) -> None:
    from ..store import Store

    reporter(Store(store_path), Path(folder), lot, blocks)


def run_reports(cluster: Cluster, store_path: Path, folders: dict[str, Path],
                blocks: str | None, reporter: Any) -> dict[str, BaseException | None]:
    """Each lot's report written by a worker; lot -> the error it raised, or None."""
    from distributed import KilledWorker

    root = os.path.abspath(store_path)
    blocks_s = os.path.abspath(blocks) if blocks is not None else None
    futures = {lot: cluster.submit(report_task, root, os.path.abspath(folder), lot, blocks_s,
                                   reporter) for lot, folder in folders.items()}
    out: dict[str, BaseException | None] = {}
    for lot, fut in futures.items():
        try:
            fut.result()
            out[lot] = None
        except KilledWorker:
            out[lot] = ClusterError("its task was lost with a worker on every try")
        except Exception as e:  # noqa: BLE001 - classified by the caller, as in a local run
            out[lot] = e
        finally:
            fut.release()
    return out
