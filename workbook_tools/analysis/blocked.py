"""The whole blocked analysis of one response: fit, tables, comparisons, checks."""

from __future__ import annotations

import numpy as np

from workbook_tools.analysis import checks as assumption_checks
from workbook_tools.analysis.anova import blocked_rows, efficiency, one_way_rows
from workbook_tools.analysis.compare import DEFAULT_METHOD, common_value, compare_means
from workbook_tools.analysis.design import BlockDesign
from workbook_tools.analysis.errors import TrialInputError
from workbook_tools.analysis.fit import fit_additive, fit_cell_means, sums_of_squares
from workbook_tools.analysis.means import additive_means, cell_model_means, difference_variances, mean_rows, t_quantile
from workbook_tools.analysis.result import BlockTrialResult, MissingCell, ResidualTable, Summary

BLOCK_MODELS = ("random", "fixed")
OUTLIER_LIMIT = 3.0  # |standardized residual| above this is flagged (common practice)


def _residual_table(design, fitted, residuals, leverage, residual_ms, exact) -> ResidualTable:
    denominator = residual_ms * (1.0 - leverage)
    with np.errstate(divide="ignore", invalid="ignore"):
        standardized = np.where((denominator > 0) & (leverage < 1 - 1e-10) & (not exact),
                                residuals / np.sqrt(np.maximum(denominator, 1e-300)), np.nan)
    with np.errstate(invalid="ignore"):
        outlier = np.abs(standardized) > OUTLIER_LIMIT      # NaN compares False
    return ResidualTable(
        block_labels=design.blocks, treatment_labels=design.treatments,
        block_index=design.block_index, treatment_index=design.treatment_index,
        observed=design.values, fitted=fitted, residual=residuals, standardized=standardized,
        leverage=leverage, outlier=outlier,
    )


def _friedman(design: BlockDesign, alpha: float, warnings: list[str]):
    if design.missing_cells:
        warnings.append("The Friedman test needs every block complete; it was not computed because cells are missing.")
        return None
    b, t = design.n_blocks, design.n_treatments
    cell = design.block_index * t + design.treatment_index
    sums = np.bincount(cell, weights=design.values, minlength=b * t)
    cell_means = (sums / design.counts.reshape(-1)).reshape(b, t)
    if not design.one_per_cell_at_most:
        warnings.append("The Friedman test ranks the cell means, since some cells hold several observations.")
    return assumption_checks.friedman_test(cell_means, alpha=alpha)


def analyze_design(
    design: BlockDesign,
    *,
    alpha: float = 0.05,
    compare: str = DEFAULT_METHOD,
    control: str | None = None,
    alternative: str = "two-sided",
    block_model: str = "random",
) -> BlockTrialResult:
    """Run the full blocked analysis of a validated design.

    Parameters
    ----------
    design : BlockDesign
    alpha : float
        Significance level for tests, intervals and comparisons.
    compare : {"lsd", "tukey", "bonferroni", "holm", "dunnett"}
    control : str, optional
        Control treatment for Dunnett (default: first treatment).
    alternative : {"two-sided", "greater", "less"}
        Direction for Dunnett comparisons.
    block_model : {"random", "fixed"}
        How blocks are regarded when every cell is replicated: random blocks test
        treatments against the treatment x block interaction, fixed blocks
        against the within-cell error. Without replication it changes nothing.

    Returns
    -------
    BlockTrialResult

    References
    ----------
    Montgomery, D. C. (2017). *Design and Analysis of Experiments*, 9th ed., ch. 4.
    Cochran, W. G. & Cox, G. M. (1957). *Experimental Designs*, 2nd ed., ch. 4.
    """
    if block_model not in BLOCK_MODELS:
        raise TrialInputError(f"The block model must be 'random' or 'fixed' (got '{block_model}').")
    if not 0.0 < float(alpha) < 1.0:
        raise TrialInputError(f"alpha must lie between 0 and 1 (got {alpha}).")
    alpha = float(alpha)
    warnings: list[str] = []
    if design.dropped_blocks:
        warnings.append("Blocks without any observation were left out: " + ", ".join(design.dropped_blocks) + ".")
    fit = fit_additive(design)
    sums = sums_of_squares(design, fit)
    cells = fit_cell_means(design) if design.replicated else None
    rows, error, residual_ms = blocked_rows(design, sums, cells, random_blocks=(block_model == "random"))
    one_way, _ = one_way_rows(design, sums)
    gain = efficiency(error, rows[1], design.n, design.n_treatments)
    estimates = cell_model_means(design, cells) if cells is not None else additive_means(design, fit)

    treatment_row = rows[0]
    f_significant = None if treatment_row.p is None else bool(treatment_row.p < alpha)
    comparisons = compare_means(
        design.treatments, estimates, error, method=compare, alpha=alpha, control=control,
        alternative=alternative, treatment_significant=f_significant,
    )
    means = mean_rows(design.treatments, estimates, error, alpha)

    if cells is not None:
        fitted, residuals, leverage, residual_sse = cells.fitted, cells.residuals, cells.leverage, cells.sse
    else:
        fitted, residuals, leverage, residual_sse = fit.fitted, fit.residuals, fit.leverage, fit.sse
    residual_row = next(row for row in rows if row.source == "error")
    exact = error.exact_zero
    if exact:
        warnings.append(
            "The error mean square is zero: the data fit the model exactly (for example, constant values), "
            "so F tests, p-values and intervals cannot be computed."
        )
    table = _residual_table(design, fitted, residuals, leverage, residual_ms, exact)
    n_outliers = int(table.outlier.sum())
    if n_outliers:
        warnings.append(
            f"{n_outliers} observation(s) have a standardized residual beyond +/-{OUTLIER_LIMIT:g} "
            "(possible outliers): check them against the lab records before acting on the result."
        )

    rounding = 64.0 * np.finfo(float).eps * float(np.max(np.abs(design.values)))
    checks = {
        "normality": assumption_checks.normality_check(residuals, alpha=alpha, zero_tolerance=rounding),
        "equal_variance": assumption_checks.equal_variance_check(
            residuals, design.treatment_index, design.n_treatments, alpha=alpha, zero_tolerance=rounding),
    }
    if cells is None and design.one_per_cell_at_most:
        checks["additivity"] = assumption_checks.additivity_check(
            residuals, fit.fitted, fit.solver.residuals,
            residual_sse, residual_row.df, alpha=alpha,
        )
    else:
        checks["additivity"] = assumption_checks.CheckOutcome(
            name="additivity", method="treatment x block interaction F test",
            statistic=rows[2].f if cells is not None else None,
            p=rows[2].p if cells is not None else None,
            df=(rows[2].df, residual_row.df) if cells is not None else None,
            passed=None if (cells is None or rows[2].p is None) else bool(rows[2].p >= alpha),
            verdict=_interaction_verdict(rows[2] if cells is not None else None, alpha),
        )
    for outcome in checks.values():
        if outcome.passed is False:
            warnings.append(outcome.verdict)

    qq = assumption_checks.qq_points(table.standardized)  # undefined residuals are left out
    qq = dict(qq, reference_line=assumption_checks.reference_line(qq["theoretical"], qq["sample"],
                                                                  already_sorted=True))
    friedman = _friedman(design, alpha, warnings)

    missing = [
        MissingCell(design.blocks[b], design.treatments[t],
                    float(fit.shift + fit.block_effects[b] + fit.treatment_effects[t]))
        for b, t in design.missing_cells
    ]
    if missing:
        warnings.append(
            f"{len(missing)} cell(s) are missing: treatment effects are adjusted for blocks by least squares "
            f"and the error has {residual_row.df} degrees of freedom."
        )
    if compare == "lsd" and f_significant is False:
        warnings.append(comparisons.notes[0])

    dv = difference_variances(estimates)
    off_diagonal = dv[np.triu_indices(design.n_treatments, 1)]
    usable = not exact and error.ms > 0
    sed_values = np.sqrt(error.ms * off_diagonal) if usable else None
    sed = common_value(sed_values) if usable else None
    grand_mean = float(design.values.mean())
    residual_ms_value = float(residual_row.ms)
    summary = Summary(
        grand_mean=grand_mean,
        cv_percent=(100.0 * np.sqrt(residual_ms_value) / abs(grand_mean)) if grand_mean != 0 and not exact else (
            0.0 if exact and grand_mean != 0 else None),
        mse=residual_ms_value,
        root_mse=float(np.sqrt(residual_ms_value)),
        error_df=int(residual_row.df),
        r_squared=(1.0 - residual_sse / sums.total) if sums.total > 0 else None,
        n_observations=design.n,
        n_blocks=design.n_blocks,
        n_treatments=design.n_treatments,
        model=("treatment + block + treatment x block" if cells is not None else "treatment + block"),
        treatment_error=error.source,
        treatment_error_ms=float(error.ms),
        treatment_error_df=int(error.df),
        treatment_error_reason=error.reason,
        sed=sed,
        lsd=None if sed is None else float(sed * t_quantile(alpha / 2, error.df)),
    )
    options = {"alpha": alpha, "compare": comparisons.method, "control": comparisons.control,
               "alternative": alternative, "block_model": block_model if cells is not None else "not needed"}
    return BlockTrialResult(
        blocks=design.blocks, treatments=design.treatments, options=options, anova=rows, error_term=error,
        one_way=one_way, efficiency=gain, summary=summary, means=means, comparisons=comparisons,
        residuals=table, checks=checks, qq=qq, friedman=friedman, missing=missing, warnings=warnings,
    )


def _interaction_verdict(row, alpha: float) -> str:
    if row is None:
        return ("Not available: with some cells holding one observation or fewer, neither Tukey's "
                "one-degree-of-freedom test nor an interaction test applies.")
    if row.p is None:
        return "Not available: the within-cell error is zero."
    if row.p < alpha:
        return (f"Treatment differences change from block to block (interaction p = {row.p:.3g}): "
                "report treatment effects with care and look at the means block by block.")
    return f"No evidence that treatment differences change from block to block (interaction p = {row.p:.3g})."
