"""`tandem ingest`: read datalogs into a store (see pipeline/jobs/ingest.py)."""

from __future__ import annotations

import argparse
import json
import sys

from .common import Command, cluster_of, cluster_opts, store_opt, workers_of


def _ingest_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("paths", nargs="+", metavar="PATH",
                   help="STDF V4 logs (raw, .gz, .bz2, .xz, .zst) or timing CSVs; folders "
                        "are searched recursively; the format is decided by content")
    store_opt(p, creates=True)
    p.add_argument("--workers", type=int, default=None, metavar="N",
                   help="decode N files at once in worker processes (default: automatic; "
                        "not used with --cluster)")
    cluster_opts(p)
    p.add_argument("--json", action="store_true", help="print the outcome as JSON")


def _ingest(args: argparse.Namespace) -> int:
    from ..api import Store
    from ..jobs.cluster import connected
    from ..jobs.decode import InputLimits
    from ..jobs.ingest import ingest, tty_progress

    workers = workers_of(args)
    address = cluster_of(args)
    store = Store(args.store)
    limits = InputLimits.from_env()  # a bad setting is exit 2 before connecting
    with connected(address, args.cluster_timeout) as cluster:  # before the store is touched
        report = ingest(store, args.paths, workers=workers, progress=tty_progress,
                        limits=limits, cluster=cluster)
    for line in report.problems:
        print(line, file=sys.stderr)
    if args.json:
        print(json.dumps(report.to_json(), indent=2, default=str))
    else:
        print(f"ingested {len(report.ingested)}, skipped {len(report.skipped)}, "
              f"rejected {len(report.rejected)}")
        for r in report.ingested:
            print(f"  {r['status']:<8} {r['path']}  ({r['format']}, {r['records']} records, "
                  f"{r['parts']} parts)")
        for r in report.skipped:
            print(f"  skipped  {r['path']}  ({r['reason']})")
    return report.exit_code


COMMANDS = [
    Command("ingest", "read datalogs into a store",
            "tandem ingest sample_logs/ --store ./store --json", _ingest_options, _ingest),
]
