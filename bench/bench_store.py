"""Store benchmark: answers about one lot on stores of 1, 32 and 256 lots, in one run.

``make bench-store`` runs it. A measurement, not a test: it prints what it measured (and
whether each figure is inside the project's target) and exits 0 either way.

1. One lot of the sample device (markers, 4 sites, 200 touchdowns, ~1.6 MB) is generated
   with the sample generator and cached in ``bench/out/``; the other lots are copies with
   another LOT_ID in the MIR (same length), so each is a distinct log of its own lot.
2. Stores of 1, 32 and 256 lots are made by ``tandem ingest`` (timed).
3. Whole processes on each store: the first call after the ingest, then 3 more (their
   median; the peak RSS of all from ``os.wait4``): ``tandem sql`` on block_times,
   touchdowns and results of one lot; ``tandem times``, ``tandem sites`` and ``tandem
   plan`` of that lot; pooled block_times of every lot; a count over every result row.
4. Ingesting one more lot into the 256-lot store against ingesting it into an empty one.
5. Each figure as a ratio to the 1-lot store (the machine is shared: absolute times
   drift, ratios within one run hold), printed and written to ``bench/out/store.json``.
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import statistics
import subprocess
import sys
import time
from pathlib import Path
from typing import Any

REPO = Path(__file__).resolve().parent.parent
OUT = REPO / "bench" / "out" / "store"
BLOCKS = REPO / "sample_logs" / "blocks.toml"
BASE_LOT = "BL-0000"
GENERATOR_VERSION = 1
SIZES = (1, 32, 256)
LOT = "BL-0001"  # in every store
# The targets: (factor, seconds) over the 1-lot store's figure.
ONE_LOT, ALL_LOTS, INGEST = (1.5, 0.3), (3.0, 0.5), (1.5, 0.5)
RSS_LIMIT_MB = 1024


def base_log() -> bytes:
    """One generated lot (cached): the sample device, timed by markers."""
    path = OUT / f"base-v{GENERATOR_VERSION}.stdf"
    if path.exists():
        return path.read_bytes()
    sys.path.insert(0, str(REPO))
    import numpy as np

    from sample_logs import generate as g

    lot = g.LotSpec(99, BASE_LOT, "W99", (g.Output("bench.stdf"),), 200)
    blocks = g.build_blocks()
    rng = np.random.default_rng([g.SEED, lot.key])
    tds, index = g.plan_lot(lot, blocks, rng)
    recs = g.build_stdf(lot, blocks, tds, index, rng)[0]  # the records; the rest varies
    data = g.encode_stream(recs, "<")
    OUT.mkdir(parents=True, exist_ok=True)
    path.write_bytes(data)
    return data


def lot_logs(n: int) -> Path:
    """bench/out/store/logs/<n>/: the first n lots, one log each."""
    data = base_log()
    old = bytes([len(BASE_LOT)]) + BASE_LOT.encode()
    assert data.count(old) == 1, "the lot id must appear once (the MIR)"
    folder = OUT / "logs" / str(n)
    if folder.is_dir() and len(list(folder.iterdir())) == n:
        return folder
    shutil.rmtree(folder, ignore_errors=True)
    folder.mkdir(parents=True)
    for i in range(1, n + 1):
        (folder / f"lot{i:04d}.stdf").write_bytes(data.replace(old, bytes([7]) +
                                                               f"BL-{i:04d}".encode()))
    return folder


def one_log(i: int) -> Path:
    data = base_log()
    p = OUT / "logs" / f"extra-{i:04d}.stdf"
    p.write_bytes(data.replace(bytes([7]) + BASE_LOT.encode(), bytes([7]) +
                               f"BL-{i:04d}".encode()))
    return p


def run(*args: str | Path) -> tuple[float, float, int]:
    """(seconds, peak RSS MB, exit code) of `tandem ARGS` as a whole process."""
    t0 = time.perf_counter()
    proc = subprocess.Popen([sys.executable, "-m", "pipeline", *map(str, args)], cwd=REPO,
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    _, status, usage = os.wait4(proc.pid, 0)
    took = time.perf_counter() - t0
    err = proc.stderr.read().decode() if proc.stderr else ""
    proc.stderr.close() if proc.stderr else None
    code = os.waitstatus_to_exitcode(status)
    if code not in (0, 3):
        print(f"  ! tandem {' '.join(map(str, args))[:80]}: exit {code}: {err[:200]}")
    return took, usage.ru_maxrss / 1024, code


def queries(store: Path) -> dict[str, list[str | Path]]:
    lot = f"'{LOT}'"
    return {
        "block_times of one lot": ["sql", "--store", store,
                                   f"select block, site, mean_ms from block_times "
                                   f"where lot_id = {lot}"],
        "touchdowns of one lot": ["sql", "--store", store,
                                  f"select * from touchdowns where lot_id = {lot}"],
        "results of one lot": ["sql", "--store", store,
                               f"select count(*), avg(value) from results where lot_id = {lot}"],
        "tandem times --lot": ["times", "--store", store, "--lot", LOT],
        "tandem sites --lot": ["sites", "--store", store, "--lot", LOT],
        "tandem plan --lot": ["plan", "--store", store, "--lot", LOT, "--blocks", BLOCKS,
                              "--json", "--time-limit", "2"],
        "pooled block_times, every lot": ["sql", "--store", store,
                                          "select lot_id, block, mean_ms from block_times "
                                          "where site is null"],
        "count(*) of every result": ["sql", "--store", store, "select count(*) from results"],
    }


def measure(store: Path, repeat: int) -> dict[str, dict[str, float]]:
    out = {}
    for name, args in queries(store).items():
        first = run(*args)  # the first call after the ingest: nothing is left to compute
        runs = [run(*args) for _ in range(repeat)]
        out[name] = {"first_s": first[0], "seconds": statistics.median(r[0] for r in runs),
                     "rss_mb": max(r[1] for r in [first, *runs])}
    return out


def limit_for(name: str) -> tuple[float, float] | None:
    if name.startswith("pooled"):
        return ALL_LOTS
    if name.startswith("count"):
        return None  # a question about everything: only its memory has a limit
    return ONE_LOT


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", type=int, nargs="+", default=list(SIZES))
    ap.add_argument("--repeat", type=int, default=3)
    args = ap.parse_args(argv)
    sizes = sorted(set(args.sizes) | {1})
    results: dict[str, Any] = {"sizes": sizes, "load_before": os.getloadavg(), "stores": {}}
    for n in sizes:
        store = OUT / f"store-{n}"
        shutil.rmtree(store, ignore_errors=True)
        took, rss, code = run("ingest", lot_logs(n), "--store", store, "--workers", "2")
        print(f"store of {n} lot(s): ingested in {took:.1f} s (peak {rss:.0f} MB, exit {code})")
        results["stores"][n] = {"ingest_s": took, "ingest_rss_mb": rss,
                                "queries": measure(store, args.repeat)}
    big = max(sizes)
    extra = one_log(big + 1)
    empty_runs = []
    for _ in range(args.repeat):
        fresh = OUT / "store-empty"
        shutil.rmtree(fresh, ignore_errors=True)
        empty_runs.append(run("ingest", extra, "--store", fresh)[0])
    into_big = run("ingest", extra, "--store", OUT / f"store-{big}")
    results["one_more_lot"] = {"into_empty_s": statistics.median(empty_runs),
                               f"into_{big}_s": into_big[0], "rss_mb": into_big[1]}
    results["load_after"] = os.getloadavg()
    report(results, big)
    (OUT.parent / "store.json").write_text(json.dumps(results, indent=1) + "\n")
    return 0


def report(results: dict[str, Any], big: int) -> None:
    base = results["stores"][1]["queries"]
    sizes = results["sizes"]
    print(f"\nload average {results['load_before'][0]:.1f} before, "
          f"{results['load_after'][0]:.1f} after; seconds (x the 1-lot store), peak RSS")
    print(f"{'question':32s}" + "".join(f"{f'{n} lots':>22s}" for n in sizes)
          + f"{'first call':>22s}  target")
    for name, one in base.items():
        row = f"{name:32s}"
        for n in sizes:
            q = results["stores"][n]["queries"][name]
            ratio = q["seconds"] / one["seconds"]
            row += f"{q['seconds']:7.2f} s {ratio:5.2f}x {q['rss_mb']:4.0f} MB"
        lim = limit_for(name)
        q = results["stores"][big]["queries"][name]
        row += f"{q['first_s']:9.2f} s vs {one['first_s']:5.2f} s"
        ok = q["rss_mb"] < RSS_LIMIT_MB and (lim is None or all(
            q[k] <= lim[0] * one[k] + lim[1] for k in ("seconds", "first_s")))
        row += "  " + ("ok" if ok else "MISSED") + (
            f" (<= {lim[0]}x + {lim[1]} s)" if lim else f" (RSS < {RSS_LIMIT_MB} MB)")
        print(row)
    m = results["one_more_lot"]
    ratio = m[f"into_{big}_s"] / m["into_empty_s"]
    ok = m[f"into_{big}_s"] <= INGEST[0] * m["into_empty_s"] + INGEST[1]
    print(f"ingest one more lot: empty store {m['into_empty_s']:.2f} s, {big}-lot store "
          f"{m[f'into_{big}_s']:.2f} s ({ratio:.2f}x) "
          f"{'ok' if ok else 'MISSED'} (<= {INGEST[0]}x + {INGEST[1]} s)")


if __name__ == "__main__":
    raise SystemExit(main())
