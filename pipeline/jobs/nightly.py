"""The nightly job: store what is new in an inbox, refresh the timing tables, flag the
blocks that drifted, write a report per lot touched, and leave ``status.json`` for the
scheduler.

Safe to run from cron:

- **One at a time.** The whole run holds the store's write lock. By default a second run
  does not wait (``lock_timeout=0``): it exits 1 at once with "another writer holds the
  store lock (pid N)" and touches nothing, not even ``status.json`` (the running job owns
  it); the next scheduled run catches up. ``--lock-timeout S`` waits up to S seconds.
- **Resumable.** ``status.json`` is written "running" before any work and the outcome
  last, each time atomically (written aside, renamed into place). A run that is killed
  leaves "running"; the next run, holding the lock, knows that one died, says so
  (``previous_run``), ingests what it had not stored (ingest commits per file, so nothing
  is half-stored) and reports the lots it had touched as well as its own.
- **Idempotent.** Files already stored are skipped at the cost of hashing them; a rerun
  with nothing new writes no report and exits 0.

With ``cluster`` (a Dask scheduler address) the decoding, the derivation and the
per-lot reports run on its workers (pipeline.jobs.cluster_tasks); this process holds the lock
and commits. The scheduler is reached before anything is written: when it does not
answer, the run exits 1 and leaves even ``status.json`` as it was.

Exit codes (DESIGN.md): 0 ok; 3 some inputs rejected or only partly stored (the rest
processed); 1 internal error (a file failed reconciliation, a report could not be
written, or the lock is held); 2 usage error (no such inbox, bad block map).
"""

from __future__ import annotations

import datetime as _dt
import hashlib
import json
import os
import re
import socket
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

from ..errors import InputError, TandemError, UsageError
from ..store import Store
from .cluster import DEFAULT_TIMEOUT_S, Cluster, connected
from .decode import InputLimits
from .ingest import IngestReport, ingest

STATUS_FILE = "status.json"
REPORTS_DIR = "reports"
Reporter = Callable[[Store, Path, str, "str | None"], Any]


def run_nightly(inbox: str | os.PathLike[str], store_dir: str | os.PathLike[str],
                out: str | os.PathLike[str], blocks: str | None = None,
                lock_timeout: float = 0.0, workers: int | None = None,
                limits: InputLimits | None = None,
                reporter: Reporter | None = None, cluster: str | None = None,
                cluster_timeout: float = DEFAULT_TIMEOUT_S) -> dict[str, Any]:
    """Run the nightly job once; returns the final status (also in ``out/status.json``),
    whose ``exit_code`` is the process's. ``reporter(store, folder, lot, blocks)`` writes
    one lot's report (default: ``pipeline.report.build_report``; with a cluster it runs
    on a worker, so it must be picklable). ``cluster``: a Dask scheduler's address."""
    inbox_p, out_p = Path(inbox), Path(out)
    if not inbox_p.is_dir():
        raise UsageError(f"{inbox_p}: --inbox must be an existing folder")
    bm = _load_blocks(blocks)
    limits = limits or InputLimits.from_env()  # a bad TANDEM_MAX_DECOMPRESSED: exit 2 now
    if out_p.exists() and not out_p.is_dir():
        raise UsageError(f"{out_p}: --out must be a folder")
    store = Store(store_dir, lock_timeout=lock_timeout)
    with connected(cluster, cluster_timeout) as remote:  # unreachable: exit 1, no trace
        try:
            out_p.mkdir(parents=True, exist_ok=True)
        except OSError as e:
            raise UsageError(f"{out_p}: cannot create the --out folder: "
                             f"{e.strerror or e}") from None
        if out_p.is_file() or not out_p.is_dir():
            raise UsageError(f"{out_p}: --out must be a folder")
        with store.writer():  # StoreError (exit 1) when another run holds it: nothing touched
            return _run_locked(store, inbox_p, out_p, blocks, bm, workers, limits,
                               reporter or _build_report, remote)


def _run_locked(store: Store, inbox: Path, out: Path, blocks: str | None, bm: Any,
                workers: int | None, limits: InputLimits | None,
                reporter: Reporter, cluster: Cluster | None = None) -> dict[str, Any]:
    previous = read_status(out)
    started = _now()
    status: dict[str, Any] = {
        "state": "running", "started_at": started.isoformat(), "finished_at": None,
        "pid": os.getpid(), "host": socket.gethostname(), "inbox": str(inbox),
        "store": str(store.path), "out": str(out), "blocks": blocks,
    }
    since, note = _since(previous, started)
    if note is not None:
        status["previous_run"] = note
    status["since"] = since.isoformat()
    write_status(out, status)
    try:
        _work(store, inbox, out, blocks, bm, workers, limits, reporter, status, since,
              cluster)
    except TandemError as e:  # e.g. the store cannot be written
        status.update(error=" ".join(str(e).split()), exit_code=e.exit_code)
        _finish(out, status, "failed")
        raise
    except BaseException as e:  # a bug, or interrupted: say so, then let it propagate
        status.update(error=f"{type(e).__name__}: {' '.join(str(e).split())}", exit_code=1)
        _finish(out, status, "failed")
        raise
    return _finish(out, status, "finished")


def _work(store: Store, inbox: Path, out: Path, blocks: str | None, bm: Any,
          workers: int | None, limits: InputLimits | None, reporter: Reporter,
          status: dict[str, Any], since: _dt.datetime, cluster: Cluster | None) -> None:
    from ..attribute import timing
    from .derivation import set_block_rules

    runner = None
    if cluster is not None:
        from .cluster_tasks import cluster_runner

        runner = cluster_runner(cluster)
    # Rules first: the new logs are then derived with them, once.
    rederived = set_block_rules(store, bm, runner) if bm is not None else []
    report = ingest(store, inbox_files(inbox, [store.path, out]), workers=workers,
                    limits=limits, runner=runner, cluster=cluster)
    status.update(_ingest_summary(report))
    lots = sorted(set(lots_since(store, since, [r["file_id"] for r in report.ingested]))
                  | set(rederived))
    status["lots"] = lots
    status["rederived_lots"] = rederived
    warnings = [f"estimate: {w}" for lot in lots for w in timing.warnings(store, lot)]
    status["drift"] = drift_flags(store, lots)
    reports, errors = _write_reports(store, out, lots, blocks, reporter, warnings, cluster)
    status.update(reports=reports, warnings=warnings, errors=errors)
    code = report.exit_code
    status["exit_code"] = 1 if errors or code == 1 else code


def _write_reports(store: Store, out: Path, lots: list[str], blocks: str | None,
                   reporter: Reporter, warnings: list[str], cluster: Cluster | None = None
                   ) -> tuple[list[dict[str, str]], list[str]]:
    """One report per lot, in out/reports/<safe name>/ (with a cluster, each a task on
    its workers); a lot with nothing to report is a warning, a report that fails is an
    error (exit 1) and the other lots go on."""
    folders = {lot: out / REPORTS_DIR / safe_name(lot) for lot in lots}
    if cluster is not None:
        from .cluster_tasks import run_reports

        outcomes = run_reports(cluster, store.path, folders, blocks, reporter)
    else:
        outcomes = {lot: _try_report(reporter, store, folders[lot], lot, blocks)
                    for lot in lots}
    reports, errors = [], []
    for lot in lots:
        e = outcomes[lot]
        if e is None:
            reports.append({"lot_id": lot, "folder": str(folders[lot])})
        elif isinstance(e, InputError):  # the lot has nothing to report (no block times)
            warnings.append(f"report for lot {lot!r} not written: {_line(e)}")
        else:
            errors.append(f"report for lot {lot!r} failed: {type(e).__name__}: {_line(e)}")
    return reports, errors


def _try_report(reporter: Reporter, store: Store, folder: Path, lot: str,
                blocks: str | None) -> BaseException | None:
    try:
        reporter(store, folder, lot, blocks)
    except Exception as e:  # noqa: BLE001 - a bug in one report must not lose the rest
        return e
    return None


def _since(previous: dict[str, Any] | None,
           started: _dt.datetime) -> tuple[_dt.datetime, dict[str, Any] | None]:
    """From when stored files count as new: lots of every file stored since then are
    reported. After a run that finished: the second after it finished (files another
    writer stored in between count too). After one that did not (killed: status.json
    still says running; or failed): that run's own ``since``, so its lots are reported
    now. First run: this run's start."""
    if previous is None:
        return started, None
    if previous.get("state") == "finished":
        end = _parse_time(previous.get("finished_at"))
        return (started if end is None else end + _dt.timedelta(seconds=1)), None
    state = ("killed or crashed (status.json still said running)"
             if previous.get("state") == "running" else str(previous.get("state")))
    note = {"state": state, "started_at": previous.get("started_at"),
            "pid": previous.get("pid"), "error": previous.get("error")}
    since = _parse_time(previous.get("since") or previous.get("started_at"))
    return (since or started), note


def inbox_files(inbox: Path, exclude: list[Path]) -> list[Path]:
    """Every file under the inbox (as ingest finds them), except the store's and this
    job's own outputs when they live inside it: else each run would reject its own
    status.json and reports as "not a datalog" and exit 3 every night."""
    from .decode import find_inputs

    files, _ = find_inputs([inbox])
    skip = [e.resolve() for e in exclude]
    return [f for f in files if not any(f.resolve().is_relative_to(e) for e in skip)]


def _ingest_summary(report: IngestReport) -> dict[str, Any]:
    partial = [{"path": r["path"], "reason": r["error"]} for r in report.ingested
               if r.get("status") == "partial"]
    return {
        "counts": {"ingested": len(report.ingested), "partial": len(partial),
                   "skipped": len(report.skipped), "rejected": len(report.rejected),
                   "failed": len(report.failed)},
        "ingested": [{k: r[k] for k in ("path", "file_id", "format", "status", "records",
                                        "parts")} for r in report.ingested],
        "partial": partial, "rejected": report.rejected, "failed": report.failed,
        "skipped": report.skipped, "problems": report.problems,
    }


def lots_since(store: Store, since: _dt.datetime, file_ids: Sequence[str] = ()) -> list[str]:
    """Lots of every file stored (ok or partial) at or after ``since``, and of these."""
    df = store.sql("""
        select distinct lot_id from raw_files
        where status in ('ok', 'partial') and lot_id is not null
          and (ingested_at >= ? or list_contains(?::varchar[], file_id))
        order by lot_id""", [since.replace(microsecond=0), list(file_ids)])
    return [str(v) for v in df["lot_id"].to_list()]


def drift_flags(store: Store, lots: list[str]) -> list[dict[str, Any]]:
    """timing.drift's flagged rows for these lots: block, lot, mean, baseline, change."""
    from ..attribute import timing

    df = timing.drift(store)
    out = []
    for r in df.filter(df["is_flagged"]).iter_rows(named=True):
        if r["lot_id"] not in lots:
            continue
        base = r["baseline_ms"]
        out.append({"lot_id": r["lot_id"], "block": r["block"], "kind": r["kind"],
                    "method": r["method"],
                    "mean_ms": round(r["mean_ms"], 3), "baseline_ms": round(base, 3),
                    "change_pct": round(100.0 * (r["mean_ms"] - base) / base, 2)
                    if base else None})
    return out


def safe_name(lot: str) -> str:
    """A folder name for a lot id from a log (untrusted): safe characters only, and a
    hash of the whole id so that ids differing only in unsafe characters stay apart."""
    stem = re.sub(r"[^A-Za-z0-9_-]+", "_", lot)[:60].strip("_") or "lot"
    return f"{stem}-{hashlib.sha256(lot.encode('utf-8', 'surrogatepass')).hexdigest()[:8]}"


def _build_report(store: Store, folder: Path, lot: str, blocks: str | None) -> Any:
    from ..report import build_report

    return build_report(store, folder, blocks=blocks, lot=lot)


# -- status.json ------------------------------------------------------------------------
def read_status(out: str | os.PathLike[str]) -> dict[str, Any] | None:
    """The last status written in ``out``, or None (missing or unreadable)."""
    try:
        got = json.loads((Path(out) / STATUS_FILE).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    return got if isinstance(got, dict) else None


def write_status(out: Path, status: dict[str, Any]) -> None:
    """Atomically: a reader sees the old status or the new one, never half of one."""
    target = out / STATUS_FILE
    tmp = target.with_name(f".{STATUS_FILE}.{os.getpid()}.tmp")
    with tmp.open("w", encoding="utf-8") as fh:
        fh.write(json.dumps(status, indent=1, default=str, ensure_ascii=True) + "\n")
        fh.flush()
        os.fsync(fh.fileno())
    os.replace(tmp, target)


def _finish(out: Path, status: dict[str, Any], state: str) -> dict[str, Any]:
    status.update(state=state, finished_at=_now().isoformat())
    status.setdefault("exit_code", 1)
    write_status(out, status)
    return status


# -- helpers ----------------------------------------------------------------------------
def _load_blocks(blocks: str | None) -> Any:
    if blocks is None:
        return None
    from ..plan.blockmap import load_block_map

    return load_block_map(blocks)  # ConfigError (exit 2) before anything is touched


def _now() -> _dt.datetime:
    # Naive local time, like files.ingested_at (decode.decode_to_staging).
    return _dt.datetime.now().replace(microsecond=0)


def _parse_time(value: Any) -> _dt.datetime | None:
    try:
        return _dt.datetime.fromisoformat(str(value))
    except ValueError:
        return None


def _line(e: BaseException) -> str:
    return " ".join(str(e).split())
