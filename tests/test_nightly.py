"""`tandem nightly` end to end: exit codes, status.json, idempotent reruns, drift flags,
one run at a time, and a killed run noticed and finished by the next.

Logs are invented (tests/test_reliability.tiny_log): lots a day apart, two blocks timed
by markers; where a test needs drift, the last lot's ``dc`` block is 40 % slower.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

import pytest

from pipeline.errors import StoreError
from pipeline.jobs import ingest as ingest_mod
from pipeline.jobs import nightly
from pipeline.store import Store
from tests.conftest import CliResult
from tests.test_reliability import REPO, _hold_lock, _release, tiny_log

DAY = 86400


def lot_log(i: int, dc_us: int = 2500, touchdowns: int = 4) -> bytes:
    return tiny_log(f"NL-{i:02d}", touchdowns=touchdowns, seed=i,
                    block_us={"contact": 800, "dc": dc_us},
                    start_t=1_900_000_000 + DAY * i).data


class FakeReporter:
    """Records which lots it was asked to report, and writes one small file for each."""

    def __init__(self, fail_for: str | None = None):
        self.calls: list[tuple[str, Path]] = []
        self.fail_for = fail_for
        self.status_seen: list[dict[str, Any] | None] = []

    def __call__(self, store: Store, folder: Path, lot: str, blocks: str | None) -> None:
        self.status_seen.append(nightly.read_status(folder.parent.parent))
        if lot == self.fail_for:
            raise RuntimeError("chart renderer fell over")
        folder.mkdir(parents=True, exist_ok=True)
        (folder / "lot.txt").write_text(lot, encoding="utf-8")
        self.calls.append((lot, folder))


def status_of(out: Path) -> dict[str, Any]:
    return json.loads((out / "status.json").read_text(encoding="utf-8"))


# -- end to end through the CLI, with the real report ------------------------------------
def test_nightly_end_to_end_then_rerun_is_idempotent(tmp_path: Path,
                                                     cli: Callable[..., CliResult],
                                                     monkeypatch: pytest.MonkeyPatch) -> None:
    # --out inside the inbox: the rerun must not take last night's outputs for logs
    inbox, store = tmp_path / "inbox", tmp_path / "store"
    out = inbox / "nightly"
    inbox.mkdir()
    log = tiny_log("NL-01", touchdowns=5, seed=1)
    (inbox / "a.stdf").write_bytes(log.data)
    cut = log.offset(log.parts[7].prr_index) + 3  # same lot, cut inside part 7's PRR
    (inbox / "a_cut.stdf").write_bytes(log.data[:cut])
    (inbox / "notes.txt").write_text("not a log\n")
    r = cli("nightly", "--inbox", inbox, "--store", store, "--out", out)
    assert r.code == 3, r.err
    st = status_of(out)
    assert st["state"] == "finished" and st["exit_code"] == 3
    assert st["counts"] == {"ingested": 2, "partial": 1, "skipped": 0, "rejected": 1,
                            "failed": 0}
    [rej] = st["rejected"]
    assert Path(rej["path"]).name == "notes.txt" and rej["reason"].startswith("not a datalog")
    [part] = st["partial"]
    assert Path(part["path"]).name == "a_cut.stdf"
    assert part["reason"].startswith(f"file ends inside a record: 3 bytes after the last "
                                     f"complete record at byte {cut - 3}")
    assert st["lots"] == ["NL-01"] and st["drift"] == [] and st["errors"] == []
    [rep] = st["reports"]
    assert (Path(rep["folder"]) / "report.html").stat().st_size > 0
    assert Path(rep["folder"]).parent == out / "reports"
    assert r.out.startswith("nightly: ingested 2 (1 partial), skipped 0, rejected 1, failed 0; "
                            "1 lot(s) reported, 0 drift flag(s)")
    assert [ln for ln in r.err_lines if "rejected" in ln or "partial" in ln] == st["problems"]
    assert not list(out.glob(".status.json.*"))  # written aside, renamed into place

    # The rerun: everything is stored already. No file is decoded, no report written.
    def no_decoding(*args: Any, **kwargs: Any) -> Any:
        raise AssertionError("a stored file was decoded again")

    monkeypatch.setattr(ingest_mod, "decode_to_staging", no_decoding)
    before = {p: p.stat().st_mtime_ns for p in (out / "reports").rglob("*") if p.is_file()}
    r = cli("nightly", "--inbox", inbox, "--store", store, "--out", out)
    assert r.code == 0, r.err
    st = status_of(out)
    assert st["counts"] == {"ingested": 0, "partial": 0, "skipped": 3, "rejected": 0,
                            "failed": 0}
    assert {Path(s["path"]).name for s in st["skipped"]} == {"a.stdf", "a_cut.stdf",
                                                             "notes.txt"}
    assert st["lots"] == [] and st["reports"] == [] and st["exit_code"] == 0
    assert {p: p.stat().st_mtime_ns for p in (out / "reports").rglob("*")
            if p.is_file()} == before


# -- the API: new lots only, drift, failures ------------------------------------------------
def test_nightly_reports_new_lots_only_and_flags_drift(tmp_path: Path) -> None:
    inbox, store, out = tmp_path / "inbox", tmp_path / "store", tmp_path / "out"
    inbox.mkdir()
    for i in range(4):
        (inbox / f"lot{i}.stdf").write_bytes(lot_log(i))
    first = FakeReporter(fail_for="NL-01")  # a bug in one report: the others go on
    st = nightly.run_nightly(inbox, store, out, reporter=first)
    assert st["drift"] == [] and st["state"] == "finished"
    assert [lot for lot, _ in first.calls] == ["NL-00", "NL-02", "NL-03"]
    assert st["exit_code"] == 1 and st["errors"] == [
        "report for lot 'NL-01' failed: RuntimeError: chart renderer fell over"]
    assert all(s is not None and s["state"] == "running" for s in first.status_seen)
    (inbox / "lot4.stdf").write_bytes(lot_log(4, dc_us=3500))  # dc 40 % slower
    second = FakeReporter()
    st = nightly.run_nightly(inbox, store, out, reporter=second)
    assert [lot for lot, _ in second.calls] == ["NL-04"]
    assert st["counts"]["ingested"] == 1 and st["counts"]["skipped"] == 4
    [flag] = st["drift"]
    assert (flag["lot_id"], flag["block"], flag["method"]) == ("NL-04", "dc", "marker")
    assert 35 < flag["change_pct"] < 45 and abs(flag["baseline_ms"] - 2.5) < 0.1
    assert "previous_run" not in st and st["exit_code"] == 0  # the run before finished


def test_lot_folder_names_are_safe_and_distinct() -> None:
    names = ["../../etc", "a/b", "a_b", "a b", "..", "", "x" * 300, "LOT-1"]
    safe = [nightly.safe_name(n) for n in names]
    assert len(set(safe)) == len(names)
    for s in safe:
        assert "/" not in s and not s.startswith(".") and len(s) <= 69
        assert Path(s).name == s


# -- one at a time ----------------------------------------------------------------------------
def test_second_nightly_exits_at_once_and_leaves_status_alone(
        tmp_path: Path, cli: Callable[..., CliResult]) -> None:
    inbox, store, out = tmp_path / "inbox", tmp_path / "store", tmp_path / "out"
    inbox.mkdir()
    out.mkdir()
    (out / "status.json").write_text('{"state": "running", "pid": 1}\n')
    Store(store)
    holder = _hold_lock(store)
    try:
        t0 = time.monotonic()
        r = cli("nightly", "--inbox", inbox, "--store", store, "--out", out)
        fast = time.monotonic() - t0
        assert r.code == 1 and r.err_lines == [
            f"tandem: {store}: another writer holds the store lock (pid {holder.pid}); "
            f"waited 0 s. Try again when it finishes, or wait longer "
            f"(TANDEM_LOCK_TIMEOUT=seconds)"]
        assert fast < 5
        r = cli("nightly", "--inbox", inbox, "--store", store, "--out", out,
                "--lock-timeout", "0.5")
        assert r.code == 1 and "waited 0.5 s" in r.err
    finally:
        _release(holder)
    assert (out / "status.json").read_text() == '{"state": "running", "pid": 1}\n'
    with pytest.raises(StoreError):  # the API says the same
        with Store(store).writer():
            nightly.run_nightly(inbox, store, out, reporter=FakeReporter())


def test_nightly_usage_errors(tmp_path: Path, cli: Callable[..., CliResult]) -> None:
    (tmp_path / "inbox").mkdir()
    where = ["--store", tmp_path / "store", "--out", tmp_path / "out"]
    r = cli("nightly", "--inbox", tmp_path / "nowhere", *where)
    assert r.code == 2 and r.err_lines == [
        f"tandem: {tmp_path / 'nowhere'}: --inbox must be an existing folder"]
    r = cli("nightly", "--inbox", tmp_path / "inbox", *where, "--lock-timeout", "-1")
    assert r.code == 2 and r.err_lines == ["tandem: --lock-timeout must be 0 or more seconds"]
    assert not (tmp_path / "out" / "status.json").exists()


def test_bad_block_map_is_a_usage_error_before_anything_runs(
        tmp_path: Path, cli: Callable[..., CliResult]) -> None:
    (tmp_path / "inbox").mkdir()
    (tmp_path / "inbox" / "a.stdf").write_bytes(lot_log(1))
    (tmp_path / "blocks.toml").write_text("[limits]\npower_w = 'lots'\n")
    r = cli("nightly", "--inbox", tmp_path / "inbox", "--store", tmp_path / "store",
            "--out", tmp_path / "out", "--blocks", tmp_path / "blocks.toml")
    assert r.code == 2 and len(r.err_lines) == 1 and "Traceback" not in r.err
    assert not (tmp_path / "store" / "tables" / "files").exists()


# -- resumable after a crash ----------------------------------------------------------------
# A nightly in another process whose reporter never returns: kill -9 lands while it runs.
STUCK = """
import sys, time
from pathlib import Path
from pipeline.jobs.nightly import run_nightly

def stuck(store, folder, lot, blocks):
    Path(sys.argv[3], "reporting").touch()
    time.sleep(600)

run_nightly(sys.argv[1], sys.argv[2], sys.argv[3], reporter=stuck)
"""


def test_killed_nightly_is_noticed_and_the_next_run_finishes_its_work(tmp_path: Path) -> None:
    inbox, store, out = tmp_path / "inbox", tmp_path / "store", tmp_path / "out"
    inbox.mkdir()
    for i in range(2):
        (inbox / f"lot{i}.stdf").write_bytes(lot_log(i))
    proc = subprocess.Popen([sys.executable, "-c", STUCK, str(inbox), str(store), str(out)],
                            cwd=REPO)
    deadline = time.monotonic() + 60
    while not (out / "reporting").exists():  # ingested, and reporting the first lot
        assert time.monotonic() < deadline and proc.poll() is None
        time.sleep(0.01)
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait()
    st = status_of(out)
    assert st["state"] == "running" and st["pid"] == proc.pid  # what a killed run leaves
    rep = FakeReporter()
    st = nightly.run_nightly(inbox, store, out, reporter=rep)
    assert st["previous_run"]["state"] == "killed or crashed (status.json still said running)"
    assert st["previous_run"]["pid"] == proc.pid
    assert st["counts"]["skipped"] == 2 and st["counts"]["ingested"] == 0
    assert [lot for lot, _ in rep.calls] == ["NL-00", "NL-01"]  # the killed run's lots
    assert st["state"] == "finished" and st["exit_code"] == 0
