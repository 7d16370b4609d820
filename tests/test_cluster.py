"""`--cluster`: ingest and the nightly job on a real Dask cluster on loopback.

One `dask scheduler` and two `dask worker` processes (tests/loopback_cluster.py) are
started once for the module and stopped by process group at its end, whatever happens.
Each test compares with what a local run of the same command gives, or checks the
store from outside (registry, views, folders).
"""

from __future__ import annotations

import json
import os
import shutil
import socket
import subprocess
import sys
import time
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

import pytest

from pipeline.errors import UsageError
from pipeline.jobs import cluster as cl
from pipeline.store import Store
from tests.conftest import SAMPLES, CliResult
from tests.loopback_cluster import LoopbackCluster
from tests.test_nightly import lot_log

REPO = Path(__file__).parent.parent
sys.path.insert(0, str(REPO / "bench"))
import bench_store  # noqa: E402 - bench/ is not a package


@pytest.fixture(scope="module")
def loopback(tmp_path_factory: pytest.TempPathFactory) -> Iterator[LoopbackCluster]:
    with LoopbackCluster(tmp_path_factory.mktemp("cluster"), workers=2) as c:
        c.client().get_task_stream()  # from now on the scheduler records every task
        yield c


def lots(folder: Path, n: int, first: int = 1) -> Path:
    """n generated lots of the sample device (bench_store's), one log each."""
    data = bench_store.base_log()
    old = bytes([len(bench_store.BASE_LOT)]) + bench_store.BASE_LOT.encode()
    folder.mkdir(parents=True, exist_ok=True)
    for i in range(first, first + n):
        new = f"CL-{i:04d}".encode()
        assert len(new) == len(old) - 1
        (folder / f"lot{i:04d}.stdf").write_bytes(data.replace(old, bytes([len(new)]) + new))
    return folder


def tasks_since(c: LoopbackCluster, t0: float) -> dict[str, list[str]]:
    """Task name -> the workers that ran each of its tasks since t0 (scheduler's record)."""
    out: dict[str, list[str]] = {}
    for e in c.client().get_task_stream(start=t0):
        if any(s["action"] == "compute" for s in e["startstops"]):
            out.setdefault(e["key"].split("-")[0], []).append(e["worker"])
    return out


def tables(root: Path) -> dict[str, Any]:
    s = Store(root)
    return {"parts": s.sql("select * from parts order by file_id, part_index"),
            "results": s.sql("select * from results order by file_id, part_index, "
                             "test_num, element nulls first, site"),
            "block_times": s.sql("select * from block_times order by all")}


def once_each(root: Path, n: int) -> None:
    """n logs stored, each exactly once: in the registry, the views and the lots."""
    s = Store(root)
    files = s.sql("select file_id, sha256, status from files")
    assert files.height == n and files["sha256"].n_unique() == n
    assert set(files["status"]) == {"ok"}
    per_lot = s.sql("select lot_id, count(*) as logs from lots group by lot_id")
    assert per_lot.height == n and set(per_lot["logs"]) == {1}
    parts = s.sql("select file_id, count(*) as parts, count(distinct part_index) as distinct_ "
                  "from parts group by file_id")
    assert parts.height == n and (parts["parts"] == parts["distinct_"]).all()


# -- the same store as a local run -------------------------------------------------------
def test_cluster_ingest_equals_local(loopback: LoopbackCluster, tmp_path: Path,
                                     cli: Callable[..., CliResult]) -> None:
    # sample_logs/: every format (raw, big-endian, gzip, TSR only, totals only, timing CSV)
    # and three files that are not logs, so the JSON has ingested and rejected entries.
    local = cli("ingest", SAMPLES, "--store", tmp_path / "local", "--json")
    t0 = time.time()
    remote = cli("ingest", SAMPLES, "--store", tmp_path / "remote", "--json",
                 "--cluster", loopback.address)
    assert (remote.code, remote.out, remote.err) == (local.code, local.out, local.err)
    assert local.code == 3 and len(json.loads(local.out)["ingested"]) >= 6
    a, b = tables(tmp_path / "local"), tables(tmp_path / "remote")
    for name in a:
        assert a[name].height > 0 and a[name].equals(b[name]), name
    ran = tasks_since(loopback, t0)
    workers = set(loopback.client().scheduler_info()["workers"])
    # Every input was decoded by a worker (the three non-logs too: content decides), and
    # every lot derived there.
    assert len(ran["decode_task"]) == len(list(SAMPLES.iterdir()))
    assert set(ran["decode_task"]) <= workers and set(ran["lot_task"]) <= workers
    assert not (tmp_path / "remote" / "staging").exists() or not any(
        (tmp_path / "remote" / "staging").iterdir())
    # A rerun skips everything, as locally.
    again = cli("ingest", SAMPLES, "--store", tmp_path / "remote", "--json",
                "--cluster", loopback.address)
    assert again.code == 0
    assert len(json.loads(again.out)["skipped"]) == len(list(SAMPLES.iterdir()))


def test_relative_paths_resolve_on_workers(loopback: LoopbackCluster, tmp_path: Path,
                                           cli: Callable[..., CliResult],
                                           monkeypatch: pytest.MonkeyPatch) -> None:
    """Workers run elsewhere (another working folder): store and logs named relative to
    the client's folder still work, and the report names them as given."""
    lots(tmp_path / "in", 2)
    monkeypatch.chdir(tmp_path)
    r = cli("ingest", "in", "--store", "st", "--json", "--cluster", loopback.address)
    assert r.code == 0, r.err
    assert [e["path"] for e in json.loads(r.out)["ingested"]] == [
        os.path.join("in", "lot0001.stdf"), os.path.join("in", "lot0002.stdf")]
    once_each(tmp_path / "st", 2)


# -- a worker lost mid-run ---------------------------------------------------------------
def test_worker_killed_mid_ingest_each_log_once(loopback: LoopbackCluster,
                                                tmp_path: Path) -> None:
    n = 8
    logs, store = lots(tmp_path / "in", n), tmp_path / "store"
    proc = subprocess.Popen([sys.executable, "-m", "pipeline", "ingest", str(logs), "--store",
                             str(store), "--json", "--cluster", loopback.address], cwd=REPO,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        time.sleep(2.0)
        victim = None
        deadline = time.monotonic() + 30
        while victim is None and proc.poll() is None and time.monotonic() < deadline:
            victim = loopback.busy_worker()  # one that is running a task now
            time.sleep(0.05)
        assert victim is not None, "no worker was busy: the ingest ended too soon"
        loopback.kill_worker(victim)
        assert victim.poll() is not None
        out, err = proc.communicate(timeout=300)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
        loopback.start_worker()  # two again for the tests after this one
    assert proc.returncode == 0, err
    assert err == ""
    report = json.loads(out)
    assert len(report["ingested"]) == n and not report["rejected"] and "failed" not in report
    assert len({e["file_id"] for e in report["ingested"]}) == n
    once_each(store, n)
    # The lost attempts' staging folders (if any) go with the next writer's recovery.
    again = subprocess.run([sys.executable, "-m", "pipeline", "ingest", str(logs), "--store",
                            str(store)], cwd=REPO, capture_output=True, text=True)
    assert again.returncode == 0 and f"skipped {n}" in again.stdout
    assert not (store / "staging").exists() or not any((store / "staging").iterdir())
    once_each(store, n)


def test_task_lost_on_every_try_is_failed_not_stored() -> None:
    """Dask gives up on a task whose worker died on every try (KilledWorker): that log is
    reported failed (exit 1, not registered: a rerun tries it again)."""
    from distributed import KilledWorker

    from pipeline.jobs.cluster_tasks import _result

    class Lost:
        def result(self) -> None:
            raise KilledWorker("decode_task-1", None, 3)  # type: ignore[arg-type]

        def release(self) -> None:
            pass

    got = _result(None, Lost(), Path("big.stdf"), None)  # type: ignore[arg-type]
    assert got.root is None and got.entry["status"] == "failed"
    assert got.entry["path"] == "big.stdf" and "4 tries" in got.entry["error"]


# -- the nightly job ----------------------------------------------------------------------
def test_nightly_on_cluster(loopback: LoopbackCluster, tmp_path: Path,
                            cli: Callable[..., CliResult]) -> None:
    inbox, out = tmp_path / "inbox", tmp_path / "out"
    inbox.mkdir()
    for i in (1, 2):
        (inbox / f"n{i}.stdf").write_bytes(lot_log(i))
    t0 = time.time()
    r = cli("nightly", "--inbox", inbox, "--store", tmp_path / "store", "--out", out,
            "--cluster", loopback.address)
    assert r.code == 0, r.err
    st = json.loads((out / "status.json").read_text())
    assert st["state"] == "finished" and st["exit_code"] == 0
    assert st["lots"] == ["NL-01", "NL-02"] and st["errors"] == []
    assert [rep["lot_id"] for rep in st["reports"]] == ["NL-01", "NL-02"]
    for rep in st["reports"]:
        assert (Path(rep["folder"]) / "report.html").stat().st_size > 0
    ran = tasks_since(loopback, t0)
    assert len(ran["decode_task"]) == 2 and len(ran["report_task"]) == 2


# -- no scheduler, or no address ------------------------------------------------------------
def free_port() -> int:
    with socket.socket() as s:  # the system's pick, closed again: nothing listens there
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def tandem(*args: str | Path, env: dict[str, str] | None = None
           ) -> tuple[subprocess.CompletedProcess[str], float]:
    t0 = time.monotonic()
    r = subprocess.run([sys.executable, "-m", "pipeline", *map(str, args)], cwd=REPO,
                       capture_output=True, text=True, env={**os.environ, **(env or {})},
                       timeout=120)
    return r, time.monotonic() - t0


def test_unreachable_scheduler_exit_1_one_line_nothing_written(tmp_path: Path) -> None:
    address = f"tcp://127.0.0.1:{free_port()}"
    r, took = tandem("ingest", SAMPLES, "--store", tmp_path / "store", "--cluster", address,
                     "--cluster-timeout", "2")
    assert r.returncode == 1 and r.stdout == ""
    [line] = r.stderr.splitlines()
    assert address in line and "2 s" in line and "nothing was written" in line
    assert took < 2 + 15  # the timeout, plus start-up on a loaded machine
    assert not (tmp_path / "store").exists()
    # The nightly job: not even status.json or the --out folder.
    r, _ = tandem("nightly", "--inbox", SAMPLES, "--store", tmp_path / "store", "--out",
                  tmp_path / "out", "--cluster-timeout", "2", env={cl.ENV: address})
    assert r.returncode == 1 and len(r.stderr.splitlines()) == 1 and address in r.stderr
    assert not (tmp_path / "store").exists() and not (tmp_path / "out").exists()


def test_existing_store_untouched_when_unreachable(tmp_path: Path,
                                                   cli: Callable[..., CliResult]) -> None:
    store = tmp_path / "store"
    assert cli("ingest", SAMPLES / "pf4_L0231_w01_markers.stdf", "--store", store).code == 0
    before = {p: p.stat().st_mtime_ns for p in store.rglob("*")}
    r = cli("ingest", SAMPLES, "--store", store, "--cluster",
            f"tcp://127.0.0.1:{free_port()}", "--cluster-timeout", "1")
    assert r.code == 1 and len(r.err_lines) == 1
    assert {p: p.stat().st_mtime_ns for p in store.rglob("*")} == before
    assert Store(store).sql("select count(*) as n from files").item() == 1


@pytest.mark.slow
def test_unreachable_default_timeout_under_30_s(tmp_path: Path) -> None:
    address = f"tcp://127.0.0.1:{free_port()}"
    r, took = tandem("ingest", SAMPLES, "--store", tmp_path / "store", "--cluster", address)
    assert r.returncode == 1 and len(r.stderr.splitlines()) == 1 and address in r.stderr
    assert took < 30
    assert not (tmp_path / "store").exists()


BAD = ["", "tcp://", "tcp://127.0.0.1", "127.0.0.1", "http://127.0.0.1:8786",
       "tcp://127.0.0.1:0", "tcp://127.0.0.1:65536", "tcp://127.0.0.1:port",
       "tcp://bad host:8786", "tcp://[::1:8786", "tcp://[nothex]:8786", "tcp://a..b:8786"]


@pytest.mark.parametrize("address", BAD)
def test_malformed_address_exit_2(address: str, tmp_path: Path,
                                  cli: Callable[..., CliResult]) -> None:
    r = cli("ingest", SAMPLES, "--store", tmp_path / "store", "--cluster", address)
    assert r.code == 2 and len(r.err_lines) == 1 and "--cluster" in r.err
    assert not (tmp_path / "store").exists()


def test_malformed_env_address_and_timeout_exit_2(tmp_path: Path,
                                                  cli: Callable[..., CliResult],
                                                  monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv(cl.ENV, "scheduler-without-port")
    r = cli("nightly", "--inbox", SAMPLES, "--store", tmp_path / "s", "--out", tmp_path / "o")
    assert r.code == 2 and len(r.err_lines) == 1 and "scheduler-without-port" in r.err
    monkeypatch.delenv(cl.ENV)
    r = cli("ingest", SAMPLES, "--store", tmp_path / "s", "--cluster", "tcp://127.0.0.1:1",
            "--cluster-timeout", "0")
    assert r.code == 2 and "--cluster-timeout" in r.err
    assert not (tmp_path / "s").exists() and not (tmp_path / "o").exists()


GOOD = [("tcp://10.1.2.3:8786", "tcp://10.1.2.3:8786"), ("10.1.2.3:8786", "tcp://10.1.2.3:8786"),
        ("TLS://sched.floor.example:443", "tls://sched.floor.example:443"),
        ("tcp://[::1]:8786", "tcp://[::1]:8786"), (" tcp://localhost:1 ", "tcp://localhost:1")]


@pytest.mark.parametrize(("text", "want"), GOOD)
def test_parse_address_agrees_with_dask(text: str, want: str) -> None:
    # Outside reference: distributed's own parser reads our normal form back to the same
    # transport, host and port.
    from distributed.comm import parse_address, parse_host_port

    got = cl.parse_address(text)
    assert got == want
    scheme, loc = parse_address(got)
    host, port = parse_host_port(loc)
    assert scheme == want.split("://")[0]
    assert (host, port) == parse_host_port(want.split("://")[1])


def test_address_from_option_then_env() -> None:
    assert cl.address_from(None, {}) is None
    assert cl.address_from(None, {cl.ENV: "  "}) is None  # set but empty: no cluster
    assert cl.address_from(None, {cl.ENV: "h:1"}) == "tcp://h:1"
    assert cl.address_from("tcp://o:2", {cl.ENV: "h:1"}) == "tcp://o:2"
    with pytest.raises(UsageError):
        cl.address_from("", {cl.ENV: "h:1"})


def test_no_cluster_no_dask(tmp_path: Path) -> None:
    """Without --cluster nothing of Dask is imported, let alone started."""
    code = ("import sys; from pipeline.cli import main; "
            f"rc = main(['ingest', {str(SAMPLES / 'pf4_L0231_w01_markers.stdf')!r}, "
            f"'--store', {str(tmp_path / 'store')!r}]); "
            "print(rc, sorted(m for m in sys.modules if m.split('.')[0] in "
            "('dask', 'distributed')))")
    r = subprocess.run([sys.executable, "-c", code], cwd=REPO, capture_output=True,
                       text=True, env={k: v for k, v in os.environ.items() if k != cl.ENV})
    assert r.returncode == 0, r.stderr
    assert r.stdout.strip().splitlines()[-1] == "0 []"


# -- the figures, at full size ---------------------------------------------------------
@pytest.mark.slow
def test_64_lots_equal_local_and_client_cpu_a_third(loopback: LoopbackCluster,
                                                    tmp_path: Path) -> None:
    logs = lots(tmp_path / "in", 64)

    def run(store: str, *extra: str) -> float:
        """The ingesting process's own CPU time (its getrusage, through wait4)."""
        proc = subprocess.Popen([sys.executable, "-m", "pipeline", "ingest", str(logs),
                                 "--store", str(tmp_path / store), *extra], cwd=REPO,
                                stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        _, status, use = os.wait4(proc.pid, 0)
        proc.returncode = os.waitstatus_to_exitcode(status)  # reaped here, not by Popen
        assert proc.returncode == 0
        return use.ru_utime + use.ru_stime

    local = run("local", "--workers", "1")
    remote = run("remote", "--cluster", loopback.address)
    a, b = tables(tmp_path / "local"), tables(tmp_path / "remote")
    for name in a:
        assert a[name].equals(b[name]), name
    assert remote <= local / 3, (remote, local)


@pytest.mark.slow
def test_worker_killed_2_s_into_64_lots(loopback: LoopbackCluster, tmp_path: Path) -> None:
    logs, store = lots(tmp_path / "in", 64), tmp_path / "store"
    proc = subprocess.Popen([sys.executable, "-m", "pipeline", "ingest", str(logs), "--store",
                             str(store), "--cluster", loopback.address], cwd=REPO,
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
    try:
        time.sleep(2.0)
        loopback.kill_worker(loopback.busy_worker() or loopback.alive_workers()[0])
        _, err = proc.communicate(timeout=900)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
        loopback.start_worker()
    assert proc.returncode == 0, err
    once_each(store, 64)
    shutil.rmtree(store)


@pytest.mark.slow
def test_scheduler_lost_mid_ingest_exit_1_rest_stored_by_rerun(tmp_path: Path) -> None:
    """The scheduler itself goes (its own cluster here): one line, exit 1; what was
    committed stays whole, and a rerun (here a local one) stores the rest, each once."""
    import signal

    n = 12
    logs, store = lots(tmp_path / "in", n), tmp_path / "store"
    with LoopbackCluster(tmp_path / "own", workers=2) as c:
        proc = subprocess.Popen([sys.executable, "-m", "pipeline", "ingest", str(logs),
                                 "--store", str(store), "--cluster", c.address], cwd=REPO,
                                stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
        try:
            deadline = time.monotonic() + 60
            while not (store / "derived").is_dir() and time.monotonic() < deadline:
                time.sleep(0.05)  # the first commit is published
            assert c.scheduler is not None
            os.killpg(c.scheduler.pid, signal.SIGKILL)
            _, err = proc.communicate(timeout=120)
        finally:
            if proc.poll() is None:
                proc.kill()
                proc.wait()
    assert proc.returncode == 1
    [line] = err.splitlines()
    assert "lost the Dask scheduler" in line and c.address in line
    r, _ = tandem("ingest", logs, "--store", store, "--json")
    assert r.returncode == 0, r.stderr
    done = json.loads(r.stdout)
    assert len(done["ingested"]) + len(done["skipped"]) == n and done["ingested"]
    once_each(store, n)
