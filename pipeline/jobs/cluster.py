"""The connection to a Dask distributed cluster (``--cluster ADDRESS``).

Only the address is checked here without Dask: a malformed one is a usage error (exit 2)
before anything is imported or connected. ``connected`` imports ``distributed`` only
when an address is given, so a run without a cluster starts no Dask process and does not
even load it. A scheduler that does not answer within the timeout is one line, exit 1,
before the store is touched (callers connect before they take the store's lock).

The tasks themselves (decoding, derivation, reports) are in ``pipeline.jobs.cluster_tasks``.
"""

from __future__ import annotations

import ipaddress
import logging
import os
import re
from collections.abc import Callable, Iterator, Mapping
from contextlib import contextmanager
from functools import cache
from typing import Any

from ..errors import TandemError, UsageError

ENV = "TANDEM_CLUSTER"
# Connecting, the version check and the import of distributed together stay under the
# 30 s the contract allows for an unreachable scheduler.
DEFAULT_TIMEOUT_S = 20.0
SCHEMES = ("tcp", "tls", "ws", "wss")  # the network transports Dask schedulers listen on
_HOSTNAME = re.compile(r"^(?=.{1,253}$)[A-Za-z0-9](?:[A-Za-z0-9-]{0,61}[A-Za-z0-9])?"
                       r"(?:\.[A-Za-z0-9](?:[A-Za-z0-9-]{0,61}[A-Za-z0-9])?)*$")


class ClusterError(TandemError):
    """The cluster cannot be reached or cannot run this release's tasks (exit 1)."""

    exit_code = 1


def parse_address(text: str) -> str:
    """A scheduler address as Dask writes it (``tcp://10.1.2.3:8786``; ``host:port``
    means tcp), normalised with its scheme; UsageError (exit 2) naming the problem."""
    raw = text.strip()
    scheme, sep, rest = raw.partition("://")
    if not sep:
        scheme, rest = "tcp", raw
    scheme = scheme.lower()
    bad = f"--cluster {text!r}: not a Dask scheduler address"
    if scheme not in SCHEMES:
        raise UsageError(f"{bad}: scheme {scheme!r} is not one of "
                         f"{', '.join(s + '://' for s in SCHEMES)} (e.g. tcp://10.1.2.3:8786)")
    host, port = _host_port(rest, bad)
    return f"{scheme}://{host}:{port}"


def _host_port(rest: str, bad: str) -> tuple[str, int]:
    if rest.startswith("["):  # IPv6, as Dask writes it: [::1]:8786
        host, sep, port_s = rest[1:].partition("]:")
        if not sep:
            raise UsageError(f"{bad}: an IPv6 host is written [address]:port")
        try:
            ipaddress.IPv6Address(host)
        except ValueError:
            raise UsageError(f"{bad}: {host!r} is not an IPv6 address") from None
        host = f"[{host}]"
    else:
        host, sep, port_s = rest.rpartition(":")
        if not sep or not host:
            raise UsageError(f"{bad}: it needs a host and a port, e.g. tcp://10.1.2.3:8786")
        if not _HOSTNAME.match(host):
            raise UsageError(f"{bad}: {host!r} is not a host name or IPv4 address")
    if not port_s.isdigit() or not 1 <= int(port_s) <= 65535:
        raise UsageError(f"{bad}: the port must be a number from 1 to 65535, not {port_s!r}")
    return host, int(port_s)


def address_from(option: str | None, environ: Mapping[str, str] | None = None) -> str | None:
    """The cluster to use: the option when given, else ``TANDEM_CLUSTER`` when set and
    not empty, else None (the local process pool). Parsed: UsageError when malformed."""
    env = os.environ if environ is None else environ
    if option is not None:
        return parse_address(option)
    value = env.get(ENV, "").strip()
    return parse_address(value) if value else None


def check_timeout(seconds: float) -> float:
    if not seconds > 0:
        raise UsageError(f"--cluster-timeout must be more than 0 seconds, not {seconds:g}")
    return seconds


class Cluster:
    """A connected client: ``submit`` and ``map`` hand picklable top-level functions to
    the cluster's workers (Dask's own futures; no scheduling of our own here)."""

    def __init__(self, client: Any, address: str):
        self.client, self.address = client, address

    def submit(self, fn: Callable[..., Any], *args: Any, priority: int = 0) -> Any:
        # pure=False: every call is a task of its own (Dask would otherwise merge calls
        # with equal arguments into one key, and forget a rerun).
        return self.client.submit(fn, *args, pure=False, priority=priority)

    def map(self, fn: Callable[..., Any], items: list[Any], priority: int = 0) -> list[Any]:
        """fn over items on the workers; results in order (a task's error re-raised; a
        task lost with a worker on every try, or the scheduler lost: ClusterError)."""
        from concurrent.futures import CancelledError

        from distributed import KilledWorker

        if not items:
            return []
        futures = self.client.map(fn, items, pure=False, priority=priority)
        try:
            return list(self.client.gather(futures))
        except KilledWorker as e:
            raise ClusterError(f"a {getattr(fn, '__name__', 'task')} task was lost with a "
                               f"worker on every try ({e.allowed_failures + 1} tries); "
                               f"nothing of this commit was published") from None
        except (OSError, CancelledError):
            self.raise_if_lost("deriving")
            raise
        finally:
            self.client.cancel(futures)

    def raise_if_lost(self, doing: str) -> None:
        """ClusterError when the connection to the scheduler is gone (a task's own error
        is left to its caller)."""
        if self.client.status != "running":
            raise ClusterError(f"lost the Dask scheduler at {self.address} while {doing}: "
                               f"the logs committed before are stored, a commit cut short "
                               f"is undone by the next writer, a rerun stores the rest")

    def workers(self) -> list[str]:
        return sorted(self.client.scheduler_info(n_workers=-1)["workers"])

    def close(self) -> None:
        try:
            self.client.close(timeout=10)
        except Exception:  # noqa: BLE001 - the work is done; a slow goodbye is not an error
            pass


@contextmanager
def connected(address: str | None, timeout: float = DEFAULT_TIMEOUT_S
              ) -> Iterator[Cluster | None]:
    """A Cluster for ``address`` (None: no cluster, nothing imported), closed after."""
    if address is None:
        yield None
        return
    cluster = connect(address, timeout)
    try:
        yield cluster
    finally:
        cluster.close()


def connect(address: str, timeout: float = DEFAULT_TIMEOUT_S) -> Cluster:
    """Connect, and check that every worker runs this release's derivation (a worker of
    another release would write tables the store's views do not expect)."""
    from distributed import Client

    _quiet_client_logs()  # after the import: importing distributed sets its log levels
    try:
        client = Client(address, timeout=f"{timeout}s", set_as_default=False)
    except (OSError, TimeoutError) as e:
        raise ClusterError(f"cannot reach the Dask scheduler at {address}: no answer within "
                           f"{timeout:g} s{_reason(e)}; nothing was written. Is the "
                           f"scheduler running, and is the address right?") from None
    cluster = Cluster(client, address)
    try:
        check_workers(cluster, timeout)
    except BaseException:
        cluster.close()
        raise
    return cluster


@cache
def worker_release() -> str:
    """What must match between client and workers: the release and its derivation."""
    from .. import __version__
    from ..store.catalog import derivation_version

    return f"{__version__} (derivation {derivation_version()})"


def check_workers(cluster: Cluster, timeout: float) -> None:
    """ClusterError unless the cluster has a worker and every worker derives as we do."""
    client = cluster.client
    try:
        client.wait_for_workers(1, timeout=timeout)
    except (OSError, TimeoutError):
        raise ClusterError(f"the Dask scheduler at {cluster.address} has no worker (waited "
                           f"{timeout:g} s); start one with: dask worker "
                           f"{cluster.address}") from None
    mine = worker_release()
    try:
        theirs = client.run(worker_release)
    except ImportError as e:  # pickled by reference: the worker must import Tandem
        raise ClusterError(f"a worker of {cluster.address} cannot run Tandem's tasks "
                           f"({' '.join(str(e).split())}): install this release of Tandem "
                           f"on every worker") from None
    other = {w: v for w, v in theirs.items() if v != mine}
    if other:
        w, v = sorted(other.items())[0]
        raise ClusterError(f"worker {w} of {cluster.address} runs Tandem {v}, this client "
                           f"{mine}: install the same release on every worker "
                           f"({len(other)} of {len(theirs)} differ)")


def _reason(e: BaseException) -> str:
    """Dask's own words, unless they only repeat that the time ran out."""
    text = " ".join(str(e).split())
    return "" if not text or text.startswith("Timed out trying to connect") else f" ({text})"


def _quiet_client_logs() -> None:
    # distributed logs connection retries, lost workers and a lost scheduler (with
    # tracebacks) on stderr; in this client each outcome is one line of our own (exit 1),
    # as every other error of the command. The scheduler's and workers' logs keep theirs.
    for name in ["distributed", *(n for n in logging.root.manager.loggerDict
                                  if n.startswith("distributed."))]:
        logging.getLogger(name).setLevel(logging.CRITICAL + 1)
