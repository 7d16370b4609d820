"""Tandem: where the tester's seconds go, and which serial test blocks could overlap.

The few entry points; everything else is private to its module. Names load on first
use, so ``tandem --help`` and the start-up of every command stay cheap.
"""

from __future__ import annotations

from typing import Any

__version__ = "0.1.0"

_EXPORTS = {
    "Store": "api", "IngestReport": "jobs.ingest", "TandemError": "errors",
    "FormatError": "errors", "InputError": "errors", "ConfigError": "errors",
    "StoreError": "errors", "UsageError": "errors",
}
__all__ = [*_EXPORTS, "__version__"]


def __getattr__(name: str) -> Any:
    module = _EXPORTS.get(name)
    if module is None:
        raise AttributeError(f"module 'pipeline' has no attribute {name!r}")
    from importlib import import_module

    return getattr(import_module(f".{module}", __name__), name)
