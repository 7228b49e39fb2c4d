"""Parity: worksheet functions, the job runner's sheets and the engine agree cell by cell.

For every sample workbook (each as a one-row job sheet) and every job of
``job_sheet_trials.xlsx``: the engine's ``to_dict()`` on the cells read
independently with plain openpyxl (``tests.test_cli.read_independently``), the
worksheet functions called as plain Python with the range as Excel passes it
(rows of values, floats for numbers, ``None`` for blanks), and the sheets that
``workbook-tools run`` writes. Numbers agree within 1e-12 relative, text exactly.
"""

from __future__ import annotations

import dataclasses
import math
import shutil
from pathlib import Path

import openpyxl
import pytest

from tests.test_cli import (REL, _range_cells, expected_tables, find_table, read_independently, same_value,
                            workbook_grids)
from workbook_tools import analyze_records
from workbook_tools.excel import functions as udf
from workbook_tools.jobs import COLUMNS, JOB_SHEET, run_file
from workbook_tools.layout import checks_table, efficiency_table
from workbook_tools.samples import JOB_ROWS, JOB_SAMPLE, SAMPLES, SampleWorkbook, build_sample

COMMITTED = Path(__file__).resolve().parents[1] / "sample_workbooks"
TABLE_FUNCTIONS = {"anova": udf.WBT_ANOVA, "summary": udf.WBT_SUMMARY, "means": udf.WBT_MEANS,
                   "comparisons": udf.WBT_PAIRS, "residuals": udf.WBT_RESIDUALS, "checks": udf.WBT_CHECKS,
                   "efficiency": udf.WBT_GAIN}


@dataclasses.dataclass(frozen=True)
class Case:
    """One analysis: where its data are (for reading independently), its options and its job row."""

    name: str
    book: str          # file in the built folder
    sample: SampleWorkbook
    job: tuple         # the job-sheet row (Range, Layout, Block, Treatment, Responses, Compare, Alpha, Control, Prefix)
    row: int           # its row on the job sheet

    @property
    def compare(self):
        return self.job[5]

    @property
    def alpha(self):
        return self.job[6]

    @property
    def control(self):
        return self.job[7]


def _sample_job(sample: SampleWorkbook) -> tuple:
    responses = "; ".join(sample.responses) if sample.responses else None
    compare = "dunnett" if sample.control else "tukey"
    return (sample.range, sample.layout, sample.block, sample.treatment, responses, compare, 0.05, sample.control,
            "wbt-")


def _cases() -> list[Case]:
    cases = [Case(Path(s.filename).stem, s.filename, s, _sample_job(s), 2) for s in SAMPLES]
    by_file = {s.filename: s for s in SAMPLES}
    coating, wheat = by_file["coating_hardness.xlsx"], by_file["wheat_strips.xlsx"]
    # job 3 names the defined name HardnessData; it is checked below to cover Hardness!B3:G9
    for k, job in enumerate(JOB_ROWS):
        sample = coating if job[0] != "StripTrial" else wheat
        cases.append(Case(f"job_sheet_row_{k + 5}", JOB_SAMPLE, sample, job, k + 5))
    return cases


CASES = _cases()


def excel_shaped(book: Path, sample: SampleWorkbook) -> list[list]:
    """The range's values as Excel hands them to a function: floats for numbers, ``None`` for blanks."""
    sheet, cells = _range_cells(book, sample.range)
    ws = openpyxl.load_workbook(book, data_only=True)[sheet]
    return [[float(c.value) if isinstance(c.value, int) and not isinstance(c.value, bool) else c.value
             for c in row] for row in ws[cells]]


def _with_job_sheet(source: Path, target: Path, job: tuple) -> Path:
    wb = openpyxl.load_workbook(source)
    ws = wb.create_sheet(JOB_SHEET)
    ws.append(list(COLUMNS))
    ws.append(list(job))
    wb.save(target)
    return target


@pytest.fixture(scope="module")
def runs(tmp_path_factory) -> dict:
    """Each book run headless once: book name -> (outcomes, sheet grids)."""
    folder = tmp_path_factory.mktemp("parity")
    done = {}
    for sample in SAMPLES:
        built = build_sample(sample, folder / "built")
        book = _with_job_sheet(built, folder / sample.filename, _sample_job(sample))
        outcomes, out = run_file(book)
        done[sample.filename] = (outcomes, workbook_grids(out))
    book = shutil.copy(COMMITTED / JOB_SAMPLE, folder / JOB_SAMPLE)
    outcomes, out = run_file(book)
    done[JOB_SAMPLE] = (outcomes, workbook_grids(out))
    return done


def assert_close(actual, expected, where="result"):
    """Same structure; numbers within 1e-12 relative, everything else equal."""
    if isinstance(expected, dict):
        assert isinstance(actual, dict) and actual.keys() == expected.keys(), where
        for key in expected:
            assert_close(actual[key], expected[key], f"{where}.{key}")
    elif isinstance(expected, (list, tuple)):
        assert len(actual) == len(expected), where
        for i, (a, e) in enumerate(zip(actual, expected)):
            assert_close(a, e, f"{where}[{i}]")
    elif isinstance(expected, float) and not isinstance(expected, bool):
        assert math.isclose(actual, expected, rel_tol=REL), f"{where}: {actual!r} != {expected!r}"
    else:
        assert actual == expected, f"{where}: {actual!r} != {expected!r}"


def _udf_args(case: Case, response) -> tuple:
    args = (case.compare, case.alpha, case.control)
    if case.sample.layout == "long":
        args += ("long", case.sample.block, case.sample.treatment, response)
    return args


def _engine_results(case: Case, book: Path) -> list[tuple]:
    """(response, engine to_dict()) per response, on independently read cells."""
    _, _, records = read_independently(book, case.sample)
    return [(r.response, analyze_records(r.blocks, r.treatments, r.values, compare=case.compare,
                                         alpha=case.alpha, control=case.control).to_dict()) for r in records]


def _book(case: Case, tmp_path: Path) -> Path:
    if case.book == JOB_SAMPLE:
        return COMMITTED / JOB_SAMPLE
    return build_sample(case.sample, tmp_path)


def test_the_defined_name_of_job_3_covers_the_hardness_grid():
    wb = openpyxl.load_workbook(COMMITTED / JOB_SAMPLE)
    assert wb.defined_names["HardnessData"].attr_text == "Hardness!$B$3:$G$9"
    assert JOB_ROWS[2][0] == "HardnessData" and JOB_ROWS[0][0] == "Hardness!B3:G9"


def _rows_equal(grid_rows, expected_rows, title):
    for i, expected_row in enumerate(expected_rows):
        for j, expected in enumerate(expected_row):
            shown = grid_rows[i][j]
            shown = None if shown == "" else shown
            assert same_value(shown, expected), f"{title}: row {i + 1}, column {j + 1}: {shown!r} != {expected!r}"


@pytest.mark.parametrize("case", CASES, ids=lambda c: c.name)
def test_worksheet_functions_equal_the_engine(case, tmp_path):
    book = _book(case, tmp_path)
    data = excel_shaped(book, case.sample)
    for response, expected in _engine_results(case, book):
        args = _udf_args(case, response)
        assert_close(udf.analysis(data, *args), expected)
        for table, rows in [pair for pairs in expected_tables(expected).values() for pair in pairs]:
            key = table.key
            if key not in TABLE_FUNCTIONS:
                continue
            grid = TABLE_FUNCTIONS[key](data, *args)
            assert grid[0] == table.headers
            assert len(grid) == len(rows) + 1
            _rows_equal(grid[1:], rows, table.title)
        efficiency = expected["efficiency"]
        _rows_equal(udf.WBT_GAIN(data, *args)[1:], [[efficiency_table(expected).rows[k][0], efficiency[key]]
                                                     for k, key in enumerate(("relative", "relative_uncorrected",
                                                                              "error_df_blocked",
                                                                              "error_df_unblocked"))], "gain")
        checks = udf.WBT_CHECKS(data, *args)
        assert checks[0] == checks_table(expected).headers
        for row, name in zip(checks[1:], ("normality", "equal_variance", "additivity")):
            _rows_equal([[row[2], row[4], row[6]]], [[expected["checks"][name]["statistic"],
                                                      expected["checks"][name]["p"],
                                                      expected["checks"][name]["verdict"]]], name)
        treatment = next(r for r in expected["anova"] if r["source"] == "treatment")
        scalars = {udf.WBT_P: treatment["p"], udf.WBT_LSD: expected["summary"]["lsd"],
                   udf.WBT_CV: expected["summary"]["cv_percent"], udf.WBT_EFFICIENCY: efficiency["relative"]}
        for function, value in scalars.items():
            _rows_equal([[function(data, *args)]], [[value]], function.__name__)


@pytest.mark.parametrize("case", CASES, ids=lambda c: c.name)
def test_runner_sheets_show_the_worksheet_function_tables(case, runs, tmp_path):
    outcomes, grids = runs[case.book]
    outcome = next(o for o in outcomes if o.row == case.row)
    assert outcome.status == "done"
    book = _book(case, tmp_path)
    data = excel_shaped(book, case.sample)
    results = _engine_results(case, book)
    families = ("anova", "means", "residuals", "checks")
    assert len(outcome.sheets) == len(families) * len(results) + 1
    on_sheet = {"anova": ("anova", "summary", "efficiency"), "means": ("means", "comparisons"),
                "residuals": ("residuals",), "checks": ("checks",)}
    for k, (response, _) in enumerate(results):
        for f, family in enumerate(families):
            grid = grids[outcome.sheets[len(families) * k + f]]
            for key in on_sheet[family]:
                table = TABLE_FUNCTIONS[key](data, *_udf_args(case, response))
                title = udf.table_by_key(udf.analysis(data, *_udf_args(case, response)), key).title
                r, c = find_table(grid, title)
                shown = [row[c:c + len(table[0])] for row in grid[r + 1:r + 1 + len(table)]]
                assert shown[0] == table[0]
                _rows_equal(shown[1:], [[None if v == "" else v for v in row] for row in table[1:]], title)
