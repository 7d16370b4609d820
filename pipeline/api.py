"""The Python entry points, for notebooks and scripts: ``Store``, which is the store of
pipeline/store with the ingest job of pipeline/jobs on it, so one object reads logs in and
answers SQL.

May import every layer below it (jobs and everything under them); the CLI imports it.
"""

from __future__ import annotations

from collections.abc import Callable, Iterable
from pathlib import Path
from typing import TYPE_CHECKING

from .store.core import Store as _StoreCore

if TYPE_CHECKING:
    from .jobs.ingest import IngestReport


class Store(_StoreCore):
    """A store folder (see pipeline.store.core.Store) that can also ingest logs."""

    def ingest(self, paths: Iterable[str | Path], workers: int | None = None,
               progress: Callable[..., None] | None = None) -> IngestReport:
        """Store every new log under ``paths`` (files or folders); returns IngestReport."""
        from .jobs.ingest import ingest

        return ingest(self, paths, workers=workers, progress=progress)
