"""The compiled extension ``_scan`` (C: the record-boundary scan, the field decoder and
the batch engine), loaded in this one place. ``EXT`` is the module, or None when it did
not build at install (no C compiler): every caller then takes its numpy twin, with the
same answers, slower.
"""

from __future__ import annotations

from types import ModuleType

EXT: ModuleType | None
try:
    from . import _scan as EXT  # type: ignore[attr-defined, no-redef]
except ImportError:
    EXT = None
