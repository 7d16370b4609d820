"""A pair of correlation lots written as STDF V4, with what was planted in them.

The baseline lot is the serial program, the candidate the same units re-tested by a
faster (concurrent) program. Each unit's true value per test is drawn once; a test of it
returns that value plus repeatability noise, so the two lots' results of one unit
correlate (rho): ``b = nom + sigma z``, ``c = nom + rho (b - nom) + sqrt(1 - rho^2) sigma z'``
(the same spread, paired differences of sd ``sigma sqrt(2 (1 - rho))``), then the planted
changes: a mean shift in sigmas, a spread ratio. A few units fail in both lots (the same
test); ``flips`` units pass in the baseline and fail FLIP_TEST in the candidate, far beyond
its limit. Part times are PRR.TEST_T only (no markers): the truth of the saving is
computed here from the touchdowns as written (the slowest site's part time).

Records: STDF V4 FAR 0/10, MIR 1/10, PIR 5/10, BPS 20/10, PTR 15/10, MPR 15/15, FTR 15/20,
EPS 20/20, PRR 5/20, MRR 1/20 — through pipeline.read.stdf.codec.encode_record.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from pipeline.read.stdf.codec import encode_record

N_PTR = 36          # parametric tests, numbered 100..; every 6th has only a high limit
MPR_ELEMENTS = 8    # one MPR test (number 500) with this many results
N_FTR = 4           # functional tests, numbered 600..
FLIP_TEST = 120     # the PTR the flipped units fail in the candidate
FAIL_BIN, FLIP_BIN = 3, 5


@dataclass
class Pair:
    units: int = 400
    sites: int = 4
    seed: int = 0
    rho: float = 0.9
    shift: dict[int, float] = field(default_factory=dict)   # test_num -> mean shift (sigma)
    spread: dict[int, float] = field(default_factory=dict)  # test_num -> ratio of sigmas
    flips: int = 0
    base_fails: int = 8             # units that fail (the same test) in both lots
    base_ms: float = 500.0          # mean part time, baseline
    cand_ms: float = 300.0          # and candidate
    baseline_lot: str = "CR-B1"
    candidate_lot: str = "CR-C1"
    part_ids: bool = True
    drop: tuple[int, ...] = ()      # tests the candidate program no longer runs
    new_hi: dict[int, float] = field(default_factory=dict)  # candidate's other high limits
    truth: dict[str, Any] = field(default_factory=dict)

    def write(self, folder: Path) -> tuple[Path, Path]:
        """Both lots as ``<lot>.stdf`` in ``folder``; fills ``truth``."""
        rng = np.random.default_rng([20_466, self.seed])
        tests = _tests()
        n = self.units
        z = {t["num"]: rng.standard_normal((n, t.get("k", 1))) for t in tests if t["kind"] != "F"}
        failing = rng.choice(n, size=self.base_fails + self.flips, replace=False)
        base_fail = {int(u): tests[int(rng.integers(len(tests)))]["num"]
                     for u in failing[:self.base_fails]}
        flipped = sorted(int(u) for u in failing[self.base_fails:])
        base_vals = {num: _values(t, z[num]) for t in tests if (num := t["num"]) in z}
        cand_vals = {}
        for t in tests:
            if t["kind"] == "F":
                continue
            num, nom, sd = t["num"], np.asarray(t["nom"]), t["sigma"]
            noise = rng.standard_normal(base_vals[num].shape)
            dev = self.rho * (base_vals[num] - nom) + math.sqrt(1 - self.rho ** 2) * sd * noise
            dev = dev * self.spread.get(num, 1.0) + self.shift.get(num, 0.0) * sd
            cand_vals[num] = nom + dev
        times_b = rng.normal(self.base_ms, 0.02 * self.base_ms, n)
        times_c = rng.normal(self.cand_ms, 0.02 * self.cand_ms, n)
        flips = dict.fromkeys(flipped, FLIP_TEST)
        b = folder / f"{self.baseline_lot}.stdf"
        c = folder / f"{self.candidate_lot}.stdf"
        td_b = _write(b, self, tests, base_vals, base_fail, {}, times_b)
        cand_tests = [t | ({"hi": self.new_hi[t["num"]]} if t["num"] in self.new_hi else {})
                      for t in tests if t["num"] not in self.drop]
        td_c = _write(c, self, cand_tests, cand_vals, base_fail, flips, times_c)
        self.truth = {
            "flipped_part_ids": [str(u + 1) for u in flipped],
            "saving_pct": 100.0 * (1.0 - np.mean(td_c) / np.mean(td_b)),
            "planted": sorted({*self.shift, *self.spread}),
            "repeatability_sd": {t["num"]: t["sigma"] * math.sqrt(1 - self.rho)
                                 for t in tests if t["kind"] == "P"}}
        return b, c


def _tests() -> list[dict[str, Any]]:
    out: list[dict[str, Any]] = []
    for i in range(N_PTR):
        nom, sd = 1.0 + 0.5 * i, 0.02 + 0.01 * (i % 7)
        lo = None if i % 6 == 5 else nom - 6 * sd
        out.append({"num": 100 + i, "kind": "P", "name": f"par_{i:02d}", "nom": nom,
                    "sigma": sd, "lo": lo, "hi": nom + 6 * sd, "block": f"blk{i // 12}"})
    bow = [0.1 * math.sin(math.pi * k / (MPR_ELEMENTS - 1)) for k in range(MPR_ELEMENTS)]
    out.append({"num": 500, "kind": "M", "name": "lin_group", "nom": bow, "sigma": 0.05,
                "lo": -1.0, "hi": 1.0, "k": MPR_ELEMENTS, "block": "blk3"})
    out += [{"num": 600 + i, "kind": "F", "name": f"func_{i}", "block": "blk3"}
            for i in range(N_FTR)]
    return out


def _values(t: dict[str, Any], z: np.ndarray) -> np.ndarray:
    return np.asarray(t["nom"]) + t["sigma"] * (z if t["kind"] == "M" else z[:, 0])


def _write(path: Path, pair: Pair, tests: list[dict[str, Any]], vals: dict[int, np.ndarray],
           fails: dict[int, int], flips: dict[int, int], times: np.ndarray) -> list[int]:
    lot = path.stem
    recs: list[tuple[str, dict[str, Any]]] = [
        ("FAR", {"CPU_TYPE": 2, "STDF_VER": 4}),
        ("MIR", {"SETUP_T": 1_700_000_000, "START_T": 1_700_000_000, "STAT_NUM": 1,
                 "MODE_COD": "P", "RTST_COD": " ", "PROT_COD": " ", "BURN_TIM": 65535,
                 "CMOD_COD": " ", "LOT_ID": lot, "PART_TYP": "CR", "NODE_NAM": "n1",
                 "TSTR_TYP": "sim", "JOB_NAM": "cr_prog",
                 "JOB_REV": "serial" if lot == pair.baseline_lot else "concurrent"})]
    seen: set[int] = set()
    touchdowns = []
    nums = {t["num"] for t in tests}
    fails = {u: n for u, n in fails.items() if n in nums}  # a dropped test fails no one
    for first in range(0, pair.units, pair.sites):
        units = list(range(first, min(first + pair.sites, pair.units)))
        recs += [("PIR", {"HEAD_NUM": 1, "SITE_NUM": s + 1}) for s in range(len(units))]
        for s, u in enumerate(units):
            bad = flips.get(u, fails.get(u))
            recs += _unit(tests, vals, u, s + 1, bad, seen)
        ms = []
        for s, u in enumerate(units):
            bad = flips.get(u, fails.get(u))
            hard = 1 if bad is None else (FLIP_BIN if u in flips else FAIL_BIN)
            ms.append(max(1, int(round(times[u]))))
            recs.append(("PRR", {"HEAD_NUM": 1, "SITE_NUM": s + 1,
                                 "PART_FLG": 0 if hard == 1 else 0x08, "NUM_TEST": len(tests),
                                 "HARD_BIN": hard, "SOFT_BIN": hard, "X_COORD": u % 20,
                                 "Y_COORD": u // 20, "TEST_T": ms[-1],
                                 "PART_ID": str(u + 1) if pair.part_ids else ""}))
        touchdowns.append(max(ms))
    recs.append(("MRR", {"FINISH_T": 1_700_003_600, "DISP_COD": " "}))
    path.write_bytes(b"".join(encode_record(name, v) for name, v in recs))
    return touchdowns


def _unit(tests: list[dict[str, Any]], vals: dict[int, np.ndarray], u: int, site: int,
          bad: int | None, seen: set[int]) -> list[tuple[str, dict[str, Any]]]:
    recs: list[tuple[str, dict[str, Any]]] = []
    block = None
    for t in tests:
        if t["block"] != block:
            if block is not None:
                recs.append(("EPS", {}))
            block = t["block"]
            recs.append(("BPS", {"SEQ_NAME": block}))
        fail = bad == t["num"]
        head = {"TEST_NUM": t["num"], "HEAD_NUM": 1, "SITE_NUM": site,
                "TEST_FLG": 0x80 if fail else 0}
        first = t["num"] not in seen
        seen.add(t["num"])
        if t["kind"] == "F":
            recs.append(("FTR", head | {"OPT_FLAG": 0xFF} | (
                {"TEST_TXT": t["name"]} if first else {})))
            continue
        v = vals[t["num"]][u]
        if fail:  # far beyond the high limit: 5 sigma past it
            v = np.array(v, dtype=float).copy()
            v.flat[0] = t["hi"] + 5 * t["sigma"]
        opt = 0x0E | (0x40 if t["lo"] is None else 0)
        lim = {"TEST_TXT": t["name"], "ALARM_ID": "", "OPT_FLAG": opt, "RES_SCAL": 0,
               "LLM_SCAL": 0, "HLM_SCAL": 0, "LO_LIMIT": t["lo"] or 0.0, "HI_LIMIT": t["hi"],
               "UNITS": "V"} if first else {}
        if t["kind"] == "P":
            recs.append(("PTR", head | {"PARM_FLG": 0, "RESULT": float(v)} | lim))
        else:
            recs.append(("MPR", head | {"PARM_FLG": 0, "RTN_ICNT": 0, "RSLT_CNT": len(v),
                                        "RTN_STAT": [], "RTN_RSLT": [float(x) for x in v]}
                         | (lim | {"START_IN": 0.0, "INCR_IN": 1.0, "RTN_INDX": [],
                                   "UNITS_IN": ""} if first else {})))
    recs.append(("EPS", {}))
    return recs
