"""Keeping the derived tables current: who runs the derivation, with which Python
models, and the operations that re-derive lots — a change of block rules, an upgrade.

``pipeline.store.derive`` runs the models; ``pipeline.attribute.timing`` defines the Python ones;
this module puts them together for the writers (ingest, nightly, ``tandem times
--blocks``, ``tandem upgrade``).
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from concurrent.futures import Executor
from pathlib import Path
from typing import Any

from ..store import Store
from ..store.derive import FileTask, LotTask, PyModel, Runner, run_file_task, run_lot_task


def python_models() -> Sequence[PyModel]:
    from ..attribute.lot_models import PY_MODELS  # numpy and the estimator load only to derive

    return PY_MODELS


def lot_task(task: LotTask) -> dict[str, Path]:
    """A lot's derivation with the project's Python models (a picklable task)."""
    return run_lot_task(task, python_models())


def file_task(task: FileTask) -> dict[str, Path]:
    return run_file_task(task)


def local_runner() -> Runner:
    return Runner(files=lambda ts: [file_task(t) for t in ts],
                  lots=lambda ts: [lot_task(t) for t in ts])


def pool_runner(pool: Executor) -> Runner:
    """Tasks mapped over an executor (a process pool, or a cluster's executor)."""
    def files(ts: Sequence[FileTask]) -> list[dict[str, Path]]:
        return list(pool.map(file_task, ts)) if len(ts) > 1 else [file_task(t) for t in ts]

    def lots(ts: Sequence[LotTask]) -> list[dict[str, Path]]:
        return list(pool.map(lot_task, ts)) if len(ts) > 1 else [lot_task(t) for t in ts]

    return Runner(files, lots)


# -- block rules -----------------------------------------------------------------------
UNSECTIONED = """
select lot_id, test_num, test_name, tsr_block, fallback_block
from result_tests where unsectioned_records > 0
"""

AFFECTED = """
with new_rules as (select * from _new_rules),
tests as (select * from _tests),
placed as (
    select t.lot_id, t.test_num, t.test_name, any_value(t.fallback_block) as old_block,
           coalesce(any_value(t.tsr_block), arg_min(r.block, r.priority)) as new_block
    from tests as t
    left join new_rules as r
        on (r.kind = 'tests' and t.test_num between r.lo and r.hi)
        or (r.kind = 'names' and t.test_name glob r.pattern)
    group by all
)
select distinct lot_id from placed where old_block is distinct from new_block order by 1
"""


def rules_table(blockmap: Any) -> Any:
    """A block map's assignment rules as the store keeps them (priority = map order)."""
    return rules_table_from([{"priority": i, "block": b, "kind": kind, "lo": lo, "hi": hi,
                              "pattern": pat}
                             for i, (b, kind, lo, hi, pat) in enumerate(blockmap.rules())])


def rules_table_from(rows: list[dict[str, Any]]) -> Any:
    import pyarrow as pa

    from ..store.derive import RULES_SCHEMA

    return pa.Table.from_pylist(rows, schema=RULES_SCHEMA)


def set_block_rules(store: Store, blockmap: Any, runner: Runner | None = None) -> list[str]:
    """Make the block map's assignment rules the store's (tests no BPS/EPS section or TSR
    SEQ_NAME places go by them), re-deriving at once exactly the lots whose blocks they
    change. Returns those lots."""
    table = rules_table(blockmap)
    import duckdb

    with store.writer():
        before = store.snapshot()
        tests = store.sql(UNSECTIONED).to_arrow()  # small: one row per test number
        con = duckdb.connect(":memory:")  # the catalog is read-only: match the rules here
        try:
            con.register("_new_rules", table)
            con.register("_tests", tests)
            lots = [r[0] for r in con.execute(AFFECTED).fetchall()]
        finally:
            con.close()
        sha_now = before.rules_sha
        store.commit([], runner or local_runner(), refresh=frozenset(lots), rules=table)
        if not lots and store.snapshot().rules_sha == sha_now:
            return []
    return lots


# -- upgrade ----------------------------------------------------------------------------
def rederive_all(store: Store, runner: Runner | None = None,
                 lots: Iterable[str] | None = None) -> list[str]:
    """Derive every lot (or ``lots``) again from its raw tables: after a release that
    changes the models. Returns the lots derived."""
    with store.writer(upgrading=True):
        todo = sorted(lots if lots is not None else store.snapshot().lots())
        if todo:
            store.commit([], runner or local_runner(), refresh=frozenset(todo))
    return todo
