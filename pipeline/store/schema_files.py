"""The empty, typed files every table and model keeps under ``lot=_schema`` (layout.py).

Raw tables' come from their Arrow schemas; each materialised model's from running the
derivation on no data (about a second: DuckDB binds every model), so they are made once
per release and copied from a cache folder after that, as the catalog is.
"""

from __future__ import annotations

import os
import shutil
import uuid
from pathlib import Path

from ..read.schemas import table_schemas
from .layout import (
    LOT_FILES,
    META,
    REJECTED,
    SCHEMA_KEY,
    derived_schema_file,
    raw_schema_file,
)
from .parquet import write_parquet


def write_schema_files(root: Path) -> None:
    """Write the ones missing (they never change within a release: a release that
    changes them changes the derivation version, and `tandem upgrade` rewrites them)."""
    from .registry import SCHEMA

    for name, schema in table_schemas().items():
        if name != "files" and not raw_schema_file(root, name).exists():
            write_parquet(schema.empty_table(), raw_schema_file(root, name))
    for target in (root / REJECTED / f"{SCHEMA_KEY}.parquet",
                   derived_schema_file(root, LOT_FILES)):
        if not target.exists():
            write_parquet(SCHEMA.empty_table(), target)
    _derived_schema_files(root)


def _derived_schema_files(root: Path) -> None:
    from .derive import empty_outputs, file_models, lot_models_and_python

    models = [*file_models(), *lot_models_and_python()]
    if all(derived_schema_file(root, m).exists() for m in models):
        return
    cache = _cache_dir()
    if cache is None or not all((cache / m / "part-0.parquet").exists() for m in models):
        # Not under staging/: a writer's recovery empties that, and a store may be
        # created by two processes at once.
        work = root / META / f".schema-{os.getpid()}-{uuid.uuid4().hex[:8]}"
        try:
            made = empty_outputs(root, work)
            _remember(made, cache)
            _place(root, made)
        finally:
            shutil.rmtree(work, ignore_errors=True)
        return
    _place(root, {m: cache / m / "part-0.parquet" for m in models}, copy=True)


def _place(root: Path, files: dict[str, Path], copy: bool = False) -> None:
    for model, path in files.items():
        target = derived_schema_file(root, model)
        if target.exists():
            continue
        target.parent.mkdir(parents=True, exist_ok=True)
        tmp = target.with_name(f"{target.name}.{os.getpid()}.{uuid.uuid4().hex[:8]}.tmp")
        shutil.copyfile(path, tmp) if copy else os.replace(path, tmp)
        os.replace(tmp, target)


def _cache_dir() -> Path | None:
    from .catalog import derivation_version

    base = os.environ.get("XDG_CACHE_HOME") or os.path.join(os.path.expanduser("~"), ".cache")
    if not base or base.startswith("~"):
        return None
    return Path(base) / "tandem" / f"schemas-{derivation_version().replace(':', '-')}"


def _remember(made: dict[str, Path], cache: Path | None) -> None:
    if cache is None:
        return
    try:
        tmp = cache.with_name(f"{cache.name}.{os.getpid()}.{uuid.uuid4().hex[:8]}.tmp")
        for model, path in made.items():
            (tmp / model).mkdir(parents=True, exist_ok=True)
            shutil.copyfile(path, tmp / model / "part-0.parquet")
        if not cache.exists():
            os.replace(tmp, cache)
        shutil.rmtree(tmp, ignore_errors=True)
    except OSError:
        pass  # a cache only: the next store makes its schema files again


__all__ = ["write_schema_files"]
