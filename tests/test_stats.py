"""Checks of querygap.stats against scipy, published worked examples and hand arithmetic.

Each outside check names its source beside it: "reference library" for scipy, "(computed)" for
values worked out from the formula in REFERENCES.md, "from memory" for published values recalled
but not confirmed from a stored copy.
"""

import math
import warnings

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats as sps

from querygap.stats import (
    TwoProportionResult,
    log_likelihood_ratio,
    sample_size_two_proportions,
    signed_llr,
    two_proportion_test,
    wilson_interval,
)

# (x1, n1, x2, n2): ordinary, 0 successes on one side, all successes on one side, tiny n, huge n.
# Every table has both margins non-zero so scipy.stats.chi2_contingency accepts it.
TABLES = [
    (120, 1000, 80, 1000),
    (0, 50, 7, 60),
    (3, 10, 0, 12),
    (50, 50, 40, 50),
    (9, 9, 0, 4),
    (1, 2, 2, 3),
    (1, 1, 0, 1),
    (0, 3, 3, 3),
    (123_456, 10_000_000, 124_321, 10_000_000),
    (5, 1_000_000, 25, 2_000_000),
]

RESULT_FIELDS = [
    "p1",
    "p2",
    "difference",
    "pooled",
    "z",
    "p_value",
    "wald_lower",
    "wald_upper",
    "newcombe_lower",
    "newcombe_upper",
    "enough_data",
]


# --- two-proportion z-test ---------------------------------------------------------------------


@pytest.mark.parametrize(("x1", "n1", "x2", "n2"), TABLES)
def test_z_and_p_match_a_hand_computation_with_scipy_norm(x1, n1, x2, n2):
    # Reference library: z by hand from the textbook pooled formula, p from scipy.stats.norm.
    p1, p2 = x1 / n1, x2 / n2
    pooled = (x1 + x2) / (n1 + n2)
    z_hand = (p2 - p1) / math.sqrt(pooled * (1 - pooled) * (1 / n1 + 1 / n2))
    result = two_proportion_test(x1, n1, x2, n2)
    assert result.z == pytest.approx(z_hand, rel=1e-12)
    assert result.p_value == pytest.approx(2 * sps.norm.sf(abs(z_hand)), rel=1e-9, abs=1e-300)
    assert result.difference == pytest.approx(p2 - p1, abs=1e-15)


@pytest.mark.parametrize(("x1", "n1", "x2", "n2"), TABLES)
def test_z_squared_equals_pearson_chi_square(x1, n1, x2, n2):
    # Reference library identity: scipy.stats.chi2_contingency(correction=False) on the 2x2 table
    # gives Pearson's chi-square, which equals the pooled z squared; its 1-df p-value is the
    # two-sided normal p-value.
    table = np.array([[x1, n1 - x1], [x2, n2 - x2]])
    chi2 = sps.chi2_contingency(table, correction=False)
    result = two_proportion_test(x1, n1, x2, n2)
    assert result.z**2 == pytest.approx(chi2.statistic, rel=1e-9)
    assert result.p_value == pytest.approx(chi2.pvalue, rel=1e-6, abs=1e-300)


def test_check_value_from_references():
    # REFERENCES.md, "Check values" (computed): 120/1000 vs 80/1000 gives z about 2.98 and a
    # two-sided p about 0.0029. Our difference is after minus before, so z is negative here.
    result = two_proportion_test(120, 1000, 80, 1000)
    assert result.z == pytest.approx(-2.98, abs=0.005)
    assert result.p_value == pytest.approx(0.0029, abs=0.00005)
    assert result.enough_data is True
    assert two_proportion_test(80, 1000, 120, 1000).z == pytest.approx(2.98, abs=0.005)


def test_no_variation_gives_z_zero_and_p_one():
    # Pooled p of 0 (no successes anywhere) or 1 (all successes): the formula's 0/0 is defined as
    # z = 0 (no evidence of change); the intervals still carry information.
    for x1, n1, x2, n2 in [(0, 10, 0, 20), (10, 10, 20, 20)]:
        with warnings.catch_warnings():
            warnings.simplefilter("error")
            result = two_proportion_test(x1, n1, x2, n2)
        assert result.z == 0.0
        assert result.p_value == 1.0
        assert result.difference == 0.0
        assert result.enough_data is False
        assert result.newcombe_lower < 0.0 < result.newcombe_upper


@pytest.mark.parametrize(("x1", "n1", "x2", "n2"), [(0, 0, 3, 4), (3, 4, 0, 0), (0, 0, 0, 0)])
def test_a_group_without_trials_gives_nan_without_warnings(x1, n1, x2, n2):
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        result = two_proportion_test(x1, n1, x2, n2)
    for name in RESULT_FIELDS[2:-1]:  # everything built on both groups
        assert math.isnan(getattr(result, name)), name
    assert result.enough_data is False


def test_enough_data_needs_min_expected_successes_and_failures_each_side():
    # pooled p = 0.1: group sizes 50 and 50 give 5 expected successes each, just enough at 5.
    assert two_proportion_test(5, 50, 5, 50).enough_data is True
    assert two_proportion_test(5, 50, 4, 40).enough_data is False  # 40 * 0.1 = 4 < 5
    assert two_proportion_test(5, 50, 5, 50, min_expected=10).enough_data is False
    # Few failures also count: pooled p = 0.95, 100 * 0.05 = 5 failures expected.
    assert two_proportion_test(95, 100, 95, 100).enough_data is True
    assert two_proportion_test(96, 100, 96, 100).enough_data is False


def test_result_is_frozen():
    result = two_proportion_test(1, 2, 1, 2)
    assert isinstance(result, TwoProportionResult)
    with pytest.raises(AttributeError):
        result.z = 1.0  # type: ignore[misc]


# Newcombe, "Interval estimation for the difference between independent proportions: comparison
# of eleven methods", Statistics in Medicine 17 (1998) 873-890, Table II, 95% intervals for
# theta = x1/n1 - x2/n2. All values from memory (not confirmed from a stored copy); example (a)
# agrees with a third-party test file in a public repository. Columns: x1, n1, x2, n2, theta,
# method 10 (hybrid score) lower and upper.
NEWCOMBE_TABLE_II = [
    (56, 70, 48, 80, 0.2, 0.0524, 0.3339),  # (a)
    (9, 10, 3, 10, 0.6, 0.1705, 0.8090),  # (b)
    (6, 7, 2, 7, 4 / 7, 0.0582, 0.8062),  # (c)
    (5, 56, 0, 29, 5 / 56, -0.0381, 0.1926),  # (d)
    (0, 10, 0, 20, 0.0, -0.1611, 0.2775),  # (e)
    (0, 10, 0, 10, 0.0, -0.2775, 0.2775),  # (f)
    (10, 10, 0, 20, 1.0, 0.6791, 1.0),  # (g)
    (10, 10, 0, 10, 1.0, 0.6075, 1.0),  # (h)
]


@pytest.mark.parametrize(("x1", "n1", "x2", "n2", "theta", "lower", "upper"), NEWCOMBE_TABLE_II)
def test_newcombe_method_10_reproduces_table_ii(x1, n1, x2, n2, theta, lower, upper):
    # Newcombe's theta is first minus second; ours is after minus before, so pass the first group
    # of the paper as our "after" group.
    result = two_proportion_test(x2, n2, x1, n1)
    assert result.difference == pytest.approx(theta, abs=1e-12)
    assert result.newcombe_lower == pytest.approx(lower, abs=5e-5)
    assert result.newcombe_upper == pytest.approx(upper, abs=5e-5)
    # Swapping the groups mirrors the interval.
    mirrored = two_proportion_test(x1, n1, x2, n2)
    assert mirrored.newcombe_lower == pytest.approx(-upper, abs=5e-5)
    assert mirrored.newcombe_upper == pytest.approx(-lower, abs=5e-5)


def test_wald_interval_of_newcombe_example_a():
    # Newcombe (1998) Table II, example (a), method 1 (simple asymptotic), from memory:
    # 0.0575 to 0.3425. Also by hand: 0.2 +/- 1.959964 * sqrt(0.8*0.2/70 + 0.6*0.4/80)
    # = 0.2 +/- 1.959964 * 0.0727029 = 0.2 +/- 0.1424951.
    result = two_proportion_test(48, 80, 56, 70)
    assert result.wald_lower == pytest.approx(0.0575, abs=5e-5)
    assert result.wald_upper == pytest.approx(0.3425, abs=5e-5)


@settings(max_examples=300, derandomize=True)
@given(
    n1=st.integers(1, 500),
    n2=st.integers(1, 500),
    f1=st.floats(0, 1),
    f2=st.floats(0, 1),
)
def test_intervals_contain_the_difference_and_stay_in_range(n1, n2, f1, f2):
    # Invariants of method 10: the estimate lies inside, the bounds inside [-1, 1].
    x1, x2 = round(f1 * n1), round(f2 * n2)
    result = two_proportion_test(x1, n1, x2, n2)
    assert -1.0 <= result.newcombe_lower <= result.difference + 1e-12
    assert result.difference - 1e-12 <= result.newcombe_upper <= 1.0
    assert result.wald_lower <= result.difference <= result.wald_upper
    assert 0.0 <= result.p_value <= 1.0


def test_wider_coverage_gives_wider_intervals():
    narrow = two_proportion_test(30, 200, 45, 210, alpha=0.10)
    wide = two_proportion_test(30, 200, 45, 210, alpha=0.01)
    assert wide.newcombe_lower < narrow.newcombe_lower < narrow.newcombe_upper < wide.newcombe_upper
    assert wide.wald_lower < narrow.wald_lower < narrow.wald_upper < wide.wald_upper


# --- Wilson interval ---------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("x", "n", "lower", "upper", "tolerance"),
    [(0, 20, 0.0, 0.161, 5e-4), (5, 100, 0.0215, 0.1118, 5e-5)],
)
def test_wilson_check_values_from_references(x, n, lower, upper, tolerance):
    # REFERENCES.md, "Check values" (computed): Wilson 95%; tolerance is half the last digit given.
    low, high = wilson_interval(x, n)
    assert low == pytest.approx(lower, abs=tolerance)
    assert high == pytest.approx(upper, abs=tolerance)


@pytest.mark.parametrize("confidence", [0.80, 0.90, 0.95, 0.99])
def test_wilson_matches_scipy_binomtest_over_a_grid(confidence):
    # Reference library: scipy.stats.binomtest(x, n).proportion_ci(method="wilson") (no continuity
    # correction), one array call against a loop of scipy calls.
    pairs = [
        (x, n)
        for n in (1, 2, 3, 5, 10, 20, 37, 100, 1000)
        for x in range(0, n + 1, max(1, n // 25))
    ]
    xs = np.array([x for x, _ in pairs])
    ns = np.array([n for _, n in pairs])
    lower, upper = wilson_interval(xs, ns, alpha=1 - confidence)
    for i, (x, n) in enumerate(pairs):
        ci = sps.binomtest(x, n).proportion_ci(confidence_level=confidence, method="wilson")
        assert lower[i] == pytest.approx(ci.low, abs=1e-12), (x, n)
        assert upper[i] == pytest.approx(ci.high, abs=1e-12), (x, n)


def test_wilson_edges():
    assert wilson_interval(0, 7)[0] == 0.0
    assert wilson_interval(7, 7)[1] == 1.0
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        low, high = wilson_interval(0, 0)
    assert math.isnan(low) and math.isnan(high)


# --- sample size -------------------------------------------------------------------------------


def test_sample_size_check_value_from_references():
    # REFERENCES.md, "Check values" (computed): 12% -> 8%, alpha 0.05, power 80%: about 882.
    assert sample_size_two_proportions(0.12, 0.08) == 882
    assert sample_size_two_proportions(0.08, 0.12) == 882


def _normal_power(p1, p2, n, alpha=0.05):
    # The same normal approximation solved for power (the formula read backwards).
    z_a = sps.norm.isf(alpha / 2)
    p_bar = (p1 + p2) / 2
    numerator = abs(p1 - p2) * math.sqrt(n) - z_a * math.sqrt(2 * p_bar * (1 - p_bar))
    return sps.norm.cdf(numerator / math.sqrt(p1 * (1 - p1) + p2 * (1 - p2)))


@pytest.mark.parametrize(
    ("p1", "p2", "alpha", "power"),
    [
        (0.12, 0.08, 0.05, 0.8),
        (0.5, 0.55, 0.05, 0.9),
        (0.02, 0.01, 0.01, 0.8),
        (0.3, 0.6, 0.1, 0.95),
    ],
)
def test_sample_size_is_the_smallest_reaching_the_power(p1, p2, alpha, power):
    n = sample_size_two_proportions(p1, p2, alpha=alpha, power=power)
    assert isinstance(n, int)
    assert _normal_power(p1, p2, n, alpha) >= power
    assert _normal_power(p1, p2, n - 1, alpha) < power


def test_sample_size_grows_with_power_and_shrinks_with_effect():
    assert sample_size_two_proportions(0.12, 0.08, power=0.9) > 882
    assert sample_size_two_proportions(0.12, 0.06) < 882


# --- Dunning's G^2 -----------------------------------------------------------------------------


def test_g2_hand_computed_table():
    # Hand arithmetic for [[10, 20], [30, 40]]: N = 100, rows 30 and 70, columns 40 and 60, so
    # E = [[30*40/100, 30*60/100], [70*40/100, 70*60/100]] = [[12, 18], [28, 42]].
    #   10 ln(10/12) = 10 * -0.1823216 = -1.823216
    #   20 ln(20/18) = 20 *  0.1053605 =  2.107210
    #   30 ln(30/28) = 30 *  0.0689929 =  2.069787
    #   40 ln(40/42) = 40 * -0.0487902 = -1.951607
    #   sum = 0.402174; G^2 = 2 * 0.402174 = 0.804348.
    assert log_likelihood_ratio(10, 20, 30, 40) == pytest.approx(0.804348, abs=2e-6)
    # k11 = 10 is below its expectation 12: negative direction.
    assert signed_llr(10, 20, 30, 40) == pytest.approx(-0.804348, abs=2e-6)


def test_g2_zero_cells_use_zero_log_zero():
    # Hand arithmetic for [[0, 5], [5, 0]]: every E = 5 * 5 / 10 = 2.5; the zero cells add
    # 0 * ln 0 = 0 and each 5 adds 5 ln(5 / 2.5) = 5 ln 2, so G^2 = 2 * 10 ln 2 = 13.862944.
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert log_likelihood_ratio(0, 5, 5, 0) == pytest.approx(20 * math.log(2), rel=1e-12)
        assert signed_llr(0, 5, 5, 0) == pytest.approx(-20 * math.log(2), rel=1e-12)
        assert signed_llr(5, 0, 0, 5) == pytest.approx(20 * math.log(2), rel=1e-12)
        assert log_likelihood_ratio(0, 0, 0, 0) == 0.0
        assert log_likelihood_ratio(0, 0, 3, 4) == 0.0  # an empty row carries no association


def _random_tables(seed, count):
    rng = np.random.default_rng(seed)
    scale = rng.choice([3, 30, 1000, 10**6], size=count)
    cells = np.floor(rng.random((count, 4)) * scale[:, None]).astype(np.int64)
    # Knock out some cells to exercise 0 * ln 0, then keep tables whose margins are all non-zero
    # (chi2_contingency refuses a zero expected frequency).
    cells[rng.random((count, 4)) < 0.15] = 0
    rows = cells[:, [0, 2]] + cells[:, [1, 3]]
    cols = cells[:, [0, 1]] + cells[:, [2, 3]]
    keep = (rows > 0).all(axis=1) & (cols > 0).all(axis=1)
    return cells[keep]


def test_g2_matches_scipy_log_likelihood_chi_square_on_random_tables():
    # Reference library: scipy.stats.chi2_contingency(correction=False, lambda_="log-likelihood")
    # is the G-test statistic 2 * sum O ln(O / E). Seeded grid of about 500 tables.
    tables = _random_tables(seed=20240611, count=600)
    assert len(tables) > 400
    ours = log_likelihood_ratio(tables[:, 0], tables[:, 1], tables[:, 2], tables[:, 3])
    theirs = np.array(
        [
            sps.chi2_contingency(
                t.reshape(2, 2), correction=False, lambda_="log-likelihood"
            ).statistic
            for t in tables
        ]
    )
    np.testing.assert_allclose(ours, theirs, rtol=1e-9, atol=1e-9)


def test_signed_llr_sign_follows_the_observed_minus_expected_top_left_cell():
    tables = _random_tables(seed=7, count=300).astype(float)
    a, b, c, d = tables.T
    expected = (a + b) * (a + c) / (a + b + c + d)
    signed = signed_llr(a, b, c, d)
    np.testing.assert_allclose(np.abs(signed), log_likelihood_ratio(a, b, c, d), atol=1e-9)
    clear = np.abs(a - expected) > 1e-9
    assert np.all(np.sign(signed[clear]) == np.sign(a - expected)[clear])
    # Swapping the rows reverses the direction.
    np.testing.assert_allclose(signed_llr(c, d, a, b), -signed, rtol=1e-12)


# --- broadcasting ------------------------------------------------------------------------------


def test_two_proportion_arrays_equal_a_loop_over_scalars():
    x1 = np.array([120, 0, 3, 50, 0, 1, 5])
    n1 = np.array([1000, 50, 10, 50, 0, 2, 50])
    x2 = np.array([80, 7, 0, 40, 3, 2, 4])
    n2 = np.array([1000, 60, 12, 50, 4, 3, 40])
    vectorised = two_proportion_test(x1, n1, x2, n2)
    for name in RESULT_FIELDS:
        column = getattr(vectorised, name)
        assert column.shape == (7,)
        looped = [
            getattr(two_proportion_test(*row), name) for row in zip(x1, n1, x2, n2, strict=True)
        ]
        np.testing.assert_array_equal(column, np.array(looped), err_msg=name)


def test_two_proportion_broadcasts_scalars_against_a_grid():
    before = np.arange(0, 21)[:, None]  # 21 x 1
    after = np.arange(0, 31)[None, :]  # 1 x 31
    grid = two_proportion_test(before, 20, after, 30)
    assert grid.z.shape == (21, 31)
    assert grid.newcombe_upper[4, 9] == two_proportion_test(4, 20, 9, 30).newcombe_upper
    assert grid.enough_data[10, 15] == two_proportion_test(10, 20, 15, 30).enough_data


def test_wilson_sample_size_and_g2_arrays_equal_loops():
    xs, ns = np.array([0, 3, 7, 0]), np.array([20, 9, 7, 0])
    lower, upper = wilson_interval(xs, ns)
    looped = [wilson_interval(x, n) for x, n in zip(xs, ns, strict=True)]
    np.testing.assert_array_equal(lower, [lo for lo, _ in looped])
    np.testing.assert_array_equal(upper, [hi for _, hi in looped])

    p1, p2 = np.array([0.12, 0.5, 0.02]), np.array([0.08, 0.55, 0.01])
    sizes = sample_size_two_proportions(p1, p2)
    assert sizes.dtype == np.int64
    assert list(sizes) == [sample_size_two_proportions(a, b) for a, b in zip(p1, p2, strict=True)]

    cells = _random_tables(seed=3, count=50)
    for function in (log_likelihood_ratio, signed_llr):
        vectorised = function(*cells.T)
        np.testing.assert_array_equal(vectorised, [function(*row) for row in cells])


# --- bad input ---------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("call", "message"),
    [
        (lambda: two_proportion_test(11, 10, 1, 10), "x1 must not exceed n1; got x1=11, n1=10"),
        (
            lambda: two_proportion_test(1, 10, np.array([1, 9]), np.array([5, 8])),
            "x2 must not exceed n2; got x2=9, n2=8 at index (1,)",
        ),
        (lambda: two_proportion_test(-1, 10, 1, 10), "x1 must be finite non-negative whole counts"),
        (lambda: two_proportion_test(1.5, 10, 1, 10), "got x1=1.5"),
        (lambda: two_proportion_test(1, 10, 1, 10, alpha=0), "alpha must lie strictly between"),
        (lambda: two_proportion_test(1, 10, 1, 10, min_expected=-1), "min_expected must be"),
        (lambda: wilson_interval(1, float("nan")), "n must be finite non-negative whole counts"),
        (lambda: sample_size_two_proportions(0.1, 0.1), "p1 and p2 must differ"),
        (lambda: sample_size_two_proportions(0.1, 1.2), "p2 must be a proportion in [0, 1]"),
        (lambda: sample_size_two_proportions(0.1, 0.2, power=1), "power must lie strictly"),
        (lambda: log_likelihood_ratio(1, 2, -3, 4), "k21 must be finite non-negative whole counts"),
    ],
)
def test_bad_input_names_the_argument_and_value(call, message):
    with pytest.raises(ValueError) as caught:
        call()
    assert message in str(caught.value)


def test_docstring_examples_hold():
    # The Examples sections double as checks (values from REFERENCES.md and the hand tables above).
    import doctest

    import querygap.stats

    outcome = doctest.testmod(querygap.stats)
    assert outcome.attempted >= 5
    assert outcome.failed == 0
