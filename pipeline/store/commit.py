"""The commit protocol: publish new logs and their lots' derived tables at once.

One commit (number ``n``), under the store lock:

1. write ``meta/journal.json``: the lots touched, every folder this commit will create;
2. for each lot touched, build generation ``n`` of its derived tables in staging: the
   per-file outputs of its earlier logs carried over (hard links, no copy), those of the
   new logs moved in (or derived here), the per-lot models computed afresh, and
   ``lot_files``, the list of the logs it covers;
3. rename each new log's staged tables into ``tables/`` (no view shows them yet: a log's
   rows count only once a published generation lists it);
4. publish: rename each lot's new generation into ``derived/`` — **the commit point** of
   that lot (one rename: its logs, derived rows and aggregates appear together);
5. bookkeeping: rejected logs' entries, the writer's index and state, superseded
   generations onto ``meta/gc.json``, the journal removed.

After a crash, ``recover`` reads the journal: a commit whose every generation was
published is finished (5 again); any other is undone (what it created is removed), so
the store is as it was before that commit or after it, never between. Superseded
generations are removed once no reader can still be reading them (``GC_GRACE_S``).
"""

from __future__ import annotations

import os
import shutil
import time
import uuid
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from .derive import FileTask, LotTask, Runner, file_models
from .layout import (
    GC_LIST,
    JOURNAL,
    LOGS,
    LOT_FILES,
    REJECTED,
    STAGING,
    TABLES,
    gen_dir,
    raw_dir,
)
from .registry import KEEP, SCHEMA, Registry, read_json, write_json

GC_GRACE_S = float(os.environ.get("TANDEM_GC_GRACE", "600"))


@dataclass
class Share:
    """One log's rows filed under one lot (an STDF log has one share; a CSV, one per lot)."""

    lot: str
    tables: dict[str, Path]                  # raw table -> staged folder
    derived: dict[str, Path] | None = None   # per-file model -> staged Parquet (None: to do)


@dataclass
class Incoming:
    """A decoded log ready to commit: its registry fields and its shares (none when the
    log was rejected)."""

    entry: dict[str, Any]
    shares: list[Share] = field(default_factory=list)
    staging: Path | None = None              # removed once committed

    @property
    def file_id(self) -> str:
        return str(self.entry["file_id"])


def commit(root: Path, registry: Registry, incoming: Sequence[Incoming], runner: Runner,
           refresh: frozenset[str] = frozenset(), rules: Path | None = None,
           rules_sha: str | None | object = KEEP, models: str | None = None) -> Registry:
    """Publish ``incoming`` and re-derive their lots and the lots in ``refresh`` (every
    per-file model again too: the rules changed). Returns the registry now current."""
    n = registry.commit + 1
    work = root / STAGING / f"commit-{n}.{os.getpid()}.{uuid.uuid4().hex[:8]}"
    touched = sorted({s.lot for inc in incoming for s in inc.shares} | set(refresh))
    rows = [{**inc.entry, "lot_id": s.lot} for inc in incoming for s in inc.shares]
    rejected = [inc for inc in incoming if not inc.shares]
    after = registry.with_commit(rows + [{**inc.entry, "lot_id": None} for inc in rejected],
                                 set(touched), rules_sha, models)
    write_json(root / JOURNAL, {
        "commit": n, "lots": touched, "work": str(work.relative_to(root)),
        "raw": [str(raw_dir(root, t, s.lot, inc.file_id).relative_to(root))
                for inc in incoming for s in inc.shares for t in s.tables],
        "rejected": [inc.file_id for inc in rejected],
        "superseded": [str(gen_dir(root, lot, registry.gens[lot]).relative_to(root))
                       for lot in touched if lot in registry.gens],
        "rules_sha": after.rules_sha, "models": after.models})
    _build_generations(root, work, registry, after, touched, incoming, refresh, runner,
                       rules)
    _write_rejected(root, after.commit, rejected)  # they have no rows: nothing to wait for
    for inc in incoming:
        for s in inc.shares:
            for table, src in s.tables.items():
                dst = raw_dir(root, table, s.lot, inc.file_id)
                dst.parent.mkdir(parents=True, exist_ok=True)
                if dst.exists():  # left by an undone commit whose clean-up was cut short
                    shutil.rmtree(dst)
                os.rename(src, dst)
    for lot in touched:                          # <- the commit point, lot by lot
        _move(gen_dir(work, lot, n), gen_dir(root, lot, n))
    _finish(root, after)
    for inc in incoming:
        if inc.staging is not None:
            shutil.rmtree(inc.staging, ignore_errors=True)
    shutil.rmtree(work, ignore_errors=True)
    return after


def _write_rejected(root: Path, n: int, rejected: Sequence[Incoming]) -> None:
    import pyarrow as pa

    from .parquet import write_parquet

    for inc in rejected:
        write_parquet(pa.Table.from_pylist([{**inc.entry, "lot_id": None, "commit_id": n}],
                                           schema=SCHEMA),
                      root / REJECTED / f"{inc.file_id}.parquet")


def _finish(root: Path, after: Registry) -> None:
    after.write(root)
    j = read_json(root / JOURNAL) or {}
    add_garbage(root, j.get("superseded", []))
    (root / JOURNAL).unlink(missing_ok=True)


def _build_generations(root: Path, work: Path, before: Registry, after: Registry,
                       lots: Sequence[str], incoming: Sequence[Incoming],
                       refresh: frozenset[str], runner: Runner, rules: Path | None) -> None:
    """Generation ``after.commit`` of every lot in ``lots``, complete, under ``work``."""
    import pyarrow.parquet as pq

    n = after.commit
    todo: list[tuple[str, str, FileTask]] = []
    new = {(s.lot, inc.file_id): s for inc in incoming for s in inc.shares}
    for lot in lots:
        for fid in after.files_of(lot):
            share = new.get((lot, fid))
            if share is not None and share.derived is not None and lot not in refresh:
                for model, path in share.derived.items():
                    _move(path, _out(work, lot, n, model, fid))
            elif share is not None or lot in refresh:
                tables = share.tables if share is not None else _tables_of(root, lot, fid)
                todo.append((lot, fid, FileTask(root, fid, tables,
                                                work / "files" / str(len(todo)), rules)))
            else:
                for model in file_models():
                    _link(_out(root, lot, before.gens[lot], model, fid),
                          _out(work, lot, n, model, fid))
    for (lot, fid, _), outputs in zip(todo, runner.files([t for _, _, t in todo]), strict=True):
        for model, path in outputs.items():
            _move(path, _out(work, lot, n, model, fid))
    tasks = []
    for i, lot in enumerate(lots):
        fids = after.files_of(lot)
        listed = gen_dir(work, lot, n) / LOT_FILES / "part-0.parquet"
        listed.parent.mkdir(parents=True, exist_ok=True)
        pq.write_table(after.rows_of(lot), listed)
        (gen_dir(work, lot, n) / LOGS).mkdir()
        for fid in fids:  # what the raw views list to know which logs count
            (gen_dir(work, lot, n) / LOGS / fid).touch()
        tasks.append(LotTask(root, lot, {m: [_out(work, lot, n, m, f) for f in fids]
                                         for m in file_models()},
                             _raw_files(root, lot, fids, new), work / "lots" / str(i), rules))
    for task, outputs in zip(tasks, runner.lots(tasks), strict=True):
        for model, path in outputs.items():
            _move(path, gen_dir(work, task.lot, n) / model / "part-0.parquet")


def _out(base: Path, lot: str, gen: int, model: str, file_id: str) -> Path:
    return gen_dir(base, lot, gen) / model / f"{file_id}.parquet"


def _tables_of(root: Path, lot: str, file_id: str) -> dict[str, Path]:
    """A committed log's raw tables in ``lot`` (the ones it has rows in)."""
    out = {}
    for table_dir in sorted((root / TABLES).iterdir()):
        d = raw_dir(root, table_dir.name, lot, file_id)
        if (d / "part-0.parquet").exists():
            out[table_dir.name] = d
    return out


def _raw_files(root: Path, lot: str, fids: Sequence[str],
               new: dict[tuple[str, str], Share]) -> dict[str, list[Path]]:
    """Every raw file of the lot's logs (new ones still where they were staged)."""
    out: dict[str, list[Path]] = {}
    for fid in fids:
        share = new.get((lot, fid))
        tables = share.tables if share is not None else _tables_of(root, lot, fid)
        for table, d in sorted(tables.items()):
            out.setdefault(table, []).append(Path(d) / "part-0.parquet")
    return out


def _move(src: Path, dst: Path) -> None:
    dst.parent.mkdir(parents=True, exist_ok=True)
    os.replace(src, dst)


def _link(src: Path, dst: Path) -> None:
    """Carry an unchanged file into the new generation: a hard link (no copy, no space),
    or a copy where the filesystem has none."""
    dst.parent.mkdir(parents=True, exist_ok=True)
    try:
        os.link(src, dst)
    except OSError:
        shutil.copyfile(src, dst)


# -- recovery and garbage ----------------------------------------------------------------
def recover(root: Path, registry: Registry) -> Registry:
    """After a crash: finish a commit whose every generation was published, undo any
    other (remove what it created), remove staging and old garbage. Returns the
    registry as it now stands."""
    j = read_json(root / JOURNAL)
    if j is not None and int(j.get("commit", 0)) > registry.commit:
        registry = _finish_or_undo(root, registry, j)
    elif j is not None:
        (root / JOURNAL).unlink(missing_ok=True)
    shutil.rmtree(root / STAGING, ignore_errors=True)
    collect_garbage(root)
    return registry


def _finish_or_undo(root: Path, registry: Registry, j: dict[str, Any]) -> Registry:
    n = int(j["commit"])
    published = all((gen_dir(root, lot, n) / LOT_FILES).is_dir() for lot in j["lots"])
    if published and all((root / r).is_dir() for r in j["raw"]):
        done = Registry.rebuild(root, n, j.get("rules_sha"), j.get("models"))
        _finish(root, done)
        return done
    for lot in j["lots"]:
        shutil.rmtree(gen_dir(root, lot, n), ignore_errors=True)
    for rel in j["raw"]:
        shutil.rmtree(root / rel, ignore_errors=True)
    for fid in j.get("rejected", []):
        (root / REJECTED / f"{fid}.parquet").unlink(missing_ok=True)
    (root / JOURNAL).unlink(missing_ok=True)
    return Registry.rebuild(root, registry.commit, registry.rules_sha, registry.models)


def collect_garbage(root: Path, grace_s: float | None = None) -> int:
    """Remove superseded generations older than the grace period; returns how many."""
    grace = GC_GRACE_S if grace_s is None else grace_s
    items = (read_json(root / GC_LIST) or {}).get("items", [])
    now = time.time()
    keep, removed = [], 0
    for item in items:
        if now - float(item["at"]) >= grace:
            shutil.rmtree(root / item["path"], ignore_errors=True)
            removed += 1
        else:
            keep.append(item)
    if removed:
        write_json(root / GC_LIST, {"items": keep})
    return removed


def add_garbage(root: Path, paths: list[str]) -> None:
    if not paths:
        return
    items = (read_json(root / GC_LIST) or {}).get("items", [])
    now = time.time()
    items += [{"path": p, "at": now} for p in paths]
    write_json(root / GC_LIST, {"items": items})
