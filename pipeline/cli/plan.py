"""`tandem plan` and `tandem draft-map`."""

from __future__ import annotations

import argparse
import json
from pathlib import Path

from ..errors import UsageError
from ..plan.planner import DEFAULT_TIME_LIMIT_S
from .common import Command, open_store, store_opt


def _lot_opt(p: argparse.ArgumentParser, verb: str) -> None:
    p.add_argument("--lot", metavar="LOT",
                   help=f"the lot to {verb} (default: the lot with the most parts)")


# -- plan -------------------------------------------------------------------------------
def _plan_options(p: argparse.ArgumentParser) -> None:
    store_opt(p)
    p.add_argument("--blocks", required=True, metavar="FILE",
                   help="the block map (TOML): resources, limits, blocks, what-ifs")
    _lot_opt(p, "plan")
    p.add_argument("--json", action="store_true", help="print the plan as JSON")
    p.add_argument("--time-limit", type=float, default=DEFAULT_TIME_LIMIT_S, metavar="S",
                   help=f"seconds for the main solve (default {DEFAULT_TIME_LIMIT_S:g}); the "
                        "roadmap, candidates and what-ifs then share half as long again (at "
                        "least 1 s), each solve starting from the plan")
    p.add_argument("--percentile", choices=("mean", "p50", "p95"), default="mean",
                   help="which block time to plan with (default: mean)")


def _plan(args: argparse.Namespace) -> int:
    from ..plan import plan_lot
    from ..plan.blockmap import load_block_map
    from .plan_text import render

    if not args.time_limit > 0:
        raise UsageError("--time-limit must be greater than 0 seconds")
    bm = load_block_map(args.blocks)
    result = plan_lot(open_store(args.store), bm, args.lot, args.percentile, args.time_limit)
    if args.json:
        print(json.dumps(result.to_json(), indent=2))
    else:
        print(render(result), end="")
    return 0



# -- draft-map --------------------------------------------------------------------------
def _draft_options(p: argparse.ArgumentParser) -> None:
    store_opt(p)
    p.add_argument("--out", required=True, metavar="FILE", help="where to write the block map")
    _lot_opt(p, "draft from")
    p.add_argument("--force", action="store_true", help="overwrite FILE if it exists")


def _draft(args: argparse.Namespace) -> int:
    from ..plan.draft import draft_map

    out = Path(args.out)
    if out.exists() and not args.force:
        raise UsageError(f"{out}: exists; choose another --out or add --force to overwrite it")
    text, measured, uses = draft_map(open_store(args.store), args.lot)
    try:
        out.write_text(text, encoding="utf-8")
    except OSError as e:
        raise UsageError(f"{out}: cannot write: {e.strerror or e}") from None
    for note in measured.notes:
        print(f"note: {note}")
    inferred = sorted({u for held in uses.values() for u in held})
    print(f"wrote {out}: {len(measured.order)} blocks from lot {measured.lot_id}; "
          + (f"uses inferred from pins for {len(uses)} blocks ({', '.join(inferred)})"
             if uses else "no pin records: every block's uses is left TODO"))
    return 0


COMMANDS = [
    Command("plan", "plan which serial blocks could run concurrently in one touchdown",
            "tandem plan --store ./store --blocks sample_logs/blocks.toml --lot PF4-L0231",
            _plan_options, _plan),
    Command("draft-map", "write a starting block map from a lot's measured blocks",
            "tandem draft-map --store ./store --out blocks.toml --lot PF4-L0231",
            _draft_options, _draft),
]
