"""The public face of the engine: analyse a grid or a list of records."""

from __future__ import annotations

from workbook_tools.analysis.blocked import analyze_design
from workbook_tools.analysis.design import design_from_grid, design_from_records
from workbook_tools.analysis.result import BlockTrialResult


def analyze_grid(values, blocks, treatments, **options) -> BlockTrialResult:
    """Analyse a blocks-by-treatments grid as a randomised complete block design.

    Parameters
    ----------
    values : 2-D array-like, shape (n_blocks, n_treatments)
        One observation per cell; ``None`` or NaN marks a missing cell.
    blocks, treatments : sequence
        Row and column labels; their order is kept in every table.
    **options
        ``alpha=0.05``, ``compare="tukey"`` (``"lsd"``, ``"bonferroni"``, ``"holm"``,
        ``"dunnett"``), ``control=None``, ``alternative="two-sided"`` (Dunnett only:
        ``"greater"``, ``"less"``), ``block_model="random"`` or ``"fixed"`` (matters only
        when every cell is replicated).

    Returns
    -------
    BlockTrialResult
        Typed fields, ``to_dict()`` (JSON-safe) and ``to_frames()`` (pandas).

    Raises
    ------
    TrialInputError
        For data the analysis cannot use, with a message for the user.

    References
    ----------
    Montgomery, D. C. (2017). *Design and Analysis of Experiments*, 9th ed., ch. 4.
    """
    return analyze_design(design_from_grid(values, blocks, treatments), **_engine_options(options))


def analyze_records(blocks, treatments, values, **options) -> BlockTrialResult:
    """Analyse one record per observation (any number per block-treatment cell).

    Parameters
    ----------
    blocks, treatments, values : sequence
        Block label, treatment label and value of each observation; records with
        a missing value are skipped. Labels keep the order of first appearance.
    **options
        As for :func:`analyze_grid`.

    Returns
    -------
    BlockTrialResult

    References
    ----------
    Searle, S. R. (1987). *Linear Models for Unbalanced Data*, ch. 4.
    """
    return analyze_design(design_from_records(blocks, treatments, values), **_engine_options(options))


def _engine_options(options: dict) -> dict:
    from workbook_tools.analysis.errors import TrialInputError

    known = {"alpha", "compare", "control", "alternative", "block_model"}
    unknown = sorted(set(options) - known)
    if unknown:
        raise TrialInputError(f"Unknown option(s): {', '.join(unknown)}; known: {', '.join(sorted(known))}.")
    return options
