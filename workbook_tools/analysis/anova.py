"""Analysis-of-variance rows, the one-way comparison and what blocking gained."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import special

from workbook_tools.analysis.design import BlockDesign
from workbook_tools.analysis.fit import CellMeansFit, SumsOfSquares


@dataclass(frozen=True)
class AnovaRow:
    """One line of an analysis-of-variance table (None where not defined)."""

    source: str
    df: int
    ss: float
    ms: float | None
    f: float | None
    p: float | None

    def to_dict(self) -> dict:
        return {"source": self.source, "df": self.df, "ss": self.ss, "ms": self.ms, "f": self.f, "p": self.p}


@dataclass(frozen=True)
class ErrorTerm:
    """The mean square that treatments are tested and compared against."""

    source: str      # "error" or "interaction"
    ms: float
    df: int
    exact_zero: bool  # the data fit exactly: F, p and intervals are undefined
    reason: str      # why this term is used, in plain words


def f_test(ms: float, error: ErrorTerm, df: int) -> tuple[float | None, float | None]:
    """F ratio and upper-tail p-value; None when the error mean square is zero."""
    if error.exact_zero or error.ms <= 0.0:
        return None, None
    f = ms / error.ms
    return float(f), float(special.fdtrc(df, error.df, f))


def exact_fit(sse: float, values: np.ndarray) -> bool:
    """Whether a residual sum of squares is zero up to rounding of the data."""
    scale = float(np.max(np.abs(values))) if values.size else 0.0
    return bool(sse <= values.size * (64.0 * np.finfo(float).eps * scale) ** 2)


def _row(source: str, df: int, ss: float, error: ErrorTerm | None) -> AnovaRow:
    ms = ss / df if df > 0 else None
    f, p = f_test(ms, error, df) if (error is not None and ms is not None) else (None, None)
    return AnovaRow(source, df, float(ss), None if ms is None else float(ms), f, p)


def blocked_rows(
    design: BlockDesign,
    sums: SumsOfSquares,
    cells: CellMeansFit | None,
    random_blocks: bool,
) -> tuple[list[AnovaRow], ErrorTerm, float]:
    """Rows of the blocked analysis, the treatment error term and the residual MS.

    With every cell replicated, the treatment x block interaction is separated
    from the within-cell error. Fixed blocks test treatments against the
    within-cell error; random blocks test treatments (and blocks) against the
    interaction, because under random blocks the expected treatment mean
    square contains the interaction variance.

    References
    ----------
    Montgomery, D. C. (2017). *Design and Analysis of Experiments*, 9th ed.,
        sections 4.1 and 13.3 (expected mean squares, mixed models).
    Searle (1987), *Linear Models for Unbalanced Data*, section 4.3.
    """
    b, t, n = design.n_blocks, design.n_treatments, design.n
    df_t, df_b = t - 1, b - 1
    if cells is None:
        df_e = n - b - t + 1
        error = ErrorTerm(
            "error", sums.error / df_e, df_e, exact_fit(sums.error, design.values),
            "residual of the additive block + treatment model",
        )
        rows = [
            _row("treatment", df_t, sums.treatment, error),
            _row("block", df_b, sums.block, error),
            _row("error", df_e, sums.error, None),
        ]
        residual_ms = error.ms
    else:
        df_i = df_t * df_b
        df_e = n - b * t
        ss_i = max(sums.error - cells.sse, 0.0)
        within = ErrorTerm(
            "error", cells.sse / df_e, df_e, exact_fit(cells.sse, design.values),
            "within-cell (replicate) error: blocks taken as fixed",
        )
        interaction = ErrorTerm(
            "interaction", ss_i / df_i, df_i, exact_fit(ss_i, design.values),
            "treatment x block interaction: blocks taken as random, so treatment differences "
            "are judged against how much they vary from block to block",
        )
        error = interaction if random_blocks else within
        rows = [
            _row("treatment", df_t, sums.treatment, error),
            _row("block", df_b, sums.block, error),
            _row("interaction", df_i, ss_i, within),
            _row("error", df_e, cells.sse, None),
        ]
        residual_ms = within.ms
    rows.append(AnovaRow("total", n - 1, float(sums.total), None, None, None))
    return rows, error, residual_ms


def one_way_rows(design: BlockDesign, sums: SumsOfSquares) -> tuple[list[AnovaRow], ErrorTerm]:
    """The same data analysed as a completely randomised design (treatments only)."""
    n, t = design.n, design.n_treatments
    df_e = n - t
    ss_e = sums.total - sums.treatment_unadjusted
    error = ErrorTerm("error", ss_e / df_e, df_e, exact_fit(ss_e, design.values), "within-treatment error")
    rows = [
        _row("treatment", t - 1, sums.treatment_unadjusted, error),
        _row("error", df_e, ss_e, None),
        AnovaRow("total", n - 1, float(sums.total), None, None, None),
    ]
    return rows, error


@dataclass(frozen=True)
class Efficiency:
    """Relative efficiency of the block design against a completely randomised one.

    ``relative_uncorrected`` estimates the error mean square the same runs would
    have had without blocking, ``(SS_block + (n - 1 - df_block) MSE) / (n - 1)``,
    and divides it by the blocked error mean square; ``relative`` multiplies that
    by Fisher's allowance for the error degrees of freedom spent on blocks,
    ``(df_b + 1)(df_c + 3) / ((df_b + 3)(df_c + 1))`` with ``df_c = n - t``.
    A value of 1.9 means a completely randomised trial would need about 1.9
    times as many runs for the same precision.

    References
    ----------
    Fisher, R. A. (1935). *The Design of Experiments*, section on the
        amount of information.
    Cochran, W. G. & Cox, G. M. (1957). *Experimental Designs*, 2nd ed.,
        section 4.3 (efficiency of randomised blocks).
    """

    relative: float | None
    relative_uncorrected: float | None
    error_df_blocked: int
    error_df_unblocked: int

    def to_dict(self) -> dict:
        return {
            "relative": self.relative,
            "relative_uncorrected": self.relative_uncorrected,
            "error_df_blocked": self.error_df_blocked,
            "error_df_unblocked": self.error_df_unblocked,
        }


def efficiency(blocked: ErrorTerm, block_row: AnovaRow, n: int, n_treatments: int) -> Efficiency:
    """What blocking gained (see :class:`Efficiency`)."""
    df_c = n - n_treatments
    if blocked.exact_zero or blocked.ms <= 0.0:
        return Efficiency(None, None, blocked.df, df_c)
    unblocked_ms = (block_row.ss + (n - 1 - block_row.df) * blocked.ms) / (n - 1)
    ratio = unblocked_ms / blocked.ms
    df_b = blocked.df
    correction = (df_b + 1) * (df_c + 3) / ((df_b + 3) * (df_c + 1))
    return Efficiency(float(ratio * correction), float(ratio), df_b, df_c)
