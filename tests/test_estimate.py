"""Block times from part totals: NNLS, identifiability and the bootstrap, against outsiders.

References from outside our code: the exact NNLS optimum by trying every support on small
systems (``nnls`` itself is ``scipy.optimize.nnls`` behind our checks; the estimate's
merged-pattern fit is compared with scipy on the raw design); the matroid of the
design's columns, enumerated subset by subset, for which columns the data cannot
separate; and the block times we planted in synthetic stop-on-fail data. No expected
value here was copied from our own output.
"""

from __future__ import annotations

import itertools
import time
from collections.abc import Callable

import numpy as np
import pytest
from scipy.optimize import nnls as scipy_nnls

from pipeline.attribute.estimate import Estimate, estimate_block_times, identifiability, nnls
from pipeline.errors import ConfigError, InputError
from tests.conftest import TOTALS_ONLY, file_truth

Design = tuple[np.ndarray, list[str]]

# ------------------------------------------------------------------ synthetic logs


def staircase(rng: np.random.Generator, n_parts: int, n_blocks: int,
              fail_rate: float = 0.06, contact_fail: float = 0.05) -> np.ndarray:
    """Stop-on-fail runs: a part that fails at block k ran blocks 0..k and no more.

    ``contact_fail`` of the parts fail at contact and run no block at all; without them
    block 0 runs on every part and cannot be told from the per-part overhead.
    """
    last = np.full(n_parts, n_blocks - 1)
    for k in range(n_blocks - 1, -1, -1):  # the first failing block wins
        last[rng.random(n_parts) < fail_rate] = k
    last[rng.random(n_parts) < contact_fail] = -1
    return (np.arange(n_blocks)[None, :] <= last[:, None]).astype(np.float64)


def part_times(rng: np.random.Generator, X: np.ndarray, times: np.ndarray, overhead: float,
               noise: float = 0.0) -> np.ndarray:
    """Part totals from planted times, with multiplicative Gaussian noise (0.02 = 2 %)."""
    exact = overhead + X @ times
    return exact * (1.0 + noise * rng.standard_normal(exact.shape))


def names_for(n: int) -> list[str]:
    return [f"block{i}" for i in range(n)]


def values(est: Estimate) -> np.ndarray:
    return np.array([b.value_ms for b in est.blocks.values()])


def intervals(est: Estimate) -> tuple[np.ndarray, np.ndarray]:
    blocks = est.blocks.values()
    return np.array([b.ci_low_ms for b in blocks]), np.array([b.ci_high_ms for b in blocks])


# -------------------------------------------------------------------------- nnls


def random_system(seed: int) -> tuple[str, np.ndarray, np.ndarray]:
    """One of six kinds of system, cycling with the seed; all but "wide" full column rank."""
    rng = np.random.default_rng(seed)
    kind = ("planted zeros", "signed truth", "ill-conditioned", "0/1 design", "square",
            "wide")[seed % 6]
    m = int(rng.integers(8, 80))
    n = int(rng.integers(2, min(m, 25)))
    if kind == "square":
        m = n
    if kind == "wide":
        m, n = n, m
    A = rng.standard_normal((m, n))
    if kind == "ill-conditioned":  # nearly collinear columns: condition number ~1e3
        A[:, 1:] = A[:, [0]] + 1e-3 * A[:, 1:]
    if kind == "0/1 design":
        A = (rng.random((m, n)) < 0.5).astype(np.float64)
        A[:, 0] = 1.0
    truth = np.abs(rng.standard_normal(n)) * (rng.random(n) < 0.6)
    b = A @ truth + 0.3 * rng.standard_normal(m)
    if kind == "signed truth":  # negative planted coefficients: NNLS must clip them
        b = A @ rng.standard_normal(n) + 0.3 * rng.standard_normal(m)
    return kind, A, b


@pytest.mark.parametrize("seed", range(66))
def test_nnls_returns_scipys_answer_through_our_checks(seed: int) -> None:
    kind, A, b = random_system(seed)
    x, rnorm = nnls(A, b)
    ref, ref_rnorm = scipy_nnls(A, b)
    assert rnorm == pytest.approx(ref_rnorm, rel=1e-8, abs=1e-12)
    assert rnorm == pytest.approx(np.linalg.norm(A @ x - b), rel=1e-12)
    assert (x >= 0).all()
    if kind == "wide":  # m < n: the minimiser is not unique, the residual is
        return
    if kind == "signed truth":
        assert (ref == 0).any(), "the case should exercise active constraints"
    scale = max(np.abs(ref).max(), 1.0)
    np.testing.assert_allclose(x, ref, rtol=1e-8, atol=1e-8 * scale)


def exhaustive_nnls(A: np.ndarray, b: np.ndarray) -> tuple[np.ndarray, float]:
    """The exact optimum: the NNLS solution is the least-squares fit on its own support,
    so try every support and keep the best feasible fit."""
    best, best_r = np.zeros(A.shape[1]), float(np.linalg.norm(b))
    for size in range(1, A.shape[1] + 1):
        for support in itertools.combinations(range(A.shape[1]), size):
            cols = list(support)
            z = np.linalg.lstsq(A[:, cols], b, rcond=None)[0]
            if (z >= 0).all():
                x = np.zeros(A.shape[1])
                x[cols] = z
                r = float(np.linalg.norm(A @ x - b))
                if r < best_r - 1e-12:
                    best, best_r = x, r
    return best, best_r


@pytest.mark.parametrize("seed", range(30))
def test_nnls_finds_the_exhaustive_optimum(seed: int) -> None:
    rng = np.random.default_rng(1000 + seed)
    n = int(rng.integers(1, 5))
    A = rng.standard_normal((n + int(rng.integers(0, 4)), n))
    b = rng.standard_normal(A.shape[0])
    x, rnorm = nnls(A, b)
    best, best_r = exhaustive_nnls(A, b)
    assert rnorm == pytest.approx(best_r, rel=1e-10, abs=1e-12)
    np.testing.assert_allclose(x, best, rtol=1e-9, atol=1e-12)


def test_nnls_worked_by_hand() -> None:
    # By hand: x1 fits rows with b = 2 and 1 (their mean 1.5), x2 fits b = 1 exactly, so
    # the residual is sqrt(0.5^2 + 0.5^2). With b < 0 everywhere x = 0 and ||r|| = ||b||.
    A = np.array([[1.0, 0.0], [1.0, 0.0], [0.0, 1.0]])
    x, rnorm = nnls(A, np.array([2.0, 1.0, 1.0]))
    np.testing.assert_allclose(x, [1.5, 1.0], rtol=1e-14)
    assert rnorm == pytest.approx(np.sqrt(0.5), rel=1e-14)
    x, rnorm = nnls(A, -np.ones(3))
    assert x.tolist() == [0.0, 0.0]
    assert rnorm == pytest.approx(np.sqrt(3.0), rel=1e-14)


def test_nnls_meets_the_optimality_conditions_on_a_staircase() -> None:
    # Karush-Kuhn-Tucker for min ||Ax - b|| s.t. x >= 0: x >= 0, gradient A^T(b - Ax) <= 0
    # everywhere and = 0 where x > 0. Two planted zero block times make some bind.
    rng = np.random.default_rng(7)
    X = staircase(rng, 400, 10)
    A = np.hstack([np.ones((400, 1)), X])
    truth = np.array([12.0, 30, 0, 8, 25, 0, 14, 40, 9, 21, 5])
    b = part_times(rng, X, truth[1:], truth[0], noise=0.02)
    x, _ = nnls(A, b)
    gradient = A.T @ (b - A @ x)
    tol = 1e-9 * np.linalg.norm(A) * np.linalg.norm(b)
    assert (x >= 0).all() and (gradient <= tol).all()
    assert np.abs(gradient[x > 0]).max() <= tol
    assert (x == 0).any(), "a planted zero should bind"


def test_nnls_is_deterministic_and_takes_the_first_of_tied_columns() -> None:
    rng = np.random.default_rng(3)
    A = rng.standard_normal((20, 4))
    A[:, 2] = A[:, 1]
    b = A @ np.array([1.0, 2.0, 2.0, 0.5])
    first, again = nnls(A, b), nnls(A, b)
    assert first[0].tobytes() == again[0].tobytes() and first[1] == again[1]
    assert first[0][2] == 0.0
    assert first[0][1] == pytest.approx(4.0, rel=1e-10)  # the two tied columns' sum


def test_nnls_input_checks_and_iteration_limit() -> None:
    with pytest.raises(ValueError, match="2-D"):
        nnls(np.ones(3), np.ones(3))
    with pytest.raises(ValueError, match=r"shape \(3,\)"):
        nnls(np.ones((3, 2)), np.ones(4))
    with pytest.raises(ValueError, match="finite"):
        nnls(np.ones((3, 2)), np.array([1.0, np.nan, 2.0]))
    _, A, b = random_system(6)  # 6 % 6 == 0: planted zeros, needs several entries
    with pytest.raises(RuntimeError, match="no convergence after 1 iterations"):  # scipy's limit
        nnls(A, b, max_iter=1)


# -------------------------------------------------------------- identifiability


def design_full_rank() -> Design:
    return staircase(np.random.default_rng(11), 300, 6), names_for(6)


def design_identical() -> Design:
    X = staircase(np.random.default_rng(12), 300, 4)
    return np.hstack([X, X[:, [1]]]), ["contact", "flash_bist", "scan", "iddq", "sram_bist"]


def design_always_runs() -> Design:
    X = staircase(np.random.default_rng(13), 300, 4)
    return np.hstack([np.ones((300, 1)), X]), ["vdd_cont", *names_for(4)]


def design_sum_of_two() -> Design:
    rng = np.random.default_rng(14)
    X = staircase(rng, 300, 4)
    branch = rng.integers(0, 3, 300)  # 0: neither, 1: a, 2: b; c runs after either
    a, b = (branch == 1) * 1.0, (branch == 2) * 1.0
    return np.column_stack([X, a, b, a + b]), [*names_for(4), "a", "b", "c"]


def design_two_dependencies() -> Design:
    rng = np.random.default_rng(15)
    X = staircase(rng, 300, 3)
    a, b = (rng.random(300) < 0.4) * 1.0, (rng.random(300) < 0.4) * 1.0
    d = (rng.random(300) < 0.5) * 1.0
    return (np.column_stack([X, a, a, b, d, b + d]),
            [*names_for(3), "a", "a_twin", "b", "d", "b_or_d"])


def design_never_ran() -> Design:
    X = staircase(np.random.default_rng(16), 300, 4)
    return np.hstack([X, np.zeros((300, 1))]), [*names_for(4), "spare"]


def design_one_of_two() -> Design:
    rng = np.random.default_rng(17)
    X = staircase(rng, 300, 3)
    a = (rng.random(300) < 0.5) * 1.0
    return np.column_stack([X, a, 1 - a]), [*names_for(3), "trim_a", "trim_b"]


def design_twice_everywhere() -> Design:
    X = staircase(np.random.default_rng(18), 300, 3)
    return np.hstack([X, np.full((300, 1), 2.0)]), [*names_for(3), "twice"]


def design_identical_inside_dependency() -> Design:
    rng = np.random.default_rng(19)
    X = staircase(rng, 300, 3)
    a = (rng.random(300) < 0.4) * 1.0
    d = (1 - a) * (rng.random(300) < 0.5)
    return np.column_stack([X, a, a, a + d, d]), [*names_for(3), "a", "b", "c", "d"]


IDENTIFIABILITY_CASES: list[tuple[Callable[[], Design], list[list[str]]]] = [
    (design_full_rank, []),
    (design_identical, [["flash_bist", "sram_bist"]]),
    (design_always_runs, [["overhead", "vdd_cont"]]),
    (design_sum_of_two, [["a", "b", "c"]]),
    (design_two_dependencies, [["a", "a_twin"], ["b", "d", "b_or_d"]]),
    (design_never_ran, [["spare"]]),
    (design_one_of_two, [["overhead", "trim_a", "trim_b"]]),
    (design_twice_everywhere, [["overhead", "twice"]]),
    (design_identical_inside_dependency, [["a", "b", "c", "d"]]),
]


@pytest.mark.parametrize(("build", "expected"), IDENTIFIABILITY_CASES,
                         ids=[c[0].__name__ for c in IDENTIFIABILITY_CASES])
def test_identifiability_groups(build: Callable[[], Design], expected: list[list[str]]) -> None:
    X, names = build()
    assert identifiability(X, names) == expected
    assert identifiability(X[::-1], names) == expected  # row order does not matter


def matroid_groups(A: np.ndarray, labels: list[str]) -> set[frozenset[str]]:
    """Groups by brute force: columns in a common circuit (minimal dependent set of
    columns) cannot be separated; the groups are the components that hold a circuit."""
    n = A.shape[1]
    rank = {s: np.linalg.matrix_rank(A[:, list(s)]) for k in range(1, n + 1)
            for s in itertools.combinations(range(n), k)}
    circuits = [s for s in rank if rank[s] < len(s)
                and all(rank[t] == len(t) for t in itertools.combinations(s, len(s) - 1) if t)]
    parent = list(range(n))

    def root(i: int) -> int:
        while parent[i] != i:
            i = parent[i]
        return i

    for c in circuits:
        for j in c[1:]:
            parent[root(j)] = root(c[0])
    members = {j for c in circuits for j in c}
    by_root: dict[int, set[str]] = {}
    for j in members:
        by_root.setdefault(root(j), set()).add(labels[j])
    return {frozenset(g) for g in by_root.values()}


@pytest.mark.parametrize("seed", range(25))
def test_identifiability_matches_the_column_matroid(seed: int) -> None:
    rng = np.random.default_rng(2000 + seed)
    n_parts = int(rng.integers(3, 40))  # some with fewer parts than columns
    cols = [(rng.random(n_parts) < 0.5) * 1.0 for _ in range(int(rng.integers(2, 5)))]
    for _ in range(int(rng.integers(0, 3))):  # plant dependencies among what is there
        how = rng.integers(0, 4)
        i, j = rng.choice(len(cols), 2, replace=False)
        cols.append({0: cols[i], 1: np.ones(n_parts), 2: cols[i] + cols[j],
                     3: np.zeros(n_parts)}[int(how)])
    X = np.column_stack(cols)
    names = names_for(X.shape[1])
    found = {frozenset(g) for g in identifiability(X, names)}
    assert found == matroid_groups(np.hstack([np.ones((n_parts, 1)), X]),
                                   ["overhead", *names])


@pytest.mark.parametrize("build", [c[0] for c in IDENTIFIABILITY_CASES],
                         ids=[c[0].__name__ for c in IDENTIFIABILITY_CASES])
def test_group_totals_are_the_planted_times(build: Callable[[], Design]) -> None:
    """Noise-free: each group's total is what the planted times give, and the warning
    names every member (the overhead as "the per-part overhead")."""
    X, names = build()
    rng = np.random.default_rng(len(names))
    planted = np.r_[OVERHEAD_MS, rng.uniform(2.0, 60.0, len(names))]
    est = estimate_block_times(X, part_times(rng, X, planted[1:], planted[0]), names)
    A, labels = np.hstack([np.ones((len(X), 1)), X]), ["overhead", *names]
    warning = est.warning or ""
    assert bool(warning) == bool(est.groups)
    for group in est.groups:
        cols = [labels.index(n) for n in group]
        assert all(n in warning for n in group if n != "overhead")
        assert "overhead" not in group or "per-part overhead" in warning
        if not A[:, cols].any():
            continue  # never ran: no total
        if all(np.array_equal(A[:, cols[0]], A[:, c]) for c in cols):
            expected = planted[cols].sum()  # per run of the group
        else:
            ran = A[:, cols].any(axis=1)
            expected = (A[:, cols] @ planted[cols])[ran].mean()  # per part that ran it
        assert est.group_totals[" + ".join(group)] == pytest.approx(expected, rel=1e-9)
    identified = [labels[j] for j in range(len(labels))
                  if not any(labels[j] in g for g in est.groups)]
    for name in identified:
        assert est[name].value_ms == pytest.approx(planted[labels.index(name)], rel=1e-9)


def test_the_totals_only_sample_confounds_what_its_generator_says() -> None:
    # sample_logs/truth.json: how many parts stopped at each block (stop-on-fail, blocks
    # in program order) and which blocks the generator knows cannot be separated.
    t = file_truth(TOTALS_ONLY)
    blocks = list(t["block_ms"])
    runs = [k for k, b in enumerate(blocks) for _ in range(t["stops"][b])]
    runs += [len(blocks) - 1] * t["stops"]["pass"]
    X = (np.arange(len(blocks))[None, :] <= np.array(runs)[:, None]) * 1.0
    assert len(X) == t["parts"]
    assert identifiability(X, blocks) == t["confounded"]


# --------------------------------------------------------------------- estimates


TIMES_8 = np.array([3.0, 41.5, 12.25, 66.0, 8.5, 27.0, 19.75, 5.5])
OVERHEAD_MS = 14.0


def test_noise_free_staircase_is_recovered_exactly() -> None:
    rng = np.random.default_rng(21)
    X = staircase(rng, 300, 8)
    est = estimate_block_times(X, part_times(rng, X, TIMES_8, OVERHEAD_MS), names_for(8))
    truth = np.r_[OVERHEAD_MS, TIMES_8]
    np.testing.assert_allclose(values(est), truth, rtol=1e-9)
    lo, hi = intervals(est)
    assert (lo <= truth + 1e-9).all() and (hi >= truth - 1e-9).all()
    assert (est.groups, est.warning, est.n_parts) == ([], None, 300)
    assert est.residual_ms < 1e-9
    assert all(b.identifiable for b in est.blocks.values())


def test_repeated_blocks_are_counts() -> None:
    rng = np.random.default_rng(22)
    X = staircase(rng, 300, 8)
    retest = rng.random(300) < 0.3  # these parts ran block 3 a second time, if they got there
    X[:, 3] += retest * X[:, 3]
    est = estimate_block_times(X, part_times(rng, X, TIMES_8, OVERHEAD_MS), names_for(8))
    np.testing.assert_allclose(values(est), np.r_[OVERHEAD_MS, TIMES_8], rtol=1e-9)


def test_two_percent_noise_is_recovered_within_a_few_percent() -> None:
    rng = np.random.default_rng(23)
    times = np.array([22.0, 41.5, 12.25, 66.0, 18.5, 27.0, 19.75, 35.5])
    X = staircase(rng, 2000, 8)
    y = part_times(rng, X, times, OVERHEAD_MS, noise=0.02)
    est = estimate_block_times(X, y, names_for(8))
    np.testing.assert_allclose(values(est), np.r_[OVERHEAD_MS, times], rtol=0.04)
    # And it is the constrained least-squares fit that scipy finds on the full design.
    ref, ref_rnorm = scipy_nnls(np.hstack([np.ones((2000, 1)), X]), y)
    np.testing.assert_allclose(values(est), ref, rtol=1e-9)
    assert est.residual_ms == pytest.approx(ref_rnorm / np.sqrt(2000), rel=1e-9)


def test_a_block_that_takes_no_time_stays_at_zero() -> None:
    rng = np.random.default_rng(24)
    times = np.array([22.0, 0.0, 12.25, 66.0, 0.0, 27.0])
    X = staircase(rng, 1500, 6)
    y = part_times(rng, X, times, OVERHEAD_MS, noise=0.02)
    est = estimate_block_times(X, y, names_for(6))
    ref, _ = scipy_nnls(np.hstack([np.ones((1500, 1)), X]), y)
    np.testing.assert_allclose(values(est), ref, rtol=1e-9, atol=1e-9)
    lo, _ = intervals(est)
    assert (values(est) >= 0).all() and (lo >= 0).all()
    assert est["block1"].ci_low_ms == 0.0 and est["block4"].ci_low_ms == 0.0


def test_blocks_that_always_run_together_report_their_sum() -> None:
    rng = np.random.default_rng(25)
    X, names = design_identical()
    times = np.array([4.0, 50.0, 31.0, 6.5, 30.1])  # flash_bist 50.0, sram_bist 30.1
    est = estimate_block_times(X, part_times(rng, X, times, OVERHEAD_MS), names)
    assert est.groups == [["flash_bist", "sram_bist"]]
    assert est.warning == ("flash_bist and sram_bist always run together: their times "
                           "cannot be separated (their sum is 80.1 ms)")
    assert est.group_totals == {"flash_bist + sram_bist": pytest.approx(80.1, rel=1e-9)}
    for name in ("flash_bist", "sram_bist"):
        assert not est[name].identifiable and np.isnan(est[name].ci_low_ms)
    assert est["flash_bist"].value_ms + est["sram_bist"].value_ms == pytest.approx(80.1)
    for name, t in (("overhead", OVERHEAD_MS), ("contact", 4.0), ("scan", 31.0)):
        assert est[name].identifiable and est[name].value_ms == pytest.approx(t, rel=1e-9)
    lo, hi = est.group_ci_ms["flash_bist + sram_bist"]
    assert lo - 1e-9 <= 80.1 <= hi + 1e-9


def test_a_block_on_every_part_is_reported_with_the_overhead() -> None:
    rng = np.random.default_rng(26)
    X, names = design_always_runs()
    times = np.array([9.0, 3.0, 41.5, 12.25, 66.0])
    est = estimate_block_times(X, part_times(rng, X, times, OVERHEAD_MS), names)
    assert est.group_totals == {"overhead + vdd_cont": pytest.approx(23.0, rel=1e-9)}
    assert est.warning is not None and "vdd_cont runs once on every part" in est.warning
    assert not est["overhead"].identifiable and not est["vdd_cont"].identifiable
    assert est["block3"].value_ms == pytest.approx(66.0, rel=1e-9)


def test_a_dependent_group_reports_its_time_per_part_that_ran_it() -> None:
    rng = np.random.default_rng(27)
    X, names = design_sum_of_two()
    times = np.array([3.0, 41.5, 12.25, 66.0, 7.0, 11.0, 5.0])  # a, b, c = a + b
    est = estimate_block_times(X, part_times(rng, X, times, OVERHEAD_MS), names)
    group = X[:, 4:]
    ran = group.any(axis=1)
    expected = (group @ times[4:])[ran].mean()  # from the planted times
    assert est.group_totals == {"a + b + c": pytest.approx(expected, rel=1e-9)}
    assert est.warning is not None and est.warning.startswith("a, b and c are linearly dependent")
    assert [est[n].identifiable for n in ("block0", "a", "b", "c")] == [True, False, False, False]


def test_a_block_that_never_ran_has_no_estimate() -> None:
    rng = np.random.default_rng(28)
    X, names = design_never_ran()
    est = estimate_block_times(X, part_times(rng, X, np.array([3.0, 4, 5, 6, 7]), 1.0), names)
    assert np.isnan(est["spare"].value_ms) and not est["spare"].identifiable
    assert est.warning == "spare never ran: its time cannot be estimated"
    assert est.group_totals == {}


def test_warning_is_one_line_naming_every_group() -> None:
    rng = np.random.default_rng(29)
    X, names = design_two_dependencies()
    est = estimate_block_times(X, part_times(rng, X, np.arange(1.0, 9.0), 2.0), names)
    assert est.warning is not None and "\n" not in est.warning
    assert est.warning.count(";") == 1
    assert all(name in est.warning for group in est.groups for name in group)


# --------------------------------------------------------------------- bootstrap


def noisy_case(seed: int, n_parts: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    times = np.array([22.0, 41.5, 12.25, 66.0, 18.5, 27.0])
    X = staircase(rng, n_parts, 6, fail_rate=0.1)
    return X, part_times(rng, X, times, OVERHEAD_MS, noise=0.02), np.r_[OVERHEAD_MS, times]


def test_intervals_cover_the_truth_at_about_their_level() -> None:
    covered = total = 0
    for seed in range(20):
        X, y, truth = noisy_case(100 + seed, 400)
        lo, hi = intervals(estimate_block_times(X, y, names_for(6), seed=seed))
        covered += int(((lo <= truth) & (truth <= hi)).sum())
        total += truth.size
    assert covered / total >= 0.90  # 95 % intervals; 140 of them


def test_intervals_are_deterministic_for_a_seed() -> None:
    X, y, _ = noisy_case(5, 400)
    first = estimate_block_times(X, y, names_for(6), seed=3)
    assert estimate_block_times(X, y, names_for(6), seed=3) == first
    other = estimate_block_times(X, y, names_for(6), seed=4)
    np.testing.assert_array_equal(values(other), values(first))
    assert not np.array_equal(intervals(other)[0], intervals(first)[0])


def test_intervals_shrink_with_more_parts() -> None:
    small_lo, small_hi = intervals(estimate_block_times(*noisy_case(6, 500)[:2], names_for(6)))
    big_lo, big_hi = intervals(estimate_block_times(*noisy_case(7, 4000)[:2], names_for(6)))
    # Width goes as 1/sqrt(parts): 8 times the parts, about 0.35 times the width.
    assert ((big_hi - big_lo) < 0.6 * (small_hi - small_lo)).all()


def test_intervals_are_percentiles_of_refits_on_resampled_parts() -> None:
    # The documented recipe done the slow way: resample i is the rows
    # rng.integers(0, n, n) of rng = default_rng(seed), refitted by scipy on the full rows.
    X, y, _ = noisy_case(8, 300)
    A = np.hstack([np.ones((300, 1)), X])
    rng = np.random.default_rng(9)
    refits = []
    for _ in range(40):
        rows = rng.integers(0, 300, 300)
        refits.append(scipy_nnls(A[rows], y[rows])[0])
    lo, hi = np.percentile(refits, [5.0, 95.0], axis=0)
    est = estimate_block_times(X, y, names_for(6), n_boot=40, seed=9, ci=0.9)
    np.testing.assert_allclose(intervals(est)[0], lo, rtol=1e-9)
    np.testing.assert_allclose(intervals(est)[1], hi, rtol=1e-9)


def test_no_resamples_gives_values_without_intervals() -> None:
    X, y, truth = noisy_case(10, 300)
    est = estimate_block_times(X, y, names_for(6), n_boot=0)
    assert np.isnan(intervals(est)[0]).all()
    np.testing.assert_allclose(values(est), truth, rtol=0.1)


def test_2000_parts_15_blocks_200_resamples_well_under_two_seconds() -> None:
    rng = np.random.default_rng(30)
    times = rng.uniform(5.0, 80.0, 15)
    X = staircase(rng, 2000, 15, fail_rate=0.04)
    y = part_times(rng, X, times, OVERHEAD_MS, noise=0.02)
    start = time.perf_counter()
    est = estimate_block_times(X, y, names_for(15), n_boot=200)
    assert time.perf_counter() - start < 1.0
    assert est.warning is None
    # Blocks skipped independently: ~2000 distinct rows instead of a staircase's 16.
    X = (rng.random((2000, 15)) < 0.5) * 1.0
    y = part_times(rng, X, times, OVERHEAD_MS, noise=0.02)
    start = time.perf_counter()
    est = estimate_block_times(X, y, names_for(15), n_boot=200)
    assert time.perf_counter() - start < 1.0
    assert est.warning is None


# -------------------------------------------------------------------- bad input


BAD_INPUTS = [
    ("too few parts", np.ones((3, 5)), np.ones(3), names_for(5),
     "estimating 5 block times plus overhead needs at least 6 parts, found 3"),
    ("NaN total", np.eye(4)[[0, 1, 2, 3, 0, 1]], np.array([1, 2, np.nan, 4, 5, 6.0]),
     names_for(4), "part test time is NaN or infinite for 1 of 6 parts (first: part 2, nan); "
                   "drop those parts"),
    ("negative total", np.eye(4)[[0, 1, 2, 3, 0, 1]], np.array([1, 2, 3, -4, 5, -6.0]),
     names_for(4), "part test time is negative for 2 of 6 parts (first: part 3, -4.0); "
                   "drop those parts"),
    ("wrong length", np.ones((6, 2)), np.ones(5), names_for(2),
     "part times must be one per part (6), found shape (5,)"),
    ("names do not match", np.ones((6, 2)), np.ones(6), names_for(3),
     "block design must be parts x 3 blocks (one column per name), found shape (6, 2)"),
    ("negative count", -np.eye(3)[[0, 1, 2, 0]], np.ones(4), names_for(3),
     "block design must hold run counts >= 0, found -1.0 at part 0, block 'block0'"),
    ("reserved name", np.ones((6, 2)), np.ones(6), ["overhead", "scan"],
     "block names must be distinct and not 'overhead', found ['overhead', 'scan']"),
]


@pytest.mark.parametrize(("X", "y", "names", "message"), [c[1:] for c in BAD_INPUTS],
                         ids=[c[0] for c in BAD_INPUTS])
def test_bad_input_is_one_clear_line(X: np.ndarray, y: np.ndarray, names: list[str],
                                     message: str) -> None:
    with pytest.raises(InputError) as caught:
        estimate_block_times(X, y, names)
    assert str(caught.value) == message


@pytest.mark.parametrize(("options", "message"), [
    ({"n_boot": -1}, "n_boot must be an integer >= 0, found -1"),
    ({"ci": 95}, "ci must be between 0 and 1 (e.g. 0.95), found 95"),
])
def test_bad_options_are_config_errors(options: dict[str, float], message: str) -> None:
    X, y, _ = noisy_case(11, 50)
    with pytest.raises(ConfigError) as caught:
        estimate_block_times(X, y, names_for(6), **options)  # type: ignore[arg-type]
    assert str(caught.value) == message
