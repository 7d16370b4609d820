"""The command line, run in-process: exact exit codes (DESIGN.md: 0 ok, 2 usage, 3 some
inputs rejected), the documented output shapes, one stderr line per problem and never a
traceback. Expected values come from sample_logs/truth.json, the inputs themselves
(sha256, record and row counts) or the csv/json modules reading our output back.
"""

from __future__ import annotations

import csv
import datetime as dt
import gzip
import hashlib
import io
import json
import subprocess
import sys
from pathlib import Path

import pytest

from pipeline.cli import COMMANDS
from tests.conftest import (
    MARKERS_GZ,
    SAMPLES,
    TIMING_CSV,
    CliResult,
    Ingested,
    file_truth,
    walk,
)

REPO = Path(__file__).parent.parent


def sha256(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def expected_records(name: str) -> int:
    """STDF: records in the decompressed stream; timing CSV: data rows."""
    data = (SAMPLES / name).read_bytes()
    if name.endswith(".csv"):
        return sum(1 for _ in csv.DictReader(io.StringIO(data.decode())))
    if data[:2] == b"\x1f\x8b":
        data = gzip.decompress(data)
    return sum(1 for _ in walk(data))


def assert_one_clean_line(r: CliResult) -> str:
    assert len(r.err_lines) == 1, r.err
    assert "Traceback" not in r.err and r.err_lines[0].startswith("tandem: ")
    return r.err_lines[0]


@pytest.fixture(scope="module")
def inputs(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """Two good logs, the same content again under another name, and one non-log."""
    d = tmp_path_factory.mktemp("cli_in")
    for name in (MARKERS_GZ, TIMING_CSV):
        (d / name).write_bytes((SAMPLES / name).read_bytes())
    (d / "zz_copy.bin").write_bytes((SAMPLES / MARKERS_GZ).read_bytes())
    (d / "notes.txt").write_text("shift notes: nothing to report\n")
    return d


# -- ingest --------------------------------------------------------------------------------
def test_ingest_json_shape_and_values(cli, inputs: Path, tmp_path: Path) -> None:
    missing = inputs / "absent.stdf"
    r = cli("ingest", inputs, missing, "--store", tmp_path / "store", "--json")
    assert r.code == 3
    out = json.loads(r.out)
    assert list(out) == ["ingested", "skipped", "rejected"]
    by_name = {Path(i["path"]).name: i for i in out["ingested"]}
    assert sorted(by_name) == sorted([MARKERS_GZ, TIMING_CSV])
    for name, item in by_name.items():
        assert {"path", "file_id", "format", "records", "parts"} <= set(item)
        assert item["path"] == str(inputs / name)
        assert item["file_id"] == sha256(inputs / name)[:16]
        assert item["format"] == file_truth(name)["format"]
        assert item["parts"] == file_truth(name)["parts"]
        assert item["records"] == expected_records(name)
    assert out["skipped"] == [{"path": str(inputs / "zz_copy.bin"),
                               "reason": f"same content as {inputs / MARKERS_GZ}"}]
    assert [set(x) for x in out["rejected"]] == [{"path", "reason"}] * 2
    rejected = {x["path"]: x["reason"] for x in out["rejected"]}
    assert rejected[str(missing)] == "no such file or folder"
    assert rejected[str(inputs / "notes.txt")].startswith("not a datalog")
    # stderr: exactly one line per rejected input, naming it; nothing else
    assert sorted(r.err_lines) == sorted(f"{p}: rejected: {why}" for p, why in rejected.items())


def test_ingest_exit_0_then_skipped_on_rerun(cli, tmp_path: Path) -> None:
    log = tmp_path / "in" / MARKERS_GZ
    log.parent.mkdir()
    log.write_bytes((SAMPLES / MARKERS_GZ).read_bytes())
    store = tmp_path / "store"
    first = cli("ingest", log.parent, "--store", store)
    assert (first.code, first.err) == (0, "")
    t = file_truth(MARKERS_GZ)
    assert first.out.splitlines() == [
        "ingested 1, skipped 0, rejected 0",
        f"  ok       {log}  (stdf, {expected_records(MARKERS_GZ)} records, {t['parts']} parts)"]
    again = cli("ingest", log, "--store", store, "--json")
    assert (again.code, again.err) == (0, "")
    fid = sha256(log)[:16]
    assert json.loads(again.out) == {
        "ingested": [], "skipped": [{"path": str(log), "reason": f"already stored as {fid} (ok)"}],
        "rejected": []}


def test_ingest_partial_file_exit_3_one_line(cli, tmp_path: Path) -> None:
    data = gzip.decompress((SAMPLES / MARKERS_GZ).read_bytes())
    cut = tmp_path / "cut.stdf"
    cut.write_bytes(data[: len(data) // 2])
    r = cli("ingest", cut, "--store", tmp_path / "store", "--json")
    assert r.code == 3
    [item] = json.loads(r.out)["ingested"]
    assert item["status"] == "partial" and 0 < item["parts"] < file_truth(MARKERS_GZ)["parts"]
    assert r.err_lines == [f"{cut}: partial: {item['error']}"]


def test_ingest_bad_inputs_exit_3_one_line_each_rest_stored(cli, tmp_path: Path) -> None:
    d = tmp_path / "in"
    d.mkdir()
    (d / "a_good.stdf.gz").write_bytes((SAMPLES / MARKERS_GZ).read_bytes())
    (d / "empty.stdf").write_bytes(b"")
    (d / "vax.stdf").write_bytes(b"\x02\x00\x00\x0a\x00\x04")  # FAR 0/10, CPU_TYPE 0
    (d / "bad.csv").write_text("lot_id,touchdown,site,part_id,block,start_ms,end_ms\n"
                               "LOT-A,zero,1,p1,warmup,0,1\n")
    lines = (SAMPLES / TIMING_CSV).read_text().splitlines(keepends=True)
    whole = gzip.compress("".join(lines * 4).encode(), mtime=0)
    (d / "cut.csv.gz").write_bytes(whole[: len(whole) // 2])
    r = cli("ingest", d, "--store", tmp_path / "store")
    assert r.code == 3 and "Traceback" not in r.err
    bad = ("bad.csv", "cut.csv.gz", "empty.stdf", "vax.stdf")
    assert sorted(Path(ln.split(": ", 1)[0]).name for ln in r.err_lines) == sorted(bad)
    assert all(": rejected: " in ln for ln in r.err_lines)
    assert r.out.splitlines()[0] == f"ingested 1, skipped 0, rejected {len(bad)}"
    count = cli("sql", "--store", tmp_path / "store", "--format", "csv",
                "select status, count(*) as n, sum(parts) as parts from files "
                "group by 1 order by 1")
    assert list(csv.reader(io.StringIO(count.out))) == [
        ["status", "n", "parts"], ["ok", "1", str(file_truth(MARKERS_GZ)["parts"])],
        ["rejected", str(len(bad)), "0"]]


# -- usage errors ----------------------------------------------------------------------------
USAGE = {
    "ingest without --store": (["ingest", "x.stdf"], "--store"),
    "unknown command": (["frobnicate"], "frobnicate"),
    "unknown option": (["sql", "--store", "{store}", "--colour", "select 1"], "--colour"),
    "bad --format": (["sql", "--store", "{store}", "--format", "xml", "select 1"], "xml"),
    "sql without a query": (["sql", "--store", "{store}"], "QUERY"),
    "--workers 0": (["ingest", "x.stdf", "--store", "{store}", "--workers", "0"], "--workers"),
    "--workers not a number": (["ingest", "x", "--store", "{store}", "--workers", "many"],
                               "many"),
}


@pytest.mark.parametrize("case", list(USAGE))
def test_bad_arguments_exit_2_with_one_line(cli, tmp_path: Path, case: str) -> None:
    argv, mention = USAGE[case]
    r = cli(*[a.replace("{store}", str(tmp_path / "store")) for a in argv])
    assert r.code == 2 and r.out == ""
    assert mention in assert_one_clean_line(r)


def test_no_command_prints_help_and_exits_2(cli) -> None:
    r = cli()
    assert r.code == 2 and r.out.startswith("usage: tandem") and r.err == ""


# -- sql -------------------------------------------------------------------------------------
@pytest.fixture(scope="module")
def gz_store(tmp_path_factory: pytest.TempPathFactory) -> Ingested:
    from tests.conftest import ingest_into

    return ingest_into(tmp_path_factory.mktemp("cli_sql") / "store", SAMPLES / MARKERS_GZ)


def _expected_site_rows() -> list[dict[str, object]]:
    per_site = file_truth(MARKERS_GZ)["parts_per_site"]
    good = file_truth(MARKERS_GZ)["good_per_site"]
    return [{"site": int(s), "parts": n, "good": good[s]} for s, n in sorted(per_site.items())]


SITE_QUERY = ("select site, count(*) as parts, count(*) filter (where passed) as good "
              "from parts group by site order by site")
# integers, text, a null and a timestamp in one answer
MIXED_QUERY = ("select p.site, count(*) as parts, count(*) filter (where p.passed) as good, "
               "any_value(l.lot_id) as lot_id, any_value(l.sublot_id) as sublot_id, "
               "any_value(l.started_at) as started_at from parts p join lots l "
               "using (file_id) group by p.site order by p.site")


def _expected_mixed_rows() -> list[dict[str, object]]:
    t = file_truth(MARKERS_GZ)
    started = dt.datetime.fromtimestamp(t["start_t"], dt.UTC).replace(tzinfo=None)
    return [row | {"lot_id": t["lot_id"], "sublot_id": None, "started_at": started}
            for row in _expected_site_rows()]


def test_sql_json_is_an_array_of_objects(cli, gz_store: Ingested) -> None:
    r = cli("sql", "--store", gz_store.store.path, "--format", "json", MIXED_QUERY)
    assert (r.code, r.err) == (0, "")
    got = json.loads(r.out)
    assert isinstance(got, list) and all(isinstance(row, dict) for row in got)
    for row in got:
        row["started_at"] = dt.datetime.fromisoformat(row["started_at"])
    assert got == _expected_mixed_rows()


def test_sql_csv_parses_back_to_the_same_values(cli, gz_store: Ingested) -> None:
    r = cli("sql", "--store", gz_store.store.path, "--format", "csv", MIXED_QUERY)
    assert (r.code, r.err) == (0, "")
    rows = list(csv.DictReader(io.StringIO(r.out)))
    for row in rows:
        row["started_at"] = dt.datetime.fromisoformat(row["started_at"])
    assert rows == [{k: v if isinstance(v, dt.datetime) else "" if v is None else str(v)
                     for k, v in row.items()} for row in _expected_mixed_rows()]


def test_sql_table_is_aligned_with_a_row_count(cli, gz_store: Ingested) -> None:
    r = cli("sql", "--store", gz_store.store.path, SITE_QUERY)  # table is the default
    assert (r.code, r.err) == (0, "")
    lines = r.out.splitlines()
    assert lines[0].split() == ["site", "parts", "good"]
    assert set(lines[1].replace(" ", "")) == {"-"}
    body = [[int(x) for x in ln.split()] for ln in lines[2:-1]]
    assert body == [[v["site"], v["parts"], v["good"]] for v in _expected_site_rows()]
    assert lines[-1] == f"({len(body)} rows)"
    assert len({len(ln) for ln in lines[:-1]}) == 1  # right-aligned numbers: equal widths


@pytest.mark.parametrize("command", [
    ["sql", "select 1"], ["times"], ["sites"], ["plan", "--blocks", str(SAMPLES / "blocks.toml")],
    ["draft-map", "--out", "x.toml"], ["report", "--out", "r"]])
def test_read_commands_refuse_a_path_with_no_store(cli, tmp_path: Path,
                                                   command: list[str]) -> None:
    """A typo in --store must not look like success: exit 2, one line, nothing made."""
    r = cli(command[0], "--store", tmp_path / "no" / "such", *command[1:])
    assert r.code == 2 and len(r.err_lines) == 1 and "no store" in r.err, r.err
    assert not (tmp_path / "no").exists()


def test_sql_on_an_empty_store_answers(cli, tmp_path: Path) -> None:
    assert cli("ingest", SAMPLES / "blocks.toml", "--store", tmp_path / "fresh").code == 3
    r = cli("sql", "--store", tmp_path / "fresh", "--format", "json",
            "select count(*) as n from parts")
    assert (r.code, r.err) == (0, "")
    assert json.loads(r.out) == [{"n": 0}]


@pytest.mark.parametrize("query", ["select nope from parts", "selec 1"])
def test_bad_query_exits_2_with_one_line(cli, gz_store: Ingested, query: str) -> None:
    r = cli("sql", "--store", gz_store.store.path, query)
    assert r.code == 2 and r.out == ""
    assert assert_one_clean_line(r).startswith("tandem: query failed: ")


# -- help ------------------------------------------------------------------------------------
@pytest.mark.parametrize("command", sorted(COMMANDS))
def test_every_command_help_shows_an_example(cli, command: str) -> None:
    r = cli(command, "--help")
    assert (r.code, r.err) == (0, "")
    assert r.out.startswith(f"usage: tandem {command}")
    example = r.out.split("example:", 1)[1].strip().splitlines()[0]
    assert example.startswith(f"tandem {command} ")


def test_top_level_help_lists_every_command(cli) -> None:
    r = cli("--help")
    assert (r.code, r.err) == (0, "")
    listed = {ln.split()[0] for ln in r.out.splitlines() if ln.startswith("    ")}
    assert set(COMMANDS) <= listed


def test_python_m_pipeline_help() -> None:
    done = subprocess.run([sys.executable, "-m", "pipeline", "--help"], cwd=REPO,
                          capture_output=True, text=True, timeout=60, check=False)
    assert done.returncode == 0, done.stderr
    assert done.stdout.startswith("usage: tandem") and "ingest" in done.stdout
    assert done.stderr == ""


def test_every_command_is_documented_in_the_readme() -> None:
    """Docs that cannot drift (STYLE 15): each registered command appears in README.md."""
    from pathlib import Path

    from pipeline.cli import COMMANDS

    readme = (Path(__file__).parent.parent / "README.md").read_text(encoding="utf-8")
    missing = [name for name in COMMANDS if f"tandem {name}" not in readme]
    assert COMMANDS and not missing, f"README.md does not mention: {missing}"


def test_sql_csv_neutralises_spreadsheet_formulas(cli, tmp_path) -> None:  # type: ignore[no-untyped-def]
    """Text from logs must not run as a formula when a CSV export is opened (OWASP's
    CSV-injection advice, from memory: prefix = + - @ tab CR with a single quote)."""
    import csv
    import io

    cli("ingest", SAMPLES / "blocks.toml", "--store", tmp_path / "s")
    res = cli("sql", "--store", tmp_path / "s", "--format", "csv",
              "select '=1+1' as a, '-x' as b, 'ok' as c, -3 as n")
    assert res.code == 0, res.err
    rows = list(csv.reader(io.StringIO(res.out)))
    assert rows == [["a", "b", "c", "n"], ["'=1+1", "'-x", "ok", "-3"]]
