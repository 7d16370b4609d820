"""pipeline.verify.stats against outside references, each named beside its check:
scipy.stats on the same data (Mann-Whitney, Brown-Forsythe, Wilcoxon signed-rank, Fisher's
exact test),
the Benjamini-Hochberg worked example of their 1995 paper and statsmodels' implementation,
and Cpk by its usual formula on a worked example."""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats as sps
from statsmodels.stats.multitest import multipletests

from pipeline.verify import stats


def samples() -> list[tuple[np.ndarray, np.ndarray]]:
    rng = np.random.default_rng(7)
    return [
        (rng.normal(0, 1, 60), rng.normal(0, 1, 75)),            # no difference
        (rng.normal(0, 1, 400), rng.normal(0.8, 1, 400)),        # a mean shift
        (rng.normal(0, 1, 400), rng.normal(0, 1.6, 400)),        # a spread change
        (np.round(rng.normal(5, 2, 50)), np.round(rng.normal(5.5, 2, 40))),  # many ties
        (rng.exponential(1, 30), rng.exponential(1.5, 12)),      # skewed, unequal sizes
        (np.r_[rng.normal(0, 1, 397), [40.0, 45.0, 50.0]], rng.normal(0, 1, 400)),  # outliers
    ]


@pytest.mark.parametrize("case", range(len(samples())))
def test_mann_whitney_is_scipys_asymptotic_test(case: int) -> None:
    x, y = samples()[case]
    # scipy.stats.mannwhitneyu, normal approximation with tie and continuity corrections
    want = sps.mannwhitneyu(x, y, alternative="two-sided", method="asymptotic",
                            use_continuity=True).pvalue
    assert stats.mann_whitney(x, y) == pytest.approx(want, rel=1e-9, abs=1e-300)
    assert stats.mann_whitney(y, x) == pytest.approx(want, rel=1e-9, abs=1e-300)


@pytest.mark.parametrize("case", range(len(samples())))
def test_brown_forsythe_is_scipys_median_levene(case: int) -> None:
    x, y = samples()[case]
    # scipy.stats.levene(center="median") is the Brown-Forsythe test
    want = sps.levene(x, y, center="median").pvalue
    assert stats.brown_forsythe(x, y) == pytest.approx(want, rel=1e-9, abs=1e-300)


@pytest.mark.parametrize("case", range(len(samples())))
def test_wilcoxon_signed_rank_is_scipys_approximate_test(case: int) -> None:
    x, y = samples()[case]
    n = min(x.size, y.size)
    d = y[:n] - x[:n]
    # scipy.stats.wilcoxon: zeros dropped, normal approximation, tie + continuity corrected
    want = sps.wilcoxon(d, zero_method="wilcox", correction=True, method="approx").pvalue
    assert stats.wilcoxon_signed_rank(d) == pytest.approx(want, rel=1e-9, abs=1e-300)


def test_wilcoxon_with_ties_and_zero_differences() -> None:
    d = np.array([0, 0, 1, 1, 1, -1, 2, 2, -2, 3, 0, 1, 4, -1, 1, 2], dtype=float)
    want = sps.wilcoxon(d, zero_method="wilcox", correction=True, method="approx").pvalue
    assert stats.wilcoxon_signed_rank(d) == pytest.approx(want, rel=1e-9)
    assert stats.wilcoxon_signed_rank(np.zeros(12)) == 1.0


@settings(max_examples=150, deadline=None)
@given(st.lists(st.integers(-5, 5), min_size=3, max_size=40),
       st.lists(st.integers(-5, 5), min_size=3, max_size=40))
def test_rank_and_spread_tests_agree_with_scipy_on_heavily_tied_data(a: list[int],
                                                                       b: list[int]) -> None:
    x, y = np.array(a, float), np.array(b, float)
    if np.unique(np.r_[x, y]).size > 1:  # scipy's asymptotic test is undefined otherwise
        want = sps.mannwhitneyu(x, y, method="asymptotic").pvalue
        assert stats.mann_whitney(x, y) == pytest.approx(want, rel=1e-9, abs=1e-12)
    else:
        assert stats.mann_whitney(x, y) == 1.0
    dx, dy = np.abs(x - np.median(x)), np.abs(y - np.median(y))
    if np.ptp(dx) > 0 or np.ptp(dy) > 0:  # scipy divides by zero when both are constant
        want = sps.levene(x, y, center="median").pvalue
        got = stats.brown_forsythe(x, y)
        assert got == pytest.approx(want, rel=1e-7, abs=1e-12) or np.isnan(want)


def test_fisher_exact_is_scipys_on_every_small_table() -> None:
    # scipy.stats.fisher_exact, two-sided, on every table with margins up to 9 x 9
    for n_a, n_b in itertools.product(range(1, 10), repeat=2):
        for fa, fb in itertools.product(range(n_a + 1), range(n_b + 1)):
            want = sps.fisher_exact([[fa, n_a - fa], [fb, n_b - fb]]).pvalue
            got = stats.fisher_exact(fa, n_a, fb, n_b)
            assert got == pytest.approx(min(1.0, want), rel=1e-9), (fa, n_a, fb, n_b)


@pytest.mark.parametrize("table", [(0, 400, 3, 400), (2, 400, 9, 400), (40, 10_000, 71, 10_000),
                                   (0, 160, 0, 160), (160, 160, 150, 160)])
def test_fisher_exact_on_lot_sized_tables(table: tuple[int, int, int, int]) -> None:
    fa, na, fb, nb = table
    want = sps.fisher_exact([[fa, na - fa], [fb, nb - fb]]).pvalue
    assert stats.fisher_exact(*table) == pytest.approx(min(1.0, want), rel=1e-9)


# Benjamini & Hochberg (1995), J. R. Statist. Soc. B 57, 289-300, section 4: fifteen
# p-values from a study of myocardial infarction treatments; at q = 0.05 their procedure
# rejects the four smallest, where Bonferroni (0.05 / 15) rejects three. (From memory of
# the paper; the counts are checked by hand below and against statsmodels.)
BH_1995 = [0.0001, 0.0004, 0.0019, 0.0095, 0.0201, 0.0278, 0.0298, 0.0344, 0.0459, 0.3240,
           0.4262, 0.5719, 0.6528, 0.7590, 1.000]


def test_benjamini_hochberg_on_the_papers_example() -> None:
    q = stats.bh_adjust(BH_1995)
    assert (q <= 0.05).sum() == 4
    assert (np.array(BH_1995) <= 0.05 / 15).sum() == 3
    # by hand: the fourth smallest, 0.0095 * 15 / 4, is the adjusted value of it and of
    # everything smaller that would otherwise exceed it
    assert q[3] == pytest.approx(0.0095 * 15 / 4)
    assert q[0] == pytest.approx(0.0001 * 15) and q[-1] == 1.0


@pytest.mark.parametrize("seed", range(5))
def test_benjamini_hochberg_is_statsmodels_fdr_bh(seed: int) -> None:
    rng = np.random.default_rng(seed)
    p = np.r_[rng.uniform(0, 1, 80), rng.uniform(0, 1e-3, 6 * seed)]
    rng.shuffle(p)
    reject, corrected, _, _ = multipletests(p, alpha=0.05, method="fdr_bh")
    got = stats.bh_adjust(p)
    np.testing.assert_allclose(got, corrected, rtol=1e-12)
    assert ((got <= 0.05) == reject).all()


def test_cpk_by_its_usual_formula_on_a_worked_example() -> None:
    # Cpk = min(USL - mean, mean - LSL) / (3 sigma) (the usual definition, e.g. Montgomery,
    # Introduction to Statistical Quality Control; from memory). Worked by hand: mean 10.2,
    # sigma 0.1, LSL 9.7, USL 10.6: Cpu = 0.4 / 0.3 = 1.333, Cpl = 0.5 / 0.3 = 1.667.
    assert stats.cpk(10.2, 0.1, 9.7, 10.6) == pytest.approx(4 / 3)
    assert stats.cpk(10.2, 0.1, None, 10.6) == pytest.approx(4 / 3)   # Cpu alone
    assert stats.cpk(10.2, 0.1, 9.7, None) == pytest.approx(5 / 3)    # Cpl alone
    assert stats.cpk(10.2, 0.1, None, None) is None
    assert stats.cpk(10.2, 0.0, 9.7, 10.6) is None
    assert stats.cpk(11.0, 0.1, 9.7, 10.6) == pytest.approx(-4 / 3)   # mean outside


def test_summary_and_bonferroni() -> None:
    x = np.array([1.0, 2.0, 4.0])
    s = stats.summarise(x)
    assert (s.n, s.mean, s.sd) == (3, pytest.approx(7 / 3), pytest.approx(np.std(x, ddof=1)))
    assert stats.summarise([]) == stats.Summary(0, None, None)
    assert stats.bonferroni_min([0.01, 0.5, 0.9]) == pytest.approx(0.03)
    assert stats.bonferroni_min([0.6, 0.9]) == 1.0


def test_degenerate_samples_say_nothing_changed() -> None:
    same = np.full(20, 3.0)
    assert stats.mann_whitney(same, same) == 1.0
    assert stats.brown_forsythe(same, same) == 1.0
    assert stats.mann_whitney(same, same + 1) < 1e-6   # constant, but elsewhere
    assert stats.fisher_exact(0, 100, 0, 100) == 1.0
