"""The store: Hive-partitioned Parquet per table, partitioned by lot, a registry that is
the commit point, derived tables materialised per log and per lot, and the SQL catalog.

- ``layout``: where everything lives, and how a lot id becomes a folder name;
- ``staging``: a log's tables being written aside while it is decoded;
- ``models`` / ``derive``: the ``sql/`` models, and running them for one log or one lot;
- ``commit`` / ``registry``: publishing logs and derived tables at once, crash recovery;
- ``catalog``: the views (thin reads of what was written) and ``catalog.duckdb``;
- ``core``: the ``Store`` object that ties them together; ``frames``: results as polars.

May import: ``pipeline.read`` (the schemas) and the shared modules; never attribute, plan
or anything above. (The per-lot Python models are handed in by the caller: ingest goes
through ``pipeline.jobs``, and ``pipeline.api.Store`` adds ``ingest()``.)
"""

from __future__ import annotations

from typing import Any

from .catalog import derivation_version
from .core import Store, StoreVersionError
from .frames import to_frame
from .models import SQL_DIR

__all__ = ["SQL_DIR", "Staged", "Store", "StoreVersionError", "derivation_version",
           "to_frame"]


def __getattr__(name: str) -> Any:
    if name == "Staged":  # pyarrow loads with it: not at start-up
        from .staging import Staged

        return Staged
    raise AttributeError(f"module 'pipeline.store' has no attribute {name!r}")
