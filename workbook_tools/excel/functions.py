"""Worksheet functions for Excel (xlwings user-defined functions), all named ``WBT_...``.

Every function takes the trial as its first argument, a range as Excel passes
it (a list of rows; ``None`` for blanks; numbers as floats; text; dates as
datetimes; error values as their text, because the argument is read with
xlwings' ``err_to_str``), then the same optional arguments::

    =WBT_ANOVA(data, [compare], [alpha], [control], [layout], [block_header], [treatment_header], [response])

The layout is guessed as ``workbook-tools analyze`` does: a wide grid
(treatment labels across the first row, block labels down the first column),
or a long table (a header row, then one row per observation: give the block,
treatment and response headers). The cells follow the reader's rules
(:func:`workbook_tools.sheets.reader.cell_number`), so a problem comes back as
the same message the headless path gives, with its place counted inside the
range (``row 3, column 2 of the data: ...``), never as a traceback.

The functions only adapt: read the arguments, call the engine, lay out the
result with :func:`workbook_tools.layout.table_by_key` (the headers and row
labels of the result sheets); an undefined number comes out as an empty cell.
Several functions on the same data and options share one analysis (a small
cache keyed on the argument values).
"""

from __future__ import annotations

import functools
import math

import xlwings as xw
from openpyxl.utils.cell import range_boundaries

from workbook_tools.analysis.errors import TrialInputError
from workbook_tools.jobs import parse_alpha, parse_compare, parse_layout
from workbook_tools.sheets.book import analyse_tables
from workbook_tools.layout import table_by_key
from workbook_tools.sheets.ranges import CellRange
from workbook_tools.sheets.reader import cell_label, trials_from_values

CATEGORY = "workbook-tools"
CACHE_SIZE = 32
ARGUMENT_DOCS = {
    "data": "The trial: a wide grid (treatments across, blocks down) or a long table with a header row.",
    "compare": "Comparison method: lsd, tukey (default), bonferroni, holm or dunnett.",
    "alpha": "Significance level (default 0.05).",
    "control": "Dunnett: the control treatment (default: the first).",
    "layout": "auto (default), wide, long or transposed (wide with blocks across).",
    "block_header": "Long layout: header of the block column.",
    "treatment_header": "Long layout: header of the treatment column.",
    "response": "Long layout: header of the response column.",
    "block": "Block label of the missing cell.",
    "treatment": "Treatment label of the missing cell.",
}
ARGUMENT_OPTIONS = {"data": {"ndim": 2, "err_to_str": True}}


def _worksheet_function(function):
    """Register ``function`` with xlwings (no effect where xlwings cannot serve functions)."""
    names = function.__code__.co_varnames[:function.__code__.co_argcount]
    for name in reversed(names):
        function = xw.arg(name, doc=ARGUMENT_DOCS[name], **ARGUMENT_OPTIONS.get(name, {}))(function)
    return xw.func(category=CATEGORY)(function)


# ---------------------------------------------------------------- adapting arguments and results

def _frozen(data) -> tuple:
    """The argument as a tuple of row tuples (a single value or a 1-D list becomes one row)."""
    if not isinstance(data, (list, tuple)):
        data = [[data]]
    elif data and not isinstance(data[0], (list, tuple)):
        data = [data]
    return tuple(tuple(row) for row in data)


def _place(cell: str | None, whole: str) -> str:
    """Where in the argument a problem is, counted from its top-left cell."""
    if not cell or cell == whole:
        return ""
    min_col, min_row, max_col, max_row = range_boundaries(cell)
    if (min_row, min_col) == (max_row, max_col):
        return f"row {min_row}, column {min_col} of the data: "
    if min_row == max_row:
        return f"row {min_row} of the data: "
    return f"rows {min_row} to {max_row}, columns {min_col} to {max_col} of the data: "


@functools.lru_cache(maxsize=CACHE_SIZE)
def _analysis(data: tuple, compare, alpha, control, layout, block_header, treatment_header, response) -> dict:
    layout, transposed = parse_layout(layout)
    engine = {"compare": parse_compare(compare), "alpha": parse_alpha(alpha),
              "control": cell_label(control, None, "control treatment")}
    headers = {"block": cell_label(block_header, None, "block header"),
               "treatment": cell_label(treatment_header, None, "treatment header")}
    response = cell_label(response, None, "response header")
    width = max((len(row) for row in data), default=0)
    rng = CellRange("", 1, 1, max(len(data), 1), max(width, 1))
    try:
        tables = trials_from_values([list(row) for row in data], rng, layout=layout, transposed=transposed,
                                    responses=[response] if response else None, **headers)
    except TrialInputError as error:
        raise TrialInputError(_place(error.cell, rng.a1) + error.message) from None
    if len(tables) > 1:
        names = ", ".join(repr(t.response) for t in tables)
        raise TrialInputError(f"The data hold several responses ({names}); name one with the response argument.")
    try:
        return analyse_tables(tables, "", **engine)[0].as_dict()
    except TrialInputError as error:
        raise TrialInputError(error.message) from None


def analysis(data, compare=None, alpha=None, control=None, layout=None, block_header=None, treatment_header=None,
             response=None) -> dict:
    """The engine's ``to_dict()`` for worksheet-function arguments (cached); raises `TrialInputError`."""
    return _analysis(_frozen(data), compare, alpha, control, layout, block_header, treatment_header, response)


def _cell(value):
    """A value as a worksheet cell shows it: ``None`` and non-finite numbers become empty."""
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return ""
    return value


def _table(key: str, args) -> list[list]:
    try:
        grid = table_by_key(analysis(*args), key).grid()
    except TrialInputError as error:
        return [[str(error)]]
    return [[_cell(v) for v in row] for row in grid]


def _scalar(pick, args):
    try:
        return _cell(pick(analysis(*args)))
    except TrialInputError as error:
        return str(error)


# ---------------------------------------------------------------- array functions (they spill)

@_worksheet_function
def WBT_ANOVA(data, compare=None, alpha=None, control=None, layout=None, block_header=None, treatment_header=None,
              response=None):
    """Analysis of variance with blocks: source, df, sums of squares, mean squares, F, p-value."""
    return _table("anova", (data, compare, alpha, control, layout, block_header, treatment_header, response))


@_worksheet_function
def WBT_SUMMARY(data, compare=None, alpha=None, control=None, layout=None, block_header=None,
                treatment_header=None, response=None):
    """Headline figures: grand mean, error mean square, CV %, R squared, SED and LSD."""
    return _table("summary", (data, compare, alpha, control, layout, block_header, treatment_header, response))


@_worksheet_function
def WBT_MEANS(data, compare=None, alpha=None, control=None, layout=None, block_header=None, treatment_header=None,
              response=None):
    """Treatment means: n, plain and adjusted mean, standard error, confidence interval, letter group."""
    return _table("means", (data, compare, alpha, control, layout, block_header, treatment_header, response))


@_worksheet_function
def WBT_PAIRS(data, compare=None, alpha=None, control=None, layout=None, block_header=None, treatment_header=None,
              response=None):
    """Pairwise comparisons: difference, standard error, t, adjusted p-value, interval, significant."""
    return _table("comparisons", (data, compare, alpha, control, layout, block_header, treatment_header, response))


@_worksheet_function
def WBT_RESIDUALS(data, compare=None, alpha=None, control=None, layout=None, block_header=None,
                  treatment_header=None, response=None):
    """Per observation: observed, fitted, residual, standardized residual, leverage, possible outlier."""
    return _table("residuals", (data, compare, alpha, control, layout, block_header, treatment_header, response))


@_worksheet_function
def WBT_CHECKS(data, compare=None, alpha=None, control=None, layout=None, block_header=None, treatment_header=None,
               response=None):
    """Assumption checks (normality, equal variance, additivity) and the Friedman test, with verdicts."""
    return _table("checks", (data, compare, alpha, control, layout, block_header, treatment_header, response))


@_worksheet_function
def WBT_GAIN(data, compare=None, alpha=None, control=None, layout=None, block_header=None, treatment_header=None,
             response=None):
    """What blocking gained: relative efficiency with and without the df correction, error df."""
    return _table("efficiency", (data, compare, alpha, control, layout, block_header, treatment_header, response))


# ---------------------------------------------------------------- scalar functions

def _treatment_p(result: dict):
    return next(row["p"] for row in result["anova"] if row["source"] == "treatment")


@_worksheet_function
def WBT_P(data, compare=None, alpha=None, control=None, layout=None, block_header=None, treatment_header=None,
          response=None):
    """p-value of the treatment F test (adjusted for blocks)."""
    return _scalar(_treatment_p, (data, compare, alpha, control, layout, block_header, treatment_header, response))


@_worksheet_function
def WBT_LSD(data, compare=None, alpha=None, control=None, layout=None, block_header=None, treatment_header=None,
            response=None):
    """Least significant difference at alpha (empty when replication differs between treatments)."""
    return _scalar(lambda r: r["summary"]["lsd"],
                   (data, compare, alpha, control, layout, block_header, treatment_header, response))


@_worksheet_function
def WBT_CV(data, compare=None, alpha=None, control=None, layout=None, block_header=None, treatment_header=None,
           response=None):
    """Coefficient of variation in percent (root error mean square over the grand mean)."""
    return _scalar(lambda r: r["summary"]["cv_percent"],
                   (data, compare, alpha, control, layout, block_header, treatment_header, response))


@_worksheet_function
def WBT_EFFICIENCY(data, compare=None, alpha=None, control=None, layout=None, block_header=None,
                   treatment_header=None, response=None):
    """Relative efficiency of blocking, with the degrees-of-freedom correction."""
    return _scalar(lambda r: r["efficiency"]["relative"],
                   (data, compare, alpha, control, layout, block_header, treatment_header, response))


@_worksheet_function
def WBT_MISSING_ESTIMATE(data, block, treatment, layout=None, block_header=None, treatment_header=None,
                         response=None):
    """The estimate (least-squares fitted value) of a missing cell, given its block and treatment labels."""
    try:
        result = analysis(data, None, None, None, layout, block_header, treatment_header, response)
        return _cell(missing_estimate(result, cell_label(block, None, "block label"),
                                      cell_label(treatment, None, "treatment label")))
    except TrialInputError as error:
        return str(error)


def missing_estimate(result: dict, block: str | None, treatment: str | None):
    """The estimate of the missing cell (block, treatment) in a result dictionary; `TrialInputError` otherwise."""
    design = result["design"]
    for label, known, what in ((block, design["blocks"], "block"), (treatment, design["treatments"], "treatment")):
        if label not in known:
            raise TrialInputError(f"There is no {what} {label!r} in the data; the {what}s are "
                                  f"{', '.join(repr(k) for k in known)}.")
    for cell in result["missing"]:
        if (cell["block"], cell["treatment"]) == (block, treatment):
            return cell["estimate"]
    raise TrialInputError(f"Block {block!r}, treatment {treatment!r} holds a value; only a missing cell has an "
                          "estimate.")


# ---------------------------------------------------------------- planning the next trial

ARGUMENT_DOCS.update({
    "delta": "Smallest difference between two treatment means worth detecting.",
    "sigma2": "Error variance, e.g. the error mean square of an earlier trial (see WBT_SUMMARY).",
    "treatments": "Treatment labels (a range, or text such as \"A,B,C\") or their number.",
    "blocks": "Block labels (a range or text) or their number; for power, the blocks planned (optional).",
    "power": "Target power (default 0.8).",
    "tests": "Tests to plan for: f, lsd, tukey, dunnett, separated by commas (default f).",
    "seed": "Seed of the randomisation; required, so the layout stays the same on recalculation.",
    "replicates": "Runs of each treatment in each block (default 1).",
    "fixed": "Fixed run positions in every block, such as \"Control=1\" (several separated by semicolons).",
})


def _count(labels_or_count) -> int:
    return labels_or_count if isinstance(labels_or_count, int) else len(labels_or_count)


def _power_plan(delta, sigma2, treatments, alpha, power, tests, blocks, replicates=None) -> dict:
    from workbook_tools.analysis.planning import plan_power
    from workbook_tools.plan import parse_labels_or_count, parse_tests
    from workbook_tools.plan_jobs import parse_number

    treatment_spec = parse_labels_or_count(treatments)
    if treatment_spec is None:
        raise TrialInputError("Give the treatments: their labels or their number.")
    block_spec = parse_labels_or_count(blocks)
    return plan_power(parse_number(delta, "difference worth detecting", required=True),
                      parse_number(sigma2, "error variance", required=True), _count(treatment_spec),
                      n_blocks=None if block_spec is None else _count(block_spec),
                      alpha=parse_alpha(alpha), power=parse_number(power, "target power", 0.8),
                      tests=parse_tests(tests), replicates=parse_number(replicates, "number of replicates", 1,
                                                                        whole=True))


def _planning_grid(build) -> list[list]:
    try:
        grid = build().grid()
    except TrialInputError as error:
        return [[str(error)]]
    return [[_cell(v) for v in row] for row in grid]


@_worksheet_function
def WBT_BLOCKS_NEEDED(delta, sigma2, treatments, alpha=None, power=None, tests=None, blocks=None):
    """Blocks needed per test for the target power; power and detectable difference with the planned blocks."""
    from workbook_tools.layout import blocks_needed_table

    return _planning_grid(lambda: blocks_needed_table(
        _power_plan(delta, sigma2, treatments, alpha, power, tests, blocks)))


@_worksheet_function
def WBT_POWER_TABLE(delta, sigma2, treatments, alpha=None, power=None, tests=None, blocks=None):
    """Power against the number of blocks, one column per test."""
    from workbook_tools.layout import power_table_table

    return _planning_grid(lambda: power_table_table(
        _power_plan(delta, sigma2, treatments, alpha, power, tests, blocks)))


@_worksheet_function
def WBT_RUN_ORDER(treatments, blocks, seed, replicates=None, fixed=None):
    """A randomised run order within each block (block, run, treatment, response to fill in), from a seed."""
    from workbook_tools.analysis.planning import randomised_layout
    from workbook_tools.layout import plan_run_order_table
    from workbook_tools.plan import parse_fixed_positions, parse_labels_or_count
    from workbook_tools.plan_jobs import parse_number

    def build():
        layout = randomised_layout(parse_labels_or_count(treatments) or 0, parse_labels_or_count(blocks) or 0,
                                   replicates=parse_number(replicates, "number of replicates", 1, whole=True),
                                   fixed_positions=parse_fixed_positions(fixed),
                                   seed=parse_number(seed, "seed", whole=True, required=True))
        return plan_run_order_table(layout.to_dict())

    return _planning_grid(build)
