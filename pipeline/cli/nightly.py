"""`tandem nightly` (see pipeline/jobs/nightly.py)."""

from __future__ import annotations

import argparse
import sys

from ..errors import UsageError
from .common import Command, cluster_of, cluster_opts, store_opt


def _nightly_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("--inbox", required=True, metavar="DIR",
                   help="folder of datalogs, searched recursively; what is stored already "
                        "is skipped (hashing only)")
    store_opt(p, creates=True)
    p.add_argument("--out", required=True, metavar="DIR",
                   help="where status.json and reports/<lot>/ (one report per lot touched) "
                        "are written")
    p.add_argument("--blocks", metavar="FILE",
                   help="block map (TOML): its rules assign tests to blocks, and each "
                        "report holds the plan")
    p.add_argument("--lock-timeout", type=float, default=0.0, metavar="S",
                   help="wait up to S seconds for another writer to finish (default 0: "
                        "exit 1 at once, so runs never pile up)")
    p.add_argument("--workers", type=int, default=None, metavar="N",
                   help="decode N files at once in worker processes (default: automatic; "
                        "not used with --cluster)")
    cluster_opts(p)


def _nightly(args: argparse.Namespace) -> int:
    from ..jobs.nightly import STATUS_FILE, run_nightly

    if args.lock_timeout < 0:
        raise UsageError("--lock-timeout must be 0 or more seconds")
    if args.workers is not None and args.workers < 1:
        raise UsageError("--workers must be at least 1")
    address = cluster_of(args)
    status = run_nightly(args.inbox, args.store, args.out, blocks=args.blocks,
                         lock_timeout=args.lock_timeout, workers=args.workers,
                         cluster=address, cluster_timeout=args.cluster_timeout)
    for line in [*status.get("problems", []), *status.get("errors", [])]:
        print(line, file=sys.stderr)
    for line in status.get("warnings", []):
        print(f"warning: {line}", file=sys.stderr)
    c = status.get("counts", {})
    print(f"nightly: ingested {c.get('ingested', 0)} ({c.get('partial', 0)} partial), "
          f"skipped {c.get('skipped', 0)}, rejected {c.get('rejected', 0)}, failed "
          f"{c.get('failed', 0)}; {len(status.get('lots', []))} lot(s) reported, "
          f"{len(status.get('drift', []))} drift flag(s); status in "
          f"{args.out}/{STATUS_FILE}; exit {status['exit_code']}")
    for d in status.get("drift", []):
        change = "" if d["change_pct"] is None else f" ({d['change_pct']:+} %)"
        print(f"  drift: lot {d['lot_id']!r} block {d['block']!r}: {d['mean_ms']} ms vs "
              f"baseline {d['baseline_ms']} ms{change}")
    return int(status["exit_code"])


COMMANDS = [
    Command("nightly", "the nightly job: ingest what is new, refresh timing, flag drift, "
            "report new lots, write status.json",
            "tandem nightly --inbox ./inbox --store ./store --out ./nightly",
            _nightly_options, _nightly),
]
