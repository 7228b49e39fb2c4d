"""Raw and adjusted treatment means with standard errors and intervals."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import special

from workbook_tools.analysis.anova import ErrorTerm
from workbook_tools.analysis.design import BlockDesign
from workbook_tools.analysis.fit import AdditiveFit, CellMeansFit


@dataclass(frozen=True)
class MeanEstimates:
    """Adjusted means and their covariance in units of the error variance.

    ``unscaled_cov * error.ms`` is the covariance matrix of the adjusted means,
    so the standard error of a difference between treatments j and l is
    ``sqrt(error.ms * (V[j, j] + V[l, l] - 2 V[j, l]))``.
    """

    raw: np.ndarray
    n: np.ndarray
    adjusted: np.ndarray
    unscaled_cov: np.ndarray


def additive_means(design: BlockDesign, fit: AdditiveFit) -> MeanEstimates:
    """Least-squares means of the additive model: each treatment averaged over all blocks.

    The adjusted mean of treatment j is the grand level of the blocks plus the
    treatment effect; its variance is ``sigma^2 [sum_b 1/(b^2 k_b) +
    (e_j - s)' C+ (e_j - s)]`` with ``s`` the average block share of each
    treatment (block means and within-block contrasts are uncorrelated).

    References
    ----------
    Searle, S. R., Speed, F. M. & Milliken, G. A. (1980). Population marginal
        means in the linear model: an alternative to least squares means.
        *The American Statistician* 34:216-221.
    """
    b, t = design.n_blocks, design.n_treatments
    counts = design.counts.astype(float)
    k = counts.sum(axis=1)
    n = counts.sum(axis=0)
    raw = np.bincount(design.treatment_index, weights=design.values - fit.shift, minlength=t) / n + fit.shift
    adjusted = fit.shift + fit.block_effects.mean() + fit.treatment_effects
    share = (counts / k[:, None]).mean(axis=0)
    d = np.eye(t) - share[None, :]
    cov = np.sum(1.0 / k) / b**2 + d @ fit.c_plus @ d.T
    return MeanEstimates(raw, n.astype(int), adjusted, cov)


def cell_model_means(design: BlockDesign, fit: CellMeansFit) -> MeanEstimates:
    """Means under the interaction model: each treatment's cell means averaged over blocks.

    References
    ----------
    Searle, Speed & Milliken (1980), *The American Statistician* 34:216-221.
    """
    b, t = design.n_blocks, design.n_treatments
    counts = design.counts.astype(float)
    n = counts.sum(axis=0)
    shift = float(design.values.mean())
    raw = np.bincount(design.treatment_index, weights=design.values - shift, minlength=t) / n + shift
    adjusted = fit.cell_means.mean(axis=0)
    cov = np.diag((1.0 / counts).sum(axis=0) / b**2)
    return MeanEstimates(raw, n.astype(int), adjusted, cov)


@dataclass(frozen=True)
class TreatmentMean:
    """One row of the means table."""

    treatment: str
    n: int
    mean: float
    adjusted_mean: float
    se: float | None
    ci_low: float | None
    ci_high: float | None

    def to_dict(self) -> dict:
        return dict(self.__dict__)


def t_quantile(upper_tail: float, df: int) -> float:
    """Critical value of Student's t with the given upper-tail probability."""
    return float(special.stdtrit(df, 1.0 - upper_tail))


def mean_rows(labels, estimates: MeanEstimates, error: ErrorTerm, alpha: float) -> list[TreatmentMean]:
    """Means table rows: n, raw mean, adjusted mean, SE and (1 - alpha) interval."""
    rows = []
    usable = not error.exact_zero and error.ms > 0
    half = t_quantile(alpha / 2, error.df) if usable else None
    for j, label in enumerate(labels):
        mean = float(estimates.adjusted[j])
        se = float(np.sqrt(error.ms * estimates.unscaled_cov[j, j])) if usable else (0.0 if error.exact_zero else None)
        low = mean - half * se if usable else None
        high = mean + half * se if usable else None
        rows.append(TreatmentMean(label, int(estimates.n[j]), float(estimates.raw[j]), mean, se, low, high))
    return rows


def difference_variances(estimates: MeanEstimates) -> np.ndarray:
    """Unscaled variance of each pairwise difference of adjusted means (t x t)."""
    v = estimates.unscaled_cov
    diag = np.diag(v)
    return diag[:, None] + diag[None, :] - 2.0 * v
