"""The ``plan`` row type of the job sheet: plan the next trial from a row of options.

A job-sheet row with ``Kind`` = ``plan`` needs no ``Range``; it reads
``Treatments`` and ``Blocks`` (labels separated by commas, or counts),
``Replicates``, ``Fixed`` (``Control=1``; several separated by ``;``),
``Seed``, ``Delta``, ``Sigma2``, ``Alpha``, ``Power`` and ``Tests``
(``f, tukey``). It writes, through the workbook port:

* ``Plan <row> layout`` (one run per cell) and ``Plan <row> run order``: the
  sheets to fill in. They are the user's from then on: written only when
  absent, never recorded as tool sheets, so a rerun never removes typed values.
* ``<prefix>plan <row>``: what was assumed, blocks needed, power against
  blocks and the audit record; replaced on every run.

A blank ``Seed`` is drawn and written back into the row, so the next run
repeats the layout.
"""

from __future__ import annotations

from dataclasses import dataclass

from workbook_tools.analysis.errors import TrialInputError
from workbook_tools.layout import (SheetPlan, blocks_needed_table, plan_audit_table, plan_inputs_table,
                                   plan_layout_table, plan_run_order_table, power_table_table)
from workbook_tools.plan import make_plan, parse_fixed_positions, parse_labels_or_count, parse_tests
from workbook_tools.sheets.ranges import cell_address, quote_sheet
from workbook_tools.sheets.writer import sheet_name

PLAN_KIND = "plan"
ANALYSIS_KINDS = ("", "analysis")
KINDS = (*ANALYSIS_KINDS, PLAN_KIND)
PLAN_COLUMNS = ("Kind", "Treatments", "Blocks", "Replicates", "Fixed", "Seed", "Delta", "Sigma2", "Power", "Tests")


@dataclass(frozen=True)
class PlanJob:
    """One plan row of the job sheet, checked."""

    row: int
    treatments: object
    blocks: object
    replicates: int
    fixed: dict
    seed: int | None
    delta: float | None
    sigma2: float | None
    alpha: float
    power: float
    tests: tuple[str, ...]
    prefix: str
    seed_column: int | None


@dataclass(frozen=True)
class PreparedPlan:
    """A plan job's layout and power plan, computed before any sheet is touched."""

    job: PlanJob
    layout: dict
    power_plan: dict | None


def parse_kind(value) -> str:
    """The row's kind: blank or ``analysis`` (an analysis of ``Range``) or ``plan``."""
    kind = ("" if value is None else str(value)).strip().casefold()
    if kind not in KINDS:
        raise TrialInputError(f"The kind of job must be analysis (or blank) or plan, not {kind!r}.")
    return kind


def parse_number(value, what: str, default=None, *, whole=False, required=False):
    """A number from a cell (a number or a number as text); ``default`` when blank unless ``required``."""
    if value is None or str(value).strip() == "":
        if required:
            raise TrialInputError(f"Give the {what}.")
        return default
    try:
        number = None if isinstance(value, bool) else float(value)
    except (TypeError, ValueError):
        number = None
    if number is None or (whole and not number.is_integer()):
        raise TrialInputError(f"The {what} must be a {'whole ' if whole else ''}number; the cell holds {value!r}.")
    return int(number) if whole else number


def parse_plan_job(row: int, parse, columns: dict[str, int], alpha: float, prefix: str) -> PlanJob:
    """A `PlanJob` from a row; ``parse(name, rule)`` reads a column and names its cell on a problem."""
    return PlanJob(
        row, parse("Treatments", parse_labels_or_count), parse("Blocks", parse_labels_or_count),
        parse("Replicates", lambda v: parse_number(v, "number of replicates", 1, whole=True)),
        parse("Fixed", lambda v: parse_fixed_positions("" if v is None else str(v))),
        parse("Seed", lambda v: parse_number(v, "seed", whole=True)),
        parse("Delta", lambda v: parse_number(v, "difference worth detecting")),
        parse("Sigma2", lambda v: parse_number(v, "error variance")),
        alpha, parse("Power", lambda v: parse_number(v, "target power", 0.8)),
        tuple(parse("Tests", parse_tests)), prefix, columns.get("Seed"))


def prepare_plan(job: PlanJob) -> PreparedPlan:
    """Randomise the layout and work out power; raises `TrialInputError` for the row's status."""
    layout, power_plan = make_plan(job.treatments, job.blocks, replicates=job.replicates, fixed=job.fixed,
                                   seed=job.seed, delta=job.delta, sigma2=job.sigma2, alpha=job.alpha,
                                   power=job.power, tests=job.tests)
    return PreparedPlan(job, layout.to_dict(), power_plan)


def plan_sheet_name(job: PlanJob, taken: set[str]) -> str:
    """The tool sheet of a plan row, ``<prefix>plan <row>``, unused so far."""
    name = sheet_name(job.prefix, "plan", str(job.row), taken)
    taken.add(name)
    return name


def _range_of(sheet: str, placement, n_columns: int) -> str:
    return (f"{quote_sheet(sheet)}!{cell_address(placement.header_row, placement.first_col)}:"
            f"{cell_address(placement.last_row, placement.col(n_columns - 1))}")


def write_plan(port, prepared: PreparedPlan, plan_sheet: str, stamp: str, job_sheet: str) -> None:
    """Write the input sheets (when absent), the plan sheet, and a drawn seed back into the row."""
    job, layout = prepared.job, prepared.layout
    made = (f"Made by workbook-tools at {stamp} UTC from row {job.row} of '{job_sheet}'; randomisation seed "
            f"{layout['seed']} ({layout['generator']}).")
    context = [made] + ([layout["restrictions"]] if layout["restrictions"] else [])
    existing = {n.casefold() for n in port.sheet_names()}
    inputs = [(f"Plan {job.row} run order", plan_run_order_table(layout), "Run order within each block")]
    if layout["replicates"] == 1:
        inputs.insert(0, (f"Plan {job.row} layout", plan_layout_table(layout), "Trial layout to fill in"))
    items = [["Job sheet row", job.row], ["Written (UTC)", stamp]]
    for name, table, title in inputs:
        if name.casefold() in existing:
            items.append([f"Sheet '{name}'", "kept as it was (it may hold typed values)"])
            continue
        placement = port.write_sheet(name, SheetPlan(table.key, title, [table]), context)[table.key]
        items.append([f"Sheet '{name}'", f"range {_range_of(name, placement, len(table.columns))}"])
    tables = []
    if prepared.power_plan is not None:
        plan = prepared.power_plan
        tables = [plan_inputs_table(plan), blocks_needed_table(plan), power_table_table(plan)]
    tables.append(plan_audit_table(layout, items))
    port.write_sheet(plan_sheet, SheetPlan("plan", "Plan of the next trial: power and blocks needed", tables),
                     context)
    if job.seed is None and job.seed_column is not None:
        port.write_cell(job_sheet, job.row, job.seed_column, layout["seed"], "0")
