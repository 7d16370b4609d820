"""Incremental materialisation: run the ``sql/`` models for one log, or for one lot.

Two steps, each a function of files in and files out (so either can run in a worker
process or on a cluster), on a private in-memory DuckDB:

- ``derive_file``: the per-file models of one log (one lot's share of it), from its raw
  tables alone. Done once, when the log is committed.
- ``derive_lot``: the per-lot models and the Python models of one lot, from the per-file
  outputs of all its logs (and their small raw tables). Done whenever the lot's set of
  logs or the block rules change.

In both, every model the step needs is defined under its own name: views as views, the
models this step materialises as tables in dependency order, and those an earlier step
materialised as reads of its Parquet, so a model's SQL is the same text in the catalog
and here. ``empty_outputs`` runs both steps on no data: the typed, empty result of every
materialised model, which is what the store's schema files hold.
"""

from __future__ import annotations

import os
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

import pyarrow as pa

from ..read.schemas import DERIVED, table_schemas
from .layout import FILE, LOT, raw_schema_file
from .models import PYTHON_MODELS, SqlModel, dependency_order, load_models

if TYPE_CHECKING:
    import duckdb
    import polars as pl

RULES_SCHEMA = pa.schema([
    ("priority", pa.int32()), ("block", pa.large_string()), ("kind", pa.large_string()),
    ("lo", pa.int64()), ("hi", pa.int64()), ("pattern", pa.large_string()),
])


class LotContext:
    """What a Python model sees: one lot's tables on the derivation's connection."""

    def __init__(self, con: duckdb.DuckDBPyConnection, lot: str):
        self.con, self.lot = con, lot

    def sql(self, query: str, params: list[Any] | None = None) -> pl.DataFrame:
        from .frames import to_frame

        return to_frame(self.con.sql(query, params=params or None))


@dataclass(frozen=True)
class PyModel:
    """A per-lot model computed in Python: reads the models in ``after``, returns one
    table per name in ``outputs`` (schemas: ``pipeline.read.schemas.DERIVED``)."""

    outputs: tuple[str, ...]
    after: tuple[str, ...]
    run: Callable[[LotContext], dict[str, pa.Table]]


@dataclass(frozen=True)
class FileTask:
    """Derive the per-file models of one log (its staged raw tables) into ``out``."""

    root: Path
    file_id: str
    tables: dict[str, Path]
    out: Path
    rules: Path | None


@dataclass(frozen=True)
class LotTask:
    """Derive the per-lot models of one lot from its logs' per-file outputs into ``out``."""

    root: Path
    lot: str
    per_file: dict[str, list[Path]]
    raw: dict[str, list[Path]]
    out: Path
    rules: Path | None


@dataclass
class Runner:
    """How derivation tasks run: in this process by default; a pool or a cluster maps
    them elsewhere (each task only reads and writes files under the store)."""

    files: Callable[[Sequence[FileTask]], list[dict[str, Path]]]
    lots: Callable[[Sequence[LotTask]], list[dict[str, Path]]]


def sql_str(s: str) -> str:
    return "'" + s.replace("'", "''") + "'"


def _models() -> dict[str, SqlModel]:
    return load_models()


# Per-file models that add up doubles (whose sum depends on the order, and so on DuckDB's
# threads): made on one thread, like every per-lot model. The others (counts, integer
# sums, min/max) get every core: the per-file models over all of a log's results are the
# most expensive part of an ingest after decoding.
SUMS_OF_DOUBLES = frozenset({"csv_times", "part_spans"})
# Per-file models no per-lot model adds doubles over (and the largest: one row per marker
# or per part and block), written in the order they come; the rest in a fixed order.
ONLY_COUNTED = frozenset({"markers", "part_blocks"})


def _connect(one_thread: bool) -> duckdb.DuckDBPyConnection:
    import duckdb

    con = duckdb.connect(":memory:")
    if one_thread:
        # DuckDB's parallel sums of doubles add in a varying order, and means that sit on
        # a rounding boundary would then differ from one derivation of a lot to the next.
        # The per-lot models are small; the per-file ones (counts, integer sums, windows)
        # are exact in any order and get every core.
        con.execute("set threads = 1")
    con.execute(f"set memory_limit = '{os.environ.get('TANDEM_DERIVE_MEMORY', '2GB')}'")
    return con


def _read(paths: Sequence[str | Path], hive: bool) -> str:
    files = "[" + ", ".join(sql_str(str(p)) for p in paths) + "]"
    if not hive:
        return f"read_parquet({files})"
    return (f"read_parquet({files}, hive_partitioning = true, "
            f"hive_types = {{'{LOT}': VARCHAR, '{FILE}': VARCHAR}})")


def _raw_views(con: duckdb.DuckDBPyConnection, root: Path,
               paths: Mapping[str, Sequence[str | Path]]) -> None:
    for table in table_schemas():
        if table == "files":
            continue
        got = list(paths.get(table, ())) or [raw_schema_file(root, table)]
        con.execute(f"create view raw_{table} as select * from {_read(got, hive=True)}")


def _rules(con: duckdb.DuckDBPyConnection, rules: pa.Table | None) -> None:
    con.register("_rules", rules if rules is not None else RULES_SCHEMA.empty_table())
    con.execute("create table raw_block_rules as select * from _rules")
    con.unregister("_rules")


def _define(con: duckdb.DuckDBPyConnection, m: SqlModel, materialise: bool) -> None:
    kind = "table" if materialise else "view"
    con.execute(f"create {kind} {m.name} as\n{m.body}")


def _closure(models: Mapping[str, SqlModel], wanted: set[str]) -> set[str]:
    out, stack = set(), list(wanted)
    while stack:
        n = stack.pop()
        if n in out or n not in models:
            continue
        out.add(n)
        stack += list(models[n].deps)
    return out


def _copy(con: duckdb.DuckDBPyConnection, name: str, path: Path, ordered: bool = False) -> Path:
    """Write one model's rows. ``ordered``: in a fixed order (a per-file model made on
    several threads comes out in any order, and a per-lot mean over it would add its
    doubles in that order)."""
    path.parent.mkdir(parents=True, exist_ok=True)
    order = " order by all" if ordered else ""
    con.execute(f"copy (select * from {name}{order}) to {sql_str(str(path))} "
                f"(format parquet, compression zstd)")
    return path


def file_models() -> list[str]:
    """The per-file models, in the order they are computed."""
    ms = _models()
    return [n for n in dependency_order({k: m.deps for k, m in ms.items()})
            if ms[n].kind == "file"]


def lot_models_and_python() -> list[str]:
    """The per-lot SQL models and the Python models, in the order they are computed
    when no Python model says what it reads."""
    return _lot_order(_models(), {})


def _lot_order(ms: Mapping[str, SqlModel], python_models: Mapping[str, PyModel]) -> list[str]:
    """Per-lot SQL models and every Python output (given or not), each after what it
    reads; the outputs of one Python model after everything any of them reads."""
    deps: dict[str, set[str]] = {n: set(m.deps) for n, m in ms.items() if m.kind == "lot"}
    for n in PYTHON_MODELS:
        deps[n] = set(python_models[n].after) if n in python_models else set()
    return dependency_order(deps)


def derive_file(root: Path, file_id: str, tables: Mapping[str, str | Path], out: Path,
                rules: pa.Table | None = None) -> dict[str, Path]:
    """The per-file models of one log's share of a lot. ``tables``: raw table -> the
    folder of its Parquet (Hive layout, ``lot=``/``file_id=`` in the path). Writes
    ``out/<model>/<file_id>.parquet``; returns model -> that file."""
    ms = _models()
    con = _connect(one_thread=False)
    try:
        _raw_views(con, root, {t: [Path(d) / "part-0.parquet"] for t, d in tables.items()})
        _rules(con, rules)
        order = dependency_order({n: ms[n].deps for n in
                                  _closure(ms, {n for n in ms if ms[n].kind == "file"})})
        for n in order:
            if n in SUMS_OF_DOUBLES:  # small tables: one thread costs nothing there
                con.execute("set threads = 1")
            _define(con, ms[n], ms[n].kind == "file")
            if n in SUMS_OF_DOUBLES:
                con.execute("reset threads")
        return {n: _copy(con, n, out / n / f"{file_id}.parquet",
                         ordered=n not in ONLY_COUNTED)
                for n in order if ms[n].kind == "file"}
    finally:
        con.close()


def derive_lot(root: Path, lot: str, per_file: Mapping[str, Sequence[str | Path]],
               raw: Mapping[str, Sequence[str | Path]], out: Path,
               python_models: Sequence[PyModel] = (),
               rules: pa.Table | None = None) -> dict[str, Path]:
    """The per-lot and Python models of ``lot``. ``per_file``: every per-file model -> its
    Parquet files (one per log of the lot, from ``derive_file``); ``raw``: raw table -> its
    Parquet files. Writes ``out/<model>/part-0.parquet``; returns model -> that file. A
    Python model not given is written empty (typed by ``pipeline.read.schemas.DERIVED``)."""
    ms = _models()
    py = {name: m for m in python_models for name in m.outputs}
    done: dict[str, pa.Table] = {}
    con = _connect(one_thread=True)
    try:
        _raw_views(con, root, raw)
        _rules(con, rules)
        for n in file_models():
            con.execute(f"create view {n} as select * from {_read(per_file[n], hive=False)}")
        order = _lot_order(ms, py)
        wanted = {n for n in order if n in ms} | {d for m in python_models for d in m.after}
        needed = _closure(ms, wanted)
        for n in dependency_order({k: ms[k].deps for k in needed}):
            if ms[n].kind == "view":
                _define(con, ms[n], False)
        written: dict[str, Path] = {}
        for n in order:
            if n in ms:
                _define(con, ms[n], True)
            else:
                if n not in done:
                    done.update(py[n].run(LotContext(con, lot)) if n in py
                                else {n: DERIVED[n].empty_table()})
                con.register("_py", _conform(done[n], DERIVED[n]))
                con.execute(f"create table {n} as select * from _py")
                con.unregister("_py")
            written[n] = _copy(con, n, out / n / "part-0.parquet")
        return written
    finally:
        con.close()


def _conform(table: pa.Table, schema: pa.Schema) -> pa.Table:
    from .parquet import conform

    return conform(table, schema)


def empty_outputs(root: Path, out: Path) -> dict[str, Path]:
    """Every materialised model's typed, empty output (for the store's schema files)."""
    from .layout import SCHEMA_KEY

    files = derive_file(root, SCHEMA_KEY, {}, out / "file")
    lots = derive_lot(root, SCHEMA_KEY, {n: [p] for n, p in files.items()}, {}, out / "lot")
    return {**files, **lots}


def local_runner(python_models: Sequence[PyModel] = ()) -> Any:
    """Derivation tasks run one after another in this process."""
    def files(tasks: Sequence[Any]) -> list[dict[str, Path]]:
        return [run_file_task(t) for t in tasks]

    def lots(tasks: Sequence[Any]) -> list[dict[str, Path]]:
        return [run_lot_task(t, python_models) for t in tasks]

    return Runner(files, lots)


def _rules_table(path: Path | None) -> pa.Table | None:
    if path is None:
        return None
    import pyarrow.parquet as pq

    return pq.read_table(path)


def run_file_task(task: Any) -> dict[str, Path]:
    """A FileTask, wherever it runs."""
    return derive_file(task.root, task.file_id, task.tables, task.out, _rules_table(task.rules))


def run_lot_task(task: Any, python_models: Sequence[PyModel] = ()) -> dict[str, Path]:
    """A LotTask, wherever it runs."""
    return derive_lot(task.root, task.lot, task.per_file, task.raw, task.out, python_models,
                      _rules_table(task.rules))
