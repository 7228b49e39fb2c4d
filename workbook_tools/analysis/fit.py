"""Least-squares fit of y = mean + treatment + block (+ interaction) + error.

Two routes give the same numbers: a closed form when every cell holds the same
number of observations, and block absorption otherwise (reduced normal
equations in the treatments, block effects swept out, no dummy matrix).
All sums are formed on values centred by their grand mean, and every error sum
of squares is summed from residuals directly, never as a difference of large
totals.

References
----------
Searle, S. R. (1987). *Linear Models for Unbalanced Data*, ch. 4 (two-way
    crossed classification, absorption of one factor).
John, J. A. & Williams, E. R. (1995). *Cyclic and Computer Generated Designs*,
    2nd ed., ch. 1 (the intra-block information matrix C = R - N'K^{-1}N).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from workbook_tools.analysis.design import BlockDesign


@dataclass(frozen=True)
class AdditiveFit:
    """Effects and residuals of the additive model on centred data.

    Attributes
    ----------
    shift : float
        The constant subtracted before fitting (the grand mean).
    block_effects, treatment_effects : ndarray
        Estimates on the centred scale; treatment effects sum to zero.
    fitted, residuals : ndarray
        Per observation; ``fitted`` is on the original scale.
    sse : float
        Residual sum of squares.
    c_plus : ndarray, shape (t, t)
        Moore-Penrose inverse of the intra-block information matrix C;
        ``sigma^2 * c_plus`` is the covariance of the treatment effects.
    leverage : ndarray
        Diagonal of the hat matrix per observation.
    """

    shift: float
    block_effects: np.ndarray
    treatment_effects: np.ndarray
    fitted: np.ndarray
    residuals: np.ndarray
    sse: float
    c_plus: np.ndarray
    leverage: np.ndarray


def _sum_by(index: np.ndarray, weights: np.ndarray, size: int) -> np.ndarray:
    return np.bincount(index, weights=weights, minlength=size)


def _closed_form(design: BlockDesign, centred: np.ndarray, shift: float) -> AdditiveFit:
    """Every cell holds the same number ``m`` of observations."""
    b, t = design.n_blocks, design.n_treatments
    bi, ti = design.block_index, design.treatment_index
    m = int(design.counts.flat[0])
    treatment_means = _sum_by(ti, centred, t) / (b * m)
    block_means = _sum_by(bi, centred, b) / (t * m)
    level = treatment_means.mean()
    treatment_effects = treatment_means - level
    block_effects = block_means
    fitted_centred = block_effects[bi] + treatment_effects[ti]
    residuals = centred - fitted_centred
    c_plus = (np.eye(t) - 1.0 / t) / (b * m)
    leverage = np.full(design.n, 1.0 / (t * m) + (t - 1) / (b * m * t))
    return AdditiveFit(
        shift, block_effects, treatment_effects, fitted_centred + shift, residuals,
        float(residuals @ residuals), c_plus, leverage,
    )


def information_matrix(counts: np.ndarray) -> np.ndarray:
    """Intra-block information matrix C = diag(r) - N' diag(1/k) N.

    References
    ----------
    John, J. A. & Williams, E. R. (1995), *Cyclic and Computer Generated
    Designs*, 2nd ed., section 1.2.
    """
    k = counts.sum(axis=1)
    r = counts.sum(axis=0)
    return np.diag(r.astype(float)) - counts.T @ (counts / k[:, None])


def _pseudo_inverse_connected(c: np.ndarray) -> np.ndarray:
    """C+ for a connected design, whose C has null space spanned by the ones vector."""
    t = c.shape[0]
    j = np.full((t, t), 1.0 / t)
    return np.linalg.inv(c + j) - j


def _absorbed(design: BlockDesign, centred: np.ndarray, shift: float) -> AdditiveFit:
    """Unequal or missing cells: absorb blocks, solve C tau = Q."""
    b, t = design.n_blocks, design.n_treatments
    bi, ti = design.block_index, design.treatment_index
    counts = design.counts.astype(float)
    k = counts.sum(axis=1)
    share = counts / k[:, None]                          # N_bj / k_b
    block_totals = _sum_by(bi, centred, b)
    treatment_totals = _sum_by(ti, centred, t)
    c_plus = _pseudo_inverse_connected(information_matrix(counts))
    adjusted_totals = treatment_totals - share.T @ block_totals
    tau = c_plus @ adjusted_totals
    tau -= tau.mean()
    beta = (block_totals - counts @ tau) / k
    fitted_centred = beta[bi] + tau[ti]
    residuals = centred - fitted_centred
    # h = 1/k_b + (e_t - s_b)' C+ (e_t - s_b), with s_b the block's share row
    a = share @ c_plus                                   # (b, t)
    quad = np.einsum("bt,bt->b", a, share)
    cell_leverage = (1.0 / k)[:, None] + np.diag(c_plus)[None, :] - 2.0 * a + quad[:, None]
    leverage = cell_leverage[bi, ti]
    return AdditiveFit(
        shift, beta, tau, fitted_centred + shift, residuals, float(residuals @ residuals), c_plus, leverage
    )


def fit_additive(design: BlockDesign, values: np.ndarray | None = None) -> AdditiveFit:
    """Fit the additive block + treatment model.

    Parameters
    ----------
    design : BlockDesign
    values : ndarray, optional
        Another response on the same layout (default: the design's values).
        Used to residualise auxiliary variables, e.g. for Tukey's test.

    Returns
    -------
    AdditiveFit

    References
    ----------
    Searle (1987), *Linear Models for Unbalanced Data*, section 4.2.
    """
    y = design.values if values is None else np.asarray(values, dtype=float)
    shift = float(y.mean())
    centred = y - shift
    if design.equal_counts:
        return _closed_form(design, centred, shift)
    return _absorbed(design, centred, shift)


def within_group_ss(index: np.ndarray, centred: np.ndarray, size: int) -> tuple[float, np.ndarray]:
    """Sum of squares about group means (two-pass) and the group means."""
    counts = np.bincount(index, minlength=size)
    means = _sum_by(index, centred, size) / np.maximum(counts, 1)
    deviations = centred - means[index]
    return float(deviations @ deviations), means


@dataclass(frozen=True)
class SumsOfSquares:
    """Sums of squares of the blocked analysis, each from its own residuals.

    ``treatment`` is adjusted for blocks and ``block`` adjusted for
    treatments (each equals the sequential sum when cells are equal).
    """

    total: float
    treatment: float
    block: float
    error: float
    treatment_unadjusted: float
    block_unadjusted: float


def sums_of_squares(design: BlockDesign, fit: AdditiveFit) -> SumsOfSquares:
    """Adjusted and unadjusted sums of squares of the additive model.

    References
    ----------
    Searle (1987), *Linear Models for Unbalanced Data*, section 4.3
    (reductions in sums of squares, R(tau | mu, beta) and R(beta | mu, tau)).
    """
    centred = design.values - fit.shift
    total = float(centred @ centred)
    within_blocks, _ = within_group_ss(design.block_index, centred, design.n_blocks)
    within_treatments, _ = within_group_ss(design.treatment_index, centred, design.n_treatments)
    error = fit.sse
    return SumsOfSquares(
        total=total,
        treatment=max(within_blocks - error, 0.0),
        block=max(within_treatments - error, 0.0),
        error=error,
        treatment_unadjusted=max(total - within_treatments, 0.0),
        block_unadjusted=max(total - within_blocks, 0.0),
    )


@dataclass(frozen=True)
class CellMeansFit:
    """The full model with treatment x block interaction (every cell replicated)."""

    cell_means: np.ndarray       # (b, t) on the original scale
    fitted: np.ndarray
    residuals: np.ndarray
    sse: float                   # pure error: within-cell sum of squares
    leverage: np.ndarray


def fit_cell_means(design: BlockDesign) -> CellMeansFit:
    """Fit one mean per block-treatment cell (the interaction model)."""
    b, t = design.n_blocks, design.n_treatments
    shift = float(design.values.mean())
    centred = design.values - shift
    cell = design.block_index * t + design.treatment_index
    sse, means = within_group_ss(cell, centred, b * t)
    fitted = means[cell] + shift
    residuals = centred - means[cell]
    counts = design.counts.reshape(-1)
    return CellMeansFit(
        cell_means=means.reshape(b, t) + shift,
        fitted=fitted,
        residuals=residuals,
        sse=sse,
        leverage=1.0 / counts[cell],
    )
