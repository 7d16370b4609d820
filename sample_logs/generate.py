"""Write the committed sample logs of the fictional "Pebblefinch PF4" SoC.

Everything here is invented: the device, its lots, the tester, the prober and the facility.
The script is deterministic (one seeded numpy generator per lot; gzip written with mtime 0
and no file name), so ``python sample_logs/generate.py [OUT_DIR]`` rewrites byte-identical
files and ``tests/test_samples.py`` can check that the committed outputs are what it writes
now. STDF is written only through ``pipeline.read.stdf.codec.encode_record``.

Timing model of one touchdown (all times integer microseconds from the touchdown start):
each site first spends its per-part overhead (unattributed: power-up, levels), then runs the
blocks in program order, each block starting when that site's previous block ended. Blocks
on the touchdown-wide ``rf_meter`` run one site after another (a site also waits until the
meter is free). The touchdown ends with its slowest site; the handler's index time follows.
"""

from __future__ import annotations

import argparse
import calendar
import csv
import gzip
import io
import json
import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from pipeline.read.stdf.codec import encode_record

Rec = tuple[str, dict[str, Any]]

# ------------------------------------------------------------------ the device, as data

SEED = 20310
PART_TYP, JOB_NAM, JOB_REV = "PF4", "pf4_sort", "B2"
TSTR_TYP, NODE_NAM, FACILITY = "simtest-8", "simtest8-n02", "Fab Nowhere"
OVERHEAD_MS = 12.0      # per part, not inside any block
INDEX_MS = 450.0        # handler/prober time between touchdowns
JITTER = 0.02           # realised times ~ N(mean, 2 % of mean)
SLOWDOWN = {("adc_linearity", 3): 1.06}  # site 3's ADC path is slower: visible imbalance
WEIGHT = {"P": 1.0, "F": 4.0, "M": 6.0}  # share of a block's time per test, by record kind
MPR_RESULTS = 16        # INL per code group of the 12-bit ADC (256 codes per group)

PINS = ("VDD_CORE", "VDD_IO", "VDD_RF", "PLL_REF", "PLL_OUT", "ADC_IN", "ADC_VREF", "RF_OUT",
        "RF_IN", "SCAN_CLK", "SCAN_EN", "SCAN_IN0", "SCAN_IN1", "SCAN_IN2", "SCAN_IN3",
        "SCAN_OUT0", "SCAN_OUT1", "SCAN_OUT2", "SCAN_OUT3", "TEST_MODE", "BIST_DONE")
PIN_GROUPS = {
    "SUPPLY": ("VDD_CORE", "VDD_IO", "VDD_RF"), "PLL": ("PLL_REF", "PLL_OUT"),
    "ADC": ("ADC_IN", "ADC_VREF"), "RF": ("RF_OUT", "RF_IN"), "SCAN_CTRL": ("SCAN_CLK", "SCAN_EN"),
    **{f"SCAN_CORE{k}": (f"SCAN_IN{k}", f"SCAN_OUT{k}") for k in range(4)},
    "BIST": ("TEST_MODE", "BIST_DONE"),
}
HARD_BINS = {1: "PASS", 2: "OPEN_SHORT", 3: "DC", 4: "ANALOG", 5: "RF", 6: "SCAN", 7: "MEMORY"}


@dataclass(frozen=True)
class Fam:
    """A family of tests: one per suffix. kind P = PTR, F = FTR, M = MPR; a limit of None
    means the test has no such limit; scale is the PTR's RES_SCAL (display only)."""

    kind: str
    pattern: str
    suffixes: tuple[str, ...] = ("",)
    units: str = ""
    lo: float | None = None
    hi: float | None = None
    nom: float = 0.0
    sigma: float = 0.0
    scale: int = 0
    pins: tuple[str, ...] = ()  # FTR: the pins whose states it returns (RTN_INDX)


def one(name: str, units: str, lo: float | None, hi: float | None, nom: float, sigma: float,
        scale: int = 0) -> Fam:
    return Fam("P", name, ("",), units, lo, hi, nom, sigma, scale)


CONTACT_PINS = ("pll_ref", "pll_out", "adc_in", "rf_out", "rf_in", "scan_clk", "scan_en",
                "test_mode")
LEAK_PINS = ("pll_ref", "adc_in", "scan_clk", "scan_en", "test_mode")
PLL_FREQS = ("96m", "192m", "384m")
CHANNELS = ("ch00", "ch12", "ch24")
SCAN_PATTERNS = ("chain", "sa01", "sa02", "sa03", "sa04", "sa05", "sa06", "tdf01", "tdf02",
                 "tdf03")


@dataclass(frozen=True)
class BlockSpec:
    name: str
    mean_ms: float
    hard_bin: int
    families: tuple[Fam, ...]
    shared: str | None = None   # touchdown-wide instrument: sites take turns
    power_w: float = 0.1
    uses: tuple[str, ...] = ()


def _scan_core(k: int) -> BlockSpec:
    return BlockSpec(f"scan_core{k}", 300.0, 6, (
        Fam("F", f"scan_c{k}_{{}}", SCAN_PATTERNS, pins=(f"SCAN_IN{k}", f"SCAN_OUT{k}")),
        one(f"scan_c{k}_vmin", "V", None, 0.85, 0.72, 0.012),
        one(f"scan_c{k}_idd_shift", "A", None, 0.12, 0.08, 0.004, 3),
    ), power_w=1.4, uses=("scan_port",))


BLOCK_SPECS: tuple[BlockSpec, ...] = (
    BlockSpec("contact", 15.0, 2, (
        Fam("P", "cont_{}", CONTACT_PINS, "V", -0.9, -0.2, -0.55, 0.02),), power_w=0.05),
    BlockSpec("dc_leakage", 85.0, 3, (
        Fam("P", "leak_il_{}", LEAK_PINS, "A", -1e-7, 1e-7, -4e-9, 2e-9, 9),
        Fam("P", "leak_ih_{}", LEAK_PINS, "A", -1e-7, 1e-7, 5e-9, 2e-9, 9),
        Fam("P", "idd_static_{}", ("core", "io"), "A", None, 2e-3, 6e-4, 5e-5, 3),
    ), power_w=0.2),
    BlockSpec("pll_lock", 40.0, 4, (
        Fam("P", "pll_lock_time_{}", PLL_FREQS, "s", None, 5e-5, 2.2e-5, 2e-6, 6),
        Fam("P", "pll_freq_err_{}", PLL_FREQS, "ppm", -50.0, 50.0, 0.0, 6.0),
        one("pll_jitter_rms", "s", None, 8e-12, 3e-12, 3e-13, 12),
        one("pll_vtune", "V", 0.3, 1.1, 0.7, 0.04),
    ), power_w=0.3),
    BlockSpec("adc_linearity", 110.0, 4, (
        Fam("M", "adc_inl_group", ("",), "LSB", -2.0, 2.0, 0.0, 0.25),
        one("adc_dnl_max", "LSB", None, 0.9, 0.35, 0.05),
        one("adc_offset", "LSB", -4.0, 4.0, 0.2, 0.6),
        one("adc_gain_err", "%", -1.0, 1.0, 0.05, 0.15),
        one("adc_snr", "dB", 68.0, None, 72.5, 0.6),
        one("adc_sinad", "dB", 66.0, None, 71.8, 0.6),
        one("adc_enob", "bit", 10.7, None, 11.6, 0.1),
        one("adc_thd", "dBc", None, -70.0, -78.0, 1.2),
        one("adc_vref", "V", 1.17, 1.23, 1.2, 0.004),
        one("adc_idd", "A", None, 1.5e-3, 9e-4, 4e-5, 3),
    ), power_w=0.4),
    BlockSpec("radio_tx", 90.0, 5, (
        Fam("P", "tx_pout_{}", CHANNELS, "dBm", 2.0, 6.0, 4.0, 0.3),
        Fam("P", "tx_freq_err_{}", CHANNELS, "ppm", -20.0, 20.0, 1.0, 3.0),
        one("tx_evm", "%", None, 5.0, 2.1, 0.3),
        one("tx_harm2", "dBc", None, -40.0, -52.0, 1.5),
        one("tx_harm3", "dBc", None, -40.0, -58.0, 1.5),
        one("tx_idd", "A", None, 2.5e-2, 1.8e-2, 5e-4, 3),
    ), shared="rf_meter", power_w=0.9, uses=("rf_meter",)),
    BlockSpec("radio_rx", 80.0, 5, (
        Fam("P", "rx_sens_{}", CHANNELS, "dBm", None, -92.0, -96.0, 0.7),
        Fam("P", "rx_rssi_err_{}", CHANNELS, "dB", -3.0, 3.0, 0.0, 0.5),
        one("rx_iip3", "dBm", -15.0, None, -10.0, 0.8),
        one("rx_nf", "dB", None, 8.0, 5.5, 0.3),
        one("rx_blocking", "dB", 30.0, None, 38.0, 1.2),
        one("rx_idd", "A", None, 1.6e-2, 1.1e-2, 3e-4, 3),
    ), shared="rf_meter", power_w=0.5, uses=("rf_meter",)),
    *(_scan_core(k) for k in range(4)),
    BlockSpec("flash_bist", 50.0, 7, (
        Fam("F", "flash_bist_{}", ("march", "erase", "program", "read0", "read1", "ecc")),
        one("flash_read_margin", "V", 0.15, None, 0.32, 0.02),
        one("flash_erase_time", "s", None, 4e-3, 2.6e-3, 1e-4, 3),
        one("flash_prog_time", "s", None, 2e-5, 1.2e-5, 5e-7, 6),
        one("flash_bist_idd", "A", None, 9e-3, 5.5e-3, 2e-4, 3),
    ), power_w=1.0),
    BlockSpec("sram_bist", 30.0, 7, (
        Fam("F", "sram_bist_{}", ("bank0", "bank1", "bank2", "bank3", "retention")),
        one("sram_vmin", "V", None, 0.8, 0.66, 0.012),
        one("sram_bist_idd", "A", None, 7e-3, 4.2e-3, 1.5e-4, 3),
        one("sram_retention_v", "V", None, 0.6, 0.45, 0.01),
    ), power_w=0.8),
)
POWER_LIMIT_W, PARALLEL_LIMIT = 3.0, 3  # per site; four scans together (5.6 W) exceed it
UNITS_PER_YEAR, TESTER_COST_PER_HOUR = 2_000_000, 60.0  # the block map's [economics]


@dataclass(frozen=True)
class TestDef:
    num: int
    name: str
    kind: str
    fam: Fam
    weight: float
    cycles: int  # FTR CYCL_CNT


@dataclass(frozen=True)
class Block:
    index: int
    spec: BlockSpec
    tests: tuple[TestDef, ...]

    @property
    def name(self) -> str:
        return self.spec.name

    @property
    def soft_bin(self) -> int:
        return 10 + self.index

    def nominal_ms(self, site: int) -> float:
        return self.spec.mean_ms * SLOWDOWN.get((self.name, site), 1.0)


def build_blocks() -> list[Block]:
    """Expand the families; block b (0-based) numbers its tests 1000*(b+1)+i, i 0-based."""
    blocks = []
    for b, spec in enumerate(BLOCK_SPECS):
        tests: list[TestDef] = []
        for fam in spec.families:
            for sfx in fam.suffixes:
                i = len(tests)
                name = fam.pattern.format(sfx) if "{}" in fam.pattern else fam.pattern
                tests.append(TestDef(1000 * (b + 1) + i, name, fam.kind, fam, WEIGHT[fam.kind],
                                     10_000 + 2_500 * i))
        blocks.append(Block(b, spec, tuple(tests)))
    return blocks


# ------------------------------------------------------------------ the lots


@dataclass(frozen=True)
class Output:
    name: str
    endian: str = "<"
    gzip: bool = False


@dataclass(frozen=True)
class LotSpec:
    key: int                      # seeds this lot's generator
    lot_id: str
    wafer_id: str
    outputs: tuple[Output, ...]
    touchdowns: int
    sites: tuple[int, ...] = (1, 2, 3, 4)
    start: tuple[int, int, int, int, int] = (2024, 3, 4, 6, 10)  # local wall clock
    sections: bool = True
    markers: bool = True
    tsr_time_valid: bool = True
    stop_on_fail: bool = False
    fail_rate: float = 0.04
    stops_per_block: int = 0       # stop-on-fail lots: exactly this many fails per block
    never_fail: tuple[str, ...] = ()
    csv: bool = False
    job_rev: str = JOB_REV
    retest_of: str | None = None   # a correlation lot: these units of that lot, re-tested


LOTS = (
    LotSpec(1, "PF4-L0231", "W01", (Output("pf4_L0231_w01_markers.stdf"),
                                    Output("pf4_L0231_w01_markers_be.stdf", ">")), 40),
    LotSpec(2, "PF4-L0232", "W02", (Output("pf4_L0232_w02_markers.stdf.gz", gzip=True),), 24,
            start=(2024, 3, 5, 14, 40)),
    LotSpec(3, "PF4-L0233", "W05", (Output("pf4_L0233_tsr_only.stdf"),), 30,
            start=(2024, 3, 7, 9, 5), sections=False, markers=False),
    # One site, so PRR.TEST_T is the sum of the blocks a part ran plus its overhead (no
    # waits for other sites): the estimator's cleanest case. flash_bist never fails, so it
    # and sram_bist always run together and cannot be told apart.
    LotSpec(4, "PF4-L0234", "W07", (Output("pf4_L0234_totals_only.stdf"),), 400, sites=(1,),
            start=(2024, 3, 9, 22, 30), markers=False, tsr_time_valid=False,
            stop_on_fail=True, stops_per_block=10, never_fail=("flash_bist",)),
    LotSpec(5, "PF4-L0235", "W03", (Output("pf4_L0235_timing.csv"),), 30,
            start=(2024, 3, 11, 7, 50), csv=True),
    # The correlation run of the concurrent program (rev B3): lot PF4-L0231's 160 units
    # (same wafer, part ids and dies) tested again with the demo's plan applied. See
    # "the re-test" below for what changed on purpose.
    LotSpec(6, "PF4-L0236", "W01", (Output("pf4_L0236_w01_concurrent.stdf.gz", gzip=True),),
            40, start=(2024, 3, 12, 9, 30), job_rev="B3", retest_of="PF4-L0231"),
)


# ------------------------------------------------------------------ planning: who runs what, when


@dataclass
class Part:
    site: int
    part_id: str
    x: int
    y: int
    fail_block: int | None
    blocks: list[int]                                  # block indices run, program order
    spans: dict[int, tuple[int, int]] = field(default_factory=dict)  # block -> (start, end) us
    overhead_us: int = 0
    end_us: int = 0

    @property
    def test_t_ms(self) -> int:
        return (self.end_us + 500) // 1000  # PRR.TEST_T: whole ms, half up


@dataclass
class Touchdown:
    parts: list[Part]
    duration_us: int = 0


def touchdown_positions(n_td: int, n_sites: int) -> list[list[tuple[int, int]]]:
    """Die (x, y) per site for each touchdown: sites side by side in a row, rows walked
    serpentine over a round wafer just big enough for n_td touchdowns."""
    radius = 2
    while True:
        groups: list[list[tuple[int, int]]] = []
        for row, y in enumerate(range(-radius, radius + 1)):
            half = int(math.isqrt(radius * radius - y * y))
            starts = list(range(-half, half + 1, n_sites))
            for x0 in starts if row % 2 == 0 else starts[::-1]:
                groups.append([(x0 + s, y) for s in range(n_sites)])
        if len(groups) >= n_td:
            return groups[:n_td]
        radius += 1


def fail_plan(lot: LotSpec, blocks: list[Block], n: int, rng: np.random.Generator
              ) -> list[int | None]:
    """The block each part fails (None = passes)."""
    can_fail = [b.index for b in blocks if b.name not in lot.never_fail]
    if lot.stops_per_block:
        plan: list[int | None] = [b for b in can_fail for _ in range(lot.stops_per_block)]
        plan += [None] * (n - len(plan))
        return [plan[i] for i in rng.permutation(n)]
    return [int(rng.choice(can_fail)) if rng.random() < lot.fail_rate else None
            for _ in range(n)]


def draw_us(mean_ms: float, rng: np.random.Generator) -> int:
    return max(1, int(round(rng.normal(mean_ms, JITTER * mean_ms) * 1000)))


def run_touchdown(td: Touchdown, blocks: list[Block], rng: np.random.Generator) -> None:
    """Fill in every part's block spans and end, and the touchdown's duration."""
    clock: dict[int, int] = {}
    free: dict[str, int] = {}  # shared instrument -> when it is next free
    for p in td.parts:
        p.overhead_us = draw_us(OVERHEAD_MS, rng)
        clock[p.site] = p.overhead_us
    for b in blocks:
        for p in td.parts:
            if b.index not in p.blocks:
                continue
            start = clock[p.site]
            if b.spec.shared:
                start = max(start, free.get(b.spec.shared, 0))
            end = start + draw_us(b.nominal_ms(p.site), rng)
            if b.spec.shared:
                free[b.spec.shared] = end
            p.spans[b.index] = (start, end)
            clock[p.site] = end
    for p in td.parts:
        p.end_us = clock[p.site]
    td.duration_us = max(p.end_us for p in td.parts)


def plan_lot(lot: LotSpec, blocks: list[Block], rng: np.random.Generator
             ) -> tuple[list[Touchdown], list[int]]:
    """Touchdowns with their timing, and the index times between them (us)."""
    positions = touchdown_positions(lot.touchdowns, len(lot.sites))
    fails = fail_plan(lot, blocks, lot.touchdowns * len(lot.sites), rng)
    tds = []
    for k, dies in enumerate(positions):
        parts = []
        for s, (site, (x, y)) in enumerate(zip(lot.sites, dies, strict=True)):
            n = k * len(lot.sites) + s
            fb = fails[n]
            last = fb if (lot.stop_on_fail and fb is not None) else len(blocks) - 1
            parts.append(Part(site, str(n + 1), x, y, fb, list(range(last + 1))))
        td = Touchdown(parts)
        run_touchdown(td, blocks, rng)
        tds.append(td)
    index = [draw_us(INDEX_MS, rng) for _ in range(len(tds) - 1)]
    return tds, index


def bins(p: Part, blocks: list[Block]) -> tuple[int, int]:
    if p.fail_block is None:
        return 1, 1
    b = blocks[p.fail_block]
    return b.spec.hard_bin, b.soft_bin


# ------------------------------------------------------------------ test records


def f32(x: float) -> float:
    """The value as an R*4 field will hold it."""
    return float(np.float32(x))


@dataclass
class Stats:
    execs: int = 0
    fails: int = 0
    values: list[float] = field(default_factory=list)


@dataclass(frozen=True)
class Trace:
    """One unit's result of one test: its values (PTR one, MPR one per element, FTR none)."""

    values: tuple[float, ...]
    failed: bool


class Emitter:
    """Builds one file's records. Remembers which test numbers had their first (full)
    record, and tallies each (test, site) for the TSRs."""

    def __init__(self, pmr: dict[tuple[int, str], int], rng: np.random.Generator):
        self.records: list[Rec] = []
        self.seen: set[int] = set()
        self.stats: dict[tuple[int, int], Stats] = {}
        self.pmr, self.rng = pmr, rng
        self.unit = ""  # PART_ID of the part being written
        self.trace: dict[tuple[str, int], Trace] = {}  # (part, test) -> what it returned

    def add(self, name: str, **values: Any) -> None:
        self.records.append((name, values))

    def first(self, t: TestDef) -> bool:
        new = t.num not in self.seen
        self.seen.add(t.num)
        return new

    def block(self, b: Block, site: int, failing: bool) -> int:
        """Every test of block b on one site; one test fails when `failing`."""
        bad = int(self.rng.integers(len(b.tests))) if failing else -1
        for i, t in enumerate(b.tests):
            st = self.stats.setdefault((t.num, site), Stats())
            st.execs += 1
            st.fails += i == bad
            {"P": self.ptr, "F": self.ftr, "M": self.mpr}[t.kind](t, site, i == bad, st)
        return len(b.tests)

    def value(self, f: Fam, fail: bool) -> tuple[float, int]:
        """(R*4 result, PARM_FLG). Passing values are kept inside the limits; a failing one
        lands beyond the high limit (or below the low one when there is no high limit)."""
        if not fail:
            v = f.nom + f.sigma * self.rng.standard_normal()
            v = max(v, f.lo) if f.lo is not None else v
            v = min(v, f.hi) if f.hi is not None else v
            return f32(v), 0xC0  # bits 6, 7: limits compared inclusively
        step = max(abs(f.sigma), 1e-3 * max(abs(f.hi or 0.0), abs(f.lo or 0.0), 1e-12))
        beyond = (0.5 + 2.5 * self.rng.random()) * step
        if f.hi is not None:
            return f32(f.hi + beyond + abs(f.hi) * 1e-6), 0xC8  # bit 3: above high limit
        assert f.lo is not None
        return f32(f.lo - beyond - abs(f.lo) * 1e-6), 0xD0      # bit 4: below low limit

    @staticmethod
    def limit_fields(f: Fam) -> dict[str, Any]:
        # OPT_FLAG (STDF V4, PTR 15/10): bits 2, 3 no spec limits, 6 / 7 no low / high limit;
        # bit 1 is reserved and set, as the standard asks (from memory of the standard).
        opt = 0x0E | (0x40 if f.lo is None else 0) | (0x80 if f.hi is None else 0)
        return {"OPT_FLAG": opt, "RES_SCAL": f.scale, "LLM_SCAL": f.scale, "HLM_SCAL": f.scale,
                "LO_LIMIT": f.lo or 0.0, "HI_LIMIT": f.hi or 0.0}

    def result(self, t: TestDef, fail: bool) -> tuple[float, int]:
        return self.value(t.fam, fail)

    def mpr_values(self, t: TestDef, fail: bool) -> list[float]:
        f = t.fam
        bow = 0.4 * np.sin(np.pi * np.arange(MPR_RESULTS) / (MPR_RESULTS - 1))
        vals = [f32(float(np.clip(bw + f.sigma * self.rng.standard_normal(), f.lo, f.hi)))
                for bw in bow]
        if fail:
            vals[int(self.rng.integers(MPR_RESULTS))] = self.value(f, True)[0]
        return vals

    def ptr(self, t: TestDef, site: int, fail: bool, st: Stats) -> None:
        v, parm = self.result(t, fail)
        st.values.append(v)
        self.trace[(self.unit, t.num)] = Trace((v,), fail)
        rec = {"TEST_NUM": t.num, "HEAD_NUM": 1, "SITE_NUM": site,
               "TEST_FLG": 0x80 if fail else 0, "PARM_FLG": parm, "RESULT": v}
        if self.first(t):  # later ones stop after RESULT: the reader's default-data rule
            lim = self.limit_fields(t.fam)
            rec |= {"TEST_TXT": t.name, "ALARM_ID": ""} | lim | {"UNITS": t.fam.units}
        self.add("PTR", **rec)

    def mpr(self, t: TestDef, site: int, fail: bool, st: Stats) -> None:
        f = t.fam
        vals = self.mpr_values(t, fail)
        self.trace[(self.unit, t.num)] = Trace(tuple(vals), fail)
        rec = {"TEST_NUM": t.num, "HEAD_NUM": 1, "SITE_NUM": site,
               "TEST_FLG": 0x80 if fail else 0, "PARM_FLG": 0xC8 if fail else 0xC0,
               "RTN_ICNT": 0, "RSLT_CNT": MPR_RESULTS, "RTN_STAT": [], "RTN_RSLT": vals}
        if self.first(t):  # later ones stop after RTN_RSLT
            lim = self.limit_fields(f)
            lim["OPT_FLAG"] &= 0xFD  # MPR bit 1 clear: START_IN / INCR_IN are valid
            rec |= {"TEST_TXT": t.name, "ALARM_ID": ""} | lim | {
                "START_IN": 0.0, "INCR_IN": 256.0, "RTN_INDX": [], "UNITS": f.units,
                "UNITS_IN": "code"}
        self.add("MPR", **rec)

    def ftr(self, t: TestDef, site: int, fail: bool, st: Stats) -> None:
        pins = [self.pmr[(site, pin)] for pin in t.fam.pins]
        self.trace[(self.unit, t.num)] = Trace((), fail)
        # RTN_STAT nibbles (from memory of the standard): 0 = low, 1 = high, 5 = failed low
        states = [0, 5] if fail and pins else [0] * len(pins)
        rec: dict[str, Any] = {
            "TEST_NUM": t.num, "HEAD_NUM": 1, "SITE_NUM": site, "TEST_FLG": 0x80 if fail else 0,
            # FTR OPT_FLAG (from memory): bit 1 REL_VADR, 4 X/YFAIL_AD, 5 VECT_OFF invalid
            "OPT_FLAG": 0x30 if fail else 0x32, "CYCL_CNT": t.cycles,
            "REL_VADR": int(self.rng.integers(t.cycles)) if fail else 0, "REPT_CNT": 1,
            "NUM_FAIL": int(self.rng.integers(1, 40)) if fail else 0, "XFAIL_AD": 0,
            "YFAIL_AD": 0, "VECT_OFF": 0, "RTN_ICNT": len(pins), "PGM_ICNT": 0,
            "RTN_INDX": pins, "RTN_STAT": states}
        if self.first(t):  # later ones stop after RTN_STAT
            rec |= {"PGM_INDX": [], "PGM_STAT": [], "FAIL_PIN": b"", "VECT_NAM": f"{t.name}_v",
                    "TIME_SET": "ts_scan" if pins else "ts_bist", "OP_CODE": "",
                    "TEST_TXT": t.name}
        self.add("FTR", **rec)


# ------------------------------------------------------------------ one STDF file


def local_epoch(wall: tuple[int, int, int, int, int]) -> int:
    """STDF times count seconds from 1970-01-01 in the test floor's local time, so the
    local wall clock is encoded as if it were UTC (no zone is recorded)."""
    return calendar.timegm((*wall, 0, 0, 0, 0))


def pmr_index(sites: tuple[int, ...]) -> dict[tuple[int, str], int]:
    return {(site, pin): 1 + k * len(PINS) + i
            for k, site in enumerate(sites) for i, pin in enumerate(PINS)}


def header(lot: LotSpec, pmr: dict[tuple[int, str], int], start_t: int) -> list[Rec]:
    recs: list[Rec] = [
        ("ATR", {"MOD_TIM": start_t - 600, "CMD_LINE": f"sample_logs/generate.py seed={SEED}"}),
        ("MIR", {"SETUP_T": start_t - 420, "START_T": start_t, "STAT_NUM": 2, "MODE_COD": "P",
                 "RTST_COD": " ", "PROT_COD": " ", "BURN_TIM": 65535, "CMOD_COD": " ",
                 "LOT_ID": lot.lot_id, "PART_TYP": PART_TYP, "NODE_NAM": NODE_NAM,
                 "TSTR_TYP": TSTR_TYP, "JOB_NAM": JOB_NAM, "JOB_REV": lot.job_rev, "SBLOT_ID": "",
                 "OPER_NAM": "op07", "EXEC_TYP": "simexec", "EXEC_VER": "1.4",
                 "TEST_COD": "WS1", "TST_TEMP": "25", "USER_TXT": "", "AUX_FILE": "",
                 "PKG_TYP": "", "FAMLY_ID": "PF", "DATE_COD": "", "FACIL_ID": FACILITY,
                 "FLOOR_ID": "sort-2", "PROC_ID": "n28x", "OPER_FRQ": "", "SPEC_NAM": "pf4_spec",
                 "SPEC_VER": "B", "FLOW_ID": "sort1"}),
        ("SDR", {"HEAD_NUM": 1, "SITE_GRP": 1, "SITE_CNT": len(lot.sites),
                 "SITE_NUM": list(lot.sites), "HAND_TYP": "prober", "HAND_ID": "prb-03",
                 "CARD_TYP": f"pc{len(lot.sites)}x", "CARD_ID": "pc-0451"}),
    ]
    for (site, pin), idx in pmr.items():
        recs.append(("PMR", {"PMR_INDX": idx, "CHAN_TYP": 0, "CHAN_NAM": f"s{site}c{idx:03d}",
                             "PHY_NAM": f"P{PINS.index(pin) + 1:02d}", "LOG_NAM": pin,
                             "HEAD_NUM": 1, "SITE_NUM": site}))
    # Group indices start at 32768 so they never clash with pin indices (from memory).
    for g, (name, pins) in enumerate(PIN_GROUPS.items()):
        idxs = [pmr[(s, p)] for s in lot.sites for p in pins]
        recs.append(("PGR", {"GRP_INDX": 32768 + g, "GRP_NAM": name, "PMR_INDX": idxs}))
    # WCR (from memory): WF_UNITS 3 = millimetres, WF_FLAT D = flat down.
    recs.append(("WCR", {"WAFR_SIZ": 200.0, "DIE_HT": 5.0, "DIE_WID": 5.0, "WF_UNITS": 3,
                         "WF_FLAT": "D", "CENTER_X": 0, "CENTER_Y": 0, "POS_X": "R",
                         "POS_Y": "U"}))
    recs.append(("WIR", {"HEAD_NUM": 1, "SITE_GRP": 1, "START_T": start_t,
                         "WAFER_ID": lot.wafer_id}))
    return recs


def marker(b: Block, p: Part) -> str:
    start, end = p.spans[b.index]
    return f"TT block={b.name} site={p.site} start_us={start} end_us={end}"


def emit_touchdown(em: Emitter, lot: LotSpec, td: Touchdown, blocks: list[Block]) -> None:
    """PIR per site, each block's section (sites one after another inside it), PRR per site."""
    num_test = {p.site: 0 for p in td.parts}
    for p in td.parts:
        em.add("PIR", HEAD_NUM=1, SITE_NUM=p.site)
    for b in blocks:
        running = [p for p in td.parts if b.index in p.spans]
        if not running:
            continue
        if lot.sections:
            em.add("BPS", SEQ_NAME=b.name)
        for p in running:
            em.unit = p.part_id
            num_test[p.site] += em.block(b, p.site, p.fail_block == b.index)
        if lot.sections:
            em.add("EPS")
        if lot.markers:
            for p in running:
                em.add("DTR", TEXT_DAT=marker(b, p))
    for p in td.parts:
        hb, sb = bins(p, blocks)
        em.add("PRR", HEAD_NUM=1, SITE_NUM=p.site, PART_FLG=0 if hb == 1 else 0x08,
               NUM_TEST=num_test[p.site], HARD_BIN=hb, SOFT_BIN=sb, X_COORD=p.x, Y_COORD=p.y,
               TEST_T=p.test_t_ms, PART_ID=p.part_id)


def block_site_us(tds: list[Touchdown], b: Block, site: int | None) -> list[int]:
    """Realised durations of block b on one site (None = every site)."""
    return [p.spans[b.index][1] - p.spans[b.index][0] for td in tds for p in td.parts
            if b.index in p.spans and site in (None, p.site)]


def tsr(em: Emitter, lot: LotSpec, tds: list[Touchdown], b: Block, t: TestDef,
        site: int | None) -> Rec | None:
    """One TSR; site None = the HEAD_NUM 255 summary. TEST_TIM is the block's mean time
    split over its tests by weight, so sum(TEST_TIM x EXEC_CNT) / parts = block mean."""
    keys = [k for k in em.stats if k[0] == t.num and site in (None, k[1])]
    execs = sum(em.stats[k].execs for k in keys)
    if execs == 0:
        return None
    fails = sum(em.stats[k].fails for k in keys)
    vals = [v for k in keys for v in em.stats[k].values]
    durs = block_site_us(tds, b, site)
    share = t.weight / sum(u.weight for u in b.tests)
    opt = 0 if lot.tsr_time_valid else 0x04            # STDF V4, TSR 10/30: bit 2
    test_tim = share * (sum(durs) / len(durs)) / 1e6 if lot.tsr_time_valid else 0.0
    if vals:
        stats = [min(vals), max(vals), math.fsum(vals), math.fsum(v * v for v in vals)]
    else:
        opt |= 0x33                                    # min, max, sums, squares invalid
        stats = [0.0] * 4
    return ("TSR", {"HEAD_NUM": 255 if site is None else 1, "SITE_NUM": site or 0,
                    "TEST_TYP": t.kind, "TEST_NUM": t.num, "EXEC_CNT": execs,
                    "FAIL_CNT": fails, "ALRM_CNT": 0, "TEST_NAM": t.name,
                    "SEQ_NAME": b.name, "TEST_LBL": "", "OPT_FLAG": opt, "TEST_TIM": test_tim,
                    "TEST_MIN": stats[0], "TEST_MAX": stats[1], "TST_SUMS": stats[2],
                    "TST_SQRS": stats[3]})


def bin_records(lot: LotSpec, parts: list[Part], blocks: list[Block]) -> list[Rec]:
    """HBR, SBR and PCR per site, then the HEAD_NUM 255 summaries."""
    soft = {1: "pass"} | {b.soft_bin: f"fail_{b.name}" for b in blocks}
    recs: list[Rec] = []
    for kind, table, pos in (("HBR", HARD_BINS, 0), ("SBR", soft, 1)):
        x = kind[0]
        for site in (*lot.sites, None):
            mine = [p for p in parts if site in (None, p.site)]
            for num, name in table.items():
                recs.append((kind, {"HEAD_NUM": 255 if site is None else 1,
                                    "SITE_NUM": site or 0, f"{x}BIN_NUM": num,
                                    f"{x}BIN_CNT": sum(bins(p, blocks)[pos] == num for p in mine),
                                    f"{x}BIN_PF": "P" if num == 1 else "F",
                                    f"{x}BIN_NAM": name}))
    for site in (*lot.sites, None):
        mine = [p for p in parts if site in (None, p.site)]
        # FUNC_CNT omitted (trailing): the standard's "missing"
        recs.append(("PCR", {"HEAD_NUM": 255 if site is None else 1, "SITE_NUM": site or 0,
                             "PART_CNT": len(mine), "RTST_CNT": 0, "ABRT_CNT": 0,
                             "GOOD_CNT": sum(p.fail_block is None for p in mine)}))
    return recs


def build_stdf(lot: LotSpec, blocks: list[Block], tds: list[Touchdown], index: list[int],
               rng: np.random.Generator, em: Emitter | None = None
               ) -> tuple[list[Rec], int, int, Emitter]:
    """Every record after the FAR, with START_T and FINISH_T, and the emitter (its trace
    holds what each unit returned)."""
    start_t = local_epoch(lot.start)
    finish_t = start_t + round((sum(td.duration_us for td in tds) + sum(index)) / 1e6)
    pmr = pmr_index(lot.sites)
    em = Emitter(pmr, rng) if em is None else em
    em.records = header(lot, pmr, start_t)
    for td in tds:
        emit_touchdown(em, lot, td, blocks)
    parts = [p for td in tds for p in td.parts]
    good = sum(p.fail_block is None for p in parts)
    # FUNC_CNT 4294967295 = missing (from memory); it must be written to reach WAFER_ID.
    em.add("WRR", HEAD_NUM=1, SITE_GRP=1, FINISH_T=finish_t, PART_CNT=len(parts), RTST_CNT=0,
           ABRT_CNT=0, GOOD_CNT=good, FUNC_CNT=0xFFFFFFFF, WAFER_ID=lot.wafer_id)
    for site in (*lot.sites, None):
        for b in blocks:
            for t in b.tests:
                rec = tsr(em, lot, tds, b, t, site)
                if rec:
                    em.records.append(rec)
    em.records += bin_records(lot, parts, blocks)
    em.add("MRR", FINISH_T=finish_t, DISP_COD=" ")
    return em.records, start_t, finish_t, em


def encode_stream(recs: list[Rec], endian: str) -> bytes:
    far = encode_record("FAR", {"CPU_TYPE": 1 if endian == ">" else 2, "STDF_VER": 4}, endian)
    return far + b"".join(encode_record(name, vals, endian) for name, vals in recs)


def gzip_bytes(data: bytes) -> bytes:
    """Byte-deterministic gzip: mtime 0, no file name in the header."""
    buf = io.BytesIO()
    with gzip.GzipFile(filename="", mode="wb", fileobj=buf, mtime=0, compresslevel=9) as gz:
        gz.write(data)
    return buf.getvalue()


# ------------------------------------------------------------------ the re-test
# Lot PF4-L0236 is a correlation run: the units of PF4-L0231 tested again, with the demo's
# plan applied. Each unit's result is re-measured from its baseline one with test-retest
# correlation RETEST_RHO (c = nom + rho (b - nom) + sqrt(1 - rho^2) sigma z: the same spread,
# paired differences of sd sigma sqrt(2 (1 - rho))). A unit fails where it failed before;
# on purpose, two tests move (PLANTED), flash_bist runs slower beside scan (CONCURRENT_SLOW)
# and the three passing units with the lowest adc_snr now fail it (FLIPS).

RETEST_RHO = 0.9
PLANTED = {  # test name -> (mean shift in baseline sigmas, ratio of sigmas)
    "adc_snr": (-0.8, 1.0),         # scan switching noise coupled into the ADC
    "pll_jitter_rms": (0.0, 1.6),   # supply noise from scan_core* beside pll_lock
}
FLIP_TEST, FLIPS = "adc_snr", 3
CONCURRENT_SLOW = {"flash_bist": 1.08}  # shares the core supply with a scan block
# The demo's plan for PF4-L0231 (tandem plan --blocks blocks.toml; proven optimal) as a
# program runs it: per site, after contact, lanes of blocks run in parallel, each block
# starting when the one before it in its lane ends; the shared rf_meter serves the sites in
# METER_ORDER, each use waiting for the one before it.
LANES = {
    1: ("scan_core0 scan_core1 scan_core3 scan_core2",
        "dc_leakage radio_tx flash_bist sram_bist radio_rx", "adc_linearity pll_lock"),
    2: ("scan_core0 scan_core3 scan_core1 scan_core2",
        "radio_tx dc_leakage sram_bist radio_rx", "adc_linearity flash_bist pll_lock"),
    3: ("scan_core2 scan_core3 scan_core1 scan_core0",
        "dc_leakage flash_bist sram_bist radio_tx radio_rx", "adc_linearity pll_lock"),
    4: ("scan_core3 scan_core1 scan_core2 scan_core0",
        "dc_leakage flash_bist sram_bist radio_tx radio_rx", "adc_linearity pll_lock"),
}
METER_ORDER = ("radio_tx:2 radio_tx:1 radio_tx:3 radio_tx:4 "
               "radio_rx:2 radio_rx:4 radio_rx:1 radio_rx:3").split()


class Retest(Emitter):
    """Writes a re-test: every result derived from the same unit's baseline result."""

    def __init__(self, pmr: dict[tuple[int, str], int], rng: np.random.Generator,
                 base: dict[tuple[str, int], Trace], flips: dict[str, int]):
        super().__init__(pmr, rng)
        self.base, self.flips = base, flips  # flips: part -> the test it now fails

    def block(self, b: Block, site: int, failing: bool) -> int:
        for t in b.tests:
            fail = self.base[(self.unit, t.num)].failed or self.flips.get(self.unit) == t.num
            st = self.stats.setdefault((t.num, site), Stats())
            st.execs += 1
            st.fails += fail
            {"P": self.ptr, "F": self.ftr, "M": self.mpr}[t.kind](t, site, fail, st)
        return len(b.tests)

    def again(self, f: Fam, name: str, nom: float, was: float) -> float:
        shift, ratio = PLANTED.get(name, (0.0, 1.0))
        dev = RETEST_RHO * (was - nom) + math.sqrt(1 - RETEST_RHO ** 2) * f.sigma * float(
            self.rng.standard_normal())
        v = nom + ratio * dev + shift * f.sigma
        v = max(v, f.lo) if f.lo is not None else v
        return f32(min(v, f.hi) if f.hi is not None else v)

    def result(self, t: TestDef, fail: bool) -> tuple[float, int]:
        if fail:
            return self.value(t.fam, True)
        return self.again(t.fam, t.name, t.fam.nom, self.base[(self.unit, t.num)].values[0]), 0xC0

    def mpr_values(self, t: TestDef, fail: bool) -> list[float]:
        f, was = t.fam, self.base[(self.unit, t.num)].values
        bow = 0.4 * np.sin(np.pi * np.arange(MPR_RESULTS) / (MPR_RESULTS - 1))
        vals = [self.again(f, t.name, float(bw), w) for bw, w in zip(bow, was, strict=True)]
        if fail:  # the element that failed before fails again
            outside = [k for k, w in enumerate(was) if not (f.lo or -math.inf) <= w
                       <= (f.hi if f.hi is not None else math.inf)]
            vals[outside[0] if outside else 0] = self.value(f, True)[0]
        return vals


def run_concurrent(td: Touchdown, blocks: list[Block], rng: np.random.Generator) -> None:
    """Every part's spans under LANES and METER_ORDER (durations drawn site by site, lane
    by lane, so the draws do not depend on the order starts are resolved in)."""
    by_name = {b.name: b for b in blocks}
    parts = {p.site: p for p in td.parts}
    dur: dict[tuple[str, int], int] = {}
    after: dict[tuple[str, int], list[tuple[str, int]]] = {}
    for p in td.parts:
        p.overhead_us = draw_us(OVERHEAD_MS, rng)
        dur[("contact", p.site)] = draw_us(by_name["contact"].nominal_ms(p.site), rng)
        for lane in LANES[p.site]:
            prev = ("contact", p.site)
            for name in lane.split():
                slow = CONCURRENT_SLOW.get(name, 1.0)
                dur[(name, p.site)] = draw_us(by_name[name].nominal_ms(p.site) * slow, rng)
                after[(name, p.site)] = [prev]
                prev = (name, p.site)
    for a, b in zip(METER_ORDER, METER_ORDER[1:], strict=False):
        na, sa = a.split(":")
        nb, sb = b.split(":")
        after[(nb, int(sb))].append((na, int(sa)))
    end: dict[tuple[str, int], int] = {}

    def finish(key: tuple[str, int]) -> int:
        if key not in end:
            start = max((finish(k) for k in after.get(key, [])),
                        default=parts[key[1]].overhead_us)
            end[key] = start + dur[key]
            parts[key[1]].spans[by_name[key[0]].index] = (start, end[key])
        return end[key]

    for key in dur:
        finish(key)
    for p in td.parts:
        p.end_us = max(e for _, e in p.spans.values())
    td.duration_us = max(p.end_us for p in td.parts)


def plan_retest(lot: LotSpec, blocks: list[Block], was: list[Touchdown],
                trace: dict[tuple[str, int], Trace], rng: np.random.Generator
                ) -> tuple[list[Touchdown], list[int], Retest, dict[str, Any]]:
    """The re-test's touchdowns (the baseline's units on the same sites), index times, its
    emitter, and the truth of what was planted."""
    flip_test = next(t for b in blocks for t in b.tests if t.name == FLIP_TEST)
    flip_block = next(b.index for b in blocks if flip_test in b.tests)
    passing = [p for td in was for p in td.parts if p.fail_block is None]
    lowest = sorted(passing, key=lambda p: (trace[(p.part_id, flip_test.num)].values[0],
                                            int(p.part_id)))[:FLIPS]
    flips = {p.part_id: flip_test.num for p in lowest}
    tds = []
    for old in was:
        parts = [Part(p.site, p.part_id, p.x, p.y,
                      flip_block if p.part_id in flips else p.fail_block,
                      list(range(len(blocks)))) for p in old.parts]
        td = Touchdown(parts)
        run_concurrent(td, blocks, rng)
        tds.append(td)
    index = [draw_us(INDEX_MS, rng) for _ in range(len(tds) - 1)]
    em = Retest(pmr_index(lot.sites), rng, trace, flips)
    base_ms = sum(td.duration_us for td in was) / len(was)
    new_ms = sum(td.duration_us for td in tds) / len(tds)
    return tds, index, em, {"retest": {
        "of": lot.retest_of, "rho": RETEST_RHO,
        "planted": {k: {"shift_sigma": v[0], "sigma_ratio": v[1]} for k, v in PLANTED.items()},
        "flipped_part_ids": sorted(flips, key=int), "flip_test": FLIP_TEST,
        "concurrent_slowdown": CONCURRENT_SLOW,
        "baseline_touchdown_ms": ms(base_ms), "touchdown_ms": ms(new_ms),
        "realised_saving_pct": round(100 * (1 - new_ms / base_ms), 4)}}


# ------------------------------------------------------------------ the timing CSV

CSV_HEADER = ("lot_id", "touchdown", "site", "part_id", "block", "start_ms", "end_ms", "head",
              "hard_bin", "soft_bin", "passed", "test_time_ms")


def build_csv(lot: LotSpec, blocks: list[Block], tds: list[Touchdown]) -> bytes:
    """One row per (part, block); times in ms from the touchdown start; touchdown 0-based."""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(CSV_HEADER)
    for k, td in enumerate(tds):
        for p in td.parts:
            hb, sb = bins(p, blocks)
            for b in blocks:
                if b.index in p.spans:
                    s, e = p.spans[b.index]
                    w.writerow((lot.lot_id, k, p.site, p.part_id, b.name, f"{s / 1000:.3f}",
                                f"{e / 1000:.3f}", 1, hb, sb, "true" if hb == 1 else "false",
                                p.test_t_ms))
    return buf.getvalue().encode("ascii")


# ------------------------------------------------------------------ the block map


def blocks_toml(blocks: list[Block]) -> str:
    lines = [
        "# Block map of the fictional Pebblefinch PF4 sort program (pf4_sort rev B2).",
        "# Written by sample_logs/generate.py; edit the device table there, not this file.",
        "",
        "[limits]",
        f"power_w = {POWER_LIMIT_W}        # per site: the four scan cores together draw more",
        f"parallel = {PARALLEL_LIMIT}          # per site: most blocks running at once",
        "",
        "[resource.rf_meter]",
        "count = 1",
        "shared = true        # one RF meter for the whole touchdown: sites take turns",
        "",
        "[resource.scan_port]",
        "count = 1",
        "shared = false       # one scan port per site: the cores' scan blocks cannot overlap",
        "",
        "# Assignment rules, for logs without sections: a [block.<name>] may also list",
        "#   tests = [[1000, 1999], 1042]   # inclusive test-number ranges (a number: itself)",
        '#   names = ["cont_*", "leak_i?_*"] # glob patterns on test names (case-sensitive)',
        "# The first rule that matches wins, in file order (each block's ranges first). Every",
        "# log here names its blocks (sections, TSR SEQ_NAME or the timing CSV): none needed.",
    ]
    for b in blocks:
        first = b.index == 0
        uses = ", ".join(f'"{u}"' for u in b.spec.uses)
        lines += ["", f"[block.{b.name}]", f"uses = [{uses}]", f"power_w = {b.spec.power_w}",
                  "after = []" if first else 'after = ["contact"]',
                  f"pinned = {'true' if first else 'false'}"]
    return "\n".join(lines + economics_and_whatifs()) + "\n"


def economics_and_whatifs() -> list[str]:
    """The block map's [economics] and [whatif.*] tables (our extensions of the contract)."""
    core_w = next(s.power_w for s in BLOCK_SPECS if s.name == "scan_core0")
    return [
        "",
        "[economics]",
        f"units_per_year = {UNITS_PER_YEAR}",
        f"tester_cost_per_hour = {TESTER_COST_PER_HOUR}   # currency-neutral: any unit per hour",
        '# currency = "credits"     # optional label for the report',
        f"# index_ms = {INDEX_MS}        # optional: overrides the index time the lots measure",
        "",
        "# What-ifs: design changes the planner evaluates, one at a time.",
        "",
        "# Broadcast one scan input to identical cores: the set becomes one block taking the",
        "# longest member's time plus overhead_ms. Its power defaults to the members' sum (every",
        f"# core still switches), so all four cores ({4 * core_w:.1f} W) would be too big for the",
        f"# {POWER_LIMIT_W:.1f} W power limit: this broadcasts a pair ({2 * core_w:.1f} W).",
        "[whatif.scan_broadcast_pair]",
        'kind = "broadcast"',
        'blocks = ["scan_core0", "scan_core1"]',
        "overhead_ms = 6.0",
        'note = "one scan input shared by cores 0 and 1"',
        "",
        "# Two ways to test the flash; the planner picks the better. An option's time_ms, power_w",
        "# and uses default to the block as measured. pattern_gen is declared nowhere: per site,",
        "# count 1.",
        "[whatif.flash_method]",
        'kind = "alternative"',
        'block = "flash_bist"',
        "options = [",
        '    { name = "on_chip_bist" },',
        '    { name = "tester_patterns", time_ms = 32.0, power_w = 0.7, uses = ["pattern_gen"] },',
        "]",
        "",
        "# One more instrument: a second RF meter, so two sites can measure radio at once.",
        "[whatif.second_rf_meter]",
        'kind = "extra_instrument"',
        'resource = "rf_meter"',
        "add = 1",
    ]


# ------------------------------------------------------------------ ground truth


def ms(us: float) -> float:
    return round(us / 1000, 4)


def block_truth(lot: LotSpec, blocks: list[Block], tds: list[Touchdown]) -> dict[str, Any]:
    out: dict[str, Any] = {}
    for b in blocks:
        per_site = {}
        for site in lot.sites:
            d = block_site_us(tds, b, site)
            if d:
                per_site[str(site)] = {"parts": len(d), "realised_mean_ms": ms(sum(d) / len(d)),
                                       "nominal_mean_ms": round(b.nominal_ms(site), 4)}
        out[b.name] = per_site
    return out


def identifiability(blocks: list[Block], parts: list[Part]) -> dict[str, Any]:
    """Which block times a regression of PRR.TEST_T on 'blocks run' can separate: a column
    that lies in the span of the others (rank test) cannot be; identical columns are
    reported together. The intercept is the per-part overhead."""
    names = ["overhead"] + [b.name for b in blocks]
    x = np.array([[1.0] + [float(b.index in p.spans) for b in blocks] for p in parts])
    full = np.linalg.matrix_rank(x)
    ident = {n: bool(np.linalg.matrix_rank(np.delete(x, j, axis=1)) < full)
             for j, n in enumerate(names)}
    groups: dict[bytes, list[str]] = {}
    for j, n in enumerate(names):
        groups.setdefault(x[:, j].tobytes(), []).append(n)
    return {"identifiable": ident,
            "confounded": [g for g in groups.values() if len(g) > 1]}


def record_truth(recs: list[Rec]) -> dict[str, Any]:
    count = {k: sum(1 for n, _ in recs if n == k) for k in ("PTR", "FTR", "MPR", "BPS", "EPS")}
    count["MPR_results"] = sum(len(v["RTN_RSLT"]) for n, v in recs if n == "MPR")
    count["markers"] = sum(1 for n, v in recs if n == "DTR" and v["TEXT_DAT"].startswith("TT "))
    return {"records": count,
            "ptr_result_sum": math.fsum(v["RESULT"] for n, v in recs if n == "PTR")}


def lot_truth(lot: LotSpec, blocks: list[Block], tds: list[Touchdown], index: list[int]
              ) -> dict[str, Any]:
    parts = [p for td in tds for p in td.parts]
    out: dict[str, Any] = {
        "lot_id": lot.lot_id, "wafer_id": lot.wafer_id, "job_rev": lot.job_rev,
        "sites": list(lot.sites),
        "touchdowns": len(tds), "parts": len(parts),
        "parts_per_site": {str(s): sum(p.site == s for p in parts) for s in lot.sites},
        "good_per_site": {str(s): sum(p.site == s and p.fail_block is None for p in parts)
                          for s in lot.sites},
        "has_sections": lot.sections and not lot.csv, "has_markers": lot.markers and not lot.csv,
        "tsr_test_time_valid": lot.tsr_time_valid and not lot.csv,
        "stop_on_fail": lot.stop_on_fail,
        "block_ms": block_truth(lot, blocks, tds),
        "overhead_ms": {"nominal": OVERHEAD_MS,
                        "realised_mean": ms(sum(p.overhead_us for p in parts) / len(parts))},
        "index_ms": {"nominal": INDEX_MS, "realised": [ms(u) for u in index]},
        "touchdown_ms": [ms(td.duration_us) for td in tds],
    }
    if lot.stop_on_fail:
        stops = {b.name: sum(p.fail_block == b.index for p in parts) for b in blocks}
        out["stops"] = stops | {"pass": sum(p.fail_block is None for p in parts)}
        out |= identifiability(blocks, parts)
    return out


def device_truth(blocks: list[Block]) -> dict[str, Any]:
    return {"name": "Pebblefinch PF4 (fictional)", "part_typ": PART_TYP, "job": JOB_NAM,
            "job_rev": JOB_REV, "tester_type": TSTR_TYP, "seed": SEED,
            "jitter": JITTER, "overhead_ms": OVERHEAD_MS, "index_ms": INDEX_MS,
            "blocks": [{"name": b.name, "nominal_ms": b.spec.mean_ms,
                        "tests": [t.num for t in b.tests], "shared": b.spec.shared,
                        "hard_bin": b.spec.hard_bin, "soft_bin": b.soft_bin}
                       for b in blocks]}


# ------------------------------------------------------------------ main


def generate(out_dir: Path) -> dict[str, Any]:
    """Write every sample output into out_dir; returns the ground truth."""
    out_dir.mkdir(parents=True, exist_ok=True)
    blocks = build_blocks()
    files: dict[str, Any] = {}
    made: dict[str, tuple[list[Touchdown], dict[tuple[str, int], Trace]]] = {}
    for lot in LOTS:
        rng = np.random.default_rng([SEED, lot.key])
        em: Emitter | None = None
        if lot.retest_of:
            was_tds, was_trace = made[lot.retest_of]
            tds, index, em, extra = plan_retest(lot, blocks, was_tds, was_trace, rng)
        else:
            tds, index = plan_lot(lot, blocks, rng)
            extra = {}
        base = lot_truth(lot, blocks, tds, index) | extra
        if lot.csv:
            name = lot.outputs[0].name
            (out_dir / name).write_bytes(build_csv(lot, blocks, tds))
            files[name] = {"format": "csv"} | base
            continue
        recs, start_t, finish_t, em = build_stdf(lot, blocks, tds, index, rng, em)
        made[lot.lot_id] = (tds, em.trace)
        base |= {"start_t": start_t, "finish_t": finish_t} | record_truth(recs)
        for o in lot.outputs:
            data = encode_stream(recs, o.endian)
            (out_dir / o.name).write_bytes(gzip_bytes(data) if o.gzip else data)
            files[o.name] = {"format": "stdf", "byte_order": "big" if o.endian == ">"
                             else "little", "compression": "gzip" if o.gzip else None} | base
    (out_dir / "blocks.toml").write_text(blocks_toml(blocks), encoding="utf-8")
    truth = {"device": device_truth(blocks), "files": files}
    (out_dir / "truth.json").write_text(json.dumps(truth, indent=1) + "\n", encoding="utf-8")
    return truth


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description="Write the Pebblefinch PF4 sample logs.")
    ap.add_argument("out_dir", nargs="?", type=Path, default=Path(__file__).resolve().parent,
                    help="where to write (default: this script's folder)")
    args = ap.parse_args(argv)
    generate(args.out_dir)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
