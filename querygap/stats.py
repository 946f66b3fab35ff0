"""Statistics for checking a change: proportions, intervals, sample sizes, association.

Every function takes scalars or numpy arrays of counts and broadcasts them against each other. A
scalar call returns Python floats (or ``bool``/``int``); an array call returns numpy arrays of the
broadcast shape. No Python loop runs over the elements.

Counts must be finite, non-negative whole numbers with successes not above trials; anything else
raises ``ValueError`` naming the argument, the first offending position and its value. A group with
no trials (n = 0) is not an error: its proportion and everything built on it is NaN.
"""

from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import stats

FloatArray = NDArray[np.float64]
FloatOrArray = float | FloatArray
BoolOrArray = bool | NDArray[np.bool_]
IntOrArray = int | NDArray[np.int64]

# Expected successes and failures per group below which the normal approximation is not trusted.
# REFERENCES.md ("Verifying a change") cites 5-10; 5 is the usual choice
# (common practice, no source).
DEFAULT_MIN_EXPECTED = 5.0


@dataclass(frozen=True)
class TwoProportionResult:
    """Outcome of comparing a proportion before (group 1) with one after (group 2).

    Each field is a float (or bool) for scalar inputs and an array of the broadcast shape for array
    inputs. Fields are NaN where a group has no trials.

    Attributes
    ----------
    p1, p2 : float or ndarray
        Observed proportions x1 / n1 and x2 / n2.
    difference : float or ndarray
        p2 - p1 (after minus before).
    pooled : float or ndarray
        Pooled proportion (x1 + x2) / (n1 + n2), the common p under H0: p1 = p2.
    z : float or ndarray
        Pooled-p z statistic; 0 when the pooled p is 0 or 1 (no variation to test).
    p_value : float or ndarray
        Two-sided p-value of z under the standard normal, 2 * (1 - Phi(|z|)).
    wald_lower, wald_upper : float or ndarray
        Unpooled Wald interval for the difference (not clipped to [-1, 1]).
    newcombe_lower, newcombe_upper : float or ndarray
        Newcombe (1998) hybrid score interval for the difference (method 10).
    enough_data : bool or ndarray
        True when n_i * pooled and n_i * (1 - pooled) are both at least ``min_expected`` in each
        group, i.e. the normal approximation is trusted.
    alpha : float
        Significance level the intervals were built for (coverage 1 - alpha).
    """

    p1: FloatOrArray
    p2: FloatOrArray
    difference: FloatOrArray
    pooled: FloatOrArray
    z: FloatOrArray
    p_value: FloatOrArray
    wald_lower: FloatOrArray
    wald_upper: FloatOrArray
    newcombe_lower: FloatOrArray
    newcombe_upper: FloatOrArray
    enough_data: BoolOrArray
    alpha: float


def _scalar_or_array(value: NDArray[Any]) -> Any:
    """Return a Python scalar for a 0-d array, the array itself otherwise."""
    return value.item() if value.ndim == 0 else value


def _first_bad(mask: NDArray[np.bool_], values: FloatArray) -> str:
    """Describe the first position where ``mask`` is true, for an error message."""
    index = np.unravel_index(int(np.argmax(mask)), mask.shape) if mask.ndim else ()
    where = f" at index {tuple(int(i) for i in index)}" if index else ""
    return f"{float(values[index]):.15g}{where}"


def _as_counts(function: str, name: str, value: ArrayLike) -> FloatArray:
    """Convert ``value`` to a float array of finite, non-negative whole numbers or raise."""
    array = np.asarray(value, dtype=np.float64)
    bad = ~np.isfinite(array) | (array < 0) | (array != np.floor(array))
    if np.any(bad):
        raise ValueError(
            f"{function}: {name} must be finite non-negative whole counts; "
            f"got {name}={_first_bad(bad, array)}"
        )
    return array


def _check_successes(function: str, xname: str, x: FloatArray, nname: str, n: FloatArray) -> None:
    """Raise when successes exceed trials anywhere (inputs already broadcast)."""
    bad = x > n
    if np.any(bad):
        index = np.unravel_index(int(np.argmax(bad)), bad.shape) if bad.ndim else ()
        where = f" at index {tuple(int(i) for i in index)}" if index else ""
        raise ValueError(
            f"{function}: {xname} must not exceed {nname}; "
            f"got {xname}={float(x[index]):.15g}, {nname}={float(n[index]):.15g}{where}"
        )


def _check_open_unit(function: str, name: str, value: float) -> float:
    """Return ``value`` as a float if it lies strictly between 0 and 1, else raise."""
    number = float(value)
    if not 0.0 < number < 1.0:
        raise ValueError(
            f"{function}: {name} must lie strictly between 0 and 1; got {name}={value!r}"
        )
    return number


def _critical_value(alpha: float) -> float:
    """Two-sided standard-normal critical value z_{1 - alpha/2}."""
    return float(stats.norm.isf(alpha / 2.0))


def _proportion(x: FloatArray, n: FloatArray) -> FloatArray:
    """x / n, NaN where n = 0, without a division warning."""
    ratio: FloatArray = np.divide(x, n, out=np.full(np.broadcast(x, n).shape, np.nan), where=n > 0)
    return ratio


def _wilson(x: FloatArray, n: FloatArray, z: float) -> tuple[FloatArray, FloatArray]:
    """Wilson bounds for already validated, broadcast counts and critical value ``z``."""
    z2 = z * z
    denominator = n + z2
    centre = (x + z2 / 2.0) / denominator
    # x (n - x) / n equals n * p * (1 - p); NaN where n = 0 so the bounds are NaN too.
    spread = np.divide(x * (n - x), n, out=np.full(x.shape, np.nan), where=n > 0)
    half_width = z / denominator * np.sqrt(spread + z2 / 4.0)
    lower = np.clip(centre - half_width, 0.0, 1.0)
    upper = np.clip(centre + half_width, 0.0, 1.0)
    # Exact ends: the lower bound is 0 at x = 0 and the upper bound is 1 at x = n (removes the
    # rounding residue of z^2/2 - z * sqrt(z^2/4)).
    has_trials = n > 0
    lower = np.where(has_trials & (x == 0), 0.0, lower)
    upper = np.where(has_trials & (x == n), 1.0, upper)
    return lower, upper


def wilson_interval(
    x: ArrayLike, n: ArrayLike, alpha: float = 0.05
) -> tuple[FloatOrArray, FloatOrArray]:
    """Wilson score interval for a binomial proportion (Agresti & Coull, 1998).

    With p = x / n and z = z_{1 - alpha/2}::

        centre     = (x + z^2 / 2) / (n + z^2)
        half_width = z / (n + z^2) * sqrt(x (n - x) / n + z^2 / 4)
        interval   = [centre - half_width, centre + half_width]

    The interval always lies in [0, 1] and is informative at x = 0 or x = n, unlike the Wald
    interval p +/- z sqrt(p (1 - p) / n). No continuity correction.

    Parameters
    ----------
    x : int or array_like
        Successes, 0 <= x <= n.
    n : int or array_like
        Trials; n = 0 gives NaN bounds.
    alpha : float, default=0.05
        Significance level; the coverage is 1 - alpha.

    Returns
    -------
    lower, upper : float or ndarray
        Bounds, as proportions, in the broadcast shape of ``x`` and ``n``.

    Examples
    --------
    >>> lower, upper = wilson_interval(5, 100)
    >>> round(lower, 4), round(upper, 4)
    (0.0215, 0.1118)
    """
    function = "wilson_interval"
    level = _check_open_unit(function, "alpha", alpha)
    xs, ns = np.broadcast_arrays(_as_counts(function, "x", x), _as_counts(function, "n", n))
    _check_successes(function, "x", xs, "n", ns)
    lower, upper = _wilson(xs, ns, _critical_value(level))
    return _scalar_or_array(lower), _scalar_or_array(upper)


def two_proportion_test(
    x1: ArrayLike,
    n1: ArrayLike,
    x2: ArrayLike,
    n2: ArrayLike,
    alpha: float = 0.05,
    min_expected: float = DEFAULT_MIN_EXPECTED,
) -> TwoProportionResult:
    """Compare proportion x1/n1 (before) with x2/n2 (after): z-test and two intervals.

    With p_i = x_i / n_i, d = p2 - p1 and z_c = z_{1 - alpha/2}:

    - test (pooled p under H0: p1 = p2)::

          p = (x1 + x2) / (n1 + n2)
          z = d / sqrt(p (1 - p) (1/n1 + 1/n2)),   z = 0 when p is 0 or 1
          p_value = 2 * (1 - Phi(|z|))

      z^2 equals Pearson's chi-square for the 2x2 table without continuity correction.
    - Wald interval (unpooled standard error)::

          d +/- z_c * sqrt(p1 (1 - p1) / n1 + p2 (1 - p2) / n2)

    - Newcombe hybrid score interval (Newcombe 1998, method 10), from the Wilson intervals
      [l_i, u_i] of each group; it stays sensible with 0 or n successes::

          lower = d - sqrt((p2 - l2)^2 + (u1 - p1)^2)
          upper = d + sqrt((u2 - p2)^2 + (p1 - l1)^2)

    Parameters
    ----------
    x1, n1 : int or array_like
        Successes and trials before the change.
    x2, n2 : int or array_like
        Successes and trials after the change.
    alpha : float, default=0.05
        Significance level for both intervals (coverage 1 - alpha).
    min_expected : float, default=5
        Smallest expected count of successes and of failures, n_i * p and n_i * (1 - p), each group
        must reach for ``enough_data`` (REFERENCES.md cites 5-10).

    Returns
    -------
    TwoProportionResult
        All fields in the broadcast shape of the four counts; NaN (and ``enough_data`` False)
        where a group has no trials.

    Examples
    --------
    >>> result = two_proportion_test(120, 1000, 80, 1000)
    >>> round(result.z, 2), round(result.p_value, 4), result.enough_data
    (-2.98, 0.0029, True)
    """
    function = "two_proportion_test"
    level = _check_open_unit(function, "alpha", alpha)
    if not (np.isfinite(min_expected) and min_expected >= 0):
        raise ValueError(
            f"{function}: min_expected must be a finite number >= 0; "
            f"got min_expected={min_expected!r}"
        )
    a1, m1, a2, m2 = np.broadcast_arrays(
        _as_counts(function, "x1", x1),
        _as_counts(function, "n1", n1),
        _as_counts(function, "x2", x2),
        _as_counts(function, "n2", n2),
    )
    _check_successes(function, "x1", a1, "n1", m1)
    _check_successes(function, "x2", a2, "n2", m2)
    critical = _critical_value(level)
    both = (m1 > 0) & (m2 > 0)

    p1 = _proportion(a1, m1)
    p2 = _proportion(a2, m2)
    difference = p2 - p1
    pooled = np.where(both, _proportion(a1 + a2, m1 + m2), np.nan)

    inverse_sizes = np.divide(1.0, m1, out=np.full(m1.shape, np.nan), where=m1 > 0) + np.divide(
        1.0, m2, out=np.full(m2.shape, np.nan), where=m2 > 0
    )
    null_se = np.sqrt(pooled * (1.0 - pooled) * inverse_sizes)
    # A pooled p of 0 or 1 means both groups are identical and constant: no evidence of change.
    z = np.divide(difference, null_se, out=np.zeros(m1.shape), where=both & (null_se > 0))
    z = np.where(both, z, np.nan)
    p_value = 2.0 * stats.norm.sf(np.abs(z))

    wald_se = np.sqrt(
        np.divide(p1 * (1.0 - p1), m1, out=np.full(m1.shape, np.nan), where=m1 > 0)
        + np.divide(p2 * (1.0 - p2), m2, out=np.full(m2.shape, np.nan), where=m2 > 0)
    )
    wald_lower = difference - critical * wald_se
    wald_upper = difference + critical * wald_se

    l1, u1 = _wilson(a1, m1, critical)
    l2, u2 = _wilson(a2, m2, critical)
    newcombe_lower = np.clip(difference - np.hypot(p2 - l2, u1 - p1), -1.0, 1.0)
    newcombe_upper = np.clip(difference + np.hypot(u2 - p2, p1 - l1), -1.0, 1.0)

    # Comparisons with NaN are False, so groups without trials never count as enough data.
    enough_data = (
        (m1 * pooled >= min_expected)
        & (m1 * (1.0 - pooled) >= min_expected)
        & (m2 * pooled >= min_expected)
        & (m2 * (1.0 - pooled) >= min_expected)
    )
    return TwoProportionResult(
        p1=_scalar_or_array(p1),
        p2=_scalar_or_array(p2),
        difference=_scalar_or_array(difference),
        pooled=_scalar_or_array(pooled),
        z=_scalar_or_array(z),
        p_value=_scalar_or_array(np.asarray(p_value)),
        wald_lower=_scalar_or_array(wald_lower),
        wald_upper=_scalar_or_array(wald_upper),
        newcombe_lower=_scalar_or_array(newcombe_lower),
        newcombe_upper=_scalar_or_array(newcombe_upper),
        enough_data=_scalar_or_array(enough_data),
        alpha=level,
    )


def sample_size_two_proportions(
    p1: ArrayLike, p2: ArrayLike, alpha: float = 0.05, power: float = 0.8
) -> IntOrArray:
    """Searches needed in each group to detect a change from p1 to p2 (two-sided test).

    Normal approximation with the pooled p under H0 and the separate variances under H1, with
    p_bar = (p1 + p2) / 2, z_a = z_{1 - alpha/2} and z_b = z_{power}::

        n = (z_a sqrt(2 p_bar (1 - p_bar)) + z_b sqrt(p1 (1 - p1) + p2 (1 - p2)))^2 / (p1 - p2)^2

    rounded up to a whole number of searches per group. This is the sample size for the pooled
    z-test of ``two_proportion_test`` without continuity correction.

    Parameters
    ----------
    p1, p2 : float or array_like
        Proportions before and after, in [0, 1], never equal.
    alpha : float, default=0.05
        Two-sided significance level.
    power : float, default=0.8
        Chance of detecting the change when it is real.

    Returns
    -------
    int or ndarray of int64
        Searches per group, in the broadcast shape of ``p1`` and ``p2``.

    Examples
    --------
    >>> sample_size_two_proportions(0.12, 0.08)
    882
    """
    function = "sample_size_two_proportions"
    level = _check_open_unit(function, "alpha", alpha)
    wanted_power = _check_open_unit(function, "power", power)
    q1, q2 = np.broadcast_arrays(np.asarray(p1, dtype=np.float64), np.asarray(p2, dtype=np.float64))
    for name, values in (("p1", q1), ("p2", q2)):
        bad = ~np.isfinite(values) | (values < 0) | (values > 1)
        if np.any(bad):
            raise ValueError(
                f"{function}: {name} must be a proportion in [0, 1]; "
                f"got {name}={_first_bad(bad, values)}"
            )
    same = q1 == q2
    if np.any(same):
        raise ValueError(
            f"{function}: p1 and p2 must differ (no sample size detects no change); "
            f"got p1=p2={_first_bad(same, q1)}"
        )
    z_a = _critical_value(level)
    z_b = float(stats.norm.ppf(wanted_power))
    p_bar = (q1 + q2) / 2.0
    root = z_a * np.sqrt(2.0 * p_bar * (1.0 - p_bar)) + z_b * np.sqrt(
        q1 * (1.0 - q1) + q2 * (1.0 - q2)
    )
    size = root**2 / (q1 - q2) ** 2
    # Subtract a hair before rounding up so that an exact whole number is not pushed up by
    # floating-point noise.
    rounded = np.ceil(size - 1e-9).astype(np.int64)
    sizes: IntOrArray = _scalar_or_array(np.maximum(rounded, 1))
    return sizes


def _llr_term(k: FloatArray, row: FloatArray, column: FloatArray, total: FloatArray) -> FloatArray:
    """k * ln(k / E) with E = row * column / total; 0 where k = 0 (0 * ln 0 = 0)."""
    ratio = np.divide(k * total, row * column, out=np.ones(k.shape), where=k > 0)
    return k * np.log(ratio)


def _as_table(
    function: str, k11: ArrayLike, k12: ArrayLike, k21: ArrayLike, k22: ArrayLike
) -> list[FloatArray]:
    """Validate and broadcast the four cells of 2x2 tables."""
    cells = [
        _as_counts(function, name, value)
        for name, value in (("k11", k11), ("k12", k12), ("k21", k21), ("k22", k22))
    ]
    return list(np.broadcast_arrays(*cells))


def _g2(a: FloatArray, b: FloatArray, c: FloatArray, d: FloatArray) -> FloatArray:
    """G^2 of validated, broadcast 2x2 tables [[a, b], [c, d]]."""
    row1, row2 = a + b, c + d
    col1, col2 = a + c, b + d
    total = row1 + row2
    g2 = 2.0 * (
        _llr_term(a, row1, col1, total)
        + _llr_term(b, row1, col2, total)
        + _llr_term(c, row2, col1, total)
        + _llr_term(d, row2, col2, total)
    )
    # G^2 >= 0 in exact arithmetic; clip the rounding residue of a table at independence.
    return np.maximum(g2, 0.0)


def log_likelihood_ratio(
    k11: ArrayLike, k12: ArrayLike, k21: ArrayLike, k22: ArrayLike
) -> FloatOrArray:
    """Dunning's (1993) log-likelihood ratio G^2 for 2x2 contingency tables.

    For the table [[k11, k12], [k21, k22]] (k11: A with B, k12: A without B, k21: B without A,
    k22: neither), with N the total and E_ij = row_i * column_j / N the count expected under
    independence::

        G^2 = 2 * sum_ij k_ij * ln(k_ij / E_ij),   with 0 * ln(0) = 0

    Natural logarithm. Under independence G^2 is approximately chi-square with 1 degree of freedom
    (3.84 at the 5% level). A table that is all zeros gives 0.

    Parameters
    ----------
    k11, k12, k21, k22 : int or array_like
        Non-negative counts of the four cells; they broadcast against each other.

    Returns
    -------
    float or ndarray
        G^2 in the broadcast shape of the cells.

    See Also
    --------
    signed_llr : G^2 with the direction of the association.

    Examples
    --------
    >>> round(log_likelihood_ratio(0, 5, 5, 0), 4)  # 20 ln 2
    13.8629
    """
    cells = _as_table("log_likelihood_ratio", k11, k12, k21, k22)
    g2: FloatOrArray = _scalar_or_array(_g2(*cells))
    return g2


def signed_llr(k11: ArrayLike, k12: ArrayLike, k21: ArrayLike, k22: ArrayLike) -> FloatOrArray:
    """G^2 of ``log_likelihood_ratio`` carrying the direction of the association.

    ::

        signed = sign(k11 - E11) * G^2,   sign(k11 - E11) = sign(k11 k22 - k12 k21)

    Positive when A and B occur together more often than independence predicts, negative when less
    often, 0 at independence. The sign comes from the cross-product difference, since
    k11 - E11 = (k11 k22 - k12 k21) / N.

    Parameters
    ----------
    k11, k12, k21, k22 : int or array_like
        Non-negative counts of the four cells; they broadcast against each other.

    Returns
    -------
    float or ndarray
        Signed G^2 in the broadcast shape of the cells.

    Examples
    --------
    >>> round(signed_llr(10, 20, 30, 40), 4)  # k11 = 10 is below its expectation of 12
    -0.8043
    """
    a, b, c, d = _as_table("signed_llr", k11, k12, k21, k22)
    direction = np.sign(a * d - b * c)
    signed: FloatOrArray = _scalar_or_array(direction * _g2(a, b, c, d))
    return signed


__all__ = [
    "DEFAULT_MIN_EXPECTED",
    "TwoProportionResult",
    "log_likelihood_ratio",
    "sample_size_two_proportions",
    "signed_llr",
    "two_proportion_test",
    "wilson_interval",
]
