"""Checks of the assumptions behind a blocked ANOVA, Q-Q plot points and the Friedman test.

Every function takes plain numpy arrays and returns a small result object whose
``to_dict()`` is JSON-safe (plain ``float``/``int``/``str``/``None``, never NaN or inf).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable

import numpy as np
from scipy import special, stats

from workbook_tools.analysis.errors import TrialInputError

SHAPIRO_MAX_N = 5000
"""Largest sample for which Shapiro-Wilk p-values are trusted (scipy's documentation)."""


def _plain(value):
    """Turn numpy scalars, tuples and dicts into JSON-safe Python values (NaN/inf -> None)."""
    if value is None or isinstance(value, (str, bool)):
        return value
    if isinstance(value, (np.bool_,)):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        return float(value) if math.isfinite(value) else None
    if isinstance(value, dict):
        return {str(key): _plain(item) for key, item in value.items()}
    if isinstance(value, (tuple, list, np.ndarray)):
        return [_plain(item) for item in value]
    raise TypeError(f"cannot make {type(value).__name__} JSON-safe")


def _p_text(p: float) -> str:
    """A p-value as a lab manager reads it: ``p = 0.012`` or ``p < 0.0001``."""
    return "p < 0.0001" if p < 0.0001 else f"p = {p:.2g}" if p < 0.001 else f"p = {p:.3g}"


@dataclass(frozen=True)
class CheckOutcome:
    """The outcome of one assumption check.

    Attributes
    ----------
    name : str
        ``"normality"``, ``"equal_variance"`` or ``"additivity"``.
    method : str
        The test used, in words.
    statistic, p : float or None
        Test statistic and p-value; None when the test is not available.
    df : tuple or None
        Degrees of freedom where the statistic has them, e.g. ``(1, 7)``.
    passed : bool or None
        True: no evidence against the assumption at the chosen level; False: evidence
        against it; None: the check could not be made (the verdict says why).
    verdict : str
        One plain sentence: what was found and what it means.
    extra : dict or None
        Further figures of the test (e.g. sums of squares).
    """

    name: str
    method: str
    statistic: float | None
    p: float | None
    df: tuple | None
    passed: bool | None
    verdict: str
    extra: dict | None = None

    def to_dict(self) -> dict:
        """JSON-safe dictionary of every field (NaN and inf become None)."""
        return {
            "name": self.name,
            "method": self.method,
            "statistic": _plain(self.statistic),
            "p": _plain(self.p),
            "df": _plain(self.df),
            "passed": self.passed,
            "verdict": self.verdict,
            "extra": _plain(self.extra),
        }


# scipy's shapiro behind its axis/NaN-policy wrapper: the residuals here are one finite 1-D
# array, and the wrapper costs about 15 times the test itself on a small trial
_SHAPIRO = getattr(stats.shapiro, "__wrapped__", stats.shapiro)


def dagostino_pearson(values: np.ndarray) -> tuple[float, float]:
    """D'Agostino-Pearson K^2 omnibus test of normality (as ``scipy.stats.normaltest``), in one pass.

    The skewness and kurtosis of the sample are each turned into a standard normal
    deviate, and ``K^2 = Z_skew^2 + Z_kurt^2`` is referred to chi-square on 2 df.
    Needs at least 20 values; all moments come from one set of centred powers.

    References
    ----------
    D'Agostino, R. B. (1970). Transformation to normality of the null distribution of g1.
        *Biometrika* 57:679-681.
    Anscombe, F. J. & Glynn, W. J. (1983). Distribution of the kurtosis statistic b2 for
        normal samples. *Biometrika* 70:227-234.
    D'Agostino, R. B., Belanger, A. & D'Agostino, R. B. Jr. (1990). A suggestion for using
        powerful and informative tests of normality. *The American Statistician* 44:316-321.
    """
    x = np.asarray(values, dtype=float)
    n = float(x.size)
    d = x - x.mean()
    d2 = d * d
    m2 = float(d2.mean())
    m3 = float((d2 * d).mean())
    m4 = float((d2 * d2).mean())
    # skewness: D'Agostino (1970)
    g1 = m3 / m2 ** 1.5
    y = g1 * math.sqrt((n + 1) * (n + 3) / (6.0 * (n - 2)))
    beta2 = 3.0 * (n * n + 27 * n - 70) * (n + 1) * (n + 3) / ((n - 2) * (n + 5) * (n + 7) * (n + 9))
    w2 = -1.0 + math.sqrt(2.0 * (beta2 - 1))
    delta = 1.0 / math.sqrt(0.5 * math.log(w2))
    alpha = math.sqrt(2.0 / (w2 - 1))
    y = y if y != 0 else 1.0
    z_skew = delta * math.log(y / alpha + math.sqrt((y / alpha) ** 2 + 1))
    # kurtosis: Anscombe & Glynn (1983)
    b2 = m4 / (m2 * m2)
    mean_b2 = 3.0 * (n - 1) / (n + 1)
    var_b2 = 24.0 * n * (n - 2) * (n - 3) / ((n + 1) ** 2 * (n + 3) * (n + 5))
    xk = (b2 - mean_b2) / math.sqrt(var_b2)
    root_beta1 = (6.0 * (n * n - 5 * n + 2) / ((n + 7) * (n + 9))
                  * math.sqrt(6.0 * (n + 3) * (n + 5) / (n * (n - 2) * (n - 3))))
    a = 6.0 + 8.0 / root_beta1 * (2.0 / root_beta1 + math.sqrt(1 + 4.0 / root_beta1 ** 2))
    denom = 1 + xk * math.sqrt(2.0 / (a - 4.0))
    if denom == 0:
        return math.inf, 0.0
    term2 = math.copysign(abs((1 - 2.0 / a) / denom) ** (1.0 / 3.0), denom)
    z_kurt = ((1 - 2.0 / (9 * a)) - term2) / math.sqrt(2.0 / (9 * a))
    k2 = z_skew * z_skew + z_kurt * z_kurt
    return float(k2), float(special.chdtrc(2, k2))


def _not_available(name: str, method: str, why: str, extra: dict | None = None) -> CheckOutcome:
    return CheckOutcome(name, method, None, None, None, None, f"Not available: {why}", extra)


def _finite_residuals(residuals) -> np.ndarray:
    values = np.asarray(residuals, dtype=float).ravel()
    return values[np.isfinite(values)]


def normality_check(residuals, alpha: float = 0.05, *, zero_tolerance: float = 0.0) -> CheckOutcome:
    """Test whether the residuals look like a sample from a normal distribution.

    Shapiro-Wilk for 3 to 5000 residuals. Above 5000, Shapiro-Wilk p-values are not
    reliable (scipy's documentation says so), and the D'Agostino-Pearson K² omnibus test of
    skewness and kurtosis, which is valid at that size, is used instead. With very many
    residuals even tiny, harmless departures become "significant": look at the Q-Q plot
    before acting on a small p-value.

    Parameters
    ----------
    residuals : array_like
        Residuals of the fit; NaN entries (missing cells) are ignored.
    alpha : float
        Significance level.
    zero_tolerance : float
        Residuals all within this distance of zero count as a perfect fit (give, for
        example, 1e-10 times the scale of the response to absorb rounding).

    Returns
    -------
    CheckOutcome
        ``passed`` is None when there are fewer than 3 residuals or they are all equal.

    References
    ----------
    Shapiro, S. S. and Wilk, M. B. (1965). An analysis of variance test for normality
    (complete samples). Biometrika 52:591-611.
    D'Agostino, R. and Pearson, E. S. (1973). Tests for departure from normality.
    Biometrika 60:613-622.
    """
    values = _finite_residuals(residuals)
    n = values.size
    large = n > SHAPIRO_MAX_N
    method = ("D'Agostino-Pearson K2 (used above 5000 residuals, where Shapiro-Wilk "
              "p-values are unreliable)") if large else "Shapiro-Wilk"
    if n < 3:
        return _not_available("normality", method,
                              f"at least 3 residuals are needed and there are {n}.")
    if np.all(np.abs(values) <= zero_tolerance) or np.ptp(values) == 0:
        return _not_available("normality", method,
                              "the residuals are all equal (the model fits the data exactly), "
                              "so there is no scatter whose shape could be judged.")
    # Both statistics are scale-free, but scipy's Shapiro-Wilk takes a tiny absolute spread for
    # zero range (seen with residuals near 1e-20); scaling by a power of two is exact.
    unit = np.ldexp(values, -int(np.frexp(np.max(np.abs(values)))[1]))
    statistic, p = dagostino_pearson(unit) if large else (float(v) for v in _SHAPIRO(unit))
    passed = p >= alpha
    if passed:
        verdict = (f"No clear departure from a normal distribution ({_p_text(p)}); the F test "
                   "and the comparisons can be used as they are.")
    else:
        verdict = (f"The residuals depart from a normal distribution ({_p_text(p)}), so the F "
                   "test and the comparisons may be unreliable: look at the Q-Q plot, and "
                   "consider transforming the response or using the rank-based Friedman test.")
    return CheckOutcome("normality", method, statistic, p, None, passed, verdict)


def _medians(groups: list[np.ndarray]) -> np.ndarray:
    """Median of each group, computed in one sort when the groups are of equal size."""
    sizes = {g.size for g in groups}
    if len(sizes) == 1:
        return np.median(np.stack(groups), axis=1)
    return np.array([np.median(g) for g in groups])


def equal_variance_check(residuals, treatment_index, n_treatments: int, alpha: float = 0.05,
                         *, zero_tolerance: float = 0.0) -> CheckOutcome:
    """Test whether the residuals have the same spread in every treatment.

    Brown-Forsythe test: Levene's one-way ANOVA of absolute deviations, with deviations
    taken from each group's median, which keeps the test valid for skewed residuals.
    Treatments with fewer than 2 residuals are left out. With exactly 2 residuals per
    treatment both deviations from the median are equal, so the test has no
    within-treatment variation and is reported as not available.

    Parameters
    ----------
    residuals : array_like
        Residuals of the fit; NaN entries (missing cells) are ignored.
    treatment_index : array_like of int
        Treatment number (0 .. n_treatments - 1) of each residual.
    n_treatments : int
        Number of treatments.
    alpha : float
        Significance level.
    zero_tolerance : float
        Absolute deviations at or below this count as zero (rounding of a perfect fit).

    Returns
    -------
    CheckOutcome
        ``df`` is (groups - 1, residuals - groups).

    References
    ----------
    Levene, H. (1960). Robust tests for equality of variances. In Olkin, I. (ed.),
    Contributions to Probability and Statistics, Stanford University Press, 278-292.
    Brown, M. B. and Forsythe, A. B. (1974). Robust tests for the equality of variances.
    J. Amer. Statist. Assoc. 69:364-367.
    """
    name, method = "equal_variance", "Brown-Forsythe (Levene, median-centred)"
    values = np.asarray(residuals, dtype=float).ravel()
    index = np.asarray(treatment_index).ravel()
    if index.shape != values.shape:
        raise TrialInputError("Each residual needs exactly one treatment number.")
    keep = np.isfinite(values)
    values, index = values[keep], index[keep]
    if index.size % n_treatments == 0 and np.array_equal(
            index, np.tile(np.arange(n_treatments), index.size // n_treatments)):
        groups = list(values.reshape(-1, n_treatments).T)   # a complete grid read row by row
    else:
        # small unsigned integers make numpy's stable sort a linear-time radix sort
        order = np.argsort(index.astype(np.uint16 if n_treatments < 2**16 else np.int64), kind="stable")
        sizes = np.bincount(index, minlength=n_treatments)
        groups = np.split(values[order], np.cumsum(sizes)[:-1])
    dropped = sum(1 for g in groups if g.size < 2)
    groups = [g for g in groups if g.size >= 2]
    note = (f" ({dropped} treatment{'s' if dropped != 1 else ''} with fewer than 2 residuals "
            "left out)") if dropped else ""
    if len(groups) < 2:
        return _not_available(name, method, "at least two treatments with two or more "
                              f"residuals each are needed{note}.")
    deviations = [np.abs(g - m) for g, m in zip(groups, _medians(groups))]
    deviations = [np.where(d <= zero_tolerance, 0.0, d) for d in deviations]
    total = sum(float(np.sum(d * d)) for d in deviations)
    within = sum(float(np.sum((d - d.mean()) ** 2)) for d in deviations)
    if total == 0.0 or within <= 1e-24 * total:
        return _not_available(name, method, "the distances from each treatment's median do "
                              "not vary within treatments (for instance with only two "
                              f"residuals per treatment), so spreads cannot be compared{note}.")
    # Brown-Forsythe = one-way ANOVA of the absolute deviations from the group medians
    n_total = sum(d.size for d in deviations)
    grand = sum(float(d.sum()) for d in deviations) / n_total
    between = sum(d.size * (float(d.mean()) - grand) ** 2 for d in deviations)
    df = (len(groups) - 1, n_total - len(groups))
    statistic = (between / df[0]) / (within / df[1])
    p = float(special.fdtrc(df[0], df[1], statistic))
    passed = p >= alpha
    if passed:
        verdict = (f"No clear difference in spread between treatments ({_p_text(p)}){note}; "
                   "one pooled error variance is reasonable.")
    else:
        verdict = (f"The spread of the residuals differs between treatments ({_p_text(p)})"
                   f"{note}, so the pooled error and the comparisons may be unreliable: "
                   "plot residuals against fitted values and consider a transformation "
                   "(often a log when spread grows with the mean).")
    return CheckOutcome(name, method, statistic, p, df, passed, verdict)


def additivity_check(residuals, fitted, residualize: Callable[[np.ndarray], np.ndarray],
                     error_ss: float, error_df: int, alpha: float = 0.05) -> CheckOutcome:
    """Tukey's one-degree-of-freedom test for non-additivity of blocks and treatments.

    General regression form, valid for unbalanced data: ``z = (fitted - mean(fitted))**2``
    is residualized against the additive block + treatment model, ``z_r = residualize(z)``,
    and ``SS_nonadd = (residuals . z_r)**2 / (z_r . z_r)`` is tested against the remaining
    error, ``F = SS_nonadd / ((error_ss - SS_nonadd) / (error_df - 1))`` on
    ``(1, error_df - 1)`` df. Centring the fitted values first only improves rounding: the
    two squares differ by ``-2 c fitted + c**2``, a combination of the fitted values and
    the constant, which lies in the additive model space and is removed by residualizing.

    Parameters
    ----------
    residuals, fitted : array_like
        Residuals and fitted values of the additive fit, one per observation used.
    residualize : callable
        Returns the residual of a vector (same order) after projecting out the additive
        block + treatment model.
    error_ss : float
        Error sum of squares of the additive fit.
    error_df : int
        Its degrees of freedom.
    alpha : float
        Significance level.

    Returns
    -------
    CheckOutcome
        ``extra`` holds ``ss_nonadditivity``, ``ss_remainder`` and ``slope`` (regression
        coefficient of the residuals on ``z_r``).

    References
    ----------
    Tukey, J. W. (1949). One degree of freedom for non-additivity. Biometrics 5:232-242.
    """
    name, method = "additivity", "Tukey one-degree-of-freedom"
    r = np.asarray(residuals, dtype=float).ravel()
    f = np.asarray(fitted, dtype=float).ravel()
    if r.shape != f.shape:
        raise TrialInputError("Residuals and fitted values must have the same length.")
    if error_df < 2:
        return _not_available(name, method, "at least 2 error degrees of freedom are needed "
                              f"and the fit leaves {error_df}.")
    z = (f - f.mean()) ** 2
    z_r = np.asarray(residualize(z), dtype=float).ravel()
    zz, zrzr = float(z @ z), float(z_r @ z_r)
    if zz == 0.0 or zrzr < 1e-20 * zz:
        return _not_available(name, method, "the fitted values have no curvature left to test "
                              "once block and treatment effects are taken out.")
    cross = float(r @ z_r)
    slope = cross / zrzr
    ss_nonadd = cross * cross / zrzr
    error_ss = float(error_ss)
    ss_remainder = max(error_ss - ss_nonadd, 0.0)
    tiny = 1e-12 * max(error_ss, float(r @ r))
    extra = {"ss_nonadditivity": ss_nonadd, "ss_remainder": ss_remainder, "slope": slope}
    if error_ss <= tiny:
        return _not_available(name, method, "the additive model fits the data exactly, so "
                              "there is no error left to test against.", extra)
    if ss_remainder <= tiny:
        verdict = ("Not available: all of the error is explained by non-additivity, so there "
                   "is nothing left to test it against; judge the interaction plot instead.")
        return CheckOutcome(name, method, None, None, (1, error_df - 1), None, verdict, extra)
    statistic = ss_nonadd / (ss_remainder / (error_df - 1))
    p = float(special.fdtrc(1, error_df - 1, statistic))
    passed = p >= alpha
    if passed:
        verdict = (f"No clear sign that treatment differences change with the block level "
                   f"({_p_text(p)}); the additive block model is reasonable.")
    else:
        verdict = (f"The treatment differences seem to change with the block level, for "
                   f"instance proportional effects ({_p_text(p)}), so the F test may be "
                   "unreliable: consider a log transform of the response.")
    return CheckOutcome(name, method, statistic, p, (1, error_df - 1), passed, verdict, extra)


def qq_points(standardized_residuals) -> dict:
    """Points of a normal Q-Q plot.

    Parameters
    ----------
    standardized_residuals : array_like
        Residuals on a common scale; NaN entries are left out.

    Returns
    -------
    dict
        ``theoretical`` (normal quantiles at Blom's plotting positions
        ``(i - 3/8) / (n + 1/4)``), ``sample`` (the residuals sorted ascending) and
        ``plotting_position`` (the formula, as text).

    References
    ----------
    Blom, G. (1958). Statistical Estimates and Transformed Beta-Variables. Wiley, New York.
    """
    values = np.asarray(standardized_residuals, dtype=float).ravel()
    sample = np.sort(values[np.isfinite(values)])
    n = sample.size
    positions = (np.arange(1, n + 1) - 0.375) / (n + 0.25)
    return {
        "theoretical": special.ndtri(positions),
        "sample": sample,
        "plotting_position": "Blom (i - 3/8)/(n + 1/4)",
    }


def reference_line(theoretical, sample, *, already_sorted: bool = False) -> tuple[float, float]:
    """Intercept and slope of the Q-Q reference line through the first and third quartiles.

    Drawing the line through the quartiles of both axes, rather than fitting it, is common
    practice: the tails, where departures show, do not pull the line. When the quartiles
    cannot define a line (fewer than two distinct theoretical points), the identity line
    ``(0.0, 1.0)`` of standardized residuals is returned.

    Parameters
    ----------
    theoretical, sample : array_like
        The x and y coordinates of the Q-Q points, as from ``qq_points``.
    already_sorted : bool
        Both are ascending already (as ``qq_points`` returns them).

    Returns
    -------
    tuple of float
        ``(intercept, slope)``.
    """
    x = np.asarray(theoretical, dtype=float).ravel()
    y = np.asarray(sample, dtype=float).ravel()
    if x.size < 2 or x.size != y.size:
        return 0.0, 1.0
    x1, x3 = _quartiles(x if already_sorted else np.sort(x))
    y1, y3 = _quartiles(y if already_sorted else np.sort(y))
    if not x3 > x1:
        return 0.0, 1.0
    slope = (y3 - y1) / (x3 - x1)
    return float(y1 - slope * x1), float(slope)


def _quartiles(ordered: np.ndarray) -> tuple[float, float]:
    """First and third quartiles of sorted values (linear interpolation, as numpy's default)."""
    positions = np.array([0.25, 0.75]) * (ordered.size - 1)
    low = np.floor(positions).astype(int)
    high = np.minimum(low + 1, ordered.size - 1)
    fraction = positions - low
    values = ordered[low] + fraction * (ordered[high] - ordered[low])
    return float(values[0]), float(values[1])


def average_ranks(values: np.ndarray) -> np.ndarray:
    """Ranks 1..t within each row, tied values sharing their average rank (vectorised)."""
    b, t = values.shape
    order = np.argsort(values, axis=1)     # tied values get one average rank, so any order of ties will do
    ordered = np.sort(values, axis=1)      # the same values as taking them in that order, and faster
    new_run = np.ones((b, t), dtype=bool)
    new_run[:, 1:] = ordered[:, 1:] != ordered[:, :-1]
    if new_run.all():                      # no ties anywhere: ranks are the sorted positions
        ranks = np.empty((b, t))
        np.put_along_axis(ranks, order, np.broadcast_to(np.arange(1.0, t + 1.0), (b, t)), axis=1)
        return ranks
    positions = np.broadcast_to(np.arange(t), (b, t))
    run_start = np.maximum.accumulate(np.where(new_run, positions, 0), axis=1)
    run_end_marks = np.ones((b, t), dtype=bool)
    run_end_marks[:, :-1] = new_run[:, 1:]
    run_end = np.minimum.accumulate(np.where(run_end_marks, positions, t - 1)[:, ::-1], axis=1)[:, ::-1]
    sorted_ranks = (run_start + run_end) / 2.0 + 1.0
    ranks = np.empty((b, t))
    np.put_along_axis(ranks, order, sorted_ranks, axis=1)
    return ranks


@dataclass(frozen=True)
class FriedmanOutcome:
    """The Friedman rank test of treatments within blocks.

    Attributes
    ----------
    statistic : float or None
        Tie-corrected chi-square statistic; None when not available.
    df : int
        Degrees of freedom, treatments - 1.
    p : float or None
        Upper-tail chi-square p-value.
    kendall_w : float or None
        Kendall's coefficient of concordance, ``statistic / (blocks * (treatments - 1))``.
    verdict : str
        One plain sentence.
    method : str
        The test, in words.
    """

    statistic: float | None
    df: int
    p: float | None
    kendall_w: float | None
    verdict: str
    method: str

    def to_dict(self) -> dict:
        """JSON-safe dictionary of every field (NaN and inf become None)."""
        return {key: _plain(getattr(self, key))
                for key in ("statistic", "df", "p", "kendall_w", "verdict", "method")}


def friedman_test(cell_values, alpha: float = 0.05) -> FriedmanOutcome:
    """Friedman's rank test that treatments do not differ, ranking within each block.

    Values are ranked within each block (average ranks for ties). With ``R_j`` the rank sum
    of treatment j, ``b`` blocks and ``t`` treatments, the tie-corrected statistic is::

        chi2 = (t - 1) * sum_j (R_j - b (t + 1) / 2)**2 / sum_ij (r_ij - (t + 1) / 2)**2

    which equals the usual ``12 sum_j (R_j - b(t+1)/2)**2 / (b t (t+1))`` divided by the
    tie correction ``1 - sum(tau**3 - tau) / (b t (t**2 - 1))`` (tau: sizes of tied groups)
    and is referred to chi-square on ``t - 1`` df. Kendall's W is ``chi2 / (b (t - 1))``
    with the same tie-corrected chi2, i.e.
    ``W = sum_j (R_j - b(t+1)/2)**2 / (b * sum_ij (r_ij - (t+1)/2)**2)``.

    Parameters
    ----------
    cell_values : array_like, shape (blocks, treatments)
        One value per cell (cell means when cells are replicated), no missing values.
        Ties are exact equalities: round cell means first if rounding noise could split them.
    alpha : float
        Significance level for the verdict.

    Returns
    -------
    FriedmanOutcome

    References
    ----------
    Friedman, M. (1937). The use of ranks to avoid the assumption of normality implicit in
    the analysis of variance. J. Amer. Statist. Assoc. 32:675-701.
    Kendall, M. G. and Babington Smith, B. (1939). The problem of m rankings. Ann. Math.
    Statist. 10:275-287.
    Hollander, M. and Wolfe, D. A. (1973). Nonparametric Statistical Methods. Wiley, New York.
    """
    method = "Friedman rank test (tie-corrected)"
    values = np.asarray(cell_values, dtype=float)
    if values.ndim != 2 or values.shape[0] < 2 or values.shape[1] < 2:
        raise TrialInputError("The Friedman test needs at least 2 blocks and 2 treatments.")
    if not np.all(np.isfinite(values)):
        raise TrialInputError("The Friedman test needs a value in every cell.")
    b, t = values.shape
    df = t - 1
    centred = average_ranks(values) - (t + 1) / 2.0
    rank_spread = float(np.sum(centred * centred))
    if rank_spread == 0.0:
        return FriedmanOutcome(None, df, None, None, "Not available: every block has tied "
                               "values, so the treatments cannot be ranked.", method)
    rank_sums = centred.sum(axis=0)
    treatment_spread = float(rank_sums @ rank_sums)
    statistic = df * treatment_spread / rank_spread
    p = float(special.chdtrc(df, statistic))
    w = treatment_spread / (b * rank_spread)
    figures = f"chi-square = {statistic:.4g} on {df} df, {_p_text(p)}, Kendall's W = {w:.2f}"
    if p < alpha:
        verdict = (f"Treatments rank differently within blocks ({figures}): at least one "
                   "tends to come out higher or lower; this test does not rely on normal "
                   "residuals.")
    else:
        verdict = (f"No clear difference in how treatments rank within blocks ({figures}); "
                   "this test does not rely on normal residuals.")
    return FriedmanOutcome(statistic, df, p, w, verdict, method)
