"""The report: chart specs and summary.md against golden files, the exports, the page in
a real browser, and text from logs made inert in every output.

Golden files (tests/golden/) hold the Vega-Lite specs — data and encodings, not pixels —
and summary.md of the sample logs; `make golden` (TANDEM_REGEN_GOLDEN=1) rewrites them on
purpose, and the diff is read before it is committed. Expected numbers elsewhere come
from the timing API and the planner's own JSON (`tandem plan --json`), not from the
report's earlier output.
"""

from __future__ import annotations

import csv
import html
import json
import os
import re
import shutil
import subprocess
import xml.etree.ElementTree as ET
from pathlib import Path
from typing import Any

import polars as pl
import pytest

from pipeline.attribute import timing
from pipeline.read.stdf.codec import encode_record
from pipeline.report import ReportFiles, build_report
from pipeline.report.charts import AMBER, BLOCK_COLOURS, CORAL, INK, MIST, SLATE, TEAL
from pipeline.report.export import strip_schema
from pipeline.report.facts import NO_PLAN
from pipeline.report.text import CAUTIONS, csv_cell, md_text
from tests.conftest import SAMPLES, Ingested, ingest_into

GOLDEN = Path(__file__).parent / "golden"
REGEN = os.environ.get("TANDEM_REGEN_GOLDEN") == "1"
LOT = "PF4-L0231"
BLOCKS = SAMPLES / "blocks.toml"
CHARTS = ("block_share", "touchdown_before_after", "savings_waterfall", "roadmap",
          "site_block_heatmap", "part_time_by_site", "block_time_by_lot", "estimate_intervals")
SCRIPT = "<script>alert(1)</script>"
FORMULA = "=SUM(A1:A9)"


@pytest.fixture(scope="module")
def store(sample_store: Ingested) -> Ingested:
    pass  # derived when the logs landed
    return sample_store


@pytest.fixture(scope="module")
def sample_plan(store: Ingested) -> dict[str, Any]:
    """The planner's dict for the sample lot, frozen in tests/golden/sample_plan.json so the
    golden charts do not move with solver ties (several schedules are optimal, and the
    candidates' pricing can stop at a time limit). `make golden` writes it afresh from
    pipeline.plan.plan_lot; test_frozen_plan_is_the_planners_current_answer keeps it honest."""
    path = GOLDEN / "sample_plan.json"
    if REGEN:
        from pipeline.plan import make_plan

        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_text(json.dumps(make_plan(store.store, str(BLOCKS), LOT), indent=1) + "\n",
                        encoding="utf-8")
    return json.loads(path.read_text(encoding="utf-8"))  # type: ignore[no-any-return]


@pytest.fixture(scope="module")
def report(store: Ingested, sample_plan: dict[str, Any],
           tmp_path_factory: pytest.TempPathFactory) -> ReportFiles:
    return build_report(store.store, tmp_path_factory.mktemp("report"), blocks=str(BLOCKS),
                        lot=LOT, plan=sample_plan)


def check_golden(name: str, text: str) -> None:
    path = GOLDEN / name
    if REGEN:
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_text(text, encoding="utf-8")
    assert path.exists(), f"{path} missing: run `make golden` and read the diff"
    assert text == path.read_text(encoding="utf-8"), f"{name} differs from its golden file"


def walk(obj: Any) -> Any:
    """Every (key, value) pair in a nested spec."""
    if isinstance(obj, dict):
        for k, v in obj.items():
            yield k, v
            yield from walk(v)
    elif isinstance(obj, list):
        for v in obj:
            yield from walk(v)


# -- chart specs -------------------------------------------------------------------------
def test_the_sample_report_draws_every_chart(report: ReportFiles) -> None:
    assert sorted(report.specs) == sorted(CHARTS)
    assert report.planned and report.lot_id == LOT


@pytest.mark.parametrize("name", CHARTS)
def test_chart_spec_matches_golden(report: ReportFiles, name: str) -> None:
    spec = strip_schema(report.specs[name])
    check_golden(f"charts/{name}.json", json.dumps(spec, indent=1, sort_keys=True) + "\n")


def test_pareto_title_is_computed_from_block_times(report: ReportFiles, store: Ingested) -> None:
    table = timing.block_table(store.store, LOT)
    top = table.filter(pl.col("cum_pct").shift(1, fill_value=0.0) < 50.0)
    share = float(top["share_pct"].sum())
    assert report.titles["block_share"] == (
        f"{len(top)} of {len(table)} blocks (scan_core0–3) take {share:.0f} % of part time")


def test_gantt_title_and_rows_are_the_plans(report: ReportFiles, store: Ingested) -> None:
    plan = json.loads(report.summary_json.read_text())["plan"]
    spec = report.specs["touchdown_before_after"]
    before, after = (c["data"]["values"] for c in spec["vconcat"])
    assert len(after) == len(plan["schedule"]) == len(before)
    got = sorted((r["block"], r["site"], r["start_ms"], r["end_ms"]) for r in after)
    assert got == sorted((r["block"], r["site"], round(r["start_ms"], 3), round(r["end_ms"], 3))
                         for r in plan["schedule"])
    assert f"{plan['saving_pct']:.0f} %" in report.titles["touchdown_before_after"]
    # blocks running at once on one site never share a lane
    for rows in (before, after):
        for a in rows:
            for b in rows:
                if a is not b and a["site"] == b["site"] and a["lane"] == b["lane"]:
                    assert min(a["end_ms"], b["end_ms"]) <= max(a["start_ms"], b["start_ms"]) + 1e-6


def test_roadmap_chart_is_the_plans_roadmap(report: ReportFiles) -> None:
    plan = json.loads(report.summary_json.read_text())["plan"]
    steps = plan["roadmap"]
    rows = [r for k, v in walk(report.specs["roadmap"]) if k == "values" for r in v]
    got = sorted({(r["changes"], r["saving_ms"]) for r in rows})
    want = [(0, 0.0)] + [(s["step"], round(plan["baseline_ms"] - s["touchdown_ms"], 3))
                         for s in steps]
    assert got == want
    assert got[-1][1] == round(plan["baseline_ms"] - plan["planned_ms"], 3)  # ends at the plan
    total = got[-1][1]
    k80 = next(k for k, saved in got if saved >= 0.8 * total)
    assert report.titles["roadmap"].startswith(f"{k80} of {len(steps)} changes give ")
    md = report.summary_md.read_text()
    assert "## Changes, in order" in md
    for s in steps:  # the proposal lists every change, in order
        assert f"\n{s['step']}. {s['change']}: saves " in md


def test_every_quantitative_axis_names_its_unit(report: ReportFiles) -> None:
    for name, spec in report.specs.items():
        titled = [v for k, v in walk(spec) if k in ("x", "y", "color") and isinstance(v, dict)
                  and v.get("type") == "quantitative" and "title" in v]
        assert titled, name
        for enc in titled:
            # a unit of time, a share, or a count of program changes
            assert re.search(r"\((ms|%|changes)\)$", enc["title"]), (name, enc["title"])


def test_one_palette_throughout(report: ReportFiles) -> None:
    ours = {c.lower() for c in (*BLOCK_COLOURS, AMBER, CORAL, INK, MIST, SLATE, TEAL)}
    ours |= {"#f6f4ef", "white"}
    for name, spec in report.specs.items():
        text = json.dumps(spec)
        used = {c.lower() for c in re.findall(r"#[0-9a-fA-F]{6}\b", text)}
        assert used <= ours, (name, used - ours)
        assert used & {TEAL.lower(), SLATE.lower()}, name


# -- exports -------------------------------------------------------------------------------
def test_every_chart_is_exported_as_png_and_svg(report: ReportFiles) -> None:
    for name in CHARTS:
        png = report.out / "charts" / f"{name}.png"
        svg = report.out / "charts" / f"{name}.svg"
        assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
        root = ET.fromstring(svg.read_text(encoding="utf-8"))
        assert root.tag.endswith("svg")
        texts = "".join(el.text or "" for el in root.iter() if el.tag.endswith("text"))
        assert report.titles[name] in texts


def test_html_is_self_contained(report: ReportFiles) -> None:
    page = report.html.read_text(encoding="utf-8")
    assert not re.search(r"https?://", page, re.IGNORECASE)
    markup = re.sub(r"(<script[^>]*>).*?</script>", r"\1</script>", page, flags=re.DOTALL)
    assert not re.search(r"<(link|img|iframe|object|embed)\b", markup, re.IGNORECASE)
    assert not re.search(r"<script[^>]*\bsrc=", markup, re.IGNORECASE)
    assert "@import" not in markup and "url(" not in markup
    assert "Content-Security-Policy" in page and "default-src 'none'" in page
    assert page.count('type="application/json" data-chart=') == len(CHARTS)
    first_chart = page.index("<figure")
    for caution in CAUTIONS:
        assert 0 < page.index(html.escape(caution)) < first_chart  # prominent: first


def test_summary_md_matches_golden(report: ReportFiles) -> None:
    text = report.summary_md.read_text(encoding="utf-8")
    assert "/tmp" not in text and str(Path.home()) not in text
    check_golden("summary.md", text)


def test_summary_md_leads_with_the_cautions(report: ReportFiles) -> None:
    text = report.summary_md.read_text(encoding="utf-8")
    head = text[:text.index("## Key figures")]
    for caution in CAUTIONS:
        assert md_text(caution) in head


def test_frozen_plan_is_the_planners_current_answer(sample_plan: dict[str, Any], cli: Any,
                                                    store: Ingested) -> None:
    r = cli("plan", "--store", store.store.path, "--blocks", BLOCKS, "--lot", LOT, "--json",
            "--time-limit", "1")
    assert r.code == 0, r.err
    live = json.loads(r.out)
    hint = "the planner's answer changed: run `make golden` and read the diff"
    for key in ("lot_id", "sites", "baseline_ms", "planned_ms", "saving_pct", "lower_bound_ms",
                "proven_optimal"):
        assert sample_plan[key] == live[key], (key, hint)
    assert set(live) - {"baseline_schedule"} == set(sample_plan) - {"baseline_schedule"}, hint
    def spans(rows: list[dict[str, Any]]) -> list[tuple[str, int, float]]:
        return sorted((r["block"], r["site"], round(r["end_ms"] - r["start_ms"], 2))
                      for r in rows)
    assert spans(sample_plan["schedule"]) == spans(live["schedule"]), hint


def test_summary_json_is_the_plan_json_plus_attribution(report: ReportFiles,
                                                         sample_plan: dict[str, Any],
                                                         store: Ingested) -> None:
    got = json.loads(report.summary_json.read_text())
    assert got["plan"] == sample_plan
    assert {"blocks", "saving_ms", "change", "why"} <= set(got["plan"]["candidates"][0])
    table = timing.block_table(store.store)
    assert [(r["lot_id"], r["block"]) for r in got["attribution"]] == \
        list(zip(table["lot_id"], table["block"], strict=True))
    assert got["cautions"] == list(CAUTIONS)


def test_the_live_planner_feeds_the_report(hostile: ReportFiles) -> None:
    """Without ``plan=`` the report calls pipeline.plan.plan_lot, as `tandem plan` does."""
    plan = json.loads(hostile.summary_json.read_text())["plan"]
    assert plan["lot_id"] == "HX-1" and plan["planned_ms"] < plan["baseline_ms"]
    assert plan["baseline_schedule"] and hostile.planned


def test_csv_tables_read_back(report: ReportFiles, store: Ingested) -> None:
    names = {p.stem for p in (report.out / "tables").glob("*.csv")}
    assert {"attribution", "lots", "sites", "candidates", "schedule_before",
            "schedule_after"} <= names
    with (report.out / "tables" / "attribution.csv").open(newline="") as fh:
        rows = list(csv.DictReader(fh))
    table = timing.block_table(store.store)
    assert len(rows) == len(table)
    first = table.row(0, named=True)
    assert rows[0]["block"] == first["block"]
    assert float(rows[0]["mean_ms"]) == pytest.approx(first["mean_ms"], abs=0.01)


# -- in a real browser ---------------------------------------------------------------------
def chromium() -> str | None:
    for name in ("chromium", "chromium-browser", "google-chrome"):
        found = shutil.which(name)
        if found:
            return found
    return None


def open_in_browser(page: Path, tmp_path: Path) -> tuple[str, str]:
    """(the DOM after scripts ran, the browser's log). Headless, offline, a fresh profile."""
    exe = chromium()
    if exe is None:
        if os.environ.get("CI"):
            pytest.fail("CI is set but chromium is not installed (.ci/run installs it)")
        pytest.skip("chromium not found: install it (apt-get install chromium) to run the "
                    "browser test; under CI=true this test fails instead")
    profile = tmp_path / "profile"
    cmd = [exe, "--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
           "--disable-component-update", "--disable-sync", "--no-first-run",
           f"--user-data-dir={profile}", "--enable-logging=stderr", "--v=0",
           "--virtual-time-budget=10000", "--dump-dom", page.resolve().as_uri()]
    done = subprocess.run(cmd, capture_output=True, text=True, timeout=60)
    assert done.returncode == 0, done.stderr[-2000:]
    return done.stdout, done.stderr


def console_errors(log: str) -> list[str]:
    return [line for line in log.splitlines()
            if ":CONSOLE" in line or "Uncaught" in line]


def test_every_chart_renders_in_a_browser(report: ReportFiles, tmp_path: Path) -> None:
    dom, log = open_in_browser(report.html, tmp_path)
    assert console_errors(log) == []
    n = len(CHARTS)
    assert f'data-charts-expected="{n}"' in dom
    assert f'data-charts-rendered="{n}"' in dom, "not every chart finished rendering"
    assert 'data-chart-errors="' not in dom
    for i in range(n):
        block = dom[dom.index(f'id="chart-{i}"'):]
        block = block[:block.index("</figure>")]
        assert "<svg" in block or "<canvas" in block, f"chart {i} drew nothing"


# -- untrusted text ------------------------------------------------------------------------
def test_text_helpers() -> None:
    assert md_text("a_b *c* [d](e) <f> | g") == r"a_b \*c\* \[d\](e) \<f\> \| g"
    assert md_text("=x") == r"\=x" and md_text("# x") == r"\# x"
    for bad in ("=1+1", "+1", "-1", "@x", "\tx", "\rx"):
        assert csv_cell(bad) == "'" + bad
    assert csv_cell(-3.5) == -3.5 and csv_cell("ok") == "ok"


def hostile_log(touchdowns: int = 6) -> bytes:
    """Two sites, three blocks timed by markers; two blocks and their tests are named by
    someone unfriendly."""
    blocks = [(SCRIPT, 100, 40_000), (FORMULA, 200, 60_000), ("plain", 300, 20_000)]
    recs = [("FAR", {"CPU_TYPE": 2, "STDF_VER": 4}),
            ("MIR", {"SETUP_T": 1700000000, "START_T": 1700000000, "STAT_NUM": 1,
                     "MODE_COD": "P", "RTST_COD": " ", "PROT_COD": " ", "BURN_TIM": 65535,
                     "CMOD_COD": " ", "LOT_ID": "HX-1", "PART_TYP": "HX", "NODE_NAM": "n1",
                     "TSTR_TYP": "sim", "JOB_NAM": "<b>prog</b>", "JOB_REV": "=1+1"})]
    part = 0
    for td in range(touchdowns):
        recs += [("PIR", {"HEAD_NUM": 1, "SITE_NUM": s}) for s in (1, 2)]
        t = 0
        for name, num, dur in blocks:
            recs.append(("BPS", {"SEQ_NAME": name}))
            recs += [("PTR", {"TEST_NUM": num, "HEAD_NUM": 1, "SITE_NUM": s, "TEST_FLG": 0,
                              "PARM_FLG": 0, "RESULT": 1.0, "TEST_TXT": name}) for s in (1, 2)]
            recs.append(("EPS", {}))
            for s in (1, 2):
                end = t + dur + 1000 * s + 100 * td
                recs.append(("DTR", {"TEXT_DAT": f"TT block={name} site={s} start_us={t} "
                                                 f"end_us={end}"}))
            t += dur + 3000
        for s in (1, 2):
            part += 1
            recs.append(("PRR", {"HEAD_NUM": 1, "SITE_NUM": s, "PART_FLG": 0, "NUM_TEST": 3,
                                 "HARD_BIN": 1, "SOFT_BIN": 1, "X_COORD": 0, "Y_COORD": 0,
                                 "TEST_T": t // 1000 + 5, "PART_ID": str(part)}))
    recs.append(("MRR", {"FINISH_T": 1700000100, "DISP_COD": " "}))
    return b"".join(encode_record(name, values) for name, values in recs)


@pytest.fixture(scope="module")
def hostile(tmp_path_factory: pytest.TempPathFactory) -> ReportFiles:
    d = tmp_path_factory.mktemp("hostile")
    (d / "hx.stdf").write_bytes(hostile_log())
    (d / "blocks.toml").write_text(
        "[limits]\npower_w = 3.0\nparallel = 2\n"
        + "".join(f'[block."{n}"]\npower_w = 1.0\n' for n in (SCRIPT, FORMULA, "plain")),
        encoding="utf-8")
    ing = ingest_into(d / "store", d / "hx.stdf")
    assert not ing.report.rejected
    return build_report(ing.store, d / "report", blocks=str(d / "blocks.toml"))


def test_hostile_names_are_inert_in_html(hostile: ReportFiles, tmp_path: Path) -> None:
    page = hostile.html.read_text(encoding="utf-8")
    assert SCRIPT not in page and "<b>prog" not in page
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in page      # shown, as text
    assert page.count("<script") == 2 + page.count('data-chart="')  # ours only
    specs = re.findall(r'<script type="application/json" data-chart="[^"]+">(.*?)</script>',
                       page, re.DOTALL)
    assert specs
    for text in specs:
        for key, value in walk(json.loads(text)):
            if key in ("expr", "signal", "update") and isinstance(value, str):
                assert "alert" not in value and "SUM(" not in value, value
    dom, log = open_in_browser(hostile.html, tmp_path)
    assert console_errors(log) == []
    assert SCRIPT not in dom and f'data-charts-rendered="{len(specs)}"' in dom


def test_hostile_names_are_inert_in_markdown_json_svg(hostile: ReportFiles) -> None:
    md = hostile.summary_md.read_text(encoding="utf-8")
    assert SCRIPT not in md and "<b>" not in md
    assert md_text(SCRIPT) in md and r"\=SUM(A1:A9)" in md
    raw = hostile.summary_json.read_text(encoding="utf-8")
    assert "<" not in raw and ">" not in raw
    assert SCRIPT in {r["block"] for r in json.loads(raw)["attribution"]}  # same values
    for svg in (hostile.out / "charts").glob("*.svg"):
        assert SCRIPT not in svg.read_text(encoding="utf-8")
        ET.fromstring(svg.read_text(encoding="utf-8"))


def test_hostile_names_cannot_become_spreadsheet_formulas(hostile: ReportFiles) -> None:
    seen = 0
    for path in (hostile.out / "tables").glob("*.csv"):
        with path.open(newline="", encoding="utf-8") as fh:
            for row in csv.reader(fh):
                for cell in row:
                    if cell.startswith(("=", "+", "@", "\t", "\r")) or (
                            cell.startswith("-") and not re.fullmatch(r"-[\d.e+-]+", cell)):
                        pytest.fail(f"{path.name}: formula-like cell {cell!r}")
                    seen += cell.startswith("'=")
    assert seen >= 3  # the block in attribution, drift and the schedules


# -- the command line ----------------------------------------------------------------------
def test_report_without_a_block_map_says_so(cli: Any, hostile: ReportFiles,
                                            tmp_path: Path) -> None:
    store = hostile.out.parent / "store"
    r = cli("report", "--store", store, "--out", tmp_path / "r")
    assert r.code == 0, r.err
    assert "attribution only" in r.out
    md = (tmp_path / "r" / "summary.md").read_text(encoding="utf-8")
    assert md_text(NO_PLAN) in md and "## Projected saving" not in md
    page = (tmp_path / "r" / "report.html").read_text(encoding="utf-8")
    assert html.escape(NO_PLAN) in page
    charts = {p.stem for p in (tmp_path / "r" / "charts").glob("*.svg")}
    assert charts == {"block_share", "site_block_heatmap", "part_time_by_site"}
    assert json.loads((tmp_path / "r" / "summary.json").read_text())["plan"] is None


def test_report_errors_are_one_line(cli: Any, store: Ingested, tmp_path: Path) -> None:
    r = cli("report", "--store", store.store.path)
    assert r.code == 2 and "--out" in r.err and "Traceback" not in r.err
    r = cli("report", "--store", store.store.path, "--lot", "NO-SUCH", "--out", tmp_path)
    assert r.code == 2 and len(r.err_lines) == 1 and "NO-SUCH" in r.err


@pytest.mark.parametrize("command", ["report", "demo"])
def test_help_explains_options_with_an_example(cli: Any, command: str) -> None:
    r = cli(command, "--help")
    assert r.code == 0 and "example:" in r.out and f"tandem {command}" in r.out
    assert "--out DIR" in r.out


@pytest.mark.slow
def test_demo_end_to_end(cli: Any, tmp_path: Path) -> None:
    r = cli("demo", "--out", tmp_path)
    assert r.code == 0, r.err
    assert str(tmp_path / "report" / "report.html") in r.out
    for name in ("report.html", "summary.md", "summary.json"):
        assert (tmp_path / "report" / name).stat().st_size > 0
