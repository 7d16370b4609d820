"""Tandem: where the tester's seconds go, and which serial test blocks could overlap.

The few entry points; everything else is private to its module.
"""

from __future__ import annotations

__version__ = "0.1.0"

from .errors import ConfigError, FormatError, InputError, StoreError, TandemError  # noqa: E402
from .ingest import IngestReport  # noqa: E402
from .store import Store  # noqa: E402

__all__ = ["Store", "IngestReport", "TandemError", "FormatError", "InputError",
           "ConfigError", "StoreError", "__version__"]
