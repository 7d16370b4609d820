"""The writer's registry: every log the store has seen, which lot each one's rows are
filed under, and the current generation of each lot's derived tables.

What readers see is decided elsewhere, by files that never change once written: each
lot's newest generation folder lists its logs (``lot_files``) and rejected logs have a
file each under ``meta/rejected/``. This registry is the writer's summary of the same
facts, kept in ``meta/index.parquet`` (read by writers only, with pyarrow) so that a
writer need not read every lot to know what is stored; ``meta/state.json`` holds the
last commit's number, the block rules and the derivation the derived tables follow. If
the two disagree (a crash between them), the registry is rebuilt from the lots.
"""

from __future__ import annotations

import functools
import json
import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from ..read.schemas import FILES
from .layout import DERIVED, GEN, INDEX, LOT, LOT_FILES, REJECTED, SCHEMA_KEY, STATE, lot_from_key
from .parquet import write_parquet

# One row per (log, lot): a timing CSV may hold several lots, an STDF log one, a rejected
# log none (lot_id null). The same columns are each generation's lot_files.
SCHEMA = pa.schema([("file_id", pa.large_string()), ("lot_id", pa.large_string()),
                    *FILES, ("commit_id", pa.int64())])
COMMITTED = ("ok", "partial")
KEEP = object()  # with_commit: the rules stay as they are
_META = b"tandem"


@dataclass
class Registry:
    """One snapshot of the registry (immutable in use: ``with_commit`` makes the next)."""

    table: pa.Table = field(default_factory=SCHEMA.empty_table)
    gens: dict[str, int] = field(default_factory=dict)  # lot -> current generation
    commit: int = 0               # the last commit's number (0: none yet)
    rules_sha: str | None = None  # the rules the derived tables follow (None: no rules)
    models: str | None = None     # the derivation (pipeline.store.derivation_version())

    # -- reading and writing ----------------------------------------------------------
    @classmethod
    def read(cls, root: Path) -> Registry:
        """The registry as the writer left it; rebuilt from the lots when the index is
        missing or belongs to another commit than state.json."""
        state = read_json(root / STATE) or {}
        commit = int(state.get("commit", 0))
        path = root / INDEX
        if path.exists():
            meta = json.loads((pq.read_schema(path).metadata or {}).get(_META, b"{}"))
            if meta.get("commit") == commit:
                t = pq.read_table(path, schema=SCHEMA)
                return cls(t, {k: int(v) for k, v in meta.get("gens", {}).items()}, commit,
                           state.get("rules_sha"), state.get("models"))
        return cls.rebuild(root, commit, state.get("rules_sha"), state.get("models"))

    @classmethod
    def rebuild(cls, root: Path, commit: int, rules_sha: str | None,
                models: str | None) -> Registry:
        """From what readers see: each lot's newest generation, and the rejected logs."""
        gens = current_generations(root)
        parts = [pq.read_table(_lot_files(root, key, g), schema=SCHEMA)
                 for key, g in sorted(gens.items())]
        parts += [pq.read_table(f, schema=SCHEMA)
                  for f in sorted((root / REJECTED).glob("[!_]*.parquet"))]
        table = pa.concat_tables(parts) if parts else SCHEMA.empty_table()
        return cls(table, {lot_from_key(k): g for k, g in gens.items()}, commit, rules_sha,
                   models)

    def write(self, root: Path) -> None:
        """The index, then state.json: a reader of both (a writer) trusts the index only
        when their commit numbers agree."""
        meta = json.dumps({"commit": self.commit, "gens": self.gens})
        write_parquet(self.table.replace_schema_metadata({_META: meta.encode()}),
                      root / INDEX, compression="zstd")
        write_json(root / STATE, {"commit": self.commit, "rules_sha": self.rules_sha,
                                  "models": self.models})

    # -- questions ------------------------------------------------------------------
    def sizes(self) -> set[int]:
        return set(self.table.column("size_bytes").to_pylist())

    @functools.cached_property
    def _by_sha(self) -> dict[str, dict[str, Any]]:
        cols = [self.table.column(c).to_pylist() for c in ("sha256", "file_id", "status",
                                                           "path")]
        return {s: {"file_id": f, "status": st, "path": p}
                for s, f, st, p in zip(*cols, strict=True)}

    def by_sha(self) -> dict[str, dict[str, Any]]:
        """sha256 -> file_id, status, path of every log seen (computed once per snapshot)."""
        return self._by_sha

    def lots(self) -> dict[str, int]:
        """lot -> the generation of its derived tables now."""
        return dict(self.gens)

    def rows_of(self, lot: str) -> pa.Table:
        """The committed logs filed under ``lot`` (its lot_files)."""
        mask = pc.and_(pc.equal(self.table.column("lot_id"), lot),
                       pc.is_in(self.table.column("status"), pa.array(COMMITTED)))
        return self.table.filter(pc.fill_null(mask, False))

    def files_of(self, lot: str) -> list[str]:
        return sorted(set(self.rows_of(lot).column("file_id").to_pylist()))

    # -- the next snapshot -------------------------------------------------------------
    def with_commit(self, new_rows: list[dict[str, Any]], lots: set[str],
                    rules_sha: str | None | object = KEEP,
                    models: str | None = None) -> Registry:
        """The registry after one more commit: ``new_rows`` added, the lots in ``lots`` at
        this commit's generation, and the rules now ``rules_sha`` (unless KEEP)."""
        n = self.commit + 1
        table = self.table
        if new_rows:
            rows = [{**r, "commit_id": n} for r in new_rows]
            table = pa.concat_tables([table, pa.Table.from_pylist(rows, schema=SCHEMA)])
        rules = self.rules_sha if rules_sha is KEEP else rules_sha
        return Registry(table, {**self.gens, **dict.fromkeys(lots, n)}, n,
                        rules if isinstance(rules, str) else None, models or self.models)


def current_generations(root: Path) -> dict[str, int]:
    """lot key -> its newest complete generation, from the folders (what readers see)."""
    out: dict[str, int] = {}
    for d in (root / DERIVED).glob(f"{LOT}=*/{GEN}=*"):
        key = d.parent.name.removeprefix(f"{LOT}=")
        if key == SCHEMA_KEY or not (d / LOT_FILES / "part-0.parquet").exists():
            continue
        out[key] = max(out.get(key, 0), int(d.name.removeprefix(f"{GEN}=")))
    return out


def _lot_files(root: Path, key: str, gen: int) -> Path:
    return root / DERIVED / f"{LOT}={key}" / f"{GEN}={gen}" / LOT_FILES / "part-0.parquet"


def read_json(path: Path) -> dict[str, Any] | None:
    try:
        got = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    return got if isinstance(got, dict) else None


def write_json(path: Path, obj: dict[str, Any]) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    tmp.write_text(json.dumps(obj, indent=1), encoding="utf-8")
    os.replace(tmp, path)
