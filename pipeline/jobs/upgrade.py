"""`tandem upgrade`: bring a store written by an earlier release up to date, in place.

Two cases, both explicit (no other command changes a store's layout behind its back):

- **layout 1** (the first release: one registry file per log under ``tables/files/``,
  tables partitioned by file only, estimates under ``derived/block_estimates``): each
  log's folders move under the lot its rows belong to (``tables/<t>/lot=<k>/file_id=<id>``;
  a timing CSV holding several lots is split), the registry becomes one file, the block
  rules are kept, and then every lot is derived;
- **other models**: the store's layout is current but its derived tables were made by
  other SQL or Python models: every lot is derived again from its raw tables.

Either way the raw tables are never rewritten (but for splitting a multi-lot CSV), and a
run that is interrupted can be run again: it goes on from where it stopped.
"""

from __future__ import annotations

import json
import os
import shutil
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from .. import __version__
from ..errors import UsageError
from ..store import Store
from ..store.layout import (
    DERIVED,
    FORMAT,
    LOT,
    REJECTED,
    SCHEMA_KEY,
    STORE_FILE,
    TABLES,
    raw_dir,
)
from ..store.staging import UNKNOWN_LOT


@dataclass
class UpgradeReport:
    from_layout: int
    files: int = 0                 # logs moved into the new layout (layout 1 only)
    lots: list[str] = field(default_factory=list)  # lots derived
    notes: list[str] = field(default_factory=list)


def upgrade(store: Store) -> UpgradeReport:
    """Convert and re-derive; see the module docstring. UsageError when there is no
    store at all."""
    from .derivation import local_runner, rules_table_from

    legacy = _is_layout1(store.path)
    if not legacy and not store.exists:
        raise UsageError(f"{store.path}: no store here to upgrade")
    report = UpgradeReport(from_layout=1 if legacy else FORMAT)
    with store.writer(upgrading=True):
        rules = None
        if legacy:
            rules = _old_rules(store.path)
            report.files = _convert_layout1(store)
        _reset_derived(store.path)
        store._create()  # schema files of this release; store.json last
        from ..store.registry import Registry

        store._registry = Registry.read(store.path)
        lots = sorted(set(store.snapshot().lots()) | set(_lots_without_gen(store)))
        store.commit([], local_runner(), refresh=frozenset(lots),
                     rules=rules_table_from(rules) if rules is not None else None)
        report.lots = lots
        store.write_catalog()
    return report


def _is_layout1(root: Path) -> bool:
    return not (root / STORE_FILE).exists() and (root / TABLES / "files").is_dir()


def _lots_without_gen(store: Store) -> list[str]:
    """Lots of committed logs (a converted store's lots have no generation yet)."""
    t = store.snapshot().table
    return sorted({lot for lot, st in zip(t.column("lot_id").to_pylist(),
                                          t.column("status").to_pylist(), strict=True)
                   if lot is not None and st in ("ok", "partial")})


def _reset_derived(root: Path) -> None:
    """Remove the derived schema files: they are written again, from this release's
    models (each lot's generations are replaced by the re-derivation, the old ones
    removed later like any superseded generation)."""
    shutil.rmtree(root / DERIVED / f"{LOT}={SCHEMA_KEY}", ignore_errors=True)


# -- layout 1 -----------------------------------------------------------------------------
def _old_registry(root: Path) -> list[dict[str, Any]]:
    import pyarrow.parquet as pq

    rows = []
    for d in sorted((root / TABLES / "files").glob("file_id=*")):
        f = d / "part-0.parquet"
        if d.name == "file_id=_schema" or not f.exists():
            continue
        for r in pq.read_table(f).to_pylist():
            rows.append({**r, "file_id": d.name.removeprefix("file_id=")})
    return rows


def _old_rules(root: Path) -> list[dict[str, Any]] | None:
    import pyarrow.parquet as pq

    for f in sorted((root / DERIVED / "block_rules").glob("key=[!_]*/part-0.parquet")):
        return pq.read_table(f).to_pylist()
    return None


def _lots_of(root: Path, file_id: str) -> list[str]:
    """The lots a layout-1 log's rows belong to: its MIR LOT_ID, or the CSV's lot ids."""
    import pyarrow.parquet as pq

    mir = root / TABLES / "mir" / f"file_id={file_id}" / "part-0.parquet"
    if mir.exists():
        lots = pq.read_table(mir, columns=["lot_id"]).column("lot_id").to_pylist()
        return [lots[0] or UNKNOWN_LOT] if lots else [UNKNOWN_LOT]
    csv = root / TABLES / "timing_csv" / f"file_id={file_id}" / "part-0.parquet"
    if csv.exists():
        return sorted(set(pq.read_table(csv, columns=["lot_id"]).column("lot_id").to_pylist()))
    return [UNKNOWN_LOT]


def _convert_layout1(store: Store) -> int:
    """Move every layout-1 log under its lot and write the one-file registry."""
    import pyarrow as pa

    from ..store.registry import SCHEMA, Registry

    root = store.path
    entries = _old_registry(root)
    rows = []
    for e in entries:
        committed = e.get("status") in ("ok", "partial")
        lots = _lots_of(root, e["file_id"]) if committed else [None]
        for lot in lots:
            rows.append({**e, "lot_id": lot, "commit_id": 0, "lot_gen": None})
        if committed:
            _move_log(root, e["file_id"], [lot for lot in lots if lot is not None])
    for table_dir in (root / TABLES).iterdir():  # unregistered leftovers, old schema files
        if table_dir.is_dir() and table_dir.name != "files":
            for d in table_dir.glob("file_id=*"):
                shutil.rmtree(d, ignore_errors=True)
    from ..store.parquet import write_parquet

    for r in rows:
        if r["lot_id"] is None:
            write_parquet(pa.Table.from_pylist([r], schema=SCHEMA),
                          root / REJECTED / f"{r['file_id']}.parquet")
    Registry(pa.Table.from_pylist(rows, schema=SCHEMA), {}, 0).write(root)
    shutil.rmtree(root / DERIVED, ignore_errors=True)  # made again by the derivation
    shutil.rmtree(root / TABLES / "files", ignore_errors=True)
    (root / "catalog.duckdb").unlink(missing_ok=True)
    tmp = root / f".{STORE_FILE}.{os.getpid()}.tmp"
    tmp.write_text(json.dumps({"format": FORMAT, "created_by": f"tandem {__version__}",
                               "upgraded_from": 1}) + "\n", encoding="utf-8")
    os.replace(tmp, root / STORE_FILE)
    return len([e for e in entries if e.get("status") in ("ok", "partial")])


def _move_log(root: Path, file_id: str, lots: list[str]) -> None:
    import pyarrow.compute as pc
    import pyarrow.parquet as pq

    from ..store.parquet import write_parquet

    for table_dir in sorted((root / TABLES).iterdir()):
        src = table_dir / f"file_id={file_id}"
        if table_dir.name == "files" or not src.is_dir():
            continue
        if len(lots) == 1:
            dst = raw_dir(root, table_dir.name, lots[0], file_id)
            dst.parent.mkdir(parents=True, exist_ok=True)
            os.rename(src, dst)
            continue
        t = pq.read_table(src / "part-0.parquet")  # a timing CSV of several lots: split
        for lot in lots:
            write_parquet(t.filter(pc.equal(t.column("lot_id"), lot)),
                          raw_dir(root, table_dir.name, lot, file_id) / "part-0.parquet")
        shutil.rmtree(src)
