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
    leverage: np.ndarray
    solver: "AdditiveSolver"

    @property
    def c_plus(self) -> np.ndarray:
        """Moore-Penrose inverse of C, from the solver that produced the fit."""
        return self.solver.c_plus


def _sum_by(index: np.ndarray, weights: np.ndarray, size: int) -> np.ndarray:
    return np.bincount(index, weights=weights, minlength=size)


class AdditiveSolver:
    """The additive model's normal equations for one layout, factorised once.

    Solving for another response on the same layout (for example Tukey's
    squared fitted values) reuses the factorisation.
    """

    def __init__(self, design: BlockDesign, closed_form: bool | None = None):
        self.design = design
        b, t = design.n_blocks, design.n_treatments
        self.equal = design.equal_counts if closed_form is None else bool(closed_form and design.equal_counts)
        counts = design.counts.astype(float)
        self.k = counts.sum(axis=1)
        self.share = counts / self.k[:, None]                        # N_bj / k_b
        if self.equal:
            m = float(design.counts.flat[0])
            self.c_plus = (np.eye(t) - 1.0 / t) / (b * m)
        else:
            self.c_plus = _pseudo_inverse_connected(information_matrix(counts))
        self._counts = counts

    def effects(self, centred: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Block effects and treatment effects (summing to zero) of a centred response."""
        d = self.design
        b, t = d.n_blocks, d.n_treatments
        block_totals = _sum_by(d.block_index, centred, b)
        treatment_totals = _sum_by(d.treatment_index, centred, t)
        if self.equal:
            tau = treatment_totals / self._counts.sum(axis=0)
            tau -= tau.mean()
            return block_totals / self.k, tau
        tau = self.c_plus @ (treatment_totals - self.share.T @ block_totals)
        tau -= tau.mean()
        return (block_totals - self._counts @ tau) / self.k, tau

    def residuals(self, values: np.ndarray) -> np.ndarray:
        """Residual of any response on this layout after the additive fit."""
        centred = np.asarray(values, dtype=float)
        centred = centred - centred.mean()
        beta, tau = self.effects(centred)
        return centred - beta[self.design.block_index] - tau[self.design.treatment_index]

    def leverage(self) -> np.ndarray:
        """Hat-matrix diagonal: h = 1/k_b + (e_t - s_b)' C+ (e_t - s_b), s_b the block's share row."""
        d = self.design
        if self.equal:
            b, t = d.n_blocks, d.n_treatments
            m = float(d.counts.flat[0])
            return np.full(d.n, 1.0 / (t * m) + (t - 1) / (b * m * t))
        a = self.share @ self.c_plus                                 # (b, t)
        quad = np.einsum("bt,bt->b", a, self.share)
        cell = (1.0 / self.k)[:, None] + np.diag(self.c_plus)[None, :] - 2.0 * a + quad[:, None]
        return cell[d.block_index, d.treatment_index]


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


def fit_additive(design: BlockDesign, values: np.ndarray | None = None,
                 solver: AdditiveSolver | None = None) -> AdditiveFit:
    """Fit the additive block + treatment model.

    Parameters
    ----------
    design : BlockDesign
    values : ndarray, optional
        Another response on the same layout (default: the design's values).
    solver : AdditiveSolver, optional
        A factorisation of this layout to reuse.

    Returns
    -------
    AdditiveFit

    References
    ----------
    Searle (1987), *Linear Models for Unbalanced Data*, section 4.2.
    """
    solver = solver or AdditiveSolver(design)
    y = design.values if values is None else np.asarray(values, dtype=float)
    shift = float(y.mean())
    centred = y - shift
    beta, tau = solver.effects(centred)
    fitted_centred = beta[design.block_index] + tau[design.treatment_index]
    residuals = centred - fitted_centred
    return AdditiveFit(
        shift, beta, tau, fitted_centred + shift, residuals, float(residuals @ residuals),
        solver.leverage(), solver,
    )


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
