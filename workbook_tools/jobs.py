"""The job sheet: one analysis per row, run through a workbook port.

A sheet named ``wbt-jobs`` holds a header row (see `COLUMNS`; only ``Range`` is
required, headers in any order, case ignored) and one job per row below it.
`run` reads each job's range through a `~workbook_tools.ports.WorkbookPort`,
analyses every response, writes the result sheets exactly as
``workbook-tools analyze`` does, and fills each row's ``Status`` ("done" or the
message), ``Ran at (UTC)`` and ``Sheets written``. The sheets listed under
``Sheets written`` (and those recorded in the workbook as made by the tool)
are replaced on the next run; no other sheet is ever removed. A row with
``Kind`` = ``plan`` plans the next trial instead (see :mod:`workbook_tools.plan_jobs`).
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass, field
from pathlib import Path

from workbook_tools.analysis.compare import DEFAULT_METHOD, METHODS
from workbook_tools.analysis.errors import TrialInputError
from workbook_tools.layout import SheetPlan, sheet_plans
from workbook_tools.plan_jobs import (ANALYSIS_KINDS, PLAN_COLUMNS, PLAN_KIND, PlanJob, parse_kind, parse_plan_job,
                                      plan_sheet_name, prepare_plan, write_plan)
from workbook_tools.ports import WorkbookPort
from workbook_tools.sheets.book import DEFAULT_PREFIX, ResponseAnalysis, context_lines, analyse_tables, audit_table
from workbook_tools.sheets.ranges import cell_address
from workbook_tools.sheets.reader import TrialTable, cell_label, trials_from_values
from workbook_tools.sheets.writer import FORBIDDEN, sheet_name

JOB_SHEET = "wbt-jobs"
COLUMNS = ("Range", "Layout", "Block", "Treatment", "Responses", "Compare", "Alpha", "Control", "Prefix",
           "Status", "Ran at (UTC)", "Sheets written") + PLAN_COLUMNS
STATUS_COLUMNS = ("Status", "Ran at (UTC)", "Sheets written")
DONE = "done"
TIME_FORMAT = "yyyy-mm-dd hh:mm:ss"
LAYOUTS = {"": ("auto", False), "auto": ("auto", False), "wide": ("wide", False), "long": ("long", False),
           "transposed": ("wide", True)}
MAX_PREFIX = 20
_HEADER_SEARCH_ROWS = 20
_SHEET_LIST_SEPARATOR = " / "  # "/" cannot occur in a sheet name


@dataclass(frozen=True)
class Job:
    """One row of the job sheet, checked."""

    row: int
    range_text: str
    layout: str = "auto"
    transposed: bool = False
    block: str | None = None
    treatment: str | None = None
    responses: tuple[str, ...] | None = None
    compare: str = DEFAULT_METHOD
    alpha: float = 0.05
    control: str | None = None
    prefix: str = DEFAULT_PREFIX

    def read_options(self) -> dict:
        """Options for :func:`workbook_tools.sheets.reader.trials_from_values`."""
        return {"layout": self.layout, "transposed": self.transposed, "block": self.block,
                "treatment": self.treatment, "responses": list(self.responses) if self.responses else None}

    def engine_options(self) -> dict:
        """Options for the engine."""
        return {"compare": self.compare, "alpha": self.alpha, "control": self.control}


@dataclass(frozen=True)
class JobSheet:
    """The parsed job sheet: where its columns are and its rows (a `Job` or the problem with it)."""

    sheet: str
    header_row: int
    columns: dict[str, int]
    entries: list[tuple[int, Job | TrialInputError]]
    sheets_written: list[str]


@dataclass
class JobOutcome:
    """What became of one job row."""

    row: int
    status: str
    sheets: list[str] = field(default_factory=list)

    @property
    def done(self) -> bool:
        return self.status == DONE


def parse_job_sheet(rows: list[list], sheet: str = JOB_SHEET) -> JobSheet:
    """Find the header row and turn every row below it that names a range into a `Job`.

    A row with a bad option gives a `TrialInputError` naming the job-sheet cell
    instead of a job; a header the runner does not know stops the whole run.
    """
    known = {name.casefold(): name for name in COLUMNS}
    header_row = next((i for i, row in enumerate(rows[:_HEADER_SEARCH_ROWS])
                       if any(_text(v).casefold() == "range" for v in row)), None)
    if header_row is None:
        raise TrialInputError(f"The job sheet needs a header row with a 'Range' column (and any of: "
                              f"{', '.join(COLUMNS[1:])}).", sheet=sheet, cell="A1")
    columns: dict[str, int] = {}
    for j, value in enumerate(rows[header_row]):
        text = _text(value)
        if not text:
            continue
        if text.casefold() not in known:
            raise TrialInputError(f"The job sheet has no column called {text!r}; its columns are: "
                                  f"{', '.join(COLUMNS)}.", sheet=sheet, cell=cell_address(header_row + 1, j + 1))
        columns[known[text.casefold()]] = j + 1
    entries, written = [], []
    for i in range(header_row + 1, len(rows)):
        row = rows[i]

        def get(name, row=row):
            j = columns.get(name)
            return row[j - 1] if j is not None and j - 1 < len(row) else None

        written += [n.strip() for n in _text(get("Sheets written")).split(_SHEET_LIST_SEPARATOR.strip()) if n.strip()]
        if not _text(get("Range")) and _text(get("Kind")).casefold() in ANALYSIS_KINDS:
            continue
        try:
            entries.append((i + 1, _job(i + 1, get, columns, sheet)))
        except TrialInputError as error:
            entries.append((i + 1, error))
    return JobSheet(sheet, header_row + 1, columns, entries, written)


def _text(value) -> str:
    return "" if value is None else str(value).strip()


def _label(value, what: str) -> str | None:
    return cell_label(value, None, what)


def parse_layout(value) -> tuple[str, bool]:
    """``(layout, transposed)`` from ``wide``, ``long``, ``transposed`` (wide, blocks across) or blank/``auto``."""
    text = (_label(value, "layout") or "").casefold()
    if text not in LAYOUTS:
        raise TrialInputError(f"The layout must be wide, long, transposed (wide with blocks across) or auto, "
                              f"not {text!r}.")
    return LAYOUTS[text]


def parse_compare(value) -> str:
    """A comparison method name (blank: tukey)."""
    compare = (_label(value, "comparison method") or DEFAULT_METHOD).casefold()
    if compare not in METHODS:
        raise TrialInputError(f"The comparison method must be one of {', '.join(METHODS)}, not {compare!r}.")
    return compare


def parse_alpha(value) -> float:
    """A significance level strictly between 0 and 1 (blank: 0.05); a number or a number as text."""
    if value is None or _text(value) == "":
        return 0.05
    try:
        alpha = None if isinstance(value, bool) else float(value)
    except (TypeError, ValueError):
        alpha = None
    if alpha is None or not 0.0 < alpha < 1.0:
        raise TrialInputError(f"Alpha must be a number between 0 and 1, such as 0.05; the cell holds {value!r}.")
    return alpha


def parse_prefix(value) -> str:
    """A sheet-name prefix (blank: ``wbt-``)."""
    prefix = _label(value, "prefix") or DEFAULT_PREFIX
    if set(prefix) & FORBIDDEN or len(prefix) > MAX_PREFIX:
        raise TrialInputError(f"The sheet prefix {prefix!r} must be at most {MAX_PREFIX} characters without any "
                              f"of {' '.join(sorted(FORBIDDEN))}.")
    return prefix


def parse_names(value) -> tuple[str, ...] | None:
    """Response headers separated by commas or semicolons; ``None`` when blank."""
    names = tuple(n.strip() for n in (_label(value, "list of responses") or "").replace(";", ",").split(",")
                  if n.strip())
    return names or None


def _job(row: int, get, columns: dict[str, int], sheet: str) -> Job:
    def parse(name: str, rule):
        try:
            return rule(get(name))
        except TrialInputError as error:
            raise TrialInputError(error.message, sheet=sheet, cell=cell_address(row, columns[name])) from None

    def label(name: str):
        return parse(name, lambda value: _label(value, name.lower()))

    if parse("Kind", parse_kind) == PLAN_KIND:
        return parse_plan_job(row, parse, columns, parse("Alpha", parse_alpha), parse("Prefix", parse_prefix))
    layout, transposed = parse("Layout", parse_layout)
    return Job(row, label("Range"), layout, transposed, label("Block"), label("Treatment"),
               parse("Responses", parse_names), parse("Compare", parse_compare), parse("Alpha", parse_alpha),
               label("Control"), parse("Prefix", parse_prefix))


def analyse_job(port: WorkbookPort, job: Job) -> list[ResponseAnalysis]:
    """Read a job's range through the port and analyse every response in it."""
    cells = port.read_range(job.range_text)
    tables = trials_from_values(cells.rows, cells.range, **job.read_options())
    hidden = port.hidden_warning(cells.range)
    return analyse_tables(tables, port.name, extra_warnings=[hidden] if hidden else (), **job.engine_options())


def utc_now() -> dt.datetime:
    """The time now in UTC, to the second, without a time zone (as a worksheet cell holds it)."""
    return dt.datetime.now(dt.timezone.utc).replace(microsecond=0, tzinfo=None)


def run(port: WorkbookPort, *, sheet: str = JOB_SHEET, now: dt.datetime | None = None) -> list[JobOutcome]:
    """Run every job of the job sheet: analyse, write the result sheets, fill the status cells, save.

    Parameters
    ----------
    port : WorkbookPort
        The workbook (openpyxl file or live Excel).
    sheet : str
        Name of the job sheet.
    now : datetime, optional
        The UTC time written as "Ran at"; the current time by default.

    Returns
    -------
    list of JobOutcome
        One per job row, in sheet order.

    Raises
    ------
    TrialInputError
        When there is no job sheet, its header is not understood, or it holds no job.
    """
    rows = port.sheet_values(sheet)
    if rows is None:
        raise TrialInputError(f"There is no job sheet called '{sheet}'. Add a sheet of that name with the headers "
                              f"{', '.join(COLUMNS)} in its first row and one analysis per row below.")
    jobs = parse_job_sheet(rows, sheet)
    if not jobs.entries:
        raise TrialInputError("The job sheet holds no job: put a range (such as 'Trial'!B3:G9) in the Range "
                              "column below the header.", sheet=sheet)
    when = now or utc_now()
    stamp = when.isoformat()
    analysed: list[tuple[int, Job | None, list[ResponseAnalysis] | None, str]] = []
    for row, entry in jobs.entries:
        if isinstance(entry, TrialInputError):
            analysed.append((row, None, None, str(entry)))
            continue
        try:
            work = prepare_plan(entry) if isinstance(entry, PlanJob) else analyse_job(port, entry)
            analysed.append((row, entry, work, DONE))
        except TrialInputError as error:
            analysed.append((row, entry, None, str(error)))
    previous = {n.casefold() for n in [*port.tool_sheets(), *jobs.sheets_written]} - {sheet.casefold()}
    existing = port.sheet_names()
    taken = {n for n in existing if n.casefold() not in previous}
    planned, outcomes = [], []
    for row, job, analyses, status in analysed:
        if isinstance(job, PlanJob):
            sheets = [(None, plan_sheet_name(job, taken), None)] if analyses else []
        else:
            sheets = _name_sheets(job, analyses, taken) if analyses else []
        planned.append((job, analyses, sheets))
        outcomes.append(JobOutcome(row, status, [name for _, name, _ in sheets]))
    port.remove_sheets([n for n in existing if n.casefold() in previous])
    for job, analyses, sheets in planned:
        if sheets and isinstance(job, PlanJob):
            write_plan(port, analyses, sheets[0][1], stamp, jobs.sheet)
        elif sheets:
            _write_job(port, job, analyses, sheets, stamp, jobs.sheet)
    _write_statuses(port, jobs, outcomes, when)
    port.save([name for outcome in outcomes for name in outcome.sheets])
    return outcomes


def _name_sheets(job: Job, analyses: list[ResponseAnalysis], taken: set[str]) -> list[tuple]:
    """``(analysis or None, sheet name, plan)`` for each result sheet of a job, the audit sheet last."""
    audit = job.prefix + "audit"
    sheets = []
    for analysis in analyses:
        suffix = analysis.source["response"] if len(analyses) > 1 else None
        for plan in sheet_plans(analysis.as_dict()):
            name = sheet_name(job.prefix, plan.family, suffix, taken | {audit})
            taken.add(name)
            sheets.append((analysis, name, plan))
    name = sheet_name(job.prefix, "audit", None, taken)
    taken.add(name)
    sheets.append((None, name, None))
    return sheets


def _write_job(port: WorkbookPort, job: Job, analyses, sheets, stamp: str, job_sheet: str) -> None:
    audit_name = sheets[-1][1]
    for analysis, name, plan in sheets[:-1]:
        placements = port.write_sheet(name, plan, context_lines(analysis, stamp, audit_name))
        port.add_charts(name, plan.family, placements)
    run_options = {"job sheet": job_sheet, "job row": job.row, "range": job.range_text,
                   **job.read_options(), **job.engine_options(), "prefix": job.prefix}
    audit = audit_table(analyses, port.name, stamp, run_options)
    port.write_sheet(audit_name, SheetPlan("audit", "Audit record of the analysis", [audit]), [])


def _write_statuses(port: WorkbookPort, jobs: JobSheet, outcomes: list[JobOutcome], when: dt.datetime) -> None:
    columns = dict(jobs.columns)
    last = max(columns.values())
    for name in STATUS_COLUMNS:
        if name not in columns:
            last += 1
            columns[name] = last
            port.write_cell(jobs.sheet, jobs.header_row, last, name)
    for outcome in outcomes:
        port.write_cell(jobs.sheet, outcome.row, columns["Status"], outcome.status, "@")
        port.write_cell(jobs.sheet, outcome.row, columns["Ran at (UTC)"], when, TIME_FORMAT)
        port.write_cell(jobs.sheet, outcome.row, columns["Sheets written"],
                        _SHEET_LIST_SEPARATOR.join(outcome.sheets) or None, "@")


def run_file(path, out=None, *, in_place: bool = False, sheet: str = JOB_SHEET) -> tuple[list[JobOutcome], Path]:
    """Run the job sheet of a workbook file headless; returns the outcomes and the file written."""
    from workbook_tools.sheets.port import OpenpyxlWorkbook

    port = OpenpyxlWorkbook(path, out, in_place=in_place)
    outcomes = run(port, sheet=sheet)
    return outcomes, port.target


# ---------------------------------------------------------------- command line: workbook-tools run

def add_run_parser(commands) -> None:
    """Add ``workbook-tools run BOOK [--out OUT] [--in-place] [--sheet NAME]`` to the command line."""
    run_parser = commands.add_parser("run", help="run every job of a workbook's job sheet (wbt-jobs) and write "
                                                 "the result sheets")
    run_parser.add_argument("book", type=Path, help="workbook with a job sheet (.xlsx or .xlsm)")
    run_parser.add_argument("--out", type=Path, help="result workbook (default: BOOK-analysed.xlsx beside the input)")
    run_parser.add_argument("--in-place", action="store_true",
                            help="write into the input workbook itself (refused when anything in it would be lost)")
    run_parser.add_argument("--sheet", default=JOB_SHEET, help=f"name of the job sheet (default {JOB_SHEET})")


def run_command(args, say) -> int:
    """Run the job sheet headless; exit 0 when every job is done, 2 when any job failed."""
    from workbook_tools.cli import EXIT_INPUT, EXIT_OK

    outcomes, target = run_file(args.book, args.out, in_place=args.in_place, sheet=args.sheet)
    for outcome in outcomes:
        say(f"  row {outcome.row}: {outcome.status}")
    failed = [o for o in outcomes if not o.done]
    say(f"Ran {len(outcomes)} job(s), {len(failed)} failed; wrote {target}")
    return EXIT_INPUT if failed else EXIT_OK
