"""What every command module shares: the ``Command`` record each module lists in its
``COMMANDS``, and the options several commands take (--store, --format, --lot, --cluster).

Imported by the command modules; imports nothing of ``pipeline.cli`` itself, so the
modules that use it never import the package that registers them.
"""

from __future__ import annotations

import argparse
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

from ..errors import UsageError

Handler = Callable[[argparse.Namespace], int]
Options = Callable[[argparse.ArgumentParser], None]


@dataclass(frozen=True)
class Command:
    """One `tandem NAME`: its one-line summary, an example, its options and its handler."""

    name: str
    summary: str
    example: str
    options: Options
    handler: Handler


class UsageParser(argparse.ArgumentParser):
    """An argument parser whose errors are a UsageError (one line, exit 2), not an exit."""

    def error(self, message: str) -> None:  # type: ignore[override]
        raise UsageError(f"{self.prog}: {message}")


def store_opt(p: argparse.ArgumentParser, creates: bool = False) -> None:
    """--store DIR. Commands that only read refuse a folder that holds no store."""
    p.add_argument("--store", required=True, metavar="DIR",
                   help="the store folder (created when missing)" if creates else
                   "the store folder (made by tandem ingest)")


def open_store(path: str) -> Any:
    """The store at ``path`` for a command that reads it: UsageError (exit 2, one line)
    when no store is there, and nothing is created."""
    from ..api import Store

    store = Store(path)
    store.require()
    return store


def format_opt(p: argparse.ArgumentParser) -> None:
    """--format table|csv|json."""
    p.add_argument("--format", choices=("table", "csv", "json"), default="table",
                   help="output format (default: table)")


def lot_opt(p: argparse.ArgumentParser, help: str = "only this lot (default: every lot)") -> None:
    """--lot LOT."""
    p.add_argument("--lot", metavar="LOT", help=help)


def cluster_opts(p: argparse.ArgumentParser) -> None:
    """--cluster ADDRESS and --cluster-timeout S (ingest, nightly)."""
    from ..jobs.cluster import DEFAULT_TIMEOUT_S, ENV

    p.add_argument("--cluster", metavar="ADDRESS", default=None,
                   help=f"decode and derive on this Dask scheduler's workers, e.g. "
                        f"tcp://10.1.2.3:8786 (default: ${ENV} when set; else the local "
                        f"process pool); the workers must reach the store at the same path")
    p.add_argument("--cluster-timeout", type=float, default=DEFAULT_TIMEOUT_S, metavar="S",
                   help=f"give up on a scheduler that does not answer within S seconds "
                        f"(exit 1, nothing written; default {DEFAULT_TIMEOUT_S:g})")


def cluster_of(args: argparse.Namespace) -> str | None:
    """The scheduler address to use, checked (UsageError when malformed), or None."""
    from ..jobs.cluster import address_from, check_timeout

    check_timeout(args.cluster_timeout)
    return address_from(args.cluster)


def workers_of(args: argparse.Namespace) -> int | None:
    """--workers N, checked: at least 1 (UsageError otherwise), or None for automatic."""
    if args.workers is not None and args.workers < 1:
        raise UsageError("--workers must be at least 1")
    return args.workers
