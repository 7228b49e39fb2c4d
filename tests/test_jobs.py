"""The job sheet: parsing, the headless ``workbook-tools run`` and the xlwings adapter on a stand-in book.

The stand-in (``FakeBook``) records what the xlwings adapter writes, so its
logic runs on Linux; its result sheets must hold the same cells as the
openpyxl adapter's.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import math
import shutil
from pathlib import Path

import openpyxl
import pytest
from openpyxl.utils.cell import column_index_from_string, coordinate_from_string, range_boundaries

from tests.test_cli import run_cli, workbook_grids
from workbook_tools.analysis.errors import TrialInputError
from workbook_tools.excel.live import XlwingsWorkbook, run_jobs
from workbook_tools.jobs import COLUMNS, JOB_SHEET, parse_job_sheet, run, run_file
from workbook_tools.samples import JOB_ROWS, JOB_SAMPLE

COMMITTED = Path(__file__).resolve().parents[1] / "sample_workbooks"
HEADER = list(COLUMNS[:9])


def job_rows(*jobs) -> list[list]:
    return [HEADER] + [list(job) for job in jobs]


def test_rows_become_jobs_with_defaults():
    sheet = parse_job_sheet([["Jobs"], [], HEADER, ["A!B3:G9"], [None], ["T", "long", "Strip", "Variety",
                                                                          "Yield; Protein , N", "HOLM", "0.1", 3.0,
                                                                          "x-"]])
    assert sheet.header_row == 3
    (row1, first), (row2, second) = sheet.entries
    assert (row1, row2) == (4, 6)
    assert (first.layout, first.compare, first.alpha, first.prefix, first.responses) == ("auto", "tukey", 0.05,
                                                                                          "wbt-", None)
    assert (second.layout, second.block, second.responses, second.compare, second.alpha, second.control) == (
        "long", "Strip", ("Yield", "Protein", "N"), "holm", 0.1, "3")


@pytest.mark.parametrize("column, value, cell, words", [
    ("Alpha", "abc", "G2", "Alpha must be a number between 0 and 1"),
    ("Alpha", 1.5, "G2", "Alpha must be a number between 0 and 1"),
    ("Layout", "sideways", "B2", "The layout must be wide, long"),
    ("Compare", "fisher", "F2", "The comparison method must be one of lsd"),
    ("Prefix", "a/b", "I2", "The sheet prefix 'a/b'"),
    ("Control", "#N/A", "H2", "error value #N/A"),
])
def test_a_bad_option_names_the_job_sheet_cell(column, value, cell, words):
    row = ["A!B3:G9"] + [None] * 8
    row[HEADER.index(column)] = value
    (_, error), = parse_job_sheet(job_rows(row)).entries
    assert isinstance(error, TrialInputError)
    assert (error.sheet, error.cell) == (JOB_SHEET, cell)
    assert words in error.message


def test_an_unknown_header_or_no_range_column_stops_the_run():
    with pytest.raises(TrialInputError, match="no column called 'Aplha'") as caught:
        parse_job_sheet([["Range", "Aplha"], ["A!B3:G9", 0.1]])
    assert caught.value.cell == "B1"
    with pytest.raises(TrialInputError, match="needs a header row with a 'Range' column"):
        parse_job_sheet([["Data", "Alpha"]])


# ---------------------------------------------------------------- headless

@pytest.fixture
def book(tmp_path) -> Path:
    return Path(shutil.copy(COMMITTED / JOB_SAMPLE, tmp_path / JOB_SAMPLE))


def test_run_exits_0_fills_the_statuses_and_leaves_the_input_alone(book):
    before = hashlib.sha256(book.read_bytes()).hexdigest()
    code, out, _ = run_cli("run", book)
    assert code == 0 and "3 job(s), 0 failed" in out
    assert hashlib.sha256(book.read_bytes()).hexdigest() == before
    ws = openpyxl.load_workbook(book.with_name("job_sheet_trials-analysed.xlsx"))[JOB_SHEET]
    header = [c.value for c in ws[4]]
    rows = [[c.value for c in row] for row in ws.iter_rows(min_row=5, max_row=7)]
    status, ran, written = (header.index(name) for name in ("Status", "Ran at (UTC)", "Sheets written"))
    assert [r[status] for r in rows] == ["done"] * 3
    assert all(isinstance(r[ran], dt.datetime) for r in rows)
    assert rows[0][written] == "hard-anova / hard-means / hard-residuals / hard-checks / hard-audit"
    assert [r[:9] for r in rows] == [list(job) for job in JOB_ROWS]


def test_a_failing_job_exits_2_and_the_others_are_done(book):
    wb = openpyxl.load_workbook(book)
    wb[JOB_SHEET]["A6"] = "Hardness!Z1:Z3"
    wb[JOB_SHEET]["G7"] = "abc"
    wb.save(book)
    code, out, _ = run_cli("run", book, "--out", book.with_name("out.xlsx"))
    assert code == 2 and "1 failed" not in out and "2 failed" in out
    ws = openpyxl.load_workbook(book.with_name("out.xlsx"))[JOB_SHEET]
    assert ws["J5"].value == "done"
    assert ws["J6"].value.startswith("Sheet 'Hardness', cell Z1:Z3: The range Z1:Z3 is empty")
    assert ws["J7"].value.startswith("Sheet 'wbt-jobs', cell G7: Alpha must be a number")
    assert ws["L6"].value is None


def test_rerun_replaces_only_the_sheets_it_wrote(book, tmp_path):
    first = tmp_path / "first.xlsx"
    run_file(book, first)
    wb = openpyxl.load_workbook(first)
    wb.create_sheet("my notes")
    wb.save(first)
    outcomes, second = run_file(first, tmp_path / "second.xlsx")
    assert all(o.done for o in outcomes)
    names = openpyxl.load_workbook(second).sheetnames
    written = [name for o in outcomes for name in o.sheets]
    assert sorted(names) == sorted(openpyxl.load_workbook(first).sheetnames)
    assert names == ["wbt-jobs", "Hardness", "Strip trial", "my notes"] + written  # results after the user's sheets


def test_a_user_sheet_with_a_result_name_is_kept(book, tmp_path):
    wb = openpyxl.load_workbook(book)
    wb.create_sheet("hard-anova")["A1"] = "mine"
    wb.save(book)
    outcomes, out = run_file(book)
    assert outcomes[0].sheets[0] == "hard-anova (2)"
    assert openpyxl.load_workbook(out)["hard-anova"]["A1"].value == "mine"


def test_in_place_writes_into_the_input(book):
    code, _, _ = run_cli("run", book, "--in-place")
    assert code == 0
    assert openpyxl.load_workbook(book)[JOB_SHEET]["J5"].value == "done"
    assert not book.with_name("job_sheet_trials-analysed.xlsx").exists()


def test_no_job_sheet_is_an_input_problem(tmp_path):
    wb = openpyxl.Workbook()
    wb.save(tmp_path / "plain.xlsx")
    code, _, err = run_cli("run", tmp_path / "plain.xlsx")
    assert code == 2 and "There is no job sheet called 'wbt-jobs'" in err


def test_macro_workbook_keeps_its_vba_and_names_the_udf_module(tmp_path):
    import zipfile

    book = Path(shutil.copy(COMMITTED / "job_sheet_runner.xlsm", tmp_path / "job_sheet_runner.xlsm"))
    outcomes, out = run_file(book)
    assert all(o.done for o in outcomes) and out.suffix == ".xlsm"
    assert zipfile.ZipFile(out).read("xl/vbaProject.bin") == zipfile.ZipFile(book).read("xl/vbaProject.bin")
    conf = openpyxl.load_workbook(book, keep_vba=True)["xlwings.conf"]
    assert ["UDF Modules", "workbook_tools.excel.functions"] in [[c.value for c in r] for r in conf.iter_rows()]


# ---------------------------------------------------------------- the xlwings adapter on a stand-in

class FakeFont:
    def __init__(self, sheet, cells):
        self._sheet, self._cells = sheet, cells

    def __setattr__(self, name, value):
        if name in ("bold", "italic"):
            for cell in self._cells:
                self._sheet.fonts.setdefault(cell, {})[name] = value
        super().__setattr__(name, value)


class FakeRange:
    """Enough of ``xlwings.Range``: values read and written as 2-D lists, formats, fonts, widths."""

    def __init__(self, sheet, min_row, min_col, max_row, max_col, options=None):
        self.sheet, self.row, self.column = sheet, min_row, min_col
        self.max_row, self.max_col = max_row, max_col
        self._options = options or {}

    @property
    def shape(self):
        return self.max_row - self.row + 1, self.max_col - self.column + 1

    def _cells(self):
        return [(r, c) for r in range(self.row, self.max_row + 1) for c in range(self.column, self.max_col + 1)]

    def options(self, **options):
        return FakeRange(self.sheet, self.row, self.column, self.max_row, self.max_col, options)

    @property
    def value(self):
        assert self._options == {"ndim": 2, "err_to_str": True}
        return [[self.sheet.cells.get((r, c)) for c in range(self.column, self.max_col + 1)]
                for r in range(self.row, self.max_row + 1)]

    @value.setter
    def value(self, value):
        rows = value if isinstance(value, list) else [[value]]
        for i, row in enumerate(rows):
            for j, v in enumerate(row):
                if v is None or v == "":  # Excel leaves a cell set to "" empty
                    self.sheet.cells.pop((self.row + i, self.column + j), None)
                else:
                    self.sheet.cells[(self.row + i, self.column + j)] = v

    @property
    def number_format(self):
        return self.sheet.formats.get((self.row, self.column), "General")

    @number_format.setter
    def number_format(self, fmt):
        for cell in self._cells():
            self.sheet.formats[cell] = fmt

    @property
    def font(self):
        return FakeFont(self.sheet, self._cells())

    @property
    def column_width(self):
        return self.sheet.widths.get(self.column)

    @column_width.setter
    def column_width(self, width):
        self.sheet.widths[self.column] = width

    @property
    def last_cell(self):
        return FakeRange(self.sheet, self.max_row, self.max_col, self.max_row, self.max_col)

    left = property(lambda self: 50.0 * self.column)
    top = property(lambda self: 15.0 * self.row)


class FakeChart:
    def set_source_data(self, rng):
        self.source = rng


class FakeCharts(list):
    def add(self, left, top, width, height):
        chart = FakeChart()
        self.append(chart)
        return chart


class FakeSheet:
    def __init__(self, book, name):
        self.book, self.name = book, name
        self.cells, self.formats, self.fonts, self.widths = {}, {}, {}, {}
        self.charts, self.tables = FakeCharts(), []

    def range(self, first, last=None):
        if isinstance(first, tuple):
            return FakeRange(self, *first, *first)
        if last is not None:
            return FakeRange(self, first_cell(first)[0], first_cell(first)[1], last.row, last.column)
        text = first.replace("$", "")
        if "," in text:  # several areas: only charts use them
            return type("Areas", (), {"address": text})()
        if ":" in text and all(part.isalpha() for part in text.split(":")):  # whole columns
            column = column_index_from_string(text.split(":")[0])
            return FakeRange(self, 1, column, 1_048_576, column)
        min_col, min_row, max_col, max_row = range_boundaries(text)
        return FakeRange(self, min_row, min_col, max_row, max_col)

    @property
    def used_range(self):
        rows = [r for r, _ in self.cells] or [1]
        cols = [c for _, c in self.cells] or [1]
        return FakeRange(self, 1, 1, max(rows), max(cols))

    def delete(self):
        self.book.sheets.remove(self)


def first_cell(text):
    letters, row = coordinate_from_string(text)
    return row, column_index_from_string(letters)


class FakeSheets(list):
    def __init__(self, book):
        super().__init__()
        self.book = book

    def __getitem__(self, key):
        if isinstance(key, str):
            return next(s for s in self if s.name == key)
        return list.__getitem__(self, key)

    @property
    def active(self):
        return self[0]

    def add(self, name, after):
        sheet = FakeSheet(self.book, name)
        self.insert(self.index(after) + 1, sheet)
        return sheet


class FakeName:
    def __init__(self, name, rng):
        self.name, self.refers_to_range = name, rng


class FakeBook:
    """A workbook open in Excel, as far as the xlwings adapter uses it, filled from an .xlsx file."""

    def __init__(self, path: Path):
        self.name = path.name
        self.sheets = FakeSheets(self)
        self.names = []
        self.alerts = []
        self.app = type("App", (), {"alert": lambda _, text, title=None: self.alerts.append(text)})()
        wb = openpyxl.load_workbook(path)
        for ws in wb.worksheets:
            sheet = FakeSheet(self, ws.title)
            self.sheets.append(sheet)
            for row in ws.iter_rows():
                for c in row:
                    if c.value is not None:  # Excel passes every number as a float
                        sheet.cells[(c.row, c.column)] = float(c.value) if type(c.value) is int else c.value
            for table in ws.tables.values():
                min_col, min_row, max_col, max_row = range_boundaries(table.ref)
                sheet.tables.append(type("Table", (), {"name": table.displayName,
                                                       "range": FakeRange(sheet, min_row, min_col, max_row,
                                                                          max_col)})())
        for name, defined in wb.defined_names.items():
            title, cells = next(iter(defined.destinations))
            self.names.append(FakeName(name, self.sheets[title].range(cells)))


def fake_grid(sheet: FakeSheet) -> list[list]:
    used = sheet.used_range
    return [[sheet.cells.get((r, c)) for c in range(1, used.max_col + 1)] for r in range(1, used.max_row + 1)]


def _trimmed(grid):
    rows = [list(row) for row in grid]
    while rows and all(v is None for v in rows[-1]):
        rows.pop()
    width = max((max((j + 1 for j, v in enumerate(r) if v is not None), default=0) for r in rows), default=0)
    return [r[:width] + [None] * (width - len(r)) for r in rows]


def _same(live, saved) -> bool:
    """Equal text; numbers within 1e-12 relative (a saved file holds 16 or 17 significant digits)."""
    if isinstance(live, float) and isinstance(saved, (int, float)):
        return math.isclose(live, saved, rel_tol=1e-12)
    return live == saved


def test_the_xlwings_adapter_writes_the_same_result_sheets_as_openpyxl(book):
    fake = FakeBook(book)
    when = dt.datetime(2024, 5, 1, 12, 0, 0)
    outcomes = run(XlwingsWorkbook(fake), now=when)
    assert [o.status for o in outcomes] == ["done"] * 3
    headless, out = run_file(book)
    grids = workbook_grids(out)
    assert [o.sheets for o in outcomes] == [o.sheets for o in headless]
    for outcome in outcomes:
        for name in outcome.sheets:
            live, file = _trimmed(fake_grid(fake.sheets[name])), _trimmed(grids[name])
            assert len(live) == len(file), name
            for i, (a, b) in enumerate(zip(live, file)):
                if i < 4 and not name.endswith("audit"):
                    continue  # context lines carry the time of each run
                if "UTC" in str(a):
                    continue  # the audit's time
                assert len(a) == len(b) and all(_same(x, y) for x, y in zip(a, b)), f"{name} row {i + 1}"
    job_sheet = fake.sheets[JOB_SHEET]
    assert job_sheet.cells[(5, 10)] == "done" and job_sheet.cells[(5, 11)] == when
    assert job_sheet.formats[(5, 11)] == "yyyy-mm-dd hh:mm:ss" and job_sheet.formats[(5, 10)] == "@"


def test_the_xlwings_adapter_formats_text_and_numbers_and_adds_charts(book):
    fake = FakeBook(book)
    run(XlwingsWorkbook(fake))
    means = fake.sheets["hard-means"]
    header_row = next(r for (r, c), v in means.cells.items() if v == "Treatment")
    assert means.formats[(header_row + 1, 1)] == "@"               # labels are text, never dates
    assert means.formats[(header_row + 1, 4)].startswith("0.")     # adjusted means with fixed decimals
    assert means.fonts[(header_row, 1)]["bold"] is True
    assert means.widths and len(means.charts) == 1
    assert means.charts[0].source.address == f"A{header_row}:A{header_row + 5},D{header_row}:D{header_row + 5}"
    assert len(fake.sheets["hard-residuals"].charts) == 2


def test_a_rerun_in_the_live_book_replaces_its_sheets(book):
    fake = FakeBook(book)
    run(XlwingsWorkbook(fake))
    names = [s.name for s in fake.sheets]
    run(XlwingsWorkbook(fake))
    assert [s.name for s in fake.sheets] == names


def test_run_jobs_shows_a_job_sheet_problem_in_a_message_box(tmp_path):
    wb = openpyxl.Workbook()
    wb.save(tmp_path / "plain.xlsx")
    fake = FakeBook(tmp_path / "plain.xlsx")
    assert run_jobs(fake) == []
    assert fake.alerts and "There is no job sheet" in fake.alerts[0]
