"""`tandem upgrade` (see pipeline/jobs/upgrade.py)."""

from __future__ import annotations

import argparse
import time

from .common import Command, store_opt


def _upgrade_options(p: argparse.ArgumentParser) -> None:
    store_opt(p)


def _upgrade(args: argparse.Namespace) -> int:
    from ..jobs.upgrade import upgrade
    from ..store import Store

    t0 = time.perf_counter()
    r = upgrade(Store(args.store))
    moved = f"{r.files} log(s) moved to layout 2, " if r.from_layout == 1 else ""
    print(f"upgraded {args.store}: {moved}{len(r.lots)} lot(s) derived again "
          f"in {time.perf_counter() - t0:.1f} s")
    return 0


COMMANDS = [
    Command("upgrade", "bring a store written by an earlier release up to date (in place)",
            "tandem upgrade --store ./store", _upgrade_options, _upgrade),
]
