"""`tandem demo`: the whole job on the bundled, invented sample logs.

Everything here goes through the same API a user calls; the demo adds no logic of its
own beyond choosing the files and the queries it shows.
"""

from __future__ import annotations

import shutil
from collections.abc import Callable
from pathlib import Path

from .errors import InputError
from .store import Store

SAMPLES = Path(__file__).resolve().parent.parent / "sample_logs"
LOG_PATTERNS = ("*.stdf", "*.stdf.gz", "*.csv")

QUERIES = [
    ("Parts per lot and site (from PRR, STDF V4 5/20, or the timing CSV)",
     "select lot_id, site, count(*) as parts, round(avg(test_time_ms), 1) as mean_test_ms, "
     "count(*) filter (where not passed) as failed from parts group by all order by all"),
    ("Touchdowns per lot, and how their time is known",
     "select lot_id, method, count(*) as touchdowns, round(avg(touchdown_ms), 1) as mean_ms "
     "from touchdowns group by all order by all"),
    ("The longest blocks by timing marker (DTR 'TT' convention), first lot",
     "select block, site, count(*) as markers, round(avg(duration_ms), 2) as mean_ms "
     "from markers join files using (file_id) "
     "where path like '%L0231_w01_markers.stdf' group by all order by mean_ms desc limit 8"),
    ("Result rows by record type",
     "select record, count(*) as rows, count(distinct test_num) as tests from results "
     "group by all order by all"),
]


def sample_logs() -> list[Path]:
    if not SAMPLES.is_dir():
        raise InputError(f"{SAMPLES}: the sample logs are not here (run from a clone of "
                         f"the project)")
    return sorted(p for pat in LOG_PATTERNS for p in SAMPLES.glob(pat))


def run_demo(out: str, say: Callable[[str], None]) -> int:
    from .cli import format_frame

    out_dir = Path(out)
    store_dir = out_dir / "store"
    if store_dir.exists():
        shutil.rmtree(store_dir)  # the demo always starts from nothing
    store = Store(store_dir)
    report = store.ingest(sample_logs())
    say(f"Ingested {len(report.ingested)} sample logs into {store_dir} "
        f"({sum(r['records'] for r in report.ingested)} records, "
        f"{sum(r['parts'] for r in report.ingested)} parts).")
    for line in report.problems:
        say(f"  problem: {line}")
    for title, query in QUERIES:
        say(f"\n{title}:\n")
        say(format_frame(store.sql(query), "table").rstrip())
    say(f"\nTry your own: tandem sql --store {store_dir} \"select * from parts limit 5\"")
    return report.exit_code
