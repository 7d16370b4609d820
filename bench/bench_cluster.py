"""Cluster benchmark: 64 generated lots through a loopback Dask cluster, in one run.

``make bench-cluster`` runs it (~6 minutes on a loaded machine). A measurement, not a
test: it prints what it measured and exits 0 (1 only when the stores differ: a bug).

1. The lots are ``bench_store.lot_logs(64)`` (copies of one generated sample-device lot,
   each with its own lot id, ~3.5 MB each).
2. Baseline: a local ingest (``--workers 1``: everything in the ingesting process) in a
   fresh process, whose own CPU time (getrusage) and wall time are recorded.
3. The same with a local pool of two decoding processes (`--workers 2`), to tell what
   this machine gives two processes now from what Dask costs.
4. A loopback cluster (``dask scheduler``, ``dask worker`` with one thread each, started
   here and stopped by process group) with one worker, then two; each worker warmed by a
   small ingest first (its first task imports pyarrow, DuckDB, the models). Each timed
   ingest is a fresh client process: its CPU time, wall time, and the time it spent
   committing (``ingest._commit_batch``: publishing, and waiting for the lot's
   derivation on the cluster), hence logs registered per second of committing.
5. The two-worker store is compared with the local one: parts, results and block_times,
   row for row (file ids, lots, every column).
6. With two workers, one is killed (kill -9 of its process tree) 2 s into a second
   ingest of the 64 lots into a fresh store: exit code, and each log stored once.
7. The committing client alone: the 64 lots decoded first, then committed back to back
   (batches of ``cluster_tasks.BATCH``), so the rate is the client's and the lot
   derivation's; and the registry's own work per commit with 1,000 to 100,000 logs
   stored (the part of a commit that grows with the store).

Ratios are within this run (the machine is shared; absolute times drift); the load
average is printed beside them.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import shutil
import subprocess
import sys
import time
from pathlib import Path
from typing import Any

REPO = Path(__file__).resolve().parent.parent
sys.path[:0] = [str(REPO / "bench"), str(REPO / "tests")]
OUT = REPO / "bench" / "out" / "cluster"
LOTS = 64


def client_run(logs: str, store: str, address: str | None,
               commit_only: bool = False, workers: int = 1) -> dict[str, Any]:
    """One ingest in this process (run as ``--client``): the client's own figures. The
    time committing is split into waiting for the derivation (on the cluster, or here
    for a local run) and the client's own publishing (journal, renames, registry)."""
    from pipeline.jobs import ingest as ing
    from pipeline.jobs.cluster import connected
    from pipeline.jobs.cluster_tasks import cluster_runner
    from pipeline.jobs.derivation import local_runner
    from pipeline.store import Store
    from pipeline.store.commit import Runner

    spent = {"commit_s": 0.0, "commit_cpu_s": 0.0, "derive_wait_s": 0.0, "commits": 0}
    inner = ing._commit_batch

    def timed_commit(*args: Any) -> None:
        t, c = time.perf_counter(), time.thread_time()
        inner(*args)
        spent["commit_s"] += time.perf_counter() - t
        spent["commit_cpu_s"] += time.thread_time() - c
        spent["commits"] += 1

    def waited(fn: Any) -> Any:
        def run(tasks: Any) -> Any:
            t = time.perf_counter()
            try:
                return fn(tasks)
            finally:
                spent["derive_wait_s"] += time.perf_counter() - t
        return run

    ing._commit_batch = timed_commit  # type: ignore[assignment]
    if commit_only:
        _decode_everything_first()
    t0 = time.perf_counter()
    with connected(address) as cluster:
        base = cluster_runner(cluster) if cluster is not None else local_runner()
        runner = Runner(waited(base.files), waited(base.lots))
        report = ing.ingest(Store(store), [logs], workers=workers, runner=runner,
                            cluster=cluster)
    wall = time.perf_counter() - t0
    use = resource.getrusage(resource.RUSAGE_SELF)
    return {"wall_s": wall, "cpu_s": use.ru_utime + use.ru_stime, "exit": report.exit_code,
            "logs": len(report.ingested), **spent}


def _decode_everything_first() -> None:
    """Commit only once every log is decoded: the commits then run back to back, so
    their rate is the committing client's (and the lot derivation's), not decoding's."""
    from pipeline.jobs import cluster_tasks

    inner = cluster_tasks.decoded_batches

    def batches(*args: Any) -> Any:
        ready = [d for batch in inner(*args) for d in batch]
        for i in range(0, len(ready), cluster_tasks.BATCH):
            yield ready[i:i + cluster_tasks.BATCH]

    cluster_tasks.decoded_batches = batches  # type: ignore[assignment]


def run_client(logs: Path, store: Path, address: str | None,
               mode: str = "all") -> dict[str, Any]:
    shutil.rmtree(store, ignore_errors=True)
    args = [sys.executable, __file__, "--client", str(logs), str(store), mode]
    if address:
        args.append(address)
    t0 = time.perf_counter()
    proc = subprocess.run(args, capture_output=True, text=True, cwd=REPO)
    out = json.loads(proc.stdout.strip().splitlines()[-1]) if proc.returncode == 0 else {}
    out["process_s"] = time.perf_counter() - t0
    if proc.returncode != 0:
        print(f"  ! client exited {proc.returncode}: {proc.stderr[-500:]}")
    return out


def tables(store: Path) -> dict[str, Any]:
    from pipeline.store import Store

    s = Store(store)
    return {
        "parts": s.sql("select * from parts order by file_id, part_index"),
        "results": s.sql("select * from results order by file_id, part_index, test_num, "
                         "element nulls first, head, site"),
        "block_times": s.sql("select * from block_times order by all"),
    }


def same_tables(a: Path, b: Path) -> dict[str, bool]:
    ta, tb = tables(a), tables(b)
    return {name: ta[name].equals(tb[name]) for name in ta}


def once_each(store: Path) -> dict[str, int]:
    from pipeline.store import Store

    s = Store(store)
    row = s.sql("select count(*) as files, count(distinct sha256) as distinct_logs "
                "from files where status = 'ok'").row(0)
    lots = s.sql("select count(*) as n from (select lot_id, count(distinct file_id) as k "
                 "from parts group by lot_id) where k = 1").item()
    return {"files": row[0], "distinct_logs": row[1], "lots_with_one_log": lots}


def kill_run(cluster: Any, logs: Path, store: Path) -> dict[str, Any]:
    shutil.rmtree(store, ignore_errors=True)
    t0 = time.perf_counter()
    proc = subprocess.Popen([sys.executable, "-m", "pipeline", "ingest", str(logs), "--store",
                             str(store), "--cluster", cluster.address, "--json"], cwd=REPO,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    time.sleep(2.0)
    victim = cluster.busy_worker() or cluster.alive_workers()[0]
    busy = cluster.busy_worker() is not None
    cluster.kill_worker(victim)
    killed_at = time.perf_counter() - t0
    out, err = proc.communicate(timeout=600)
    return {"exit": proc.returncode, "killed_at_s": killed_at, "victim_was_busy": busy,
            "wall_s": time.perf_counter() - t0, "stderr_lines": err.splitlines()[:5],
            "reported": len(json.loads(out)["ingested"]) if out.strip() else None,
            **once_each(store)}


def with_cpu(cluster: Any, run: Any) -> dict[str, Any]:
    """run(), with the CPU time the scheduler's and workers' process trees spent meanwhile."""
    before = tree_cpu(cluster)
    out = run()
    out["cluster_cpu_s"] = tree_cpu(cluster) - before
    return dict(out)


def tree_cpu(cluster: Any) -> float:
    import psutil  # a dependency of distributed

    total = 0.0
    for p in [cluster.scheduler, *cluster.alive_workers()]:
        try:
            root = psutil.Process(p.pid)
            for q in [root, *root.children(recursive=True)]:
                t = q.cpu_times()
                total += t.user + t.system
        except psutil.NoSuchProcess:
            pass
    return total


def registry_cost(n: int) -> dict[str, float]:
    """Seconds of the client's registry work per commit with n logs stored: the next
    snapshot, its index written, the duplicate lookup rebuilt (each grows with n)."""
    import tempfile

    import pyarrow as pa

    from pipeline.store.registry import SCHEMA, Registry

    row = {f.name: None for f in SCHEMA}
    rows = [{**row, "file_id": f"{i:016x}", "lot_id": f"L{i}", "sha256": f"{i:064x}",
             "status": "ok", "path": f"/data/inbox/log{i}.stdf", "size_bytes": 3_500_000 + i}
            for i in range(n)]
    reg = Registry(pa.Table.from_pylist(rows, schema=SCHEMA), {f"L{i}": 1 for i in range(n)}, 1)
    with tempfile.TemporaryDirectory() as d:
        t = time.perf_counter()
        after = reg.with_commit([{**rows[0], "file_id": "new", "sha256": "f" * 64}], {"new"})
        t1 = time.perf_counter()
        after.write(Path(d))
        t2 = time.perf_counter()
        after.by_sha()
        after.files_of("new")
        t3 = time.perf_counter()
    return {"with_commit_s": t1 - t, "write_s": t2 - t1, "lookups_s": t3 - t2,
            "total_s": t3 - t}


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--client", nargs="+", help=argparse.SUPPRESS)
    ap.add_argument("--lots", type=int, default=LOTS)
    args = ap.parse_args(argv)
    if args.client:
        logs, store, mode, *address = args.client
        print(json.dumps(client_run(logs, store, address[0] if address else None,
                                    mode == "commit-only", 2 if mode == "pool" else 1)))
        return 0
    import bench_store
    from loopback_cluster import LoopbackCluster

    logs, warm = bench_store.lot_logs(args.lots), bench_store.lot_logs(2)
    OUT.mkdir(parents=True, exist_ok=True)
    res: dict[str, Any] = {"lots": args.lots, "load_before": os.getloadavg()}
    print(f"{args.lots} lots; load average {os.getloadavg()[0]:.1f}")
    res["local"] = run_client(logs, OUT / "store-local", None)
    print(f"local ingest: {res['local']}")
    res["local_pool"] = run_client(logs, OUT / "store-pool", None, "pool")
    print(f"local ingest, a pool of 2 decoding processes: {res['local_pool']}")
    with LoopbackCluster(OUT / "cluster", workers=1) as c:
        run_client(warm, OUT / "store-warm", c.address)
        res["one_worker"] = with_cpu(c, lambda: run_client(logs, OUT / "store-1", c.address))
        print(f"1 worker: {res['one_worker']}")
        c.start_worker()
        run_client(warm, OUT / "store-warm", c.address)
        res["two_workers"] = with_cpu(c, lambda: run_client(logs, OUT / "store-2", c.address))
        print(f"2 workers: {res['two_workers']}")
        res["commit_only"] = run_client(logs, OUT / "store-c", c.address, "commit-only")
        print(f"commits back to back, 2 workers: {res['commit_only']}")
        res["same_as_local"] = same_tables(OUT / "store-local", OUT / "store-2")
        res["kill"] = kill_run(c, logs, OUT / "store-kill")
        print(f"worker killed: {res['kill']}")
    res["registry"] = {n: registry_cost(n) for n in (1000, 10000, 100000)}
    res["load_after"] = os.getloadavg()
    report(res)
    (OUT.parent / "cluster.json").write_text(json.dumps(res, indent=1, default=str) + "\n")
    return 0 if all(res["same_as_local"].values()) else 1


def report(res: dict[str, Any]) -> None:
    loc, one, two = res["local"], res["one_worker"], res["two_workers"]
    print(f"\nload average {res['load_before'][0]:.1f} before, {res['load_after'][0]:.1f} after")
    print(f"same parts / results / block_times as local: {res['same_as_local']}")
    print(f"client CPU: local {loc['cpu_s']:.1f} s, 2-worker cluster client {two['cpu_s']:.1f} s "
          f"= {two['cpu_s'] / loc['cpu_s']:.2f} of local (target <= 0.33)")
    print(f"wall: local {loc['wall_s']:.1f} s, 1 worker {one['wall_s']:.1f} s, 2 workers "
          f"{two['wall_s']:.1f} s: speed-up 2 over 1 = {one['wall_s'] / two['wall_s']:.2f}x")
    pool = res["local_pool"]
    print(f"the same machine's local process pool, for comparison: 1 process "
          f"{loc['wall_s']:.1f} s, pool of 2 {pool['wall_s']:.1f} s = "
          f"{loc['wall_s'] / pool['wall_s']:.2f}x")
    for name, r in (("1 worker", one), ("2 workers", two)):
        print(f"CPU, {name}: client {r['cpu_s']:.1f} s + scheduler and workers "
              f"{r['cluster_cpu_s']:.1f} s = {r['cpu_s'] + r['cluster_cpu_s']:.1f} s "
              f"(local ingest {loc['cpu_s']:.1f} s); that is "
              f"{(r['cpu_s'] + r['cluster_cpu_s']) / r['wall_s']:.2f} cores busy on average")
    co = res["commit_only"]
    for name, r in (("local", loc), ("1 worker", one), ("2 workers", two),
                    ("2 workers, commits back to back", co)):
        own = r["commit_s"] - r["derive_wait_s"]
        print(f"committing client, {name}: {r['logs']} logs in {r['commits']} commits; "
              f"{r['commit_s']:.1f} s committing ({r['logs'] / r['commit_s']:.1f} logs/s), of "
              f"which {r['derive_wait_s']:.1f} s waiting for derivation; its own publishing "
              f"{own:.2f} s ({r['commit_cpu_s']:.2f} s CPU) = {r['logs'] / own:.0f} logs/s "
              f"registered")
    for n, r in res["registry"].items():
        print(f"registry work per commit with {n} logs stored: {1000 * r['total_s']:.1f} ms "
              f"(next snapshot {1000 * r['with_commit_s']:.1f}, index written "
              f"{1000 * r['write_s']:.1f}, lookups {1000 * r['lookups_s']:.1f})")
    k = res["kill"]
    print(f"worker killed at {k['killed_at_s']:.1f} s (busy: {k['victim_was_busy']}): exit "
          f"{k['exit']}, {k['files']} files stored, {k['distinct_logs']} distinct, "
          f"{k['lots_with_one_log']} lots with exactly one log")


if __name__ == "__main__":
    raise SystemExit(main())
