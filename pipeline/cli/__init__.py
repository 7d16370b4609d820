"""`tandem ...`: a thin shell over the Python API (pipeline.api, pipeline.jobs, ...).

One module per command group lists its commands in ``COMMANDS`` (a ``common.Command``
each); this package imports every one of them and builds the parser from their lists, in
the order the help shows. No command module imports this package back: what they share is
in ``common``. Errors are translated once, here: a TandemError prints one line on stderr
and exits with its code (2 usage/config, 3 some inputs rejected); anything else is a bug
(exit 1).

May import every layer below (api, jobs, report, verify, plan, attribute, store, read).
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Sequence

from ..errors import TandemError
from ..lean import keep_pandas_out
from . import ingest, nightly, plan, query, report, upgrade, verify
from .common import Command, UsageParser

# The help's order: the flow of the job, then the jobs that drive it, then upkeep.
_GROUPS = (ingest, query, plan, report, nightly, verify, upgrade)
COMMANDS: dict[str, Command] = {c.name: c for g in _GROUPS for c in g.COMMANDS}
LEAN_COMMANDS = {"ingest", "sql"}  # start without pandas (see pipeline/lean.py)


def build_parser() -> argparse.ArgumentParser:
    """The `tandem` parser with every command of COMMANDS as a subcommand."""
    p = UsageParser(prog="tandem", description="Where the tester's seconds go, and which "
                    "serial test blocks could run concurrently.",
                    formatter_class=argparse.RawDescriptionHelpFormatter,
                    epilog="Run 'tandem COMMAND --help' for a command's options and an "
                           "example.")
    sub = p.add_subparsers(dest="command", metavar="COMMAND", parser_class=UsageParser)
    for c in COMMANDS.values():
        sp = sub.add_parser(c.name, help=c.summary, description=c.summary,
                            epilog=f"example:\n  {c.example}",
                            formatter_class=argparse.RawDescriptionHelpFormatter)
        c.options(sp)
    return p


def main(argv: Sequence[str] | None = None) -> int:
    """Run `tandem` with ``argv`` (default: the process's arguments); the exit code."""
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
        if not args.command:
            parser.print_help()
            return 2
        if args.command in LEAN_COMMANDS:
            keep_pandas_out()
        return COMMANDS[args.command].handler(args)
    except SystemExit as e:  # --help
        return int(e.code or 0)
    except TandemError as e:
        print(f"tandem: {' '.join(str(e).split())}", file=sys.stderr)
        return e.exit_code
    except KeyboardInterrupt:
        print("tandem: interrupted", file=sys.stderr)
        return 130
