"""Per test: the baseline lot against the candidate lot.

A test is a test number (and record type; each MPR element is a test of its own). Its
distribution is compared on its **in-limit values** — results that did not fail and lie
within that lot's limits — and its fails go to the fail rate, so a few failing parts far
beyond a limit cannot pass for a shifted distribution. Each test gets up to four tests of
one hypothesis ("nothing changed"): Mann-Whitney (location), Brown-Forsythe (spread),
Fisher's exact test (fail rate) and, where units match, the Wilcoxon signed-rank test of
the paired differences. Their smallest p-value times their number is the test's p-value,
and the Benjamini-Hochberg procedure over every test compared controls the false
discovery rate. An aspect *moved* when it is beyond chance and also big enough to matter
(``Rules``: a mean or paired shift of at least ``min_shift`` baseline sigmas, a spread
ratio of at least ``min_ratio`` either way; any fail-rate change beyond chance): with many
units, changes far too small to matter are beyond chance too. Verdicts: ``same``,
``shifted`` (with the aspects that moved), ``too few``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import polars as pl

from . import stats
from .units import KEY

SAME, SHIFTED, TOO_FEW = "same", "shifted", "too few"
VERDICTS = (SAME, SHIFTED, TOO_FEW)
MIN_VALUES = 10     # per lot: fewer in-limit values (or executions) than this: too few
HIST_BINS = 24
ASPECTS = ("mean", "spread", "fail rate", "paired")


@dataclass(frozen=True)
class Rules:
    """When a test counts as moved: the false discovery rate, and the smallest changes
    that matter (a mean shift in baseline sigmas; a ratio of sigmas, either way)."""

    fdr: float = 0.05
    min_shift: float = 0.3
    min_ratio: float = 1.3

    def to_json(self) -> dict[str, float]:
        return {"fdr": self.fdr, "min_shift_sigma": self.min_shift,
                "min_sigma_ratio": self.min_ratio}


def test_values(results: pl.DataFrame, kept: pl.DataFrame) -> pl.DataFrame:
    """One row per (kept part, test): its first execution, with ``unit``, ``fail`` (the
    log's flag, else outside the limits) and ``inlim`` (a value that did not fail)."""
    outside = ((pl.col("lo_limit").is_not_null() & (pl.col("value") < pl.col("lo_limit")))
               | (pl.col("hi_limit").is_not_null() & (pl.col("value") > pl.col("hi_limit"))))
    return (results.join(kept.select("file_id", "part_index", "unit"),
                         on=["file_id", "part_index"], how="inner")
            .with_columns(pl.col("element").fill_null(-1).cast(pl.Int64).alias("elem"),
                          pl.col("test_num").cast(pl.Int64))
            .sort("rec_index")
            .unique(subset=["file_id", "part_index", *KEY], keep="first", maintain_order=True)
            .with_columns(pl.coalesce(pl.col("failed"), outside.fill_null(False)).alias("fail"))
            .with_columns((pl.col("value").is_not_null() & pl.col("value").is_finite()
                           & ~pl.col("fail") & ~outside).fill_null(False).alias("inlim")))


def per_test(tv: pl.DataFrame) -> pl.DataFrame:
    """One row per test: names, limits, executions, fails and the in-limit values."""
    return (tv.group_by(KEY, maintain_order=True).agg(
        pl.col("test_name").drop_nulls().first(), pl.col("block").drop_nulls().first(),
        pl.col("units").drop_nulls().first(), pl.col("lo_limit").drop_nulls().first(),
        pl.col("hi_limit").drop_nulls().first(), pl.col("rec_index").min().alias("order"),
        pl.col("fail").count().alias("executed"), pl.col("fail").sum().alias("fails"),
        pl.col("value").filter(pl.col("inlim")).alias("values")))


@dataclass(eq=False)
class TestResult:
    """One test's comparison; ``to_json`` is its row of ``tests`` in the JSON."""

    test_num: int
    record: str
    element: int | None
    test_name: str | None
    block: str | None
    units: str | None
    limits: tuple[float | None, float | None, float | None, float | None]  # lo, hi b; lo, hi c
    base: stats.Summary
    cand: stats.Summary
    executed: tuple[int, int]
    fails: tuple[int, int]
    p: dict[str, float] = field(default_factory=dict)     # aspect -> p-value
    p_test: float | None = None
    q_value: float | None = None
    verdict: str = SAME
    moved: list[str] = field(default_factory=list)
    reason: str = ""
    paired: tuple[int, float | None, float | None] = (0, None, None)
    diffs: np.ndarray = field(default_factory=lambda: np.empty(0))
    order: int = 0
    values: tuple[np.ndarray, np.ndarray] = (np.empty(0), np.empty(0))

    @property
    def name(self) -> str:
        base = self.test_name or f"test {self.test_num}"
        return base if self.element is None else f"{base}[{self.element}]"

    @property
    def shift_sigma(self) -> float | None:
        b, c = self.base, self.cand
        if b.mean is None or c.mean is None or not b.sd:
            return None
        return (c.mean - b.mean) / b.sd

    @property
    def sigma_ratio(self) -> float | None:
        b, c = self.base, self.cand
        return None if not b.sd or c.sd is None else c.sd / b.sd

    def fail_pct(self, side: int) -> float | None:
        n = self.executed[side]
        return 100.0 * self.fails[side] / n if n else None

    def cpk(self, side: int) -> float | None:
        s = (self.base, self.cand)[side]
        lo, hi = self.limits[2 * side], self.limits[2 * side + 1]
        return stats.cpk(s.mean, s.sd, lo, hi)

    def to_json(self) -> dict[str, Any]:
        n, mean_d, sd_d = self.paired
        return {
            "test_num": self.test_num, "test_name": self.test_name, "element": self.element,
            "record": self.record, "block": self.block, "units": self.units,
            "verdict": self.verdict, "moved": self.moved, "reason": self.reason,
            "n_baseline": self.base.n, "n_candidate": self.cand.n,
            "mean_baseline": self.base.mean, "mean_candidate": self.cand.mean,
            "sd_baseline": self.base.sd, "sd_candidate": self.cand.sd,
            "shift_sigma": self.shift_sigma, "sigma_ratio": self.sigma_ratio,
            "lo_limit": self.limits[0], "hi_limit": self.limits[1],
            "limits_changed": self.limits[:2] != self.limits[2:],
            "cpk_baseline": self.cpk(0), "cpk_candidate": self.cpk(1),
            "executed_baseline": self.executed[0], "executed_candidate": self.executed[1],
            "fails_baseline": self.fails[0], "fails_candidate": self.fails[1],
            "fail_pct_baseline": self.fail_pct(0), "fail_pct_candidate": self.fail_pct(1),
            "p_location": self.p.get("mean"), "p_spread": self.p.get("spread"),
            "p_fail_rate": self.p.get("fail rate"), "p_paired": self.p.get("paired"),
            "p_test": self.p_test,
            "q_value": self.q_value, "paired_n": n, "paired_mean_diff": mean_d,
            "paired_sd_diff": sd_d,
            "repeatability_sd": None if sd_d is None else sd_d / math.sqrt(2.0)}


def compare_tests(b_tv: pl.DataFrame, c_tv: pl.DataFrame, rules: Rules,
                  paired: pl.DataFrame | None = None) -> list[TestResult]:
    """Every test both lots ran, compared, FDR-corrected and ranked (moved first)."""
    both = per_test(b_tv).join(per_test(c_tv), on=KEY, how="inner", suffix="_c")
    pair = {} if paired is None else {
        (r[0], r[1], r[2]): r[3:] for r in paired.select(
            *KEY, "paired_n", "paired_mean_diff", "paired_sd_diff", "diffs").iter_rows()}
    out = [_one(r, pair.get((r["test_num"], r["record"], r["elem"])))
           for r in both.iter_rows(named=True)]
    _decide(out, rules)
    return rank(out)


def _one(r: dict[str, Any], paired: tuple[Any, ...] | None) -> TestResult:
    b = np.asarray(r["values"] or [], dtype=float)
    c = np.asarray(r["values_c"] or [], dtype=float)
    t = TestResult(int(r["test_num"]), str(r["record"]), None if r["elem"] == -1 else
                   int(r["elem"]), r["test_name_c"] or r["test_name"], r["block_c"] or r["block"],
                   r["units_c"] or r["units"],
                   (r["lo_limit"], r["hi_limit"], r["lo_limit_c"], r["hi_limit_c"]),
                   stats.summarise(b), stats.summarise(c), (r["executed"], r["executed_c"]),
                   (int(r["fails"] or 0), int(r["fails_c"] or 0)), order=int(r["order_c"] or 0),
                   values=(b, c))
    if paired is not None:
        t.paired = (int(paired[0]), paired[1], paired[2])
        t.diffs = np.asarray(paired[3] or [], dtype=float)
    if min(b.size, c.size) >= MIN_VALUES:
        t.p["mean"] = stats.mann_whitney(b, c)
        t.p["spread"] = stats.brown_forsythe(b, c)
    if t.diffs.size >= MIN_VALUES:
        t.p["paired"] = stats.wilcoxon_signed_rank(t.diffs)
    if min(t.executed) >= MIN_VALUES:
        t.p["fail rate"] = stats.fisher_exact(t.fails[0], t.executed[0], t.fails[1],
                                              t.executed[1])
    if t.p:
        t.p_test = stats.bonferroni_min(list(t.p.values()))
    return t


def _decide(tests: list[TestResult], rules: Rules) -> None:
    tested = [t for t in tests if t.p_test is not None]
    q = stats.bh_adjust([t.p_test or 0.0 for t in tested])
    for t, qv in zip(tested, q, strict=True):
        t.q_value = float(qv)
    flagged = [t for t in tested if t.q_value is not None and t.q_value <= rules.fdr]
    ids = {id(t) for t in flagged}
    # An aspect is beyond chance when it alone would have got its test flagged: k p <= the
    # largest test p-value the procedure rejected.
    cutoff = max((t.p_test for t in flagged if t.p_test is not None), default=-1.0)
    for t in tests:
        if t.p_test is None:
            t.verdict, t.reason = TOO_FEW, _too_few(t)
            continue
        beyond = [a for a in ASPECTS if a in t.p and len(t.p) * t.p[a] <= cutoff
                  and id(t) in ids]
        t.moved = [a for a in beyond if _matters(t, a, rules)]
        if t.moved:
            t.verdict = SHIFTED
            t.reason = "; ".join(_aspect(t, a) for a in t.moved)
        elif beyond:
            t.verdict = SAME
            t.reason = (f"a small change beyond chance (q {_g(t.q_value)}): "
                        + "; ".join(_aspect(t, a) for a in beyond)
                        + f", under the {rules.min_shift:g} σ / ×{rules.min_ratio:g} that "
                        "count (--min-shift, --min-ratio)")
        else:
            t.verdict = SAME
            t.reason = f"no change beyond chance (q {_g(t.q_value)})"
            if "mean" not in t.p and t.base.n + t.cand.n:
                t.reason += f"; {_too_few(t)} for the distribution"


def paired_shift(t: TestResult) -> float | None:
    d = t.paired[1]
    return None if d is None or not t.base.sd else d / t.base.sd


def _matters(t: TestResult, aspect: str, rules: Rules) -> bool:
    """Big enough to count; a size that cannot be put in sigmas (no baseline spread)
    always counts."""
    if aspect in ("mean", "paired"):
        s = t.shift_sigma if aspect == "mean" else paired_shift(t)
        return s is None or abs(s) >= rules.min_shift
    if aspect == "spread":
        r = t.sigma_ratio
        return r is None or r <= 0 or max(r, 1.0 / r) >= rules.min_ratio
    return True


def _aspect(t: TestResult, aspect: str) -> str:
    p = _g(t.p[aspect])
    if aspect == "mean":
        s = t.shift_sigma
        return (f"mean {_signed(s)} σ (Mann-Whitney p {p})" if s is not None else
                f"mean {_g(t.base.mean)} → {_g(t.cand.mean)} (Mann-Whitney p {p})")
    if aspect == "spread":
        r = t.sigma_ratio
        return (f"spread ×{r:.2f} (Brown-Forsythe p {p})" if r is not None else
                f"spread {_g(t.base.sd)} → {_g(t.cand.sd)} (Brown-Forsythe p {p})")
    if aspect == "paired":
        n, d, _ = t.paired
        s = paired_shift(t)
        if s is not None:
            return f"paired shift {_signed(s)} σ over {n} units (Wilcoxon p {p})"
        return f"paired shift {_g(d)} over {n} units (Wilcoxon p {p})"
    return (f"fail rate {_pct(t.fail_pct(0))} → {_pct(t.fail_pct(1))} "
            f"({t.fails[0]} → {t.fails[1]} fails; Fisher p {p})")


def _too_few(t: TestResult) -> str:
    kind = "executions" if t.record == "FTR" else "in-limit values"
    got = t.executed if t.record == "FTR" else (t.base.n, t.cand.n)
    return (f"too few {kind}: {got[0]} in the baseline, {got[1]} in the candidate "
            f"({MIN_VALUES} needed in each)")


def rank(tests: list[TestResult]) -> list[TestResult]:
    """Shifted first (smallest q, then the largest shift), then same, then too few."""
    def key(t: TestResult) -> tuple[int, float, float, int]:
        s = t.shift_sigma
        return (VERDICTS.index(t.verdict) if t.verdict != SHIFTED else -1,
                t.q_value if t.q_value is not None else 2.0,
                -abs(s) if s is not None else 0.0, t.test_num)
    return sorted(tests, key=key)


def histogram(t: TestResult, bins: int = HIST_BINS) -> list[dict[str, float]]:
    """Shares of each lot's in-limit values in common bins (for the report's chart)."""
    b, c = t.values
    both = np.concatenate([b, c])
    if both.size == 0:
        return []
    lo, hi = float(both.min()), float(both.max())
    if hi <= lo:
        hi = lo + (abs(lo) or 1.0) * 1e-6
    edges = np.linspace(lo, hi, bins + 1)
    hb = np.histogram(b, edges)[0] / max(1, b.size) * 100.0
    hc = np.histogram(c, edges)[0] / max(1, c.size) * 100.0
    return [{"lo": float(edges[i]), "hi": float(edges[i + 1]), "baseline_pct": float(hb[i]),
             "candidate_pct": float(hc[i])} for i in range(bins)]


def _g(v: float | None) -> str:
    return "n/a" if v is None else f"{v:.2g}"


def _signed(v: float) -> str:
    return f"{v:+.2f}".replace("-", "−")


def _pct(v: float | None) -> str:
    return "n/a" if v is None else f"{v:.1f} %"
