"""`tandem ...`: a thin shell over the Python API.

Each command parses its options, makes one call into ``pipeline`` and formats the result.
Errors are translated once, here: a TandemError prints one line on stderr and exits with
its code (2 usage/config, 3 some inputs rejected); anything else is a bug (exit 1).
"""

from __future__ import annotations

import argparse
import json
import sys
from collections.abc import Callable, Sequence
from typing import Any

from ._lean import keep_pandas_out
from .errors import TandemError, UsageError

LEAN_COMMANDS = {"ingest", "sql"}

Handler = Callable[[argparse.Namespace], int]
COMMANDS: dict[str, tuple[str, str, Callable[[argparse.ArgumentParser], None], Handler]] = {}


def register(name: str, summary: str, example: str,
             options: Callable[[argparse.ArgumentParser], None], handler: Handler) -> None:
    COMMANDS[name] = (summary, example, options, handler)


class _Parser(argparse.ArgumentParser):
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
    from .store import Store

    store = Store(path)
    store.require()
    return store


def cluster_opts(p: argparse.ArgumentParser) -> None:
    """--cluster ADDRESS and --cluster-timeout S (ingest, nightly)."""
    from .cluster import DEFAULT_TIMEOUT_S, ENV

    p.add_argument("--cluster", metavar="ADDRESS", default=None,
                   help=f"decode and derive on this Dask scheduler's workers, e.g. "
                        f"tcp://10.1.2.3:8786 (default: ${ENV} when set; else the local "
                        f"process pool); the workers must reach the store at the same path")
    p.add_argument("--cluster-timeout", type=float, default=DEFAULT_TIMEOUT_S, metavar="S",
                   help=f"give up on a scheduler that does not answer within S seconds "
                        f"(exit 1, nothing written; default {DEFAULT_TIMEOUT_S:g})")


def cluster_of(args: argparse.Namespace) -> str | None:
    """The scheduler address to use, checked (UsageError when malformed), or None."""
    from .cluster import address_from, check_timeout

    check_timeout(args.cluster_timeout)
    return address_from(args.cluster)


def _format_opt(p: argparse.ArgumentParser) -> None:
    p.add_argument("--format", choices=("table", "csv", "json"), default="table",
                   help="output format (default: table)")


# -- ingest -----------------------------------------------------------------------------
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
    from .cluster import connected
    from .ingest import InputLimits, ingest, tty_progress
    from .store import Store

    if args.workers is not None and args.workers < 1:
        raise UsageError("--workers must be at least 1")
    address = cluster_of(args)
    store = Store(args.store)
    limits = InputLimits.from_env()  # a bad setting is exit 2 before connecting
    with connected(address, args.cluster_timeout) as cluster:  # before the store is touched
        report = ingest(store, args.paths, workers=args.workers, progress=tty_progress,
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


register("ingest", "read datalogs into a store",
         "tandem ingest sample_logs/ --store ./store --json", _ingest_options, _ingest)


# -- sql --------------------------------------------------------------------------------
def _sql_options(p: argparse.ArgumentParser) -> None:
    store_opt(p)
    _format_opt(p)
    p.add_argument("query", metavar="QUERY", help="one SQL query over the catalog's views")


def _sql(args: argparse.Namespace) -> int:
    import duckdb

    from .render import format_rows, is_numeric_type

    store = open_store(args.store)
    try:
        columns, types, rows = store.rows(args.query)
    except duckdb.Error as e:
        raise UsageError(f"query failed: {' '.join(str(e).split())}") from None
    print(format_rows(columns, [is_numeric_type(t) for t in types], rows, args.format,
                      [t.upper() == "VARCHAR" for t in types]), end="")
    return 0


register("sql", "run a SQL query against the store's views",
         "tandem sql --store ./store \"select site, count(*) from parts group by site\"",
         _sql_options, _sql)


# -- times / sites ----------------------------------------------------------------------
def _lot_opt(p: argparse.ArgumentParser) -> None:
    p.add_argument("--lot", metavar="LOT", help="only this lot (default: every lot)")


def _times_options(p: argparse.ArgumentParser) -> None:
    store_opt(p)
    _lot_opt(p)
    p.add_argument("--blocks", metavar="FILE",
                   help="block map whose test-number/name rules assign tests that no "
                        "section or TSR places (kept in the store: the lots they change "
                        "are derived again at once)")
    _format_opt(p)


def _times(args: argparse.Namespace) -> int:
    from . import timing

    store = open_store(args.store)
    if args.blocks:
        from .blockmap import load_block_map
        from .derivation import set_block_rules

        changed = set_block_rules(store, load_block_map(args.blocks))
        print(f"block rules from {args.blocks}: {len(changed)} lot(s) derived again"
              + (f" ({', '.join(changed[:5])}{' ...' if len(changed) > 5 else ''})"
                 if changed else ""), file=sys.stderr)
    table = timing.block_table(store, args.lot)
    if args.format != "table":
        print(format_frame(table, args.format), end="")
    else:
        print(timing.render_times(store, table, args.lot))
    for line in timing.warnings(store, args.lot):
        print(f"warning: {line}", file=sys.stderr)
    return 0


register("times", "where the seconds go: block times per lot and site, ranked",
         "tandem times --store ./store --lot PF4-L0231", _times_options, _times)


def _sites_options(p: argparse.ArgumentParser) -> None:
    store_opt(p)
    _lot_opt(p)
    _format_opt(p)


def _sites(args: argparse.Namespace) -> int:
    from . import timing

    store = open_store(args.store)
    summaries = timing.site_summaries(store, args.lot)
    if args.format != "table":
        print(format_frame(timing.sites_frame(summaries), args.format), end="")
    else:
        print(timing.render_sites(summaries))
    return 0


register("sites", "the multi-site view: touchdown time, MSE, imbalance, shared instruments",
         "tandem sites --store ./store --lot PF4-L0231", _sites_options, _sites)


# The commands of other areas live in their own modules and register themselves here on
# import: cli_plan (plan, draft-map), cli_report (report, demo), cli_nightly (nightly),
# cli_verify (verify), cli_store (upgrade).
from . import cli_nightly, cli_plan, cli_report, cli_store, cli_verify  # noqa: E402,F401


# -- formatting -------------------------------------------------------------------------
def format_frame(df: Any, fmt: str) -> str:
    from .render import format_frame as render

    return render(df, fmt)


# -- entry ------------------------------------------------------------------------------
def build_parser() -> argparse.ArgumentParser:
    p = _Parser(prog="tandem", description="Where the tester's seconds go, and which serial "
                "test blocks could run concurrently.",
                formatter_class=argparse.RawDescriptionHelpFormatter,
                epilog="Run 'tandem COMMAND --help' for a command's options and an example.")
    sub = p.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    for name, (summary, example, options, _) in COMMANDS.items():
        sp = sub.add_parser(name, help=summary, description=summary,
                            epilog=f"example:\n  {example}",
                            formatter_class=argparse.RawDescriptionHelpFormatter)
        options(sp)
    return p


def main(argv: Sequence[str] | None = None) -> int:
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
        if not args.command:
            parser.print_help()
            return 2
        if args.command in LEAN_COMMANDS:
            keep_pandas_out()
        return COMMANDS[args.command][3](args)
    except SystemExit as e:  # --help
        return int(e.code or 0)
    except TandemError as e:
        print(f"tandem: {' '.join(str(e).split())}", file=sys.stderr)
        return e.exit_code
    except KeyboardInterrupt:
        print("tandem: interrupted", file=sys.stderr)
        return 130
