"""Ingest benchmark: Tandem against a plain per-field ``struct`` decoder, same run.

``make bench`` runs it. It is a measurement, not a test: it prints what it measured and
exits 0 whether or not the targets are met.

1. A ~100 MB little-endian 4-site wafer-sort STDF V4 file is generated once and cached in
   ``bench/out/`` (again only when missing or when ``GENERATOR_VERSION`` changes). One
   touchdown is encoded record by record with ``encode_record`` (twice: the file's first,
   whose first PTR/MPR/FTR of each test number carries name and defaults, and a later
   one); the touchdowns are numpy copies of those templates with only the changing bytes
   patched (results, flags), plus the records whose length varies (DTR markers, PRRs).
2. Baseline: the decoder one writes first, in this file, run in this process.
3. Tandem: ``tandem ingest FILE --store TMP --json`` as a whole process (start-up and
   store writing included), 3 runs on fresh stores; and the in-process ``Decoder`` alone.
4. A table on stdout and ``bench/out/last.json``.

Peak RSS is the child's ``ru_maxrss`` from ``os.wait4`` (one child, the same kernel
figure ``RUSAGE_CHILDREN`` reports, but not mixed with the generator or other children).
Linux starts a child's ``maxrss`` at the parent's own high-water mark when it execs, so
Tandem is run while this process is still small (before the file is read or the baseline
runs), and the parent's mark at that moment is reported as the floor of the figure.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import shutil
import statistics
import struct
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

GENERATOR_VERSION = 1
OUT = Path(__file__).resolve().parent / "out"
DATA = OUT / "bench_4site.stdf"
META = OUT / "bench_4site.meta.json"
TARGET_BYTES = 100_000_000
SEED = 20240611
HEAD, SITES = 1, (1, 2, 3, 4)
SLICE = 8 << 20
# The project's targets: whole-process ingest vs the baseline, and Tandem's peak RSS.
RATIO_TARGET, RSS_TARGET_MB = 10.0, 1500.0

# The invented test program: block, PTRs, FTRs, MPRs per part, mean time (us),
# shared instrument (sites run that block one after another), units, RES_SCAL,
# result mean, sigma. About 75 % PTR, 15 % FTR, 5 % MPR of the records.
BLOCKS = [
    ("contact", 24, 0, 2, 1500, False, "V", 0, -0.55, 0.02),
    ("leakage", 48, 0, 2, 9000, False, "A", 9, 2e-9, 3e-10),
    ("dc_param", 60, 0, 4, 22000, False, "V", 0, 1.2, 0.01),
    ("idd_static", 20, 0, 2, 6000, False, "A", 3, 0.012, 0.0008),
    ("scan_core0", 8, 16, 0, 38000, False, "V", 0, 0.9, 0.005),
    ("scan_core1", 8, 16, 0, 38000, False, "V", 0, 0.9, 0.005),
    ("mbist_sram", 10, 20, 0, 45000, False, "V", 0, 0.8, 0.004),
    ("pll_lock", 30, 4, 2, 12000, False, "Hz", -6, 1.6e9, 2e5),
    ("adc_lin", 50, 2, 6, 30000, False, "LSB", 0, 0.0, 0.12),
    ("rf_tx", 42, 2, 2, 8000, True, "dBm", 0, 4.0, 0.15),
]
HBIN_OF_BLOCK = [2, 2, 2, 2, 3, 3, 3, 4, 4, 4]
HBIN_NAMES = {1: "PASS", 2: "FAIL_DC", 3: "FAIL_DIGITAL", 4: "FAIL_ANALOG"}
LIMIT_SIGMA, MPR_LIMIT_SIGMA, FTR_FAIL_P = 3.6, 8.0, 2e-4
PINS_PER_SITE, INDEX_US, GAP_US, OVERHEAD_US = 32, 350_000, 25, 400
START_T = 1_700_000_000  # seconds, naive local time of an invented test floor
SENTINEL = 1234.5  # placeholder RESULT in the templates, checked before patching


# -- generator: the program ----------------------------------------------------------
def _program(rng: Any) -> list[dict[str, Any]]:
    """One dict per test, in program order (block by block)."""
    tests: list[dict[str, Any]] = []
    for b, (name, n_ptr, n_ftr, n_mpr, _us, _sh, unit, scale, mean, sigma) in enumerate(BLOCKS):
        kinds = ["PTR"] * n_ptr + ["FTR"] * n_ftr + ["MPR"] * n_mpr
        kinds = [kinds[i] for i in rng.permutation(len(kinds))]
        for i, kind in enumerate(kinds):
            m = mean + sigma * float(rng.normal(0, 2))
            k = 1 if kind != "MPR" else int(rng.integers(8, 17))
            width = (MPR_LIMIT_SIGMA if kind == "MPR" else LIMIT_SIGMA) * sigma
            tests.append({
                "num": (b + 1) * 1000 + i, "kind": kind, "block": b, "unit": unit,
                "scale": scale, "mean": m, "sigma": sigma, "lo": m - width, "hi": m + width,
                "name": f"{name}_{kind.lower()}_{i:03d}", "pins": k,
                "later": "trunc" if rng.random() < 0.5 else "full",
            })
    return tests


def _record_values(t: dict[str, Any], s: int, first: bool) -> dict[str, Any]:
    """Field values of one test record; RESULTs hold SENTINEL, patched later."""
    v: dict[str, Any] = {"TEST_NUM": t["num"], "HEAD_NUM": HEAD, "SITE_NUM": SITES[s],
                         "TEST_FLG": 0}
    txt = t["name"] if first else ""
    if t["kind"] == "FTR":
        return {**v, "OPT_FLAG": 0x32, "CYCL_CNT": 4096, "REPT_CNT": 1, "NUM_FAIL": 0,
                "RTN_ICNT": 0, "PGM_ICNT": 0, "FAIL_PIN": b"", "VECT_NAM": f"pat_{t['name']}",
                "TIME_SET": "ts_fast", "OP_CODE": "", "TEST_TXT": txt, "ALARM_ID": "",
                "PROG_TXT": "", "RSLT_TXT": "", "PATG_NUM": 255, "SPIN_MAP": b""}
    v["PARM_FLG"] = 0
    if t["kind"] == "PTR":
        v["RESULT"] = SENTINEL
    else:
        k = t["pins"]
        v.update(RTN_ICNT=k, RSLT_CNT=k, RTN_STAT=[0] * k, RTN_RSLT=[SENTINEL] * k)
    if not first and t["later"] == "trunc":
        return v  # the standard's trailing-field rule: defaults come from the first
    v.update(TEST_TXT=txt, ALARM_ID="", OPT_FLAG=0x0C, RES_SCAL=t["scale"],
             LLM_SCAL=t["scale"], HLM_SCAL=t["scale"], LO_LIMIT=t["lo"], HI_LIMIT=t["hi"])
    if t["kind"] == "MPR":
        v.update(START_IN=0.0, INCR_IN=0.0,
                 RTN_INDX=[s * PINS_PER_SITE + p + 1 for p in range(t["pins"])],
                 UNITS_IN="V")
    v.update(UNITS=t["unit"], C_RESFMT="%9.4f", C_LLMFMT="%9.4f", C_HLMFMT="%9.4f",
             LO_SPEC=0.0, HI_SPEC=0.0)
    return v


def _offset(name: str, field: str, values: dict[str, Any]) -> int:
    """Byte offset of `field` from the record header, from the catalogue (fixed fields and
    counted arrays before it only)."""
    from pipeline.stdf.records import BY_NAME, FIXED_SIZE
    pos = 4
    for f in BY_NAME[name].fields:
        if f.name == field:
            return pos
        size = 1 if f.type == "N1" else FIXED_SIZE[f.type]
        if f.is_array:
            k = int(values[f.count])
            pos += (k + 1) // 2 if f.type == "N1" else k * size
        else:
            pos += size
    raise KeyError(field)


def _template(tests: list[dict[str, Any]], first: bool) -> dict[str, Any]:
    """One touchdown's fixed bytes (PIRs, sections, test records) and where to patch.
    The DTR markers (after each section's tests) and PRRs go in between the chunks."""
    import numpy as np

    from pipeline.stdf.codec import encode_record
    parts = [b"".join(encode_record("PIR", {"HEAD_NUM": HEAD, "SITE_NUM": s}) for s in SITES)]
    cuts, fslot, ftr = [0], [], []
    pos = len(parts[0])
    for b, block in enumerate(BLOCKS):
        head = (encode_record("EPS") if b else b"") + encode_record("BPS", {"SEQ_NAME": block[0]})
        parts.append(head)
        pos += len(head)
        for t in (x for x in tests if x["block"] == b):
            for s in range(len(SITES)):
                v = _record_values(t, s, first and s == 0)
                raw = encode_record(t["kind"], v)
                if t["kind"] == "PTR":
                    fslot.append((pos + _offset("PTR", "RESULT", v), t["index"], s, 1))
                elif t["kind"] == "MPR":
                    o = pos + _offset("MPR", "RTN_RSLT", v)
                    fslot.extend((o + 4 * e, t["index"], s, 0) for e in range(t["pins"]))
                else:
                    ftr.append((pos + _offset("FTR", "TEST_FLG", v),
                                pos + _offset("FTR", "NUM_FAIL", v), b, s, t["index"]))
                parts.append(raw)
                pos += len(raw)
        cuts.append(pos)
    parts.append(encode_record("EPS"))
    cuts.append(pos + 4)
    tpl = np.frombuffer(b"".join(parts), dtype=np.uint8).copy()
    fs = np.array(fslot, dtype=np.int64).reshape(-1, 4)
    got = np.stack([tpl[fs[:, 0] + i] for i in range(4)], axis=1).view("<f4")[:, 0]
    assert (got == np.float32(SENTINEL)).all(), "template RESULT offsets disagree"
    return {"tpl": tpl, "cuts": cuts, "fslot": fs, "ftr": np.array(ftr, np.int64).reshape(-1, 5)}


def _fill(tp: dict[str, Any], tests: list[dict[str, Any]], n: int, rng: Any) -> tuple:
    """`n` touchdowns from one template: (bytes (n, L), failed (n, sites, blocks))."""
    import numpy as np
    arr = np.tile(tp["tpl"], (n, 1))
    fs, ftr = tp["fslot"], tp["ftr"]
    mean = np.array([t["mean"] for t in tests])[fs[:, 1]]
    sigma = np.array([t["sigma"] for t in tests])[fs[:, 1]]
    site_shift = 0.15 * sigma * (fs[:, 2] - 1.5)
    vals = (mean + site_shift + sigma * rng.standard_normal((n, len(fs)))).astype("<f4")
    idx = (fs[:, 0, None] + np.arange(4)).ravel()
    arr[:, idx] = vals.view(np.uint8).reshape(n, -1)
    ptr = fs[:, 3] == 1
    lo = np.array([t["lo"] for t in tests], "<f4")[fs[ptr, 1]]
    hi = np.array([t["hi"] for t in tests], "<f4")[fs[ptr, 1]]
    v = vals[:, ptr]
    above, below = v > hi, v < lo
    arr[:, fs[ptr, 0] - 2] = np.where(above | below, 0x80, 0)  # TEST_FLG bit 7: failed
    arr[:, fs[ptr, 0] - 1] = np.where(above, 0x08, 0) | np.where(below, 0x10, 0)
    ftr_fail = rng.random((n, len(ftr))) < FTR_FAIL_P
    arr[:, ftr[:, 0]] = np.where(ftr_fail, 0x80, 0)
    arr[:, ftr[:, 1]] = np.where(ftr_fail, rng.integers(1, 200, (n, len(ftr))), 0)
    blocks = np.array([t["block"] for t in tests])
    nb = len(BLOCKS)
    group = np.r_[fs[ptr, 2] * nb + blocks[fs[ptr, 1]], ftr[:, 3] * nb + ftr[:, 2]]
    bad = np.c_[above | below, ftr_fail]
    failed = np.zeros((n, len(SITES) * nb), dtype=bool)
    for g in np.unique(group):
        failed[:, g] = bad[:, group == g].any(axis=1)
    test_fails = np.zeros((len(SITES), len(tests)), dtype=np.int64)
    np.add.at(test_fails, (fs[ptr, 2], fs[ptr, 1]), (above | below).sum(axis=0))
    np.add.at(test_fails, (ftr[:, 3], ftr[:, 4]), ftr_fail.sum(axis=0))
    return arr, failed.reshape(n, len(SITES), nb), test_fails


def _timing(n: int, rng: Any) -> tuple:
    """Per (touchdown, block, site) start/end in us from the touchdown's start, and TEST_T
    in ms per (touchdown, site). A shared-instrument block runs site after site."""
    import numpy as np
    nb, ns = len(BLOCKS), len(SITES)
    mean = np.array([b[4] for b in BLOCKS], dtype=float)
    dur = np.maximum(mean[None, :, None] * (1 + 0.03 * rng.standard_normal((n, nb, ns))), 1)
    dur = dur.round().astype(np.int64)
    start = np.zeros((n, nb, ns), np.int64)
    end = np.zeros((n, nb, ns), np.int64)
    t = np.full(n, GAP_US, np.int64)
    for b, block in enumerate(BLOCKS):
        if block[5]:
            for s in range(ns):
                start[:, b, s] = t
                end[:, b, s] = t = t + dur[:, b, s]
        else:
            start[:, b, :] = t[:, None]
            end[:, b, :] = start[:, b, :] + dur[:, b, :]
        t = end[:, b, :].max(axis=1) + GAP_US
    test_t = (end[:, -1, :] + OVERHEAD_US) // 1000
    return start, end, test_t, t


def _dies(n_parts: int) -> list[tuple[int, int]]:
    """Die coordinates of a round wafer, row by row (serpentine), enough for n_parts."""
    r = 1
    while 3.1 * r * r < n_parts * 1.02:
        r += 1
    out: list[tuple[int, int]] = []
    for y in range(-r, r + 1):
        row = [x for x in range(-r, r + 1) if x * x + y * y <= r * r]
        out.extend((x, y) for x in (row if (y + r) % 2 == 0 else row[::-1]))
    return out[:n_parts]


# -- generator: the file -------------------------------------------------------------
def _header() -> bytes:
    from pipeline.stdf.codec import encode_record as e
    mir = {"SETUP_T": START_T - 600, "START_T": START_T, "STAT_NUM": 1, "MODE_COD": "P",
           "RTST_COD": " ", "PROT_COD": " ", "BURN_TIM": 65535, "CMOD_COD": " ",
           "LOT_ID": "BL0001", "PART_TYP": "BENCH-DEV", "NODE_NAM": "bench-node-01",
           "TSTR_TYP": "GENERIC-ATE", "JOB_NAM": "bench_ws1", "JOB_REV": "r1.0",
           "SBLOT_ID": "", "OPER_NAM": "op01", "EXEC_TYP": "bench-exec", "EXEC_VER": "1.0",
           "TEST_COD": "WS1", "TST_TEMP": "25"}
    out = [e("FAR", {"CPU_TYPE": 2, "STDF_VER": 4}),
           e("ATR", {"MOD_TIM": START_T - 60,
                     "CMD_LINE": f"bench_ingest.py generator v{GENERATOR_VERSION}"}),
           e("MIR", mir),
           e("SDR", {"HEAD_NUM": HEAD, "SITE_GRP": 1, "SITE_CNT": len(SITES),
                     "SITE_NUM": list(SITES), "HAND_TYP": "prober", "HAND_ID": "PRB-01",
                     "CARD_TYP": "probecard", "CARD_ID": "PC-4X1-001"})]
    for s, site in enumerate(SITES):
        for p in range(PINS_PER_SITE):
            i = s * PINS_PER_SITE + p + 1
            out.append(e("PMR", {"PMR_INDX": i, "CHAN_TYP": 0, "CHAN_NAM": f"ch{i:03d}",
                                 "PHY_NAM": f"P{p:02d}", "LOG_NAM": f"IO{p:02d}",
                                 "HEAD_NUM": HEAD, "SITE_NUM": site}))
    out.append(e("WIR", {"HEAD_NUM": HEAD, "SITE_GRP": 255, "START_T": START_T,
                         "WAFER_ID": "BL0001-W01"}))
    return b"".join(out)


def _prr_maker() -> Any:
    """PRR bytes from the fields that change; checked once against encode_record."""
    from pipeline.stdf.codec import encode_record
    fixed = struct.Struct("<HBBBBBHHHhhI")  # header, HEAD_NUM .. TEST_T (STDF V4, PRR 5/20)

    def prr(site: int, flg: int, ntest: int, hb: int, sb: int, x: int, y: int, tt: int,
            pid: str) -> bytes:
        raw = pid.encode("latin-1")
        body = bytes([len(raw)]) + raw + b"\x00\x00"  # PART_ID, empty PART_TXT, PART_FIX
        return fixed.pack(17 + len(body), 5, 20, HEAD, site, flg, ntest, hb, sb, x, y,
                          tt) + body

    want = encode_record("PRR", {"HEAD_NUM": HEAD, "SITE_NUM": 3, "PART_FLG": 8,
                                 "NUM_TEST": 380, "HARD_BIN": 2, "SOFT_BIN": 12, "X_COORD": -5,
                                 "Y_COORD": 7, "TEST_T": 250, "PART_ID": "123",
                                 "PART_TXT": "", "PART_FIX": b""})
    assert prr(3, 8, 380, 2, 12, -5, 7, 250, "123") == want, "PRR template disagrees"
    return prr


def _dtr(b: int, site: int, start: int, end: int) -> bytes:
    text = f"TT block={BLOCKS[b][0]} site={site} start_us={start} end_us={end}".encode()
    return struct.pack("<HBBB", len(text) + 1, 50, 30, len(text)) + text


def _summaries(tests: list[dict[str, Any]], test_fails: Any, hbin: Any, sbin: Any,
               finish: int) -> bytes:
    import numpy as np

    from pipeline.stdf.codec import encode_record as e
    n_td = hbin.shape[0]
    n_parts = hbin.size
    good = int((hbin == 1).sum())
    out = [e("WRR", {"HEAD_NUM": HEAD, "SITE_GRP": 255, "FINISH_T": finish,
                     "PART_CNT": n_parts, "RTST_CNT": 0, "ABRT_CNT": 0, "GOOD_CNT": good,
                     "FUNC_CNT": n_parts, "WAFER_ID": "BL0001-W01"})]
    per_block = {b: sum(1 for t in tests if t["block"] == b) for b in range(len(BLOCKS))}
    for t in tests:
        tim = BLOCKS[t["block"]][4] / 1e6 / per_block[t["block"]]
        for s, site in [*enumerate(SITES), (None, 255)]:
            fc = int(test_fails[:, t["index"]].sum() if s is None else test_fails[s, t["index"]])
            out.append(e("TSR", {
                "HEAD_NUM": 255 if s is None else HEAD, "SITE_NUM": 0 if s is None else site,
                "TEST_TYP": t["kind"][0], "TEST_NUM": t["num"],
                "EXEC_CNT": n_parts if s is None else n_td, "FAIL_CNT": fc, "ALRM_CNT": 0,
                "TEST_NAM": t["name"], "SEQ_NAME": BLOCKS[t["block"]][0], "TEST_LBL": "",
                "OPT_FLAG": 0x33, "TEST_TIM": tim, "TEST_MIN": 0.0, "TEST_MAX": 0.0,
                "TST_SUMS": 0.0, "TST_SQRS": 0.0}))
    for rec, bins, names in (("HBR", hbin, HBIN_NAMES), ("SBR", sbin, None)):
        p = rec[0]
        for s, site in [*enumerate(SITES), (None, 255)]:
            col = bins.ravel() if s is None else bins[:, s]
            for num, cnt in zip(*np.unique(col, return_counts=True), strict=True):
                nm = names[int(num)] if names else (
                    "PASS" if num == 1 else f"FAIL_{BLOCKS[int(num) - 10][0]}")
                out.append(e(rec, {"HEAD_NUM": 255 if s is None else HEAD,
                                   "SITE_NUM": 0 if s is None else site,
                                   f"{p}BIN_NUM": int(num), f"{p}BIN_CNT": int(cnt),
                                   f"{p}BIN_PF": "P" if num == 1 else "F",
                                   f"{p}BIN_NAM": nm}))
    for s, site in [*enumerate(SITES), (None, 255)]:
        col = hbin.ravel() if s is None else hbin[:, s]
        out.append(e("PCR", {"HEAD_NUM": 255 if s is None else HEAD,
                             "SITE_NUM": 0 if s is None else site, "PART_CNT": col.size,
                             "RTST_CNT": 0, "ABRT_CNT": 0, "GOOD_CNT": int((col == 1).sum()),
                             "FUNC_CNT": col.size}))
    out.append(e("MRR", {"FINISH_T": finish, "DISP_COD": " ", "USR_DESC": "", "EXC_DESC": ""}))
    return b"".join(out)


def generate(path: Path) -> dict[str, Any]:
    """Write the benchmark file (atomically) and return its description."""
    import numpy as np
    rng = np.random.default_rng(SEED)
    tests = _program(rng)
    for i, t in enumerate(tests):
        t["index"] = i
    tp0, tp = _template(tests, first=True), _template(tests, first=False)
    head = _header()
    varying = sum(len(_dtr(b, 1, blk[4], 2 * blk[4])) for b, blk in enumerate(BLOCKS))
    per_td = len(tp["tpl"]) + len(SITES) * (varying + 28)  # + DTR markers and PRRs
    n_td = max(2, round((TARGET_BYTES - len(head)) / per_td))
    a0, f0, c0 = _fill(tp0, tests, 1, rng)
    a1, f1, c1 = _fill(tp, tests, n_td - 1, rng)
    failed, test_fails = np.r_[f0, f1], c0 + c1
    start, end, test_t, td_us = _timing(n_td, rng)
    any_fail = failed.any(axis=2)
    first_bad = failed.argmax(axis=2)
    hbin = np.where(any_fail, np.array(HBIN_OF_BLOCK)[first_bad], 1)
    sbin = np.where(any_fail, 10 + first_bad, 1)
    dies = _dies(n_td * len(SITES))
    prr = _prr_maker()
    finish = START_T + int((td_us.sum() + INDEX_US * n_td) // 1_000_000)
    tail = _summaries(tests, test_fails, hbin, sbin, finish)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_suffix(".tmp")
    with open(tmp, "wb") as f:
        f.write(head)
        for td in range(n_td):
            row, cuts = (a0[0], tp0["cuts"]) if td == 0 else (a1[td - 1], tp["cuts"])
            mv = memoryview(row)
            for b in range(len(BLOCKS)):
                f.write(mv[cuts[b]:cuts[b + 1]])
                f.write(b"".join(_dtr(b, site, int(start[td, b, s]), int(end[td, b, s]))
                                 for s, site in enumerate(SITES)))
            f.write(mv[cuts[-2]:cuts[-1]])
            f.write(b"".join(prr(site, 8 if any_fail[td, s] else 0, len(tests),
                                 int(hbin[td, s]), int(sbin[td, s]), *dies[td * 4 + s],
                                 int(test_t[td, s]), str(td * len(SITES) + s + 1))
                             for s, site in enumerate(SITES)))
        f.write(tail)
    os.replace(tmp, path)
    recs_td = {"PIR": 4, "BPS": 10, "EPS": 10, "DTR": 40, "PRR": 4}
    for k in ("PTR", "FTR", "MPR"):
        recs_td[k] = sum(1 for t in tests if t["kind"] == k) * len(SITES)
    counts = {k: v * n_td for k, v in recs_td.items()}
    counts["header"] = 5 + len(SITES) * PINS_PER_SITE
    counts["summary"] = _count(tail)
    return {"generator_version": GENERATOR_VERSION, "bytes": path.stat().st_size,
            "records": sum(counts.values()), "counts": counts, "touchdowns": n_td,
            "parts": n_td * len(SITES), "yield_pct": round(100 * float((hbin == 1).mean()), 2),
            "seed": SEED}


def _count(data: bytes) -> int:
    n, pos = 0, 0
    while pos + 4 <= len(data):
        pos += 4 + struct.unpack_from("<H", data, pos)[0]
        n += 1
    return n


def ensure_file(regen: bool) -> dict[str, Any]:
    """The cached file's description; generates it in a child process when needed (this
    process stays small, see the module note on RSS)."""
    try:
        meta = json.loads(META.read_text())
        fresh = (meta.get("generator_version") == GENERATOR_VERSION
                 and DATA.stat().st_size == meta.get("bytes"))
    except (OSError, ValueError):
        fresh = False
    if fresh and not regen:
        return meta
    OUT.mkdir(parents=True, exist_ok=True)
    print(f"generating {DATA.name} (generator v{GENERATOR_VERSION}) ...", flush=True)
    t0 = time.perf_counter()
    subprocess.run([sys.executable, __file__, "--generate-only"], check=True)
    print(f"  generated in {time.perf_counter() - t0:.1f} s", flush=True)
    return json.loads(META.read_text())


# -- baseline: the decoder one writes first -------------------------------------------
def baseline_decode(data: bytes) -> tuple[int, dict[str, list[dict[str, Any]]]]:
    """Walk the records with ``struct.unpack_from`` on the header; decode every field of
    PTR/FTR/MPR/PIR/PRR/DTR into a dict, field by field from the catalogue; skip the rest
    by length. Straightforward, not deliberately slowed."""
    from pipeline.stdf.records import BY_NAME
    endian = "<" if data[:2] == b"\x02\x00" else ">"
    wanted = {BY_NAME[n].key: BY_NAME[n] for n in ("PTR", "FTR", "MPR", "PIR", "PRR", "DTR")}
    out: dict[str, list[dict[str, Any]]] = {r.name: [] for r in wanted.values()}
    pos, n, records = 0, len(data), 0
    while pos + 4 <= n:
        ln, typ, sub = struct.unpack_from(endian + "HBB", data, pos)
        end = pos + 4 + ln
        if end > n:
            break
        rec = wanted.get((typ, sub))
        if rec is not None:
            out[rec.name].append(_baseline_fields(rec, data, pos + 4, end, endian))
        records += 1
        pos = end
    return records, out


_CODES = {"U1": "B", "U2": "H", "U4": "I", "I1": "b", "I2": "h", "I4": "i", "R4": "f",
          "R8": "d", "B1": "B"}
_SIZES = {"B": 1, "H": 2, "I": 4, "b": 1, "h": 2, "i": 4, "f": 4, "d": 8}


def _baseline_fields(rec: Any, data: bytes, pos: int, end: int, e: str) -> dict[str, Any]:
    d: dict[str, Any] = {}
    for f in rec.fields:
        if pos >= end:
            break  # omitted trailing fields
        t = f.type
        if f.is_array:
            k = d.get(f.count, 0)
            if t == "N1":
                d[f.name] = [(data[pos + i // 2] >> (4 * (i % 2))) & 0x0F for i in range(k)]
                pos += (k + 1) // 2
            else:
                c = _CODES[t]
                vals = []
                for _ in range(k):
                    vals.append(struct.unpack_from(e + c, data, pos)[0])
                    pos += _SIZES[c]
                d[f.name] = vals
        elif t in _CODES:
            c = _CODES[t]
            d[f.name] = struct.unpack_from(e + c, data, pos)[0]
            pos += _SIZES[c]
        elif t == "C1":
            d[f.name] = chr(data[pos])
            pos += 1
        elif t in ("Cn", "Bn"):
            ln = data[pos]
            raw = data[pos + 1:pos + 1 + ln]
            d[f.name] = raw.decode("latin-1") if t == "Cn" else raw
            pos += 1 + ln
        elif t == "Dn":
            nbytes = (struct.unpack_from(e + "H", data, pos)[0] + 7) // 8
            d[f.name] = data[pos + 2:pos + 2 + nbytes]
            pos += 2 + nbytes
    return d


# -- measurements --------------------------------------------------------------------
def _tandem_cmd() -> list[str] | None:
    exe = Path(sys.executable).with_name("tandem")
    cmd = [str(exe)] if exe.exists() else ([w] if (w := shutil.which("tandem")) else None)
    if cmd is None:
        return None
    try:
        help_ = subprocess.run([*cmd, "ingest", "--help"], capture_output=True, text=True,
                               timeout=60)
    except (OSError, subprocess.TimeoutExpired):
        return None
    return cmd if help_.returncode == 0 and "--store" in help_.stdout else None


def run_tandem(cmd: list[str], runs: int) -> dict[str, Any]:
    """Whole-process ingest runs, each on a fresh store: wall seconds and peak RSS."""
    times, rss, reports = [], [], []
    for _ in range(runs):
        store = Path(tempfile.mkdtemp(prefix="tandem-bench-"))
        out_f = tempfile.TemporaryFile()
        err_f = tempfile.TemporaryFile()
        try:
            t0 = time.perf_counter()
            p = subprocess.Popen([*cmd, "ingest", str(DATA), "--store", str(store / "s"),
                                  "--json"], stdout=out_f, stderr=err_f)
            _, status, usage = os.wait4(p.pid, 0)
            times.append(time.perf_counter() - t0)
            p.returncode = os.waitstatus_to_exitcode(status)
            rss.append(usage.ru_maxrss / 1024)  # kB on Linux
            out_f.seek(0)
            err_f.seek(0)
            text = out_f.read().decode(errors="replace")
            if p.returncode != 0:
                tail = err_f.read().decode(errors="replace").strip().splitlines()[-3:]
                raise RuntimeError(f"tandem ingest exited {p.returncode}: {' | '.join(tail)}")
            reports.append(json.loads(text))
        finally:
            out_f.close()
            err_f.close()
            shutil.rmtree(store, ignore_errors=True)
    return {"seconds": times, "rss_mb": rss, "report": reports[-1]}


def run_decoder(data: bytes, profile: bool) -> dict[str, Any]:
    """The in-process columnar Decoder alone: 8 MB slices, close, no store."""
    from pipeline.stdf.decoder import Decoder

    def go() -> Any:
        d = Decoder()
        rows = 0
        mv = memoryview(data)
        for i in range(0, len(data), SLICE):
            rows += sum(t.num_rows for _, t in d.feed(mv[i:i + SLICE]))
        rows += sum(t.num_rows for _, t in d.close())
        return d, rows

    t0 = time.perf_counter()
    d, rows = go()
    sec = time.perf_counter() - t0
    if profile:
        import cProfile
        import pstats
        prof = cProfile.Profile()
        prof.runcall(go)
        print("\nDecoder profile (top 10 by own time):")
        pstats.Stats(prof).sort_stats("tottime").print_stats(10)
    return {"seconds": sec, "records": d.records, "rows": rows, "damage": d.damage}


def run_baseline(data: bytes, limit_mb: float | None) -> dict[str, Any]:
    part = data
    if limit_mb:
        part = data[:int(limit_mb * 1e6)]
    t0 = time.perf_counter()
    records, out = baseline_decode(part)
    sec = time.perf_counter() - t0
    decoded = sum(len(v) for v in out.values())
    del out
    return {"seconds": sec, "bytes": len(part), "records": records, "decoded": decoded,
            "scope": "whole file" if part is data else f"first {len(part) / 1e6:.0f} MB"}


def _self_rss_mb() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024


# -- report --------------------------------------------------------------------------
def report(meta: dict[str, Any], tandem: dict[str, Any] | None, dec: dict[str, Any],
           base: dict[str, Any], floor_mb: float) -> dict[str, Any]:
    mb = meta["bytes"] / 1e6
    base_mbs = base["bytes"] / 1e6 / base["seconds"]
    res: dict[str, Any] = {
        "file": str(DATA.relative_to(OUT.parent.parent)), "file_mb": round(mb, 2),
        "records": meta["records"], "parts": meta["parts"],
        "baseline_mb_s": round(base_mbs, 2), "baseline_scope": base["scope"],
        "baseline_s": round(base["seconds"], 3),
        "decoder_only_mb_s": round(mb / dec["seconds"], 2),
        "decoder_only_s": round(dec["seconds"], 3),
        "decoder_only_ratio": round(mb / dec["seconds"] / base_mbs, 2),
        "python": sys.version.split()[0], "cpus": os.cpu_count(),
    }
    lines = [f"file           {mb:8.1f} MB  {meta['records']:,} records  {meta['parts']:,} parts",
             f"baseline       {base_mbs:8.1f} MB/s  ({base['seconds']:.2f} s, {base['scope']})",
             f"decoder only   {mb / dec['seconds']:8.1f} MB/s  ({dec['seconds']:.2f} s, "
             f"x{res['decoder_only_ratio']:.1f} baseline)"]
    if tandem:
        secs = tandem["seconds"]
        best, med = min(secs), statistics.median(secs)
        peak = max(tandem["rss_mb"])
        ratio = mb / med / base_mbs
        res.update({
            "tandem_s": [round(s, 3) for s in secs], "tandem_mb_s_best": round(mb / best, 2),
            "tandem_mb_s_median": round(mb / med, 2), "tandem_mb_s": round(mb / med, 2),
            "ratio": round(ratio, 2), "ratio_best": round(mb / best / base_mbs, 2),
            "peak_rss_mb": round(peak, 1), "rss_floor_mb": round(floor_mb, 1),
            "tandem_records": sum(i.get("records", 0) for i in tandem["report"]["ingested"]),
            "tandem_parts": sum(i.get("parts", 0) for i in tandem["report"]["ingested"]),
        })
        res["checks"] = {"ratio>=10": ratio >= RATIO_TARGET, "rss<1500MB": peak < RSS_TARGET_MB}
        lines += [f"tandem ingest  {mb / med:8.1f} MB/s  median of {len(secs)} "
                  f"(best {mb / best:.1f} MB/s; {', '.join(f'{s:.2f}' for s in secs)} s)",
                  f"ratio          {ratio:8.1f} x baseline (median; best {res['ratio_best']:.1f})",
                  f"peak RSS       {peak:8.0f} MB  (child max; floor {floor_mb:.0f} MB)"]
        for name, ok in res["checks"].items():
            lines.append(f"  {name:14s} {'PASS' if ok else 'FAIL'}")
        if res["tandem_records"] != meta["records"]:
            lines.append(f"  note: tandem reported {res['tandem_records']:,} records, "
                         f"the file has {meta['records']:,}")
    else:
        res["checks"] = {"ratio>=10": None, "rss<1500MB": None}
        lines.append("tandem ingest  not available (no working `tandem ingest`): SKIPPED")
    print("\n".join(lines))
    (OUT / "last.json").write_text(json.dumps(res, indent=2) + "\n")
    return res


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--runs", type=int, default=3, help="tandem ingest runs (default 3)")
    ap.add_argument("--baseline-mb", type=float, default=None,
                    help="time the baseline on the first N MB only (default: whole file)")
    ap.add_argument("--regenerate", action="store_true", help="rebuild the cached file")
    ap.add_argument("--profile", action="store_true", help="cProfile the Decoder-only run")
    ap.add_argument("--generate-only", action="store_true", help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.generate_only:
        t0 = time.perf_counter()
        meta = generate(DATA)
        meta["generate_s"] = round(time.perf_counter() - t0, 2)
        META.write_text(json.dumps(meta, indent=2) + "\n")
        return 0
    meta = ensure_file(args.regenerate)
    cmd = _tandem_cmd()
    floor_mb = _self_rss_mb()
    tandem = None
    if cmd is not None:
        try:
            tandem = run_tandem(cmd, args.runs)
        except (RuntimeError, ValueError) as exc:
            print(f"tandem ingest failed: {exc}")
    data = DATA.read_bytes()
    dec = run_decoder(data, args.profile)
    if dec["records"] != meta["records"]:
        print(f"note: Decoder counted {dec['records']:,} records, the file has "
              f"{meta['records']:,} (damage: {dec['damage']})")
    base = run_baseline(data, args.baseline_mb)
    report(meta, tandem, dec, base, floor_mb)
    return 0


if __name__ == "__main__":
    sys.path.insert(0, str(Path(__file__).resolve().parent.parent))
    sys.exit(main())
