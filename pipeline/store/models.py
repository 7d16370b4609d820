"""The SQL models in ``sql/``: one per file, file name = model name, and how each is kept.

A model's header says how it is materialised (as dbt's ``materialized`` config does):

- no marker: a **view**, computed when queried (thin: renames and casts over raw tables,
  or joins with small lookups);
- ``-- materialized: file``: its rows are derived from one log at a time, once, when that
  log is committed (per-file grain: parts, markers, part_blocks ...);
- ``-- materialized: lot``: an aggregate over one lot, recomputed whenever the lot's set
  of logs (or the block rules) change (block_times, reconciliation ...).

Materialised models are written as Parquet under ``derived/`` and the catalog reads them
back with a thin view, so a query never recomputes them. Models computed in Python (the
estimate, the site summary) are declared in ``pipeline.read.schemas.DERIVED`` and given to the
derivation by the layer that owns them.
"""

from __future__ import annotations

import functools
import hashlib
import re
from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from pathlib import Path

from ..errors import StoreError

SQL_DIR = Path(__file__).resolve().parent.parent.parent / "sql"
KINDS = ("view", "file", "lot")
# The per-lot models computed in Python (their schemas: pipeline.read.schemas.DERIVED).
PYTHON_MODELS = ("block_estimates", "site_summary", "timing_notes")
_MARKER = re.compile(r"^--\s*materialized:\s*(\w+)\s*$", re.M)


@dataclass(frozen=True)
class SqlModel:
    name: str
    body: str                # one select statement (no trailing semicolon)
    kind: str                # view | file | lot
    deps: frozenset[str]     # the other models (SQL or Python) it reads

    @property
    def materialized(self) -> bool:
        return self.kind != "view"


@functools.cache
def load_models() -> dict[str, SqlModel]:
    """Every model in sql/, with its dependencies among them and the Python models."""
    texts = {p.stem: p.read_text(encoding="utf-8") for p in sorted(SQL_DIR.glob("*.sql"))}
    names = set(texts) | set(PYTHON_MODELS)
    out = {}
    for name, text in texts.items():
        found = _MARKER.findall(text)
        kind = found[0] if found else "view"
        if kind not in KINDS or len(found) > 1:
            raise StoreError(f"sql/{name}.sql: 'materialized:' must be one of "
                             f"{', '.join(KINDS[1:])}, given once; found {found}")
        code = re.sub(r"--[^\n]*", "", text)  # comments may name other models
        deps = frozenset(n for n in names if n != name and re.search(rf"\b{n}\b", code))
        out[name] = SqlModel(name, text.strip().rstrip(";"), kind, deps)
    _check_layers(out)
    return out


def _check_layers(models: Mapping[str, SqlModel]) -> None:
    """A per-file model can read only views and per-file models: it is computed from one
    log alone, before the lot it belongs to is assembled."""
    for m in models.values():
        if m.kind == "file":
            bad = [d for d in m.deps if d not in models or models[d].kind == "lot"]
            if bad:
                raise StoreError(f"sql/{m.name}.sql is materialized per file but reads "
                                 f"{', '.join(sorted(bad))}, which are per lot")


def dependency_order(deps: Mapping[str, Iterable[str]]) -> list[str]:
    """Names ordered so that each comes after what it reads (ties by name)."""
    done: list[str] = []
    placed: set[str] = set()
    pending = {k: set(v) & set(deps) for k, v in deps.items()}
    while pending:
        ready = sorted(n for n, d in pending.items() if d <= placed)
        if not ready:
            raise StoreError(f"sql/: models depend on each other in a cycle: {sorted(pending)}")
        for n in ready:
            done.append(n)
            placed.add(n)
            del pending[n]
    return done


# Source files whose text decides the stored and derived schemas and the catalog's views
# (read, never imported, so that checking a catalog's version costs no pyarrow import).
_SCHEMA_SOURCES = ("read/schemas.py", "read/stdf/records.py", "read/stdf/columnar.py",
                   "store/layout.py",
                   "store/catalog.py")


@functools.cache
def fingerprint() -> str:
    """Changes whenever a model's text or a stored schema's source does."""
    h = hashlib.sha256()
    for p in sorted(SQL_DIR.glob("*.sql")):
        h.update(p.name.encode() + p.read_bytes())
    package = Path(__file__).resolve().parent.parent
    for rel in _SCHEMA_SOURCES:
        h.update(rel.encode() + (package / rel).read_bytes())
    return h.hexdigest()[:16]
