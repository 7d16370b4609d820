"""The committed sample logs: what the generator writes now, and what it says they hold.

Decoding here uses only the *reference* decoder (pipeline.read.stdf.codec.iter_records /
decode_record), so these tests check the bytes against the STDF V4 layouts and against the
generator's ground truth (sample_logs/truth.json), not against the production reader.
"""

from __future__ import annotations

import csv
import gzip
import io
import json
import math
import subprocess
import sys
import tomllib
from collections import defaultdict
from dataclasses import dataclass, field
from functools import cache
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from scipy.optimize import nnls

from pipeline.read.stdf.codec import decode_record, detect_endian, iter_records
from tests.conftest import (
    CONCURRENT,
    MARKERS_BE,
    MARKERS_GZ,
    MARKERS_LE,
    SAMPLES,
    TIMING_CSV,
    TOTALS_ONLY,
    TSR_ONLY,
)
from tests.conftest import STDF_LOGS as STDF_FILES

WITH_MARKERS = (MARKERS_LE, MARKERS_GZ)
OUTPUTS = (*STDF_FILES, TIMING_CSV, "blocks.toml", "truth.json")  # STDF_FILES has CONCURRENT
SHARED = ("radio_tx", "radio_rx")  # the blocks on the touchdown-wide rf_meter


@pytest.fixture(scope="module")
def regenerated(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """Run the generator as documented (`python sample_logs/generate.py OUT_DIR`)."""
    out = tmp_path_factory.mktemp("samples")
    done = subprocess.run([sys.executable, str(SAMPLES / "generate.py"), str(out)],
                          capture_output=True, text=True, timeout=120, check=False)
    assert done.returncode == 0, done.stderr
    return out


@cache
def truth() -> dict[str, Any]:
    return json.loads((SAMPLES / "truth.json").read_text(encoding="utf-8"))


@dataclass
class Rec:
    name: str
    f: dict[str, Any]
    size: int  # payload bytes (REC_LEN)


@cache
def decoded(name: str) -> tuple[str, tuple[Rec, ...]]:
    data = (SAMPLES / name).read_bytes()
    if data[:2] == b"\x1f\x8b":
        data = gzip.decompress(data)
    endian = detect_endian(data)
    out = []
    for rec, typ, sub, payload in iter_records(data):
        assert rec is not None, f"{name}: record {typ}/{sub} not in the catalogue"
        out.append(Rec(rec.name, decode_record(rec, payload, endian), len(payload)))
    return endian, tuple(out)


def records(name: str, kind: str | None = None) -> list[Rec]:
    return [r for r in decoded(name)[1] if kind in (None, r.name)]


@dataclass
class TD:
    """One touchdown as the stream shows it."""

    prr: dict[int, dict[str, Any]] = field(default_factory=dict)      # site -> PRR fields
    markers: list[dict[str, Any]] = field(default_factory=list)
    ran: dict[int, list[str]] = field(default_factory=lambda: defaultdict(list))


def touchdowns(name: str) -> list[TD]:
    """A PIR after a PRR opens the next touchdown; a site ran a block when its test
    records sit inside that block's BPS/EPS section."""
    tds: list[TD] = []
    section, after_prr = None, True
    for r in records(name):
        if r.name == "PIR" and after_prr:
            tds.append(TD())
            after_prr = False
        elif r.name == "PRR":
            tds[-1].prr[r.f["SITE_NUM"]] = r.f
            after_prr = True
        elif r.name == "BPS":
            section = r.f["SEQ_NAME"]
        elif r.name == "EPS":
            section = None
        elif r.name in ("PTR", "FTR", "MPR") and section:
            ran = tds[-1].ran[r.f["SITE_NUM"]]
            if not ran or ran[-1] != section:
                ran.append(section)
        elif r.name == "DTR" and r.f["TEXT_DAT"].startswith("TT "):
            tds[-1].markers.append(parse_marker(r.f["TEXT_DAT"]))
    return tds


def parse_marker(text: str) -> dict[str, Any]:
    tok = dict(t.split("=", 1) for t in text.split()[1:])
    return {"block": tok["block"], "site": int(tok["site"]), "start_us": int(tok["start_us"]),
            "end_us": int(tok["end_us"])}


def block_names() -> list[str]:
    return [b["name"] for b in truth()["device"]["blocks"]]


# ------------------------------------------------------------------ the outputs themselves


def test_committed_outputs_are_what_the_generator_writes(regenerated: Path) -> None:
    written = {p.name for p in regenerated.iterdir()}
    assert written == set(OUTPUTS)
    for name in OUTPUTS:
        assert (regenerated / name).read_bytes() == (SAMPLES / name).read_bytes(), name


def test_gzip_header_is_deterministic() -> None:
    # RFC 1952, 2.3: ID1 ID2 = 1f 8b, CM = 8 (deflate), FLG bit 3 = FNAME, MTIME bytes 4..7
    head = (SAMPLES / MARKERS_GZ).read_bytes()[:10]
    assert head[:3] == b"\x1f\x8b\x08"
    assert head[3] & 0x08 == 0, "file name stored in the gzip header"
    assert head[4:8] == b"\x00\x00\x00\x00", "gzip MTIME is not 0"


def test_outputs_are_small_and_hold_no_machine_paths() -> None:
    assert sum((SAMPLES / n).stat().st_size for n in OUTPUTS) < 5_000_000
    for name in (*OUTPUTS, "generate.py"):
        data = (SAMPLES / name).read_bytes()
        for home in (b"work", b"root"):  # spelled apart so this file holds no such path
            assert b"/" + home + b"/" not in data, name


# ------------------------------------------------------------------ STDF content vs truth


@pytest.mark.parametrize("name", STDF_FILES)
def test_stdf_counts_match_truth(name: str) -> None:
    t = truth()["files"][name]
    endian, _ = decoded(name)
    far = records(name, "FAR")[0].f
    # STDF V4, FAR 0/10: CPU_TYPE 1 = big-endian, 2 = little-endian
    assert (far["CPU_TYPE"], far["STDF_VER"]) == ((1 if t["byte_order"] == "big" else 2), 4)
    assert endian == (">" if t["byte_order"] == "big" else "<")
    mir = records(name, "MIR")[0].f
    assert (mir["LOT_ID"], mir["PART_TYP"], mir["JOB_NAM"], mir["JOB_REV"]) == (
        t["lot_id"], "PF4", "pf4_sort", t["job_rev"])
    assert mir["START_T"] == t["start_t"]
    per_site: dict[str, int] = defaultdict(int)
    for r in records(name, "PRR"):
        per_site[str(r.f["SITE_NUM"])] += 1
    assert dict(per_site) == t["parts_per_site"]
    counts = {k: len(records(name, k)) for k in ("PTR", "FTR", "MPR", "BPS", "EPS")}
    counts["MPR_results"] = sum(len(r.f["RTN_RSLT"]) for r in records(name, "MPR"))
    counts["markers"] = sum(len(td.markers) for td in touchdowns(name))
    assert counts == t["records"]
    total = math.fsum(r.f["RESULT"] for r in records(name, "PTR"))
    assert total == pytest.approx(t["ptr_result_sum"], rel=1e-12)
    assert len(touchdowns(name)) == t["touchdowns"]


def test_big_endian_copy_holds_the_same_records() -> None:
    le, be = records(MARKERS_LE), records(MARKERS_BE)
    assert len(le) == len(be)
    for a, b in zip(le[1:], be[1:], strict=True):  # all but the FAR
        assert (a.name, a.f) == (b.name, b.f)


def test_first_record_of_a_test_carries_defaults_later_ones_are_truncated() -> None:
    seen: set[int] = set()
    for r in records(MARKERS_LE):
        if r.name not in ("PTR", "MPR"):
            continue
        first = r.f["TEST_NUM"] not in seen
        seen.add(r.f["TEST_NUM"])
        if first:
            assert r.f["TEST_TXT"] and "UNITS" in r.f and "HI_LIMIT" in r.f
        elif r.name == "PTR":
            # STDF V4, PTR 15/10: TEST_NUM U4, HEAD_NUM U1, SITE_NUM U1, TEST_FLG B1,
            # PARM_FLG B1, RESULT R4 = 12 bytes, then TEST_TXT
            assert r.size == 12 and "TEST_TXT" not in r.f
        else:
            # STDF V4, MPR 15/15: 12 fixed bytes up to RSLT_CNT, RTN_STAT ceil(j/2) bytes,
            # RTN_RSLT 4k bytes, then TEST_TXT
            j, k = r.f["RTN_ICNT"], r.f["RSLT_CNT"]
            assert r.size == 12 + (j + 1) // 2 + 4 * k and "TEST_TXT" not in r.f


def test_scan_ftrs_point_at_their_cores_scan_pins() -> None:
    pmr = {r.f["PMR_INDX"]: r.f for r in records(MARKERS_LE, "PMR")}
    section, checked = None, 0
    for r in records(MARKERS_LE):
        if r.name == "BPS":
            section = r.f["SEQ_NAME"]
        elif r.name == "FTR" and section and section.startswith("scan_core"):
            k = section[-1]
            pins = [pmr[i] for i in r.f["RTN_INDX"]]
            assert {p["LOG_NAM"] for p in pins} == {f"SCAN_IN{k}", f"SCAN_OUT{k}"}
            assert {p["SITE_NUM"] for p in pins} == {r.f["SITE_NUM"]}
            assert len(r.f["RTN_STAT"]) == r.f["RTN_ICNT"] == 2
            checked += 1
    assert checked > 0


@pytest.mark.parametrize("name", STDF_FILES)
def test_bins_flags_and_summaries_agree_with_the_parts(name: str) -> None:
    t = truth()["files"][name]
    prrs = [r.f for r in records(name, "PRR")]
    for p in prrs:  # STDF V4, PRR 5/20: PART_FLG bit 3 = part failed
        assert bool(p["PART_FLG"] & 0x08) == (p["HARD_BIN"] != 1)
    assert len({p["PART_ID"] for p in prrs}) == len(prrs)
    good = {str(s): sum(p["SITE_NUM"] == s and p["HARD_BIN"] == 1 for p in prrs)
            for s in t["sites"]}
    assert good == t["good_per_site"]
    hbr = {r.f["HBIN_NUM"]: r.f["HBIN_CNT"] for r in records(name, "HBR")
           if r.f["HEAD_NUM"] == 255}
    for num, cnt in hbr.items():
        assert cnt == sum(p["HARD_BIN"] == num for p in prrs)
    pcr = [r.f for r in records(name, "PCR") if r.f["HEAD_NUM"] == 255][0]
    assert (pcr["PART_CNT"], pcr["GOOD_CNT"]) == (len(prrs), sum(good.values()))


@pytest.mark.parametrize("name", STDF_FILES)
def test_finish_time_is_start_plus_touchdowns_and_index(name: str) -> None:
    t = truth()["files"][name]
    assert len(t["index_ms"]["realised"]) == t["touchdowns"] - 1
    wall_s = (sum(t["touchdown_ms"]) + sum(t["index_ms"]["realised"])) / 1000
    finish = records(name, "MRR")[0].f["FINISH_T"]
    assert abs(finish - (records(name, "MIR")[0].f["START_T"] + wall_s)) <= 0.51


# ------------------------------------------------------------------ markers and timing


@pytest.mark.parametrize("name", (*WITH_MARKERS, CONCURRENT))
def test_markers_give_the_realised_block_times(name: str) -> None:
    t = truth()["files"][name]
    durations: dict[tuple[str, int], list[int]] = defaultdict(list)
    for td, td_ms in zip(touchdowns(name), t["touchdown_ms"], strict=True):
        for m in td.markers:
            durations[(m["block"], m["site"])].append(m["end_us"] - m["start_us"])
        ends = {s: max(m["end_us"] for m in td.markers if m["site"] == s) for s in td.prr}
        for s, prr in td.prr.items():  # PRR.TEST_T is the site's elapsed time, whole ms
            assert prr["TEST_T"] == (ends[s] + 500) // 1000
        assert max(ends.values()) / 1000 == pytest.approx(td_ms, abs=1e-4)
    for block, sites in t["block_ms"].items():
        for site, want in sites.items():
            got = durations[(block, int(site))]
            assert len(got) == want["parts"]
            assert np.mean(got) / 1000 == pytest.approx(want["realised_mean_ms"], abs=1e-4)


@pytest.mark.parametrize("name", WITH_MARKERS)
def test_shared_rf_meter_serialises_sites_and_other_blocks_overlap(name: str) -> None:
    overlaps = 0
    for td in touchdowns(name):
        spans = [(m["start_us"], m["end_us"]) for b in SHARED for m in td.markers
                 if m["block"] == b]  # program order: block, then site
        for (_, end), (start, _) in zip(spans, spans[1:], strict=False):
            assert start >= end
        scan = sorted((m["start_us"], m["end_us"]) for m in td.markers
                      if m["block"] == "scan_core0")
        overlaps += any(b0 < a1 for (_, a1), (b0, _) in zip(scan, scan[1:], strict=False))
    assert overlaps == len(touchdowns(name))  # the sites run unshared blocks at once


def test_site_3_adc_is_about_6_percent_slower() -> None:
    # 2 % jitter per part; 40 parts per site: the ratio's sd is about 0.5 %
    ms = truth()["files"][MARKERS_LE]["block_ms"]["adc_linearity"]
    others = np.mean([ms[s]["realised_mean_ms"] for s in ("1", "2", "4")])
    assert ms["3"]["realised_mean_ms"] / others == pytest.approx(1.06, abs=0.02)


@pytest.mark.parametrize("name", WITH_MARKERS + (TSR_ONLY,))
def test_realised_means_scatter_as_two_percent_jitter(name: str) -> None:
    for sites in truth()["files"][name]["block_ms"].values():
        for want in sites.values():
            se = 0.02 * want["nominal_mean_ms"] / math.sqrt(want["parts"])
            assert abs(want["realised_mean_ms"] - want["nominal_mean_ms"]) < 5 * se


def test_nominal_shares_follow_common_practice() -> None:
    nominal = {b["name"]: b["nominal_ms"] for b in truth()["device"]["blocks"]}
    one_site = sum(nominal.values()) + truth()["device"]["overhead_ms"]
    scan = sum(v for k, v in nominal.items() if k.startswith("scan_core"))
    assert 0.65 < scan / one_site < 0.75
    assert 0.04 < nominal["dc_leakage"] / one_site < 0.06


# ------------------------------------------------------------------ TSR


@pytest.mark.parametrize("name", (MARKERS_LE, MARKERS_GZ, TSR_ONLY))
def test_tsr_test_times_add_up_to_block_means(name: str) -> None:
    t = truth()["files"][name]
    per: dict[tuple[str, str], float] = defaultdict(float)
    for r in records(name, "TSR"):
        site = "all" if r.f["HEAD_NUM"] == 255 else str(r.f["SITE_NUM"])
        assert r.f["OPT_FLAG"] & 0x04 == 0  # STDF V4, TSR 10/30: bit 2 = TEST_TIM invalid
        per[(r.f["SEQ_NAME"], site)] += r.f["TEST_TIM"] * r.f["EXEC_CNT"]
    for block, sites in t["block_ms"].items():
        parts = sum(w["parts"] for w in sites.values())
        pooled = sum(w["realised_mean_ms"] * w["parts"] for w in sites.values()) / parts
        assert per[(block, "all")] * 1000 / parts == pytest.approx(pooled, rel=1e-5)
        for site, want in sites.items():
            got = per[(block, site)] * 1000 / want["parts"]
            assert got == pytest.approx(want["realised_mean_ms"], rel=1e-5)


@pytest.mark.parametrize("name", (MARKERS_LE, TSR_ONLY))
def test_tsr_summaries_match_the_results(name: str) -> None:
    sums: dict[tuple[int, int], list[float]] = defaultdict(list)
    for r in records(name, "PTR"):
        sums[(r.f["TEST_NUM"], r.f["SITE_NUM"])].append(r.f["RESULT"])
    block_of = {n: b["name"] for b in truth()["device"]["blocks"] for n in b["tests"]}
    for r in records(name, "TSR"):
        f = r.f
        assert f["SEQ_NAME"] == block_of[f["TEST_NUM"]] and f["TEST_NAM"]
        if f["HEAD_NUM"] == 255 or f["TEST_TYP"] != "P":
            continue
        vals = sums[(f["TEST_NUM"], f["SITE_NUM"])]
        assert f["EXEC_CNT"] == len(vals)
        # TST_SUMS is R*4 (STDF V4, TSR 10/30): compare at float32 precision
        assert f["TST_SUMS"] == pytest.approx(math.fsum(vals), rel=1e-6, abs=1e-30)
        assert (f["TEST_MIN"], f["TEST_MAX"]) == (min(vals), max(vals))


def test_tsr_only_file_has_no_sections_or_markers() -> None:
    assert not records(TSR_ONLY, "BPS") and not records(TSR_ONLY, "EPS")
    assert not records(TSR_ONLY, "DTR")
    executed = {r.f["TEST_NUM"] for r in records(TSR_ONLY) if r.name in ("PTR", "FTR", "MPR")}
    summarised = {r.f["TEST_NUM"] for r in records(TSR_ONLY, "TSR")
                  if r.f["HEAD_NUM"] == 255 and r.f["SEQ_NAME"]}
    assert executed == summarised


# ------------------------------------------------------------------ totals only (stop on fail)


def test_totals_only_file_stops_on_fail() -> None:
    t = truth()["files"][TOTALS_ONLY]
    order = block_names()
    soft = {b["soft_bin"]: b["name"] for b in truth()["device"]["blocks"]}
    assert not records(TOTALS_ONLY, "DTR")
    assert all(r.f["OPT_FLAG"] & 0x04 for r in records(TOTALS_ONLY, "TSR"))  # TSR 10/30 bit 2
    stops: dict[str, int] = defaultdict(int)
    for td in touchdowns(TOTALS_ONLY):
        (site, prr), = td.prr.items()
        ran = td.ran[site]
        assert ran == order[: len(ran)]  # a prefix of the program
        stop = "pass" if prr["SOFT_BIN"] == 1 else soft[prr["SOFT_BIN"]]
        assert stop == "pass" or stop == ran[-1]
        assert stop != "pass" or ran == order
        stops[stop] += 1
    assert dict(stops) == {k: v for k, v in t["stops"].items() if v}
    assert t["stops"]["flash_bist"] == 0
    assert all(t["stops"][b] > 0 for b in order if b != "flash_bist")


def test_totals_only_regression_recovers_the_identifiable_blocks() -> None:
    """NNLS of PRR.TEST_T on 'blocks run' (scipy), with the confounded columns merged as
    truth says: the merged design must have full rank, the raw one must not, and every
    estimate must sit within 5 standard errors of the realised times."""
    t = truth()["files"][TOTALS_ONLY]
    names = ["overhead", *block_names()]
    tds = touchdowns(TOTALS_ONLY)
    x = np.array([[1.0] + [float(b in td.ran[1]) for b in names[1:]] for td in tds])
    y = np.array([td.prr[1]["TEST_T"] for td in tds], dtype=float)
    groups = [g for g in t["confounded"]]
    groups += [[n] for n in names if not any(n in g for g in groups)]
    merged = np.column_stack([x[:, [names.index(n) for n in g]][:, 0] for g in groups])
    for g in t["confounded"]:  # confounded columns are identical
        cols = x[:, [names.index(n) for n in g]]
        assert (cols == cols[:, :1]).all()
    assert np.linalg.matrix_rank(x) < x.shape[1]
    assert np.linalg.matrix_rank(merged) == merged.shape[1]
    assert {n for n, ok in t["identifiable"].items() if not ok} == {
        n for g in t["confounded"] for n in g}
    coef, _ = nnls(merged, y)
    resid = y - merged @ coef
    s2 = resid @ resid / (len(y) - merged.shape[1])
    se = np.sqrt(np.diag(s2 * np.linalg.inv(merged.T @ merged)))
    realised = {b: w["1"]["realised_mean_ms"] for b, w in t["block_ms"].items()}
    realised["overhead"] = t["overhead_ms"]["realised_mean"]
    for g, est, err in zip(groups, coef, se, strict=True):
        assert abs(est - sum(realised[n] for n in g)) < 5 * err, g
    assert se.max() < 10.0  # the check above is not vacuous


# ------------------------------------------------------------------ timing CSV and block map


def test_timing_csv_matches_truth() -> None:
    t = truth()["files"][TIMING_CSV]
    text = (SAMPLES / TIMING_CSV).read_text(encoding="ascii")
    rows = list(csv.DictReader(io.StringIO(text)))
    assert text.splitlines()[0] == ("lot_id,touchdown,site,part_id,block,start_ms,end_ms,"
                                    "head,hard_bin,soft_bin,passed,test_time_ms")
    assert {r["lot_id"] for r in rows} == {t["lot_id"]}
    durations: dict[tuple[str, str], list[float]] = defaultdict(list)
    ends: dict[str, float] = defaultdict(float)
    tds: dict[str, dict[str, list[tuple[float, float]]]] = defaultdict(lambda: defaultdict(list))
    for r in rows:
        s, e = float(r["start_ms"]), float(r["end_ms"])
        durations[(r["block"], r["site"])].append(e - s)
        ends[r["part_id"]] = max(ends[r["part_id"]], e)
        assert (r["passed"] == "true") == (r["hard_bin"] == "1")
        tds[r["touchdown"]][r["block"]].append((s, e))
    for r in rows:
        assert int(r["test_time_ms"]) == math.floor(ends[r["part_id"]] + 0.5)
    parts_per_site = defaultdict(set)
    for r in rows:
        parts_per_site[r["site"]].add(r["part_id"])
    assert {s: len(p) for s, p in parts_per_site.items()} == t["parts_per_site"]
    for block, sites in t["block_ms"].items():
        for site, want in sites.items():
            got = durations[(block, site)]
            assert np.mean(got) == pytest.approx(want["realised_mean_ms"], abs=1e-4)
    for blocks in tds.values():  # rf_meter: one site after another, rx after every tx
        spans = blocks["radio_tx"] + blocks["radio_rx"]
        assert all(b[0] >= a[1] - 1e-9 for a, b in zip(spans, spans[1:], strict=False))


def test_block_map_follows_the_contract() -> None:
    bm = tomllib.loads((SAMPLES / "blocks.toml").read_text(encoding="utf-8"))
    assert list(bm["block"]) == block_names()
    assert bm["resource"]["rf_meter"] == {"count": 1, "shared": True}
    limit = bm["limits"]["power_w"]
    assert bm["limits"]["parallel"] >= 2
    for name, b in bm["block"].items():
        assert set(b) == {"uses", "power_w", "after", "pinned"}
        assert b["pinned"] == (name == "contact")
        assert b["after"] == ([] if name == "contact" else ["contact"])
        assert 0 < b["power_w"] <= limit
        assert ("rf_meter" in b["uses"]) == (name in SHARED)
        assert ("scan_port" in b["uses"]) == name.startswith("scan_core")
    scans = [b["power_w"] for n, b in bm["block"].items() if n.startswith("scan_core")]
    assert sum(scans) > limit
    assert min(scans) == max(scans) == max(b["power_w"] for b in bm["block"].values())


# ------------------------------------------------------------------ the correlation lot


def unit_results(name: str) -> tuple[dict[tuple[str, int], list[float]], dict[str, dict[str, Any]]]:
    """(PART_ID, TEST_NUM) -> the PTR RESULTs and MPR RTN_RSLTs of that part, and PART_ID ->
    its PRR; a part's results are those of its site between the touchdown's PIR and PRR."""
    values: dict[tuple[str, int], list[float]] = {}
    prrs: dict[str, dict[str, Any]] = {}
    pending: dict[int, dict[int, list[float]]] = defaultdict(dict)
    for r in records(name):
        if r.name == "PTR":
            pending[r.f["SITE_NUM"]][r.f["TEST_NUM"]] = [r.f["RESULT"]]
        elif r.name == "MPR":
            pending[r.f["SITE_NUM"]][r.f["TEST_NUM"]] = list(r.f["RTN_RSLT"])
        elif r.name == "PRR":
            pid = r.f["PART_ID"]
            prrs[pid] = r.f
            for num, vals in pending.pop(r.f["SITE_NUM"], {}).items():
                values[(pid, num)] = vals
    return values, prrs


def test_candidate_lot_retests_the_baseline_units() -> None:
    t = truth()["files"][CONCURRENT]
    assert (t["retest"]["of"], t["lot_id"], t["wafer_id"]) == ("PF4-L0231", "PF4-L0236", "W01")
    _, base = unit_results(MARKERS_LE)
    _, cand = unit_results(CONCURRENT)
    assert set(base) == set(cand)
    for pid, b in base.items():  # STDF V4, PRR 5/20: the same die on the same site
        c = cand[pid]
        assert (c["SITE_NUM"], c["X_COORD"], c["Y_COORD"]) == (b["SITE_NUM"], b["X_COORD"],
                                                               b["Y_COORD"])
        flipped = pid in t["retest"]["flipped_part_ids"]
        assert (c["HARD_BIN"] != b["HARD_BIN"]) == flipped
        if flipped:
            assert (b["HARD_BIN"], c["HARD_BIN"], c["PART_FLG"] & 0x08) == (1, 4, 0x08)


def test_the_planted_changes_are_in_the_records() -> None:
    """Checked on the raw records against the generator's own model (truth.json): pairs
    correlate as rho says, adc_snr moves by -0.8 sigma, pll_jitter_rms spreads 1.6 times."""
    t = truth()["files"][CONCURRENT]["retest"]
    rho = t["rho"]
    b, prr = unit_results(MARKERS_LE)
    c, _ = unit_results(CONCURRENT)
    defs = _test_defs()
    num = {x["name"]: x["num"] for x in defs}
    good = [p for p in prr if prr[p]["HARD_BIN"] == 1 and p not in t["flipped_part_ids"]]

    def pairs(name: str) -> tuple[np.ndarray, np.ndarray]:
        n = num[name]
        return (np.array([b[(p, n)][0] for p in good]), np.array([c[(p, n)][0] for p in good]))

    sigma = {x["name"]: x["sigma"] for x in defs}
    for name, (shift, ratio) in (("adc_snr", (-0.8, 1.0)), ("pll_jitter_rms", (0.0, 1.6)),
                                 ("tx_evm", (0.0, 1.0))):
        x, y = pairs(name)
        s = sigma[name]
        assert t["planted"].get(name, {"shift_sigma": 0.0, "sigma_ratio": 1.0}) == {
            "shift_sigma": shift, "sigma_ratio": ratio}
        d = y - x
        # c - b = (ratio rho - 1)(b - nom) + ratio sqrt(1 - rho^2) s z + shift s
        sd_d = s * math.sqrt((ratio * rho - 1) ** 2 + ratio ** 2 * (1 - rho ** 2))
        assert abs(d.mean() - shift * s) < 5 * sd_d / math.sqrt(len(d)), name
        assert np.std(d, ddof=1) == pytest.approx(sd_d, rel=0.2), name
        assert np.std(y, ddof=1) / np.std(x, ddof=1) == pytest.approx(ratio, rel=0.15), name


def _test_defs() -> list[dict[str, Any]]:
    """Test number, name and sigma of every PTR, from the first PTR of each number and the
    generator's device table (truth.json has the numbers; the sigmas are the generator's)."""
    sys.path.insert(0, str(SAMPLES))
    try:
        import generate  # the sample generator, as a module
    finally:
        sys.path.remove(str(SAMPLES))
    return [{"num": t.num, "name": t.name, "sigma": t.fam.sigma}
            for b in generate.build_blocks() for t in b.tests if t.kind == "P"]


def test_the_concurrent_program_overlaps_blocks_as_planned() -> None:
    """Markers of the candidate: after contact, blocks run in parallel on a site, each of
    the plan's lanes in its order; the rf_meter still serves one site at a time; the
    truth's realised saving is the markers' touchdown times against the baseline's."""
    t = truth()["files"][CONCURRENT]
    overlapping = 0
    for td in touchdowns(CONCURRENT):
        by_site: dict[int, list[dict[str, Any]]] = defaultdict(list)
        for m in td.markers:
            by_site[m["site"]].append(m)
        for ms in by_site.values():
            spans = sorted((m["start_us"], m["end_us"]) for m in ms)
            overlapping += any(b0 < a1 for (_, a1), (b0, _) in zip(spans, spans[1:],
                                                                     strict=False))
            contact = next(m for m in ms if m["block"] == "contact")
            assert all(m["start_us"] >= contact["end_us"] for m in ms if m is not contact)
        meter = sorted((m["start_us"], m["end_us"]) for m in td.markers
                       if m["block"] in SHARED)
        assert all(b0 >= a1 for (_, a1), (b0, _) in zip(meter, meter[1:], strict=False))
    assert overlapping == 4 * t["touchdowns"]   # every site of every touchdown
    base = truth()["files"][MARKERS_LE]["touchdown_ms"]
    saving = 100 * (1 - np.mean(t["touchdown_ms"]) / np.mean(base))
    assert saving == pytest.approx(t["retest"]["realised_saving_pct"], abs=1e-3)
    # the rule of thumb for concurrent test: savings of about 25-30 % up to 70 % (common
    # practice); this program, with four scan cores kept serial by one scan port, sits inside
    assert 25 < saving < 70
