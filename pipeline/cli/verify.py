"""`tandem verify`."""

from __future__ import annotations

import argparse
import json
from pathlib import Path

from ..errors import UsageError
from .common import Command


def _verify_options(p: argparse.ArgumentParser) -> None:
    # Its own --store help: both lots must be in it already.
    p.add_argument("--store", required=True, metavar="DIR",
                   help="the store holding both lots (made by tandem ingest)")
    p.add_argument("--baseline", required=True, metavar="LOT",
                   help="the lot tested with the serial program")
    p.add_argument("--candidate", required=True, metavar="LOT",
                   help="the lot tested with the concurrent program (usually the same units)")
    p.add_argument("--match", choices=("part_id", "xy", "none"), default="part_id",
                   help="how units of the two lots are paired: PART_ID (default), wafer "
                        "X/Y, or none (distributions only: no paired differences, no "
                        "changed units)")
    p.add_argument("--blocks", metavar="FILE",
                   help="the block map: the baseline lot is planned with it, and the "
                        "projected saving shown beside the realised one, block by block")
    p.add_argument("--fdr", type=float, default=0.05, metavar="Q",
                   help="false discovery rate over the tests compared (default 0.05)")
    p.add_argument("--min-shift", type=float, default=0.3, metavar="SIGMA",
                   help="smallest mean shift that counts, in baseline standard deviations "
                        "(default 0.3; 0 = any shift beyond chance)")
    p.add_argument("--min-ratio", type=float, default=1.3, metavar="R",
                   help="smallest change of spread that counts, as a ratio of standard "
                        "deviations either way (default 1.3; 1 = any change beyond chance)")
    p.add_argument("--out", metavar="DIR",
                   help="also write the verification report there: verify.html, verify.md, "
                        "verify.json, charts/verify_*.png|svg, tables/verify_*.csv")
    p.add_argument("--json", action="store_true", help="print the verification as JSON")


def _verify(args: argparse.Namespace) -> int:
    from ..report.text import finite
    from ..store import Store
    from ..verify import Rules, verify
    from .verify_text import render

    if not Path(args.store).is_dir():
        raise UsageError(f"{args.store}: no store there (make one with tandem ingest "
                         f"LOGS --store {args.store})")
    if args.out and Path(args.out).exists() and not Path(args.out).is_dir():
        raise UsageError(f"{args.out}: exists and is not a folder; choose another --out")
    store = Store(args.store)
    rules = Rules(args.fdr, args.min_shift, args.min_ratio)
    v = verify(store, args.baseline, args.candidate, match=args.match, blocks=args.blocks,
               rules=rules)
    if args.json:
        print(json.dumps(finite(v.to_json()), indent=1, default=str))
    else:
        print(render(v), end="")
    if args.out:
        from ..report.verify import write_verify_report

        files = write_verify_report(v, args.out)
        if not args.json:
            print(f"wrote {files.html} ({len(files.charts) // 2} charts), {files.md}, "
                  f"{files.json}, {files.out / 'tables'}/")
    return 0


COMMANDS = [
    Command("verify", "compare a concurrent program's correlation lot with the serial one's",
            "tandem verify --store ./store --baseline PF4-L0231 --candidate PF4-L0236 "
            "--blocks sample_logs/blocks.toml", _verify_options, _verify),
]
