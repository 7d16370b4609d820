"""Invented 4-site wafer-sort STDF V4 logs of ~100 MB for the ingest benchmark.

Two shapes (``PROFILES``), each in either byte order:

- ``standard``: the benchmark file of the first releases (2 M records per 100 MB): ten
  blocks, half of the later PTR/MPRs cut after the results, the rest written in full.
- ``dense``: a production-like dense log (about 5 M records per 100 MB): eleven blocks,
  most later PTRs cut right after ``RESULT`` (16-byte records), a few written in full,
  some of those with blank ``UNITS`` and format strings (the standard's missing value:
  the first record's defaults apply), BPS/EPS around every block, a DTR marker per block
  and site.

How a file is made: one touchdown is encoded record by record with ``encode_record``
(twice: the file's first, whose first PTR/MPR/FTR of each test number carries name and
defaults, and a later one); the touchdowns are numpy copies of those templates with only
the changing bytes patched (results, flags), plus the records whose length varies (DTR
markers, PRRs). The device, lot and program are invented.
"""

from __future__ import annotations

import json
import os
import struct
from dataclasses import dataclass
from pathlib import Path
from typing import Any

# Block rows: name, PTRs, FTRs, MPRs per part, mean time (us), shared instrument (sites
# run that block one after another), units, RES_SCAL, result mean, sigma.
Block = tuple[str, int, int, int, int, bool, str, int, float, float]

STANDARD_BLOCKS: list[Block] = [
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
DENSE_BLOCKS: list[Block] = [
    ("contact", 8, 0, 0, 1200, False, "V", 0, -0.55, 0.02),
    ("continuity", 12, 0, 0, 1800, False, "V", 0, -0.6, 0.02),
    ("leakage", 24, 0, 1, 7000, False, "A", 9, 2e-9, 3e-10),
    ("dc_param", 30, 0, 1, 15000, False, "V", 0, 1.2, 0.01),
    ("idd_static", 14, 0, 0, 5000, False, "A", 3, 0.012, 0.0008),
    ("scan_core0", 4, 2, 0, 30000, False, "V", 0, 0.9, 0.005),
    ("scan_core1", 4, 2, 0, 30000, False, "V", 0, 0.9, 0.005),
    ("mbist_sram", 6, 2, 0, 35000, False, "V", 0, 0.8, 0.004),
    ("pll_lock", 18, 0, 0, 9000, False, "Hz", -6, 1.6e9, 2e5),
    ("adc_lin", 30, 0, 1, 20000, False, "LSB", 0, 0.0, 0.12),
    ("rf_tx", 24, 0, 0, 6000, True, "dBm", 0, 4.0, 0.15),
]


@dataclass(frozen=True)
class Profile:
    name: str
    version: int  # bump when the bytes of this profile change
    blocks: list[Block]
    hbin_of_block: list[int]
    trunc_p: float  # later PTR/MPRs cut after the results
    blank_p: float  # later PTR/MPRs in full but with blank UNITS and formats
    seed: int
    target_bytes: int = 100_000_000

    def stem(self, endian: str) -> str:
        # The standard little-endian file keeps the name of the first releases.
        base = "bench_4site" if self.name == "standard" else f"bench_{self.name}"
        return base + ("" if endian == "<" else "_be")


PROFILES = {
    "standard": Profile("standard", 1, STANDARD_BLOCKS, [2, 2, 2, 2, 3, 3, 3, 4, 4, 4],
                        0.5, 0.0, 20240611),
    "dense": Profile("dense", 1, DENSE_BLOCKS, [2, 2, 2, 2, 2, 3, 3, 3, 4, 4, 4],
                     0.965, 0.02, 20240612),
}
HEAD, SITES = 1, (1, 2, 3, 4)
HBIN_NAMES = {1: "PASS", 2: "FAIL_DC", 3: "FAIL_DIGITAL", 4: "FAIL_ANALOG"}
LIMIT_SIGMA, MPR_LIMIT_SIGMA, FTR_FAIL_P = 3.6, 8.0, 2e-4
PINS_PER_SITE, INDEX_US, GAP_US, OVERHEAD_US = 32, 350_000, 25, 400
START_T = 1_700_000_000  # seconds, naive local time of an invented test floor
SENTINEL = 1234.5  # placeholder RESULT in the templates, checked before patching


# -- the program ------------------------------------------------------------------------
def _program(p: Profile, rng: Any) -> list[dict[str, Any]]:
    """One dict per test, in program order (block by block)."""
    tests: list[dict[str, Any]] = []
    for b, (name, n_ptr, n_ftr, n_mpr, _us, _sh, unit, scale, mean, sigma) in \
            enumerate(p.blocks):
        kinds = ["PTR"] * n_ptr + ["FTR"] * n_ftr + ["MPR"] * n_mpr
        kinds = [kinds[i] for i in rng.permutation(len(kinds))]
        for i, kind in enumerate(kinds):
            m = mean + sigma * float(rng.normal(0, 2))
            k = 1 if kind != "MPR" else int(rng.integers(8, 17))
            width = (MPR_LIMIT_SIGMA if kind == "MPR" else LIMIT_SIGMA) * sigma
            r = rng.random()
            later = "trunc" if r < p.trunc_p else "blank" if r < p.trunc_p + p.blank_p \
                else "full"
            tests.append({
                "num": (b + 1) * 1000 + i, "kind": kind, "block": b, "unit": unit,
                "scale": scale, "mean": m, "sigma": sigma, "lo": m - width, "hi": m + width,
                "name": f"{name}_{kind.lower()}_{i:03d}", "pins": k, "later": later,
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
    # "blank": C*n of length 0, the standard's missing value; the first record's apply.
    unit, fmt = ("", "") if not first and t["later"] == "blank" else (t["unit"], "%9.4f")
    v.update(UNITS=unit, C_RESFMT=fmt, C_LLMFMT=fmt, C_HLMFMT=fmt, LO_SPEC=0.0, HI_SPEC=0.0)
    return v


def _offset(name: str, field: str, values: dict[str, Any]) -> int:
    """Byte offset of `field` from the record header, from the catalogue (fixed fields and
    counted arrays before it only)."""
    from pipeline.read.stdf.records import BY_NAME, FIXED_SIZE
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


def _template(p: Profile, tests: list[dict[str, Any]], first: bool, e: str) -> dict[str, Any]:
    """One touchdown's fixed bytes (PIRs, sections, test records) and where to patch.
    The DTR markers (after each section's tests) and PRRs go in between the chunks."""
    import numpy as np

    from pipeline.read.stdf.codec import encode_record
    parts = [b"".join(encode_record("PIR", {"HEAD_NUM": HEAD, "SITE_NUM": s}, e)
                      for s in SITES)]
    cuts, fslot, ftr = [0], [], []
    pos = len(parts[0])
    for b, block in enumerate(p.blocks):
        head = ((encode_record("EPS", None, e) if b else b"")
                + encode_record("BPS", {"SEQ_NAME": block[0]}, e))
        parts.append(head)
        pos += len(head)
        for t in (x for x in tests if x["block"] == b):
            for s in range(len(SITES)):
                v = _record_values(t, s, first and s == 0)
                raw = encode_record(t["kind"], v, e)
                if t["kind"] == "PTR":
                    fslot.append((pos + _offset("PTR", "RESULT", v), t["index"], s, 1))
                elif t["kind"] == "MPR":
                    o = pos + _offset("MPR", "RTN_RSLT", v)
                    fslot.extend((o + 4 * k, t["index"], s, 0) for k in range(t["pins"]))
                else:
                    ftr.append((pos + _offset("FTR", "TEST_FLG", v),
                                pos + _offset("FTR", "NUM_FAIL", v), b, s, t["index"]))
                parts.append(raw)
                pos += len(raw)
        cuts.append(pos)
    parts.append(encode_record("EPS", None, e))
    cuts.append(pos + 4)
    tpl = np.frombuffer(b"".join(parts), dtype=np.uint8).copy()
    fs = np.array(fslot, dtype=np.int64).reshape(-1, 4)
    got = np.stack([tpl[fs[:, 0] + i] for i in range(4)], axis=1).view(e + "f4")[:, 0]
    assert (got == np.float32(SENTINEL)).all(), "template RESULT offsets disagree"
    return {"tpl": tpl, "cuts": cuts, "fslot": fs, "ftr": np.array(ftr, np.int64).reshape(-1, 5)}


def _fill(p: Profile, tp: dict[str, Any], tests: list[dict[str, Any]], n: int, rng: Any,
          e: str) -> tuple:
    """`n` touchdowns from one template: (bytes (n, L), failed (n, sites, blocks))."""
    import numpy as np
    arr = np.tile(tp["tpl"], (n, 1))
    fs, ftr = tp["fslot"], tp["ftr"]
    mean = np.array([t["mean"] for t in tests])[fs[:, 1]]
    sigma = np.array([t["sigma"] for t in tests])[fs[:, 1]]
    site_shift = 0.15 * sigma * (fs[:, 2] - 1.5)
    vals = (mean + site_shift + sigma * rng.standard_normal((n, len(fs)))).astype("<f4")
    idx = (fs[:, 0, None] + np.arange(4)).ravel()
    arr[:, idx] = vals.astype(e + "f4").view(np.uint8).reshape(n, -1)
    ptr = fs[:, 3] == 1
    lo = np.array([t["lo"] for t in tests], "<f4")[fs[ptr, 1]]
    hi = np.array([t["hi"] for t in tests], "<f4")[fs[ptr, 1]]
    v = vals[:, ptr]
    above, below = v > hi, v < lo
    arr[:, fs[ptr, 0] - 2] = np.where(above | below, 0x80, 0)  # TEST_FLG bit 7: failed
    arr[:, fs[ptr, 0] - 1] = np.where(above, 0x08, 0) | np.where(below, 0x10, 0)
    ftr_fail = rng.random((n, len(ftr))) < FTR_FAIL_P
    arr[:, ftr[:, 0]] = np.where(ftr_fail, 0x80, 0)
    num_fail = np.where(ftr_fail, rng.integers(1, 200, (n, len(ftr))), 0)
    arr[:, ftr[:, 1] + (3 if e == ">" else 0)] = num_fail  # low byte of NUM_FAIL U*4
    blocks = np.array([t["block"] for t in tests])
    nb = len(p.blocks)
    group = np.r_[fs[ptr, 2] * nb + blocks[fs[ptr, 1]], ftr[:, 3] * nb + ftr[:, 2]]
    bad = np.c_[above | below, ftr_fail]
    failed = np.zeros((n, len(SITES) * nb), dtype=bool)
    for g in np.unique(group):
        failed[:, g] = bad[:, group == g].any(axis=1)
    test_fails = np.zeros((len(SITES), len(tests)), dtype=np.int64)
    np.add.at(test_fails, (fs[ptr, 2], fs[ptr, 1]), (above | below).sum(axis=0))
    np.add.at(test_fails, (ftr[:, 3], ftr[:, 4]), ftr_fail.sum(axis=0))
    return arr, failed.reshape(n, len(SITES), nb), test_fails


def _timing(p: Profile, n: int, rng: Any) -> tuple:
    """Per (touchdown, block, site) start/end in us from the touchdown's start, and TEST_T
    in ms per (touchdown, site). A shared-instrument block runs site after site."""
    import numpy as np
    nb, ns = len(p.blocks), len(SITES)
    mean = np.array([b[4] for b in p.blocks], dtype=float)
    dur = np.maximum(mean[None, :, None] * (1 + 0.03 * rng.standard_normal((n, nb, ns))), 1)
    dur = dur.round().astype(np.int64)
    start = np.zeros((n, nb, ns), np.int64)
    end = np.zeros((n, nb, ns), np.int64)
    t = np.full(n, GAP_US, np.int64)
    for b, block in enumerate(p.blocks):
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


# -- the file ---------------------------------------------------------------------------
def _header(p: Profile, e: str) -> bytes:
    from pipeline.read.stdf.codec import encode_record

    def rec(name: str, values: dict[str, Any]) -> bytes:
        return encode_record(name, values, e)

    mir = {"SETUP_T": START_T - 600, "START_T": START_T, "STAT_NUM": 1, "MODE_COD": "P",
           "RTST_COD": " ", "PROT_COD": " ", "BURN_TIM": 65535, "CMOD_COD": " ",
           "LOT_ID": "BL0001", "PART_TYP": "BENCH-DEV", "NODE_NAM": "bench-node-01",
           "TSTR_TYP": "GENERIC-ATE", "JOB_NAM": "bench_ws1", "JOB_REV": "r1.0",
           "SBLOT_ID": "", "OPER_NAM": "op01", "EXEC_TYP": "bench-exec", "EXEC_VER": "1.0",
           "TEST_COD": "WS1", "TST_TEMP": "25"}
    # The first releases' file names the script that made it; kept so it stays the same.
    made_by = f"bench_ingest.py generator v{p.version}" if p.name == "standard" else \
        f"stdf_gen.py {p.name} v{p.version}"
    out = [rec("FAR", {"CPU_TYPE": 2 if e == "<" else 1, "STDF_VER": 4}),
           rec("ATR", {"MOD_TIM": START_T - 60, "CMD_LINE": made_by}),
           rec("MIR", mir),
           rec("SDR", {"HEAD_NUM": HEAD, "SITE_GRP": 1, "SITE_CNT": len(SITES),
                       "SITE_NUM": list(SITES), "HAND_TYP": "prober", "HAND_ID": "PRB-01",
                       "CARD_TYP": "probecard", "CARD_ID": "PC-4X1-001"})]
    for s, site in enumerate(SITES):
        for q in range(PINS_PER_SITE):
            i = s * PINS_PER_SITE + q + 1
            out.append(rec("PMR", {"PMR_INDX": i, "CHAN_TYP": 0, "CHAN_NAM": f"ch{i:03d}",
                                   "PHY_NAM": f"P{q:02d}", "LOG_NAM": f"IO{q:02d}",
                                   "HEAD_NUM": HEAD, "SITE_NUM": site}))
    out.append(rec("WIR", {"HEAD_NUM": HEAD, "SITE_GRP": 255, "START_T": START_T,
                           "WAFER_ID": "BL0001-W01"}))
    return b"".join(out)


def _prr_maker(e: str) -> Any:
    """PRR bytes from the fields that change; checked once against encode_record."""
    from pipeline.read.stdf.codec import encode_record
    fixed = struct.Struct(e + "HBBBBBHHHhhI")  # header, HEAD_NUM .. TEST_T (STDF V4, PRR 5/20)

    def prr(site: int, flg: int, ntest: int, hb: int, sb: int, x: int, y: int, tt: int,
            pid: str) -> bytes:
        raw = pid.encode("latin-1")
        body = bytes([len(raw)]) + raw + b"\x00\x00"  # PART_ID, empty PART_TXT, PART_FIX
        return fixed.pack(17 + len(body), 5, 20, HEAD, site, flg, ntest, hb, sb, x, y,
                          tt) + body

    want = encode_record("PRR", {"HEAD_NUM": HEAD, "SITE_NUM": 3, "PART_FLG": 8,
                                 "NUM_TEST": 380, "HARD_BIN": 2, "SOFT_BIN": 12, "X_COORD": -5,
                                 "Y_COORD": 7, "TEST_T": 250, "PART_ID": "123",
                                 "PART_TXT": "", "PART_FIX": b""}, e)
    assert prr(3, 8, 380, 2, 12, -5, 7, 250, "123") == want, "PRR template disagrees"
    return prr


def _dtr(p: Profile, b: int, site: int, start: int, end: int, e: str) -> bytes:
    text = f"TT block={p.blocks[b][0]} site={site} start_us={start} end_us={end}".encode()
    return struct.pack(e + "HBBB", len(text) + 1, 50, 30, len(text)) + text


def _summaries(p: Profile, tests: list[dict[str, Any]], test_fails: Any, hbin: Any,
               sbin: Any, finish: int, e: str) -> bytes:
    import numpy as np

    from pipeline.read.stdf.codec import encode_record

    def rec(name: str, values: dict[str, Any]) -> bytes:
        return encode_record(name, values, e)

    n_td = hbin.shape[0]
    n_parts = hbin.size
    good = int((hbin == 1).sum())
    out = [rec("WRR", {"HEAD_NUM": HEAD, "SITE_GRP": 255, "FINISH_T": finish,
                       "PART_CNT": n_parts, "RTST_CNT": 0, "ABRT_CNT": 0, "GOOD_CNT": good,
                       "FUNC_CNT": n_parts, "WAFER_ID": "BL0001-W01"})]
    per_block = {b: sum(1 for t in tests if t["block"] == b) for b in range(len(p.blocks))}
    for t in tests:
        tim = p.blocks[t["block"]][4] / 1e6 / per_block[t["block"]]
        for s, site in [*enumerate(SITES), (None, 255)]:
            fc = int(test_fails[:, t["index"]].sum() if s is None else test_fails[s, t["index"]])
            out.append(rec("TSR", {
                "HEAD_NUM": 255 if s is None else HEAD, "SITE_NUM": 0 if s is None else site,
                "TEST_TYP": t["kind"][0], "TEST_NUM": t["num"],
                "EXEC_CNT": n_parts if s is None else n_td, "FAIL_CNT": fc, "ALRM_CNT": 0,
                "TEST_NAM": t["name"], "SEQ_NAME": p.blocks[t["block"]][0], "TEST_LBL": "",
                "OPT_FLAG": 0x33, "TEST_TIM": tim, "TEST_MIN": 0.0, "TEST_MAX": 0.0,
                "TST_SUMS": 0.0, "TST_SQRS": 0.0}))
    for name, bins, names in (("HBR", hbin, HBIN_NAMES), ("SBR", sbin, None)):
        x = name[0]
        for s, site in [*enumerate(SITES), (None, 255)]:
            col = bins.ravel() if s is None else bins[:, s]
            for num, cnt in zip(*np.unique(col, return_counts=True), strict=True):
                nm = names[int(num)] if names else (
                    "PASS" if num == 1 else f"FAIL_{p.blocks[int(num) - 10][0]}")
                out.append(rec(name, {"HEAD_NUM": 255 if s is None else HEAD,
                                      "SITE_NUM": 0 if s is None else site,
                                      f"{x}BIN_NUM": int(num), f"{x}BIN_CNT": int(cnt),
                                      f"{x}BIN_PF": "P" if num == 1 else "F",
                                      f"{x}BIN_NAM": nm}))
    for s, site in [*enumerate(SITES), (None, 255)]:
        col = hbin.ravel() if s is None else hbin[:, s]
        out.append(rec("PCR", {"HEAD_NUM": 255 if s is None else HEAD,
                               "SITE_NUM": 0 if s is None else site, "PART_CNT": col.size,
                               "RTST_CNT": 0, "ABRT_CNT": 0, "GOOD_CNT": int((col == 1).sum()),
                               "FUNC_CNT": col.size}))
    out.append(rec("MRR", {"FINISH_T": finish, "DISP_COD": " ", "USR_DESC": "",
                           "EXC_DESC": ""}))
    return b"".join(out)


def generate(p: Profile, path: Path, endian: str = "<") -> dict[str, Any]:
    """Write the log (atomically) and return its description. Both byte orders of one
    profile carry the same values (one seed)."""
    import numpy as np
    e = endian
    rng = np.random.default_rng(p.seed)
    tests = _program(p, rng)
    for i, t in enumerate(tests):
        t["index"] = i
    tp0, tp = _template(p, tests, True, e), _template(p, tests, False, e)
    head = _header(p, e)
    varying = sum(len(_dtr(p, b, 1, blk[4], 2 * blk[4], e)) for b, blk in enumerate(p.blocks))
    per_td = len(tp["tpl"]) + len(SITES) * (varying + 28)  # + DTR markers and PRRs
    n_td = max(2, round((p.target_bytes - len(head)) / per_td))
    a0, f0, c0 = _fill(p, tp0, tests, 1, rng, e)
    a1, f1, c1 = _fill(p, tp, tests, n_td - 1, rng, e)
    failed, test_fails = np.r_[f0, f1], c0 + c1
    start, end, test_t, td_us = _timing(p, n_td, rng)
    any_fail = failed.any(axis=2)
    first_bad = failed.argmax(axis=2)
    hbin = np.where(any_fail, np.array(p.hbin_of_block)[first_bad], 1)
    sbin = np.where(any_fail, 10 + first_bad, 1)
    dies = _dies(n_td * len(SITES))
    prr = _prr_maker(e)
    finish = START_T + int((td_us.sum() + INDEX_US * n_td) // 1_000_000)
    tail = _summaries(p, tests, test_fails, hbin, sbin, finish, e)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_suffix(".tmp")
    nb = len(p.blocks)
    with open(tmp, "wb") as f:
        f.write(head)
        for td in range(n_td):
            row, cuts = (a0[0], tp0["cuts"]) if td == 0 else (a1[td - 1], tp["cuts"])
            mv = memoryview(row)
            for b in range(nb):
                f.write(mv[cuts[b]:cuts[b + 1]])
                f.write(b"".join(_dtr(p, b, site, int(start[td, b, s]), int(end[td, b, s]), e)
                                 for s, site in enumerate(SITES)))
            f.write(mv[cuts[-2]:cuts[-1]])
            f.write(b"".join(prr(site, 8 if any_fail[td, s] else 0, len(tests),
                                 int(hbin[td, s]), int(sbin[td, s]), *dies[td * 4 + s],
                                 int(test_t[td, s]), str(td * len(SITES) + s + 1))
                             for s, site in enumerate(SITES)))
        f.write(tail)
    os.replace(tmp, path)
    recs_td = {"PIR": 4, "BPS": nb, "EPS": nb, "DTR": nb * len(SITES), "PRR": 4}
    for k in ("PTR", "FTR", "MPR"):
        recs_td[k] = sum(1 for t in tests if t["kind"] == k) * len(SITES)
    counts = {k: v * n_td for k, v in recs_td.items()}
    counts["header"] = 5 + len(SITES) * PINS_PER_SITE
    counts["summary"] = _count(tail, e)
    later = [t["later"] for t in tests if t["kind"] == "PTR"]
    return {"generator_version": p.version, "profile": p.name,
            "byte_order": "little" if e == "<" else "big", "bytes": path.stat().st_size,
            "records": sum(counts.values()), "counts": counts, "touchdowns": n_td,
            "parts": n_td * len(SITES), "yield_pct": round(100 * float((hbin == 1).mean()), 2),
            "later_ptr_cut_after_result_pct": round(100 * later.count("trunc") / len(later), 1),
            "seed": p.seed}


def _count(data: bytes, e: str) -> int:
    n, pos = 0, 0
    while pos + 4 <= len(data):
        pos += 4 + struct.unpack_from(e + "H", data, pos)[0]
        n += 1
    return n


def write_meta(meta: dict[str, Any], path: Path) -> None:
    path.write_text(json.dumps(meta, indent=2) + "\n")
