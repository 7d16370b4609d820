"""Start-up cost control for commands that never need pandas.

pyarrow imports pandas the first time it converts anything, whenever pandas is installed
(OR-Tools pulls it in), and that import costs about half a second here — a third of the
whole budget for ingesting 100 MB. Tandem never hands data to pandas, so the commands
that are start-up sensitive (``ingest``, ``sql``) make ``import pandas`` fail with an
ImportError, which pyarrow takes as "pandas not installed". ``find_spec`` still answers
(polars only asks whether pandas exists). Commands that plan or report do not call this.
"""

from __future__ import annotations

import importlib.abc
import importlib.machinery
import sys
from types import ModuleType


class _Refuse(importlib.abc.Loader):
    def create_module(self, spec: importlib.machinery.ModuleSpec) -> ModuleType | None:
        return None

    def exec_module(self, module: ModuleType) -> None:
        raise ImportError("pandas is kept out of this Tandem command (pipeline/lean.py)")


class _NoPandas(importlib.abc.MetaPathFinder):
    def find_spec(self, name, path=None, target=None):  # type: ignore[no-untyped-def]
        if name == "pandas":
            return importlib.machinery.ModuleSpec(name, _Refuse())
        return None


def keep_pandas_out() -> None:
    """Make `import pandas` fail in this process from now on (see the module's note)."""
    if "pandas" not in sys.modules and not any(isinstance(f, _NoPandas) for f in sys.meta_path):
        sys.meta_path.insert(0, _NoPandas())
