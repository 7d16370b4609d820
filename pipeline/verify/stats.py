"""The statistics of a verification, pure functions of numbers (numpy; scipy.special for
the distribution tails). tests/test_verify_stats.py checks each against scipy.stats on the
same data, Cpk against a worked example and the false-discovery correction against the
published example of Benjamini and Hochberg (1995) and statsmodels.

Why these tests: failing parts and marginal units put far-out values into a lot, and a
mean/variance test (Welch t, Levene on means) lets three such values decide the verdict.
Mann-Whitney (location) and Brown-Forsythe (spread: Levene on deviations from the median)
are robust to them and lose little power on normal data; fail rates get Fisher's exact
test, which is right for the small counts fails come in. Where units match, the paired
differences get the Wilcoxon signed-rank test: a unit measured twice correlates with
itself, so the paired test sees shifts far smaller than the two-sample tests can.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy import special

ArrayLike = Sequence[float] | np.ndarray


@dataclass(frozen=True)
class Summary:
    n: int
    mean: float | None
    sd: float | None  # sample standard deviation (n - 1)


def summarise(x: ArrayLike) -> Summary:
    a = np.asarray(x, dtype=float)
    if a.size == 0:
        return Summary(0, None, None)
    return Summary(int(a.size), float(a.mean()), float(a.std(ddof=1)) if a.size > 1 else None)


def _ranks(values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """1-based ranks, ties given their average rank; and the size of each tie group."""
    _, inverse, counts = np.unique(values, return_inverse=True, return_counts=True)
    top = np.cumsum(counts)
    return (top - (counts - 1) / 2.0)[inverse], counts


def mann_whitney(x: ArrayLike, y: ArrayLike) -> float:
    """Two-sided p-value of the Mann-Whitney U test, normal approximation with the tie
    correction and a continuity correction of 1/2 (as scipy's method='asymptotic')."""
    a, b = np.asarray(x, dtype=float), np.asarray(y, dtype=float)
    n1, n2 = a.size, b.size
    if n1 == 0 or n2 == 0:
        return 1.0
    ranks, ties = _ranks(np.concatenate([a, b]))
    u1 = float(ranks[:n1].sum()) - n1 * (n1 + 1) / 2.0
    n = n1 + n2
    tie_term = float((ties.astype(float) ** 3 - ties).sum()) / (n * (n - 1))
    var = n1 * n2 / 12.0 * ((n + 1) - tie_term)
    if var <= 0:
        return 1.0  # every value the same: nothing tells the samples apart
    z = (abs(u1 - n1 * n2 / 2.0) - 0.5) / math.sqrt(var)
    return float(min(1.0, 2.0 * special.ndtr(-z)))


def wilcoxon_signed_rank(d: ArrayLike) -> float:
    """Two-sided p-value of the Wilcoxon signed-rank test of paired differences: zero
    differences dropped, normal approximation with the tie and continuity corrections (as
    scipy's wilcoxon(zero_method='wilcox', correction=True, method='approx'))."""
    a = np.asarray(d, dtype=float)
    a = a[a != 0]
    n = a.size
    if n == 0:
        return 1.0
    ranks, ties = _ranks(np.abs(a))
    r_plus = float(ranks[a > 0].sum())
    var = n * (n + 1) * (2 * n + 1) / 24.0 - float((ties.astype(float) ** 3 - ties).sum()) / 48.0
    if var <= 0:
        return 1.0
    z = (abs(r_plus - n * (n + 1) / 4.0) - 0.5) / math.sqrt(var)
    return float(min(1.0, 2.0 * special.ndtr(-z)))


def brown_forsythe(x: ArrayLike, y: ArrayLike) -> float:
    """p-value of the Brown-Forsythe test of equal spread: a one-way ANOVA F test on the
    absolute deviations from each sample's median (scipy's levene(center='median'))."""
    groups = [np.abs(g - np.median(g)) for g in (np.asarray(x, float), np.asarray(y, float))]
    n = sum(g.size for g in groups)
    if min(g.size for g in groups) < 2:
        return 1.0
    grand = np.concatenate(groups).mean()
    between = sum(g.size * (g.mean() - grand) ** 2 for g in groups)  # k - 1 = 1
    within = sum(float(((g - g.mean()) ** 2).sum()) for g in groups)
    if within <= 0:
        return 1.0 if between <= 0 else 0.0
    f = (n - 2) * between / within
    return float(special.fdtrc(1, n - 2, f))


def fisher_exact(fails_a: int, n_a: int, fails_b: int, n_b: int) -> float:
    """Two-sided p-value of Fisher's exact test on the 2x2 table (fails, passes) x (a, b):
    the total probability, under the hypergeometric law of the margins, of every table no
    more likely than the one observed (relative tolerance 1e-7 for ties in probability)."""
    fails = fails_a + fails_b
    n = n_a + n_b
    if n == 0 or fails in (0, n):
        return 1.0
    k = np.arange(max(0, fails - n_b), min(fails, n_a) + 1)
    logp = (_log_choose(n_a, k) + _log_choose(n_b, fails - k) - _log_choose(n, fails))
    p = np.exp(logp - logp.max())
    seen = p[k == fails_a][0]
    return float(min(1.0, p[p <= seen * (1 + 1e-7)].sum() / p.sum()))


def _log_choose(n: int, k: np.ndarray | int) -> np.ndarray:
    k = np.asarray(k, dtype=float)
    return np.asarray(special.gammaln(n + 1) - special.gammaln(k + 1) - special.gammaln(n - k + 1))


def bh_adjust(p: ArrayLike) -> np.ndarray:
    """Benjamini-Hochberg adjusted p-values (the step-up false discovery rate procedure,
    as R's p.adjust(method = "BH")): reject at rate q every hypothesis whose value <= q."""
    a = np.asarray(p, dtype=float)
    m = a.size
    if m == 0:
        return a
    order = np.argsort(a, kind="mergesort")
    scaled = a[order] * m / np.arange(1, m + 1)
    adjusted = np.minimum.accumulate(scaled[::-1])[::-1]
    out = np.empty(m)
    out[order] = np.minimum(adjusted, 1.0)
    return out


def bonferroni_min(p: Sequence[float]) -> float:
    """One p-value for several tests of one hypothesis: the smallest, times their number."""
    return min(1.0, len(p) * min(p)) if p else 1.0


def cpk(mean: float | None, sd: float | None, lo: float | None, hi: float | None
        ) -> float | None:
    """Process capability: min(USL - mean, mean - LSL) / (3 sigma); with one limit, that
    side alone (Cpu or Cpl). None without a limit or a spread."""
    if mean is None or sd is None or sd <= 0 or (lo is None and hi is None):
        return None
    sides = [(hi - mean) if hi is not None else math.inf,
             (mean - lo) if lo is not None else math.inf]
    return min(sides) / (3.0 * sd)
