"""A real Dask cluster on loopback for tests and the cluster benchmark: one ``dask
scheduler`` and ``dask worker`` processes (each with its nanny), started as
subprocesses in sessions of their own and stopped by process group, so a kill takes a
worker's whole process tree and nothing outlives the test.

Only 127.0.0.1 is ever used: the scheduler listens there on a port the system picks.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path
from typing import Any

DASK = Path(sys.executable).with_name("dask")
START_TIMEOUT_S = 60.0


class LoopbackCluster:
    """``with LoopbackCluster(folder, workers=2) as c: ... c.address ...``"""

    def __init__(self, folder: Path, workers: int = 2):
        self.folder, self.n = folder, workers
        self.scheduler: subprocess.Popen[bytes] | None = None
        self.workers: list[subprocess.Popen[bytes]] = []
        self.address = ""
        self._client: Any = None
        self._logs: list[Any] = []

    # -- start and stop --------------------------------------------------------------
    def __enter__(self) -> LoopbackCluster:
        try:
            self.start()
        except BaseException:
            self.stop()
            raise
        return self

    def __exit__(self, *exc: object) -> None:
        self.stop()

    def start(self) -> None:
        self.folder.mkdir(parents=True, exist_ok=True)
        info = self.folder / "scheduler.json"
        info.unlink(missing_ok=True)
        self.scheduler = self._spawn("scheduler", [
            "scheduler", "--host", "127.0.0.1", "--port", "0", "--no-dashboard",
            "--scheduler-file", str(info)])
        deadline = time.monotonic() + START_TIMEOUT_S
        while not info.exists() or not info.read_text():
            self._alive_or_fail(self.scheduler, "scheduler", deadline)
            time.sleep(0.05)
        self.address = json.loads(info.read_text())["address"]
        for _ in range(self.n):
            self.start_worker(wait=False)
        self.wait_for_workers(self.n)

    def start_worker(self, wait: bool = True) -> subprocess.Popen[bytes]:
        i = len(self.workers)
        proc = self._spawn(f"worker{i}", [
            "worker", self.address, "--nthreads", "1", "--nworkers", "1", "--no-dashboard",
            "--host", "127.0.0.1", "--name", f"w{i}",
            "--local-directory", str(self.folder / f"w{i}")])
        self.workers.append(proc)
        if wait:
            self.wait_for_workers(len(self.alive_workers()))
        return proc

    def _spawn(self, name: str, args: list[str]) -> subprocess.Popen[bytes]:
        log = (self.folder / f"{name}.log").open("ab")
        self._logs.append(log)
        # A session of its own: its process group is the whole tree (the nanny and the
        # worker process it starts), killed at once with killpg.
        return subprocess.Popen([str(DASK), *args], stdout=log, stderr=subprocess.STDOUT,
                                stdin=subprocess.DEVNULL, start_new_session=True)

    def _alive_or_fail(self, proc: subprocess.Popen[bytes], name: str, deadline: float) -> None:
        if proc.poll() is not None:
            raise RuntimeError(f"dask {name} exited with {proc.returncode}; see "
                               f"{self.folder / (name + '.log')}")
        if time.monotonic() > deadline:
            raise RuntimeError(f"dask {name} did not start within {START_TIMEOUT_S:g} s")

    def wait_for_workers(self, n: int) -> None:
        self.client().wait_for_workers(n, timeout=START_TIMEOUT_S)

    def client(self) -> Any:
        """A client of the test's own (to look at the cluster, not to run Tandem's work)."""
        if self._client is None:
            from distributed import Client

            self._client = Client(self.address, timeout="20s", set_as_default=False)
        return self._client

    def alive_workers(self) -> list[subprocess.Popen[bytes]]:
        return [p for p in self.workers if p.poll() is None]

    def kill_worker(self, proc: subprocess.Popen[bytes]) -> None:
        """kill -9 of the worker's whole process tree (its process group)."""
        try:
            os.killpg(proc.pid, signal.SIGKILL)
        except ProcessLookupError:
            pass
        proc.wait(timeout=30)

    def busy_worker(self) -> subprocess.Popen[bytes] | None:
        """The `dask worker` process whose worker is running a task now, if any."""
        client = self.client()
        processing = client.processing()
        parents = client.run(os.getppid)  # worker address -> its nanny's pid
        busy = {parents.get(w) for w, keys in processing.items() if keys}
        return next((p for p in self.alive_workers() if p.pid in busy), None)

    def stop(self) -> None:
        if self._client is not None:
            try:
                self._client.close(timeout=5)
            except Exception:  # noqa: BLE001 - stopping regardless
                pass
            self._client = None
        procs = [p for p in [*self.workers, self.scheduler] if p is not None]
        for p in procs:
            if p.poll() is None:
                try:
                    os.killpg(p.pid, signal.SIGTERM)
                except ProcessLookupError:
                    pass
        for p in procs:
            try:
                p.wait(timeout=10)
            except subprocess.TimeoutExpired:
                try:
                    os.killpg(p.pid, signal.SIGKILL)
                except ProcessLookupError:
                    pass
                p.wait(timeout=10)
        # Whatever a nanny started and left in its group (none expected) goes too.
        for p in procs:
            try:
                os.killpg(p.pid, signal.SIGKILL)
            except (ProcessLookupError, PermissionError):
                pass
        for log in self._logs:
            log.close()
        self._logs.clear()
