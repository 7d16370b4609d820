"""The verification in the report: its charts and verify.md against golden files, the
stand-alone verify.html (self-contained, cautions first, renders in a real browser), the
section in report.html / summary.md / summary.json, and names from logs made inert.
Golden files are rewritten on purpose by `make golden` (TANDEM_REGEN_GOLDEN=1)."""

from __future__ import annotations

import csv
import html
import json
import re
from collections.abc import Callable
from pathlib import Path
from typing import Any

import pytest

from pipeline.report import build_report
from pipeline.report.export import strip_schema
from pipeline.report.text import CAUTIONS, md_text
from pipeline.report.verify import VerifyFiles, write_verify_report
from pipeline.verify import CAUTIONS as VERIFY_CAUTIONS
from pipeline.verify import Verification, verify
from tests.conftest import SAMPLES, CliResult, Ingested
from tests.test_report import CHARTS, GOLDEN, check_golden, console_errors, open_in_browser

BASELINE, CANDIDATE = "PF4-L0231", "PF4-L0236"
VERIFY_CHARTS = ("verify_shift_spread", "verify_distributions", "verify_time")
SCRIPT = "<script>alert(1)</script>"
FORMULA = "=HYPERLINK(1)"


def read_csv(path: Path) -> list[dict[str, str]]:
    return list(csv.DictReader(path.read_text(encoding="utf-8").splitlines()))


@pytest.fixture(scope="module")
def plan() -> dict[str, Any]:
    return json.loads((GOLDEN / "sample_plan.json").read_text(encoding="utf-8"))  # type: ignore[no-any-return]


@pytest.fixture(scope="module")
def verification(sample_store: Ingested, plan: dict[str, Any]) -> Verification:
    return verify(sample_store.store, BASELINE, CANDIDATE, plan=plan)


@pytest.fixture(scope="module")
def page(verification: Verification, tmp_path_factory: pytest.TempPathFactory) -> VerifyFiles:
    return write_verify_report(verification, tmp_path_factory.mktemp("verify"))


@pytest.mark.parametrize("name", VERIFY_CHARTS)
def test_verify_chart_spec_matches_golden(page: VerifyFiles, name: str) -> None:
    spec = strip_schema(page.specs[name])
    check_golden(f"charts/{name}.json", json.dumps(spec, indent=1, sort_keys=True) + "\n")


def test_verify_md_matches_golden(page: VerifyFiles) -> None:
    text = page.md.read_text(encoding="utf-8")
    assert "/tmp" not in text and str(Path.home()) not in text
    check_golden("verify.md", text)


def test_chart_titles_are_the_findings(page: VerifyFiles, verification: Verification) -> None:
    moved = [t.name for t in verification.moved]
    assert page.titles["verify_shift_spread"].startswith(
        f"{len(moved)} of {len(verification.tests)} tests moved: ")
    for name in moved:
        assert name in page.titles["verify_shift_spread"]
        assert name in page.titles["verify_distributions"]
    t = verification.time
    assert f"−{t['saving_pct']:.1f} %" in page.titles["verify_time"]
    assert "flash_bist" in page.titles["verify_time"]


def test_verify_html_is_self_contained_with_the_cautions_first(page: VerifyFiles) -> None:
    text = page.html.read_text(encoding="utf-8")
    assert not re.search(r"https?://", text, re.IGNORECASE)
    assert "default-src 'none'" in text
    assert text.count('type="application/json" data-chart=') == len(VERIFY_CHARTS)
    first = text.index("<figure")
    for caution in (*CAUTIONS, *VERIFY_CAUTIONS):
        assert 0 < text.index(html.escape(caution)) < first


def test_verify_html_renders_in_a_browser(page: VerifyFiles, tmp_path: Path) -> None:
    dom, log = open_in_browser(page.html, tmp_path)
    assert console_errors(log) == []
    n = len(VERIFY_CHARTS)
    assert f'data-charts-rendered="{n}"' in dom and 'data-chart-errors="' not in dom


def test_tables_hold_every_test_and_changed_unit(page: VerifyFiles,
                                                 verification: Verification) -> None:
    rows = read_csv(page.out / "tables" / "verify_tests.csv")
    assert len(rows) == len(verification.tests)
    assert [r["verdict"] for r in rows[:2]] == ["shifted", "shifted"]
    units = read_csv(page.out / "tables" / "verify_changed_units.csv")
    assert [u["part_id"] for u in units] == [u["part_id"] for u in verification.changed_units]
    js = json.loads(page.json.read_text(encoding="utf-8"))
    assert js["summary"]["shifted"] == 2 and js["baseline"] == BASELINE


def test_the_report_carries_a_verification_section(sample_store: Ingested,
                                                   plan: dict[str, Any],
                                                   verification: Verification,
                                                   tmp_path: Path) -> None:
    r = build_report(sample_store.store, tmp_path / "report", blocks=str(SAMPLES / "blocks.toml"),
                     lot=BASELINE, plan=plan, verification=verification)
    text = r.html.read_text(encoding="utf-8")
    assert 'id="verification"' in text
    assert text.count('type="application/json" data-chart=') == len(CHARTS) + len(VERIFY_CHARTS)
    ids = re.findall(r'data-chart="(chart-\d+)"', text)
    assert len(ids) == len(set(ids))       # chart ids go on after the report's own
    assert set(VERIFY_CHARTS) <= set(r.specs)
    md = r.summary_md.read_text(encoding="utf-8")
    assert f"## Verification: lot {CANDIDATE} against lot {BASELINE}" in md
    assert md.index("## Verification") < md.index("## Assumptions")
    summary = json.loads(r.summary_json.read_text(encoding="utf-8"))
    assert summary["verification"]["matched_units"] == 160
    assert {"verify_tests.csv", "verify_blocks.csv"} <= {p.name for p in r.tables}
    dom, log = open_in_browser(r.html, tmp_path)
    assert console_errors(log) == []
    assert f'data-charts-rendered="{len(CHARTS) + len(VERIFY_CHARTS)}"' in dom


def test_verify_out_writes_the_page(cli: Callable[..., CliResult], sample_store: Ingested,
                                    tmp_path: Path) -> None:
    r = cli("verify", "--store", sample_store.store.path, "--baseline", BASELINE,
            "--candidate", CANDIDATE, "--out", tmp_path / "v")
    assert r.code == 0, r.err
    assert "wrote" in r.out.splitlines()[-1]
    assert {p.name for p in (tmp_path / "v").iterdir()} >= {"verify.html", "verify.md",
                                                            "verify.json", "charts", "tables"}
    (tmp_path / "file").write_text("x")
    bad = cli("verify", "--store", sample_store.store.path, "--baseline", BASELINE,
              "--candidate", CANDIDATE, "--out", tmp_path / "file")
    assert bad.code == 2 and len(bad.err_lines) == 1 and "not a folder" in bad.err


def test_names_from_logs_are_inert(verification: Verification, tmp_path: Path) -> None:
    v = verification.to_json()
    for t, name in zip(v["tests"][:2], (SCRIPT, FORMULA), strict=True):
        t["test_name"] = name
    v["distributions"][0]["test_name"] = SCRIPT
    v["changed_units"][0]["first_test_name"] = FORMULA
    files = write_verify_report(v, tmp_path)
    text = files.html.read_text(encoding="utf-8")
    assert SCRIPT not in text and html.escape(SCRIPT) in text
    assert text.count("<script") == 2 + text.count('data-chart="')
    md = files.md.read_text(encoding="utf-8")
    assert SCRIPT not in md and md_text(SCRIPT) in md
    text = (tmp_path / "tables" / "verify_tests.csv").read_text(encoding="utf-8")
    cells = [c for row in csv.reader(text.splitlines()) for c in row]
    assert "'" + FORMULA in cells and FORMULA not in cells
    assert "<" not in files.json.read_text(encoding="utf-8")
