"""Read a trial (blocks x treatments) from a workbook range into plain data.

Two layouts are understood. *Wide*: treatment labels across the first row, block
labels down the first column, one value per block and treatment in the body (the
top-left cell is ignored; ``transposed=True`` swaps the roles of rows and
columns). *Long*: a header row, then one row per plot with a block column, a
treatment column and one or more response columns.

Every problem with the input raises `TrialInputError` naming the sheet and cell.
The input file is only ever opened for reading.
"""

from __future__ import annotations

import datetime as dt
import math
import re
import warnings
import zipfile
from dataclasses import dataclass
from itertools import islice
from operator import itemgetter
from pathlib import Path

import openpyxl
from openpyxl.utils import get_column_letter
from defusedxml.ElementTree import iterparse
from openpyxl.worksheet.formula import ArrayFormula, DataTableFormula

from workbook_tools.analysis.errors import TrialInputError
from workbook_tools.sheets import limits
from workbook_tools.sheets.ranges import CellRange, cell_address, parse_a1, parse_range_text, resolve_range

LARGE_FILE_BYTES = 5 * 1024 * 1024
"""Files bigger than this are read in openpyxl's streaming (read-only) mode."""

ERROR_VALUES = frozenset({
    "#N/A", "#DIV/0!", "#VALUE!", "#REF!", "#NAME?", "#NUM!", "#NULL!",
    "#SPILL!", "#CALC!", "#GETTING_DATA", "#FIELD!", "#BLOCKED!", "#CONNECT!", "#BUSY!", "#UNKNOWN!",
})
BLOCK_WORDS = frozenset({"block", "blocks"})
TREATMENT_WORDS = frozenset({"treatment", "treatments"})
_NUMBER_TEXT = re.compile(r"[+-]?(\d+(\.\d*)?|\.\d+)([eE][+-]?\d+)?")
_SHOWN = 5  # how many cell addresses a message lists before "and N more"


@dataclass(frozen=True)
class TrialTable:
    """One response of a trial as read from the sheet; parallel lists, one entry per observation."""

    sheet: str
    range: CellRange
    layout: str
    response: str | None
    blocks: list[str]
    treatments: list[str]
    values: list[float]
    cells: list[str]
    missing_cells: list[tuple[str, str, str]]


def read_trials(path, range_text, *, layout="auto", transposed=False, block=None, treatment=None,
                responses=None, text_numbers=False, errors_as_missing=False,
                read_only=None) -> list[TrialTable]:
    """Read the trial in ``range_text`` of the workbook at ``path``.

    Parameters
    ----------
    path : str or os.PathLike
        An .xlsx/.xlsm workbook. It is never written to.
    range_text : str
        ``Sheet!B3:G9``, ``'My sheet'!$B$3:$G$9``, ``B3:G9`` (active sheet), a defined
        name (workbook or sheet scope) or a table name.
    layout : {"auto", "wide", "long"}
        ``"auto"`` guesses only when the layout is unambiguous.
    transposed : bool
        Wide layout with block labels across the first row and treatments down the first column.
    block, treatment : str, optional
        Long layout: headers of the block and treatment columns (case and surrounding
        spaces ignored). Guessed from headers "Block"/"Treatment" when not given.
    responses : list of str, optional
        Long layout: headers of the response columns; by default every other column
        holding numbers.
    text_numbers : bool
        Accept numbers stored as text (``" 12.5"``).
    errors_as_missing : bool
        Treat error values (``#N/A``, ``#DIV/0!``...) as missing values.
    read_only : bool, optional
        Use openpyxl's streaming mode; by default for files over 5 MB.

    Returns
    -------
    list of TrialTable
        One table for a wide layout, one per response for a long layout.
    """
    _check_layout(layout)
    grid = _read_grid(Path(path), range_text, read_only)
    return _trials(grid, layout, transposed, block, treatment, responses, text_numbers, errors_as_missing)


def read_range_values(path, range_text, *, read_only=None) -> tuple[CellRange, list[list]]:
    """The cells of a range as plain values, after the same checks on the sheet as `read_trials`.

    Returns the range and its rows (as far as the sheet holds anything): ``None`` for a
    blank cell, error values as their text (``"#N/A"``), other values as openpyxl gives them.
    """
    grid = _read_grid(Path(path), range_text, read_only)
    return grid.rng, [list(row) for row in grid.rows]


def trials_from_values(values, rng: CellRange, *, layout="auto", transposed=False, block=None, treatment=None,
                       responses=None, text_numbers=False, errors_as_missing=False) -> list[TrialTable]:
    """Read a trial from a grid of plain values, as a spreadsheet passes a range to a function.

    ``values`` is a list of rows: numbers, text, ``None`` for blanks, booleans, dates,
    error values as text (``"#N/A"``); ``rng`` says where the grid's top-left cell is,
    for messages. The rules, options and messages are those of `read_trials`.
    """
    _check_layout(layout)
    grid = _Grid(rng, [list(row) for row in values])
    return _trials(grid, layout, transposed, block, treatment, responses, text_numbers, errors_as_missing)


def _check_layout(layout) -> None:
    if layout not in ("auto", "wide", "long"):
        raise TrialInputError(f"The layout must be wide, long or auto, not {layout!r}.")


def _read_grid(path: Path, range_text, read_only) -> "_Grid":
    _check_file(path)
    try:
        fast = _read_grid_fast(path, range_text, read_only)
    finally:
        limits.drop_checked_parts()
    if fast is not None:
        return fast
    wb, handle = _open_workbook(path, read_only, data_only=True, checked=True)
    try:
        rng = resolve_range(wb, range_text)
        ws = wb[rng.sheet]
        _check_merged(wb, ws, rng)
        grid = _Grid.read(ws, rng)
        recalc_on_open = bool(getattr(wb.calculation, "fullCalcOnLoad", False))
    finally:
        wb.close()
        handle.close()
    _check_calculated(path, grid, recalc_on_open)
    return grid


LARGE_SHEET_BYTES = 1024 * 1024
"""A sheet whose XML is larger than this is held to the cell limit by the range as given."""


def _read_grid_fast(path: Path, range_text, read_only) -> "_Grid | None":
    """The calamine route (see fast_grid) for a range given by cell references.

    The package has passed `_check_file` already. A large sheet's range is held to
    the cell limit as given; a small sheet's range beyond the limit goes to openpyxl,
    which sizes the grid by the cells the sheet holds.

    Returns None when the route does not apply (a name or table instead of cell
    references, calamine not installed, cells it cannot place): openpyxl then reads.
    """
    if read_only is False:
        return None
    sheet, ref = parse_range_text(str(range_text))
    bounds = parse_a1(ref)
    if bounds is None:
        return None
    try:
        import python_calamine  # noqa: F401
    except ImportError:
        return None
    from workbook_tools.sheets import fast_grid
    from workbook_tools.sheets.safety import sheet_parts

    with zipfile.ZipFile(path) as package:
        sheet = sheet or fast_grid.active_sheet(package)
        part = next((p for p, name in sheet_parts(package).items() if name == sheet), None)
        if part is None or part not in package.namelist():
            return None
        large = package.getinfo(part).file_size > LARGE_SHEET_BYTES
    rng = CellRange(sheet, *bounds)
    n_rows, n_cols = rng.max_row - rng.min_row + 1, rng.max_col - rng.min_col + 1
    if not large and n_rows * n_cols > limits.active().max_cells:
        return None
    limits.check_cells(rng.sheet, rng.a1, n_rows, n_cols)
    try:
        read = fast_grid.read_cells(path, rng)
    except LookupError:
        return None
    limits.check_time()
    _refuse_merged([((c0, r0, c1, r1), f"{cell_address(r0, c0)}:{cell_address(r1, c1)}")
                    for r0, c0, r1, c1 in read.merged], rng)
    grid = _Grid(rng, read.rows)
    uncalculated = sorted((r, c) for (r, c), stored in read.scan.formulas.items()
                          if rng.min_row <= r <= rng.max_row and rng.min_col <= c <= rng.max_col
                          and (stored is None or (read.scan.recalc_on_open and _is_zero_text(stored))))
    _refuse_uncalculated(grid, [cell_address(r, c) for r, c in uncalculated])
    return grid


def _is_zero_text(stored: str) -> bool:
    try:
        return float(stored) == 0.0
    except ValueError:
        return False


def _trials(grid: "_Grid", layout, transposed, block, treatment, responses, text_numbers,
            errors_as_missing) -> list[TrialTable]:
    """The layout rules every front end shares: one table for a wide grid, one per long response."""
    rng = grid.rng
    if all(_is_blank(value) for row in grid.rows for value in row):
        grid.fail(f"The range {rng.a1} is empty. Check that the range covers the data.")
    options = dict(text_numbers=text_numbers, errors_as_missing=errors_as_missing)
    if layout == "auto":
        layout = _guess_layout(grid, transposed, block, treatment, responses, text_numbers)
    if layout == "wide":
        if block is not None or treatment is not None or responses is not None:
            raise TrialInputError(
                "The options --block, --treatment and --response apply to the long layout only; "
                "leave them out for a wide grid or give --layout long.", sheet=rng.sheet, cell=rng.a1)
        return [_read_wide(grid, transposed, **options)]
    if transposed:
        raise TrialInputError("The transposed option applies to the wide layout only.",
                              sheet=rng.sheet, cell=rng.a1)
    return _read_long(grid, block, treatment, responses, **options)


# ---------------------------------------------------------------- the file

def _check_file(path: Path) -> None:
    """Refuse what is not a readable workbook package, before anything parses it."""
    if not path.exists():
        raise TrialInputError(f"The file {str(path)!r} does not exist. Check the name and folder.")
    if path.is_dir():
        raise TrialInputError(f"{str(path)!r} is a folder, not a workbook file.")
    limits.check_package(path)  # size, kind, zip bomb, XML bomb, ... before openpyxl parses anything
    if not zipfile.is_zipfile(path):
        with open(path, "rb") as fh:
            start = fh.read(8)
        if start.startswith(b"\xd0\xcf\x11\xe0"):
            kind = "an old-style .xls workbook (or another legacy Office file)"
        else:
            kind = "not a workbook (perhaps a CSV or text file with a workbook name)"
        raise TrialInputError(f"The file {path.name!r} is {kind}. Save it as an Excel workbook (.xlsx) and try again.")
    with zipfile.ZipFile(path) as archive:
        if "mimetype" in archive.namelist() and b"opendocument" in archive.read("mimetype"):
            raise TrialInputError(f"The file {path.name!r} is an OpenDocument spreadsheet (.ods). "
                                  "Save it as an Excel workbook (.xlsx) and try again.")


def _open_workbook(path: Path, read_only, *, data_only: bool, checked: bool = False):
    """Open ``path`` for reading; returns the workbook and the file handle to close after it.

    ``checked``: the package has already passed `_check_file`.
    """
    if not checked:
        _check_file(path)
    if read_only is None:
        read_only = path.stat().st_size > LARGE_FILE_BYTES
    handle = open(path, "rb")  # a handle, so that any file name ending is accepted
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # openpyxl warns about features it drops; reading is unaffected
            wb = openpyxl.load_workbook(handle, read_only=read_only, data_only=data_only)
    except Exception as exc:  # openpyxl raises many types for damaged or foreign packages
        handle.close()
        raise TrialInputError(f"The file {path.name!r} could not be read as an Excel workbook ({' '.join(str(exc).split())}). "
                              "Open it in a spreadsheet application and save it as .xlsx.") from exc
    return wb, handle


# ---------------------------------------------------------------- the cells

class _Grid:
    """The cells of a range, kept only as far as the sheet holds anything.

    ``rows`` hold plain values: ``None`` for a blank, an error cell as its code
    (``"#N/A"``), which the cell rules recognise by its text.
    """

    def __init__(self, rng: CellRange, rows: list[list]):
        self.rng = rng
        self.rows = rows
        self.nrows = len(rows)
        self.ncols = max(map(len, rows), default=0)
        self.full_width = min(map(len, rows), default=0)   # every row is at least this long

    @classmethod
    def read(cls, ws, rng: CellRange) -> "_Grid":
        max_row, max_col = rng.max_row, rng.max_col
        if hasattr(ws, "merged_cells"):  # a normal worksheet knows its true extent
            max_row, max_col = min(max_row, ws.max_row), min(max_col, ws.max_column)
        limits.check_cells(rng.sheet, rng.a1, max_row - rng.min_row + 1, max_col - rng.min_col + 1)
        rows = []
        if max_row >= rng.min_row and max_col >= rng.min_col:
            for row in ws.iter_rows(min_row=rng.min_row, max_row=max_row, min_col=rng.min_col, max_col=max_col):
                limits.check_time()
                rows.append([c.value for c in row])
        return cls(rng, rows)

    def value(self, i: int, j: int):
        """``(value, kind)`` of a cell, as the cell rules take it (kind is not needed: errors are text)."""
        if i < self.nrows and j < len(self.rows[i]):
            return self.rows[i][j], None
        return None, None

    def address(self, i: int, j: int) -> str:
        return cell_address(self.rng.min_row + i, self.rng.min_col + j)

    def fail(self, message: str, i: int | None = None, j: int | None = None, cell: str | None = None):
        cell = cell or (self.address(i, j) if i is not None else self.rng.a1)
        raise TrialInputError(message, sheet=self.rng.sheet, cell=cell)


def _is_blank(value) -> bool:
    return value is None or (isinstance(value, str) and not value.strip())


def _is_error(value, data_type) -> bool:
    return data_type == "e" or (isinstance(value, str) and value.strip().upper() in ERROR_VALUES)


def _kind(value) -> str | None:
    """Name of a kind of cell content that is not a number, for messages."""
    if isinstance(value, bool):
        return f"the logical value {str(value).upper()}"
    if isinstance(value, dt.datetime) and value.time() != dt.time(0):
        return f"a date and time ({value.isoformat(sep=' ')})"
    if isinstance(value, dt.datetime):   # readers differ in returning a date or its midnight
        return f"a date ({value.date().isoformat()})"
    if isinstance(value, dt.date):
        return f"a date ({value.isoformat()})"
    if isinstance(value, dt.time):
        return f"a time of day ({value.isoformat()})"
    if isinstance(value, dt.timedelta):
        return f"a duration ({value})"
    return None


def _number(grid: _Grid, i: int, j: int, *, text_numbers: bool, errors_as_missing: bool) -> float | None:
    """The value in a body cell, ``None`` for a missing value."""
    try:
        return cell_number(*grid.value(i, j), text_numbers=text_numbers, errors_as_missing=errors_as_missing)
    except TrialInputError as error:
        grid.fail(error.message, i, j)


def cell_number(value, data_type=None, *, text_numbers=False, errors_as_missing=False) -> float | None:
    """The one rule for a value cell: a number, ``None`` for missing, or a `TrialInputError`.

    Blank is missing; numbers are accepted; numbers stored as text only with
    ``text_numbers``; error values (``data_type == "e"`` or their text) are refused
    unless ``errors_as_missing``; booleans, dates, times and other text are refused.
    The error carries no place: the caller adds the sheet and cell.
    """
    if type(value) in (float, int) and data_type != "e" and math.isfinite(value):
        return float(value)       # the common case, decided at once
    if _is_blank(value):
        return None
    if _is_error(value, data_type):
        if errors_as_missing:
            return None
        raise TrialInputError(f"The cell holds the error value {value}, not a number. Correct it in the sheet, "
                              "or give --errors-as-missing to treat error values as missing.")
    kind = _kind(value)
    if kind:
        hint = (" If the cell should hold a number, set its number format to General or Number."
                if "date" in kind or "time" in kind or "duration" in kind else "")
        raise TrialInputError(f"The cell holds {kind}, not a number.{hint} Leave it blank for a missing value.")
    if isinstance(value, str):
        text = value.strip()
        if not _NUMBER_TEXT.fullmatch(text):
            raise TrialInputError(f"The cell holds the text {text!r}, not a number. Enter a number, "
                                  "or leave it blank for a missing value.")
        if not text_numbers:
            raise TrialInputError(f"The cell holds the text {text!r}: a number stored as text. Convert it to a "
                                  "number in the sheet, or give --text-numbers to accept numbers stored as text.")
        value = float(text)
    if not isinstance(value, (int, float)):
        raise TrialInputError(f"The cell holds {value!r}, which is not a number.")
    value = float(value)
    if not math.isfinite(value):
        raise TrialInputError(f"The cell holds {value}, which is not a finite number.")
    return value


def _label(grid: _Grid, i: int, j: int, what: str) -> str | None:
    """A label as text (numbers without a trailing .0, dates in ISO form), ``None`` when blank."""
    try:
        return cell_label(*grid.value(i, j), what)
    except TrialInputError as error:
        grid.fail(error.message, i, j)


def cell_label(value, data_type, what: str) -> str | None:
    """The one rule for a label cell: text, ``None`` when blank, or a `TrialInputError` without a place."""
    if _is_blank(value):
        return None
    if _is_error(value, data_type):
        raise TrialInputError(f"The cell holds the error value {value} where a {what} is expected.")
    if isinstance(value, bool):
        return str(value).upper()
    if isinstance(value, dt.datetime) and value.time() == dt.time(0):
        return value.date().isoformat()
    if isinstance(value, (dt.date, dt.time)):
        return value.isoformat()
    if isinstance(value, float):
        if not math.isfinite(value):
            raise TrialInputError(f"The cell holds {value} where a {what} is expected.")
        return str(int(value)) if value.is_integer() else repr(value)
    return str(value).strip()


def _number_like(value, data_type) -> bool:
    """Could this cell be meant as a value (for guessing the layout only)?"""
    if _is_blank(value) or _is_error(value, data_type) or _kind(value):
        return True
    if isinstance(value, str):
        return bool(_NUMBER_TEXT.fullmatch(value.strip()))
    return isinstance(value, (int, float))


# ---------------------------------------------------------------- checks on the sheet

def _check_merged(wb, ws, rng: CellRange) -> None:
    """Refuse merged cells that overlap the range anywhere but its (ignored) top-left cell."""
    _refuse_merged(_merged_ranges(wb, ws), rng)


def _refuse_merged(merged, rng: CellRange) -> None:
    """``merged``: ``((min_col, min_row, max_col, max_row), "A1:B2")`` for each merged range."""
    for bounds, text in merged:
        min_col, min_row, max_col, max_row = bounds
        top, left = max(min_row, rng.min_row), max(min_col, rng.min_col)
        bottom, right = min(max_row, rng.max_row), min(max_col, rng.max_col)
        if top > bottom or left > right:
            continue
        if (top, left, bottom, right) == (rng.min_row, rng.min_col, rng.min_row, rng.min_col):
            continue
        raise TrialInputError(
            f"The merged cells {text} overlap the range {rng.a1}; merged cells hide which row or column a "
            "value belongs to. Unmerge them (and fill in each cell) or choose a range without them.",
            sheet=rng.sheet, cell=text)


def _merged_ranges(wb, ws):
    """``((min_col, min_row, max_col, max_row), "A1:B2")`` for each merged range of ``ws``."""
    if hasattr(ws, "merged_cells"):
        return [(m.bounds, m.coord) for m in ws.merged_cells.ranges]
    # Read-only worksheets do not load merged ranges; read the <mergeCell> elements of
    # the sheet's XML part (streamed, entity expansion disabled) from the open package.
    from openpyxl.utils.cell import range_boundaries
    found = []
    with wb._archive.open(ws._worksheet_path) as src:
        for _, element in iterparse(src):
            if element.tag.endswith("}mergeCell"):
                ref = element.get("ref")
                found.append((range_boundaries(ref), ref))
            elif element.tag.endswith("}row"):
                element.clear()
    return found


def _check_calculated(path: Path, grid: _Grid, recalc_on_open: bool) -> None:
    """Refuse formula cells in the range whose results were never calculated and stored.

    openpyxl reports such a cell as blank. Files from scripts that are marked to be
    recalculated when opened may instead hold the placeholder result 0 (XlsxWriter
    writes that), so those zeros are checked too. Only when such cells exist is the
    file opened a second time, in streaming mode, to look at the formulas.
    """
    suspects = {(i, j) for i, row in enumerate(grid.rows) for j, value in enumerate(row)
                if value is None or (recalc_on_open and type(value) in (int, float) and value == 0)}
    if not suspects:
        return
    wb, handle = _open_workbook(path, True, data_only=False, checked=True)
    try:
        formulas = _Grid.read(wb[grid.rng.sheet], grid.rng)
    finally:
        wb.close()
        handle.close()
    found = []
    for i, j in sorted(suspects):
        value, _ = formulas.value(i, j)
        if isinstance(value, (ArrayFormula, DataTableFormula)) or (isinstance(value, str) and value.startswith("=")):
            found.append(grid.address(i, j))
    _refuse_uncalculated(grid, found)


def _refuse_uncalculated(grid: "_Grid", found: list[str]) -> None:
    """Stop with one message naming the formula cells that have no stored result."""
    if found:
        more = f" and {len(found) - _SHOWN} more" if len(found) > _SHOWN else ""
        grid.fail(
            f"{len(found)} cell(s) ({', '.join(found[:_SHOWN])}{more}) hold formulas whose results were never "
            "calculated and stored (typical of files written by scripts and never opened in a spreadsheet "
            "application). Open and save the file in a spreadsheet application, or paste the values in place "
            "of the formulas.", cell=found[0])


# ---------------------------------------------------------------- layouts

def _guess_layout(grid: _Grid, transposed, block, treatment, responses, text_numbers) -> str:
    if transposed:
        return "wide"
    if block is not None or treatment is not None or responses is not None:
        return "long"
    headers = [_plain(grid.value(0, j)[0]) for j in range(grid.ncols)]
    if any(h in BLOCK_WORDS for h in headers) and any(h in TREATMENT_WORDS for h in headers):
        return "long"
    top = [grid.value(0, j) for j in range(1, grid.ncols)]
    side = [grid.value(i, 0) for i in range(1, grid.nrows)]
    body = [grid.value(i, j) for i in range(1, grid.nrows) for j in range(1, grid.ncols)]
    top_text = all(isinstance(v, str) and not _number_like(v, t) for v, t in top if not _is_blank(v))
    if (top_text and any(not _is_blank(v) for v, _ in top) and any(not _is_blank(v) for v, _ in side)
            and all(not _is_error(v, t) for v, t in side) and all(_number_like(v, t) for v, t in body)):
        return "wide"
    grid.fail(
        f"Cannot tell how the data in {grid.rng.a1} is laid out. Give --layout wide (treatment labels "
        "across the first row, block labels down the first column) or --layout long (a header row, then "
        "one row per plot; name the columns with --block, --treatment and --response).")


def _plain(value) -> str:
    return value.strip().casefold() if isinstance(value, str) else ""


def _read_wide(grid: _Grid, transposed: bool, **options) -> TrialTable:
    row_what, col_what = ("treatment", "block") if transposed else ("block", "treatment")
    row_labels = _line_labels(grid, [(i, 0) for i in range(1, grid.nrows)], row_what, across=True)
    col_labels = _line_labels(grid, [(0, j) for j in range(1, grid.ncols)], col_what, across=False)
    places = [((col_label, row_label) if transposed else (row_label, col_label)) + (i, j)
              for i, row_label in row_labels for j, col_label in col_labels]
    return _table(grid, "wide", None, places, **options)


def _line_labels(grid: _Grid, places, what: str, *, across: bool) -> list[tuple[int, str]]:
    """Labels of the rows (``across``) or columns of a wide grid, skipping blank unused lines."""
    kept, seen = [], {}
    for i, j in places:
        label = _label(grid, i, j, f"{what} label")
        line = ([(i, k) for k in range(1, grid.ncols)] if across else [(k, j) for k in range(1, grid.nrows)])
        if label is None:
            if any(not _is_blank(grid.value(*p)[0]) for p in line):
                grid.fail(f"This {what} label is empty but its {'row' if across else 'column'} holds data. "
                          f"Give it a {what} label, or leave it out of the range.", i, j)
            continue
        if label in seen:
            grid.fail(f"The {what} label {label!r} appears twice, in {seen[label]} and {grid.address(i, j)}; "
                      f"each {what} needs its own label.", i, j)
        seen[label] = grid.address(i, j)
        kept.append((i if across else j, label))
    return kept


def _read_long(grid: _Grid, block, treatment, responses, **options) -> list[TrialTable]:
    headers = _headers(grid)
    found = ", ".join(repr(h) for h in headers.values()) or "none"
    header_row = f"{grid.address(0, 0)}:{grid.address(0, max(grid.ncols - 1, 0))}"

    def column(name, words, option):
        if name is None:
            matches = [j for j, h in headers.items() if h.casefold() in words]
            if len(matches) == 1:
                return matches[0]
            grid.fail(f"Say which column holds the {option}s with --{option}. Headers found: {found}.",
                      cell=header_row)
        for j, h in headers.items():
            if h.casefold() == str(name).strip().casefold():
                return j
        grid.fail(f"There is no column headed {str(name).strip()!r} in the first row of {grid.rng.a1}. "
                  f"Headers found: {found}.", cell=header_row)

    b_col = column(block, BLOCK_WORDS, "block")
    t_col = column(treatment, TREATMENT_WORDS, "treatment")
    if responses is None:
        r_cols = [j for j in headers if j not in (b_col, t_col)
                  and any(_numeric(grid.value(i, j)) for i in range(1, grid.nrows))]
        if not r_cols:
            grid.fail("No column besides the block and treatment columns holds numbers. Name the response "
                      f"column(s) with --response. Headers found: {found}.", cell=header_row)
    else:
        r_cols = [column(name, (), "response") for name in responses]
        for j in r_cols:
            if j in (b_col, t_col):
                grid.fail(f"The column {headers[j]!r} is the block or treatment column and cannot also be "
                          "a response.", 0, j)
    used = (b_col, t_col, *r_cols)
    blocks = _column_labels(grid, b_col, "block label")
    treatments = _column_labels(grid, t_col, "treatment label")
    kept = range(len(blocks))   # every row, when every row is labelled (the usual case, checked in C)
    if None in blocks or None in treatments:
        kept = []
        for n, (b, t) in enumerate(zip(blocks, treatments)):
            if b is None or t is None:
                i = n + 1
                if all(_is_blank(grid.value(i, k)[0]) for k in used):
                    continue  # an empty row (e.g. below the data in an oversized range)
                k, what = (b_col, "block") if b is None else (t_col, "treatment")
                grid.fail(f"This row holds data but no {what} label. Fill in the {what}, "
                          "or leave the row out of the range.", i, k)
            kept.append(n)
    return [_long_table(grid, headers[j], j, kept, blocks, treatments, **options) for j in r_cols]


def _column(grid: _Grid, j: int) -> list:
    """The body values (below the header row) of column ``j``."""
    if j < grid.full_width:
        return list(map(itemgetter(j), islice(grid.rows, 1, None)))
    return [row[j] if j < len(row) else None for row in grid.rows[1:]]


def _column_labels(grid: _Grid, j: int, what: str) -> list:
    """Labels of a long-layout column, each distinct cell converted once."""
    cells = _column(grid, j)
    if bool in set(map(type, cells)):   # TRUE and 1 label differently, so they cannot share a key
        return [_label(grid, n + 1, j, what) for n in range(len(cells))]
    try:
        distinct = dict.fromkeys(cells)
    except TypeError:  # a value that cannot be a dictionary key: convert cell by cell
        return [_label(grid, n + 1, j, what) for n in range(len(cells))]
    for value in distinct:   # in order of first appearance, so a refusal names the first such cell
        try:
            distinct[value] = cell_label(value, None, what)
        except TrialInputError as error:
            grid.fail(error.message, cells.index(value) + 1, j)
    return list(map(distinct.__getitem__, cells))


def _long_table(grid: _Grid, response: str, j: int, kept, blocks, treatments, **options) -> TrialTable:
    """One response column of a long layout; blank value cells become missing cells."""
    cells = _column(grid, j)
    letters = get_column_letter(grid.rng.min_col + j)
    first_row = grid.rng.min_row
    values = [cells[n] for n in kept]
    if set(map(type, values)) == {float} and all(map(math.isfinite, values)):   # plain numbers: no cell rule
        return TrialTable(grid.rng.sheet, grid.rng, "long", response, [blocks[n] for n in kept],
                          [treatments[n] for n in kept], values,
                          [f"{letters}{first_row + n + 1}" for n in kept], [])
    out_blocks, out_treatments, values, addresses, missing = [], [], [], [], []
    for n in kept:
        value = cells[n]
        if not (type(value) is float and math.isfinite(value)):
            value = _number(grid, n + 1, j, **options)
        address = f"{letters}{first_row + n + 1}"
        if value is None:
            missing.append((blocks[n], treatments[n], address))
        else:
            out_blocks.append(blocks[n])
            out_treatments.append(treatments[n])
            values.append(value)
            addresses.append(address)
    if not values:
        grid.fail(f"The range {grid.rng.a1} holds no values for {response!r}. Check that the range covers the data.")
    return TrialTable(grid.rng.sheet, grid.rng, "long", response, out_blocks, out_treatments, values, addresses,
                      missing)


def _table(grid: _Grid, layout: str, response: str | None, places, **options) -> TrialTable:
    """Read the value cell of each ``(block, treatment, i, j)``; blank ones become missing cells."""
    blocks, treatments, values, cells, missing = [], [], [], [], []
    for b, t, i, j in places:
        value = _number(grid, i, j, **options)
        if value is None:
            missing.append((b, t, grid.address(i, j)))
        else:
            blocks.append(b)
            treatments.append(t)
            values.append(value)
            cells.append(grid.address(i, j))
    if not values:
        what = f" for {response!r}" if response else ""
        grid.fail(f"The range {grid.rng.a1} holds no values{what}. Check that the range covers the data.")
    return TrialTable(grid.rng.sheet, grid.rng, layout, response, blocks, treatments, values, cells, missing)


def _headers(grid: _Grid) -> dict[int, str]:
    """Column index -> header text for the long layout; checks blanks and repeats."""
    headers, seen = {}, {}
    for j in range(grid.ncols):
        text = _label(grid, 0, j, "column header")
        if text is None:
            if any(not _is_blank(grid.value(i, j)[0]) for i in range(1, grid.nrows)):
                grid.fail("This column holds data but has no header. Give it a header, "
                          "or leave the column out of the range.", 0, j)
            continue
        key = text.casefold()
        if key in seen:
            grid.fail(f"The header {text!r} appears twice, in {seen[key]} and {grid.address(0, j)}; "
                      "each column needs its own header.", 0, j)
        seen[key] = grid.address(0, j)
        headers[j] = text
    return headers


def _numeric(cell) -> bool:
    value, _ = cell
    if isinstance(value, bool):
        return False
    if isinstance(value, str):
        return bool(_NUMBER_TEXT.fullmatch(value.strip()))
    return isinstance(value, (int, float))
