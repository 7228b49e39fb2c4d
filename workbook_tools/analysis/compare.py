"""Pairwise comparisons of adjusted treatment means.

Every method works from the same ingredients: the adjusted means, their
covariance in units of the error variance, and the error term (mean square and
degrees of freedom). Adding a method means adding one ``_method`` function that
turns t statistics into adjusted p-values and a critical multiplier.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import lru_cache

import numpy as np
from scipy import special

from workbook_tools.analysis import distributions
from workbook_tools.analysis.anova import ErrorTerm
from workbook_tools.analysis.errors import TrialInputError
from workbook_tools.analysis.letters import letter_groups
from workbook_tools.analysis.means import MeanEstimates, difference_variances, t_quantile

METHODS = ("lsd", "tukey", "bonferroni", "holm", "dunnett")
DEFAULT_METHOD = "tukey"
"""Every front end's default: it controls the family-wise error rate, unlike plain LSD."""
ALTERNATIVES = ("two-sided", "greater", "less")

METHOD_TITLES = {
    "lsd": "Fisher's least significant difference (LSD)",
    "tukey": "Tukey HSD (Tukey-Kramer where replication differs)",
    "bonferroni": "Bonferroni-adjusted t tests",
    "holm": "Holm step-down adjusted t tests",
    "dunnett": "Dunnett comparisons with a control",
}


@dataclass(frozen=True)
class PairComparison:
    """One pairwise difference ``first - second`` of adjusted means."""

    first: str
    second: str
    difference: float
    se: float | None
    statistic: float | None
    p: float | None
    ci_low: float | None
    ci_high: float | None
    significant: bool | None

    def to_dict(self) -> dict:
        return dict(self.__dict__)


@dataclass(frozen=True)
class Comparisons:
    """The pairwise comparisons of one method at one alpha."""

    method: str
    title: str
    alpha: float
    alternative: str
    control: str | None
    critical_value: float | None
    critical_difference: float | None
    pairs: list[PairComparison]
    groups: dict[str, str] | None
    notes: list[str] = field(default_factory=list)

    def to_dict(self) -> dict:
        return {
            "method": self.method,
            "title": self.title,
            "alpha": self.alpha,
            "alternative": self.alternative,
            "control": self.control,
            "critical_value": self.critical_value,
            "critical_difference": self.critical_difference,
            "pairs": [pair.to_dict() for pair in self.pairs],
            "groups": self.groups,
            "notes": list(self.notes),
        }


def _two_sided_t_p(t: np.ndarray, df: int) -> np.ndarray:
    return 2.0 * special.stdtr(df, -np.abs(t))


def _holm(p: np.ndarray) -> np.ndarray:
    """Holm (1979) step-down adjustment of a vector of p-values."""
    m = p.size
    order = np.argsort(p, kind="stable")
    stepped = np.maximum.accumulate(p[order] * (m - np.arange(m)))
    adjusted = np.empty_like(p)
    adjusted[order] = np.minimum(stepped, 1.0)
    return adjusted


@lru_cache(maxsize=256)
def tukey_critical(alpha: float, k: int, df: int) -> float:
    """Tukey's critical multiplier q(1 - alpha; k, df) / sqrt(2), memoised.

    Worksheets recalculate with the same alpha, number of treatments and error
    df again and again; the quantile is the costliest step of a small analysis.
    """
    return float(distributions.studentized_range_quantile(1.0 - alpha, k, df)) / np.sqrt(2.0)


@lru_cache(maxsize=256)
def _dunnett_critical_memo(alpha: float, df: float, corr: tuple, alternative: str) -> float:
    m = int(round(len(corr) ** 0.5))
    return float(distributions.dunnett_critical_general(alpha, df, np.array(corr).reshape(m, m),
                                                        alternative=alternative))


def dunnett_critical(alpha: float, df: float, corr: np.ndarray, alternative: str) -> float:
    """Dunnett's critical value for the correlation matrix ``corr`` of the statistics, memoised.

    As with Tukey's, a worksheet recalculates the same design again and again; the root
    search over the multivariate-t probability is the costliest step of a Dunnett analysis.
    """
    return _dunnett_critical_memo(float(alpha), float(df), tuple(np.asarray(corr, dtype=float).ravel().tolist()),
                                  alternative)


def _all_pairs_p_and_critical(method: str, t: np.ndarray, k: int, df: int, alpha: float) -> tuple[np.ndarray, float]:
    m = t.size
    if method == "lsd":
        return _two_sided_t_p(t, df), t_quantile(alpha / 2, df)
    if method == "bonferroni":
        return np.minimum(_two_sided_t_p(t, df) * m, 1.0), t_quantile(alpha / (2 * m), df)
    if method == "holm":
        return _holm(_two_sided_t_p(t, df)), t_quantile(alpha / (2 * m), df)
    if method == "tukey":
        q = np.abs(t) * np.sqrt(2.0)
        p = np.minimum(distributions.studentized_range_sf(q, k, df), 1.0)
        critical = tukey_critical(float(alpha), int(k), int(df))
        return np.asarray(p, dtype=float), critical
    raise ValueError(method)


def common_value(values: np.ndarray) -> float | None:
    """The single value of an array when all entries agree to 1e-9 relative, else None."""
    if values.size and float(np.max(np.abs(values - values[0]))) <= 1e-9 * abs(float(values[0])):
        return float(values[0])
    return None


def _interval(difference, half, alternative):
    if alternative == "greater":
        return difference - half, None
    if alternative == "less":
        return None, difference + half
    return difference - half, difference + half


def compare_means(
    labels,
    estimates: MeanEstimates,
    error: ErrorTerm,
    *,
    method: str = DEFAULT_METHOD,
    alpha: float = 0.05,
    control: str | None = None,
    alternative: str = "two-sided",
    treatment_significant: bool | None = None,
) -> Comparisons:
    """Pairwise comparisons of adjusted means with adjusted p-values and intervals.

    Parameters
    ----------
    labels : sequence of str
        Treatment labels in the order of ``estimates``.
    estimates : MeanEstimates
    error : ErrorTerm
        Mean square and df used for every standard error.
    method : {"lsd", "tukey", "bonferroni", "holm", "dunnett"}
    alpha : float
        Family-wise (or, for LSD, per-comparison) error rate.
    control : str, optional
        Control treatment for Dunnett's method (default: the first treatment).
    alternative : {"two-sided", "greater", "less"}
        For Dunnett only: "greater" tests treatment above control.
    treatment_significant : bool, optional
        Outcome of the overall F test; LSD is protected only when True.

    Returns
    -------
    Comparisons

    References
    ----------
    Fisher, R. A. (1935). *The Design of Experiments* (least significant difference).
    Tukey, J. W. (1953). The problem of multiple comparisons (unpublished notes);
        Kramer, C. Y. (1956). *Biometrics* 12:307-310 (unequal replication).
    Holm, S. (1979). A simple sequentially rejective multiple test procedure.
        *Scandinavian Journal of Statistics* 6:65-70.
    Dunnett, C. W. (1955). *JASA* 50:1096-1121.
    Hothorn, T., Bretz, F. & Westfall, P. (2008). Simultaneous inference in
        general parametric models. *Biometrical Journal* 50:346-363.
    """
    method = str(method).lower().strip()
    if method not in METHODS:
        raise TrialInputError(f"Unknown comparison method '{method}'; choose one of {', '.join(METHODS)}.")
    if alternative not in ALTERNATIVES:
        raise TrialInputError(f"Unknown alternative '{alternative}'; choose one of {', '.join(ALTERNATIVES)}.")
    if not 0.0 < alpha < 1.0:
        raise TrialInputError(f"alpha must lie between 0 and 1 (got {alpha}).")
    labels = list(labels)
    if method == "dunnett":
        return _dunnett(labels, estimates, error, alpha, control, alternative)
    if alternative != "two-sided":
        raise TrialInputError("One-sided comparisons are offered for Dunnett's method only.")
    k = len(labels)
    first, second = np.triu_indices(k, 1)
    diff = estimates.adjusted[first] - estimates.adjusted[second]
    dv = difference_variances(estimates)[first, second]
    notes = []
    if method == "lsd":
        if treatment_significant:
            notes.append("Protected LSD: the overall treatment F test was significant at this alpha.")
        else:
            notes.append(
                "Unprotected LSD: the overall treatment F test was not significant at this alpha, "
                "so these unadjusted comparisons overstate the evidence."
            )
    if method == "holm":
        notes.append("Holm adjusts p-values only; the intervals shown are Bonferroni intervals.")
    pairs, critical_value, critical_difference, significant = _pairs(
        labels, first, second, diff, dv, error, alpha, "two-sided",
        lambda t: _all_pairs_p_and_critical(method, t, k, error.df, alpha),
    )
    sig_matrix = np.zeros((k, k), dtype=bool)
    sig_matrix[first, second] = significant
    sig_matrix |= sig_matrix.T
    groups = letter_groups(labels, estimates.adjusted, sig_matrix)
    return Comparisons(
        method, METHOD_TITLES[method], alpha, "two-sided", None, critical_value, critical_difference,
        pairs, groups, notes,
    )


def _pairs(labels, first, second, diff, dv, error, alpha, alternative, p_and_critical):
    """Build pair rows; p_and_critical maps t statistics to (adjusted p, multiplier)."""
    usable = not error.exact_zero and error.ms > 0
    if usable:
        se = np.sqrt(error.ms * dv)
        t = diff / se
        p, critical_value = p_and_critical(t)
        p = np.clip(p, 0.0, 1.0)
        significant = p < alpha
        critical_difference = common_value(critical_value * se)
    else:
        se = np.zeros_like(diff)
        t = p = None
        critical_value = critical_difference = None
        significant = np.zeros(diff.shape, dtype=bool)
    pairs = []
    for idx in range(diff.size):
        if usable:
            low, high = _interval(float(diff[idx]), float(critical_value * se[idx]), alternative)
            pair = PairComparison(
                labels[first[idx]], labels[second[idx]], float(diff[idx]), float(se[idx]), float(t[idx]),
                float(p[idx]), low, high, bool(significant[idx]),
            )
        else:
            pair = PairComparison(labels[first[idx]], labels[second[idx]], float(diff[idx]), None, None, None,
                                  None, None, None)
        pairs.append(pair)
    return pairs, (None if critical_value is None else float(critical_value)), critical_difference, significant


def _dunnett(labels, estimates, error, alpha, control, alternative) -> Comparisons:
    if control is None:
        control = labels[0]
    control = str(control).strip()
    if control not in labels:
        raise TrialInputError(
            f"The control '{control}' is not one of the treatments ({', '.join(labels)})."
        )
    c = labels.index(control)
    others = np.array([j for j in range(len(labels)) if j != c])
    v = estimates.unscaled_cov
    # covariance of the differences (mean_j - mean_control)
    cov = v[np.ix_(others, others)] - v[others, c][:, None] - v[c, others][None, :] + v[c, c]
    dv = np.diag(cov).copy()
    corr = cov / np.sqrt(np.outer(dv, dv))
    diff = estimates.adjusted[others] - estimates.adjusted[c]

    def p_and_critical(t):
        p = distributions.dunnett_sf_general(t, error.df, corr, alternative=alternative)
        critical = dunnett_critical(alpha, error.df, corr, alternative)
        return np.asarray(p, dtype=float), float(critical)

    pairs, critical_value, critical_difference, _ = _pairs(
        labels, others, np.full(others.size, c), diff, dv, error, alpha, alternative, p_and_critical,
    )
    side = {"two-sided": "two-sided", "greater": "one-sided: treatment above control",
            "less": "one-sided: treatment below control"}[alternative]
    notes = [f"Each treatment against the control '{control}' ({side}); exact multivariate-t critical value."]
    return Comparisons(
        "dunnett", METHOD_TITLES["dunnett"], alpha, alternative, control, critical_value, critical_difference,
        pairs, None, notes,
    )
