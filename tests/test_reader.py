"""Reading trial ranges from workbooks: ranges, layouts, cell contents and refusals.

Expected values here are the cell contents the tests themselves write, so no
published source is involved.
"""

from __future__ import annotations

import datetime as dt
import zipfile

import openpyxl
import pytest
import xlsxwriter
from hypothesis import given, strategies as st
from openpyxl.workbook.defined_name import DefinedName
from openpyxl.worksheet.table import Table

from workbook_tools.analysis.errors import TrialInputError
from workbook_tools.sheets.ranges import CellRange, parse_range_text, resolve_range
from workbook_tools.sheets import reader
from workbook_tools.sheets.reader import read_trials


@pytest.fixture(autouse=True, params=["openpyxl", "calamine"])
def reading_route(request, monkeypatch):
    """Every reading test runs twice: through openpyxl (the route of names, tables and ranges
    beyond the cell limit) and through the calamine + byte-scan route, as a large sheet takes it."""
    if request.param == "calamine":
        pytest.importorskip("python_calamine")
        monkeypatch.setattr(reader, "LARGE_SHEET_BYTES", -1)
    else:
        monkeypatch.setattr(reader, "_read_grid_fast", lambda *args: None)
    return request.param

WIDE = [
    ["Yield t/ha", "Control", "Low N", "High N"],
    [1, 4.1, 5.0, 5.6],
    [2.0, 3.9, None, 5.9],
    ["III", 4.4, 5.2, 6.1],
]


def save(tmp_path, rows, *, title="Trial", at="A1", name="trial.xlsx", extra=None):
    """Write ``rows`` into a new workbook starting at cell ``at``; return the path."""
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = title
    first = ws[at]
    for i, row in enumerate(rows):
        for j, value in enumerate(row):
            ws.cell(first.row + i, first.column + j, value)
    if extra:
        extra(wb, ws)
    path = tmp_path / name
    wb.save(path)
    return path


def refused(path, range_text, **options) -> TrialInputError:
    with pytest.raises(TrialInputError) as info:
        read_trials(path, range_text, **options)
    return info.value


@pytest.mark.parametrize("read_only", [False, True])
def test_wide_grid(tmp_path, read_only):
    path = save(tmp_path, WIDE, at="B3")
    (table,) = read_trials(path, "Trial!B3:E6", read_only=read_only)
    assert (table.sheet, table.layout, table.response) == ("Trial", "wide", None)
    assert table.range == CellRange("Trial", 3, 2, 6, 5)
    assert table.blocks == ["1"] * 3 + ["2"] * 2 + ["III"] * 3
    assert table.treatments == ["Control", "Low N", "High N", "Control", "High N", "Control", "Low N", "High N"]
    assert table.values == [4.1, 5.0, 5.6, 3.9, 5.9, 4.4, 5.2, 6.1]
    assert table.cells == ["C4", "D4", "E4", "C5", "E5", "C6", "D6", "E6"]
    assert table.missing_cells == [("2", "Low N", "D5")]


def test_range_larger_than_data_and_absolute_refs(tmp_path):
    path = save(tmp_path, WIDE)
    (table,) = read_trials(path, "Trial!$A$1:$K$40")
    assert len(table.values) == 8
    assert table.range.a1 == "A1:K40"


def test_transposed_grid(tmp_path):
    rows = [["", "B1", "B2"], ["T1", 1, 2], ["T2", 3, 4], ["T3", 5, 6]]
    path = save(tmp_path, rows)
    (table,) = read_trials(path, "A1:C4", transposed=True)
    assert table.blocks == ["B1", "B2"] * 3
    assert table.treatments == ["T1", "T1", "T2", "T2", "T3", "T3"]
    assert table.values == [1, 2, 3, 4, 5, 6]


LONG = [
    ["Block", "Treatment", "Yield", "Height", "Notes"],
    [1, "A", 5.0, 80, "lodged"],
    [1, "B", None, 82, None],
    [2, "A", 6.0, 79, None],
    [2, "B", 6.5, 85, None],
]


def test_long_two_responses_guessed(tmp_path):
    path = save(tmp_path, LONG)
    yield_, height = read_trials(path, "Trial!A1:E30")
    assert (yield_.layout, yield_.response, height.response) == ("long", "Yield", "Height")
    assert yield_.blocks == ["1", "2", "2"] and yield_.treatments == ["A", "A", "B"]
    assert yield_.values == [5.0, 6.0, 6.5] and yield_.cells == ["C2", "C4", "C5"]
    assert yield_.missing_cells == [("1", "B", "C3")]
    assert height.values == [80, 82, 79, 85] and height.missing_cells == []


def test_long_columns_named_loosely(tmp_path):
    rows = [["Rep", "Variety", "Yield", "Height"]] + [r[:4] for r in LONG[1:]]
    path = save(tmp_path, rows)
    (table,) = read_trials(path, "A1:D5", block=" rep ", treatment="VARIETY", responses=["height"])
    assert table.response == "Height" and table.blocks == ["1", "1", "2", "2"]


def test_long_missing_header_lists_headers(tmp_path):
    path = save(tmp_path, LONG)
    err = refused(path, "A1:E5", layout="long", block="Block", treatment="Cultivar")
    assert (err.sheet, err.cell) == ("Trial", "A1:E1")
    assert "'Cultivar'" in err.message and "'Yield'" in err.message


def test_long_row_without_label(tmp_path):
    path = save(tmp_path, LONG + [[None, "A", 7.0, 80, None]])
    err = refused(path, "A1:E6")
    assert (err.sheet, err.cell) == ("Trial", "A6")


@pytest.mark.parametrize("text", ["=A1:C3", "A1:C3"])
def test_parse_plain_range(text):
    assert parse_range_text(text) == (None, "A1:C3")


def test_parse_sheet_ranges_and_names():
    assert parse_range_text("Sheet!B3:G9") == ("Sheet", "B3:G9")
    assert parse_range_text("'Bob''s data'!A1:C5") == ("Bob's data", "A1:C5")
    assert parse_range_text("'Field 2'!$B$3:$G$9") == ("Field 2", "$B$3:$G$9")
    assert parse_range_text("TrialData") == (None, "TrialData")
    with pytest.raises(TrialInputError):
        parse_range_text("'Bob's data'!A1:C5")


def test_cell_range_text():
    assert CellRange("Trial", 3, 2, 9, 7).full == "Trial!B3:G9"
    assert CellRange("Bob's data", 1, 1, 5, 3).full == "'Bob''s data'!A1:C5"
    assert CellRange("Field 2", 1, 1, 1, 1).a1 == "A1"


sheet_titles = st.text(st.characters(blacklist_characters="\\/?*[]:", blacklist_categories=("Cs", "Cc")),
                       min_size=1, max_size=31).filter(lambda s: s.strip() == s and not s.startswith("'"))


@given(sheet_titles, st.integers(1, 1_048_576), st.integers(1, 16_384), st.integers(0, 50), st.integers(0, 50))
def test_full_text_parses_back(title, row, col, height, width):
    rng = CellRange(title, row, col, min(row + height, 1_048_576), min(col + width, 16_384))
    assert parse_range_text(rng.full) == (title, rng.a1)


@pytest.mark.parametrize("title", ["Field 2", "Bob's data", "2024 'A' trial"])
def test_quoted_sheet_names(tmp_path, title):
    path = save(tmp_path, WIDE, title=title)
    text = "'" + title.replace("'", "''") + "'!A1:D4"
    (table,) = read_trials(path, text)
    assert table.sheet == title and table.range.full == text


@pytest.mark.parametrize("text", ["Trial!A1:D", "Trial!A0:D4", "Trial!A1:XFE4", "Trial!A1:D1048577", "Trial!A1::D4"])
def test_invalid_or_too_large_ranges(tmp_path, text):
    path = save(tmp_path, WIDE)
    with pytest.raises(TrialInputError):
        read_trials(path, text)


def add_names(wb, ws):
    wb.defined_names["TrialData"] = DefinedName("TrialData", attr_text="'Field 2'!$A$1:$D$4")
    ws.defined_names["LocalGrid"] = DefinedName("LocalGrid", attr_text="'Field 2'!$A$1:$D$4")
    ws.add_table(Table(displayName="Plots", ref="F1:J5"))
    for i, row in enumerate(LONG):
        for j, value in enumerate(row):
            ws.cell(1 + i, 6 + j, value)


@pytest.mark.parametrize("read_only", [False, True])
@pytest.mark.parametrize("text", ["TrialData", "trialdata", "LocalGrid", "'Field 2'!LocalGrid"])
def test_defined_names(tmp_path, text, read_only):
    path = save(tmp_path, WIDE, title="Field 2", extra=add_names)
    (table,) = read_trials(path, text, read_only=read_only)
    assert table.range == CellRange("Field 2", 1, 1, 4, 4)


@pytest.mark.parametrize("read_only", [False, True])
def test_table_name(tmp_path, read_only):
    path = save(tmp_path, WIDE, title="Field 2", extra=add_names)
    tables = read_trials(path, "Plots", read_only=read_only)
    assert tables[0].range == CellRange("Field 2", 1, 6, 5, 10)
    assert [t.response for t in tables] == ["Yield", "Height"]


def test_sheet_name_resolved_with_workbook():
    wb = openpyxl.Workbook()
    wb.active.title = "Trial"
    wb.create_sheet("Other")
    assert resolve_range(wb, "B3:C4", default_sheet="Other") == CellRange("Other", 3, 2, 4, 3)
    assert resolve_range(wb, "B3:C4").sheet == "Trial"


def test_unknown_sheet_name_and_table(tmp_path):
    path = save(tmp_path, WIDE, title="Field 2", extra=add_names)
    err = refused(path, "Feild2!A1:D4")
    assert err.sheet == "Feild2" and "'Field 2'" in err.message
    err = refused(path, "Trail")
    assert "TrialData" in err.message and "Plots" in err.message
    err = refused(path, "'Field 2'!Nothing")
    assert err.sheet == "Field 2" and "LocalGrid" in err.message


@pytest.mark.parametrize("read_only", [False, True])
def test_numbers_stored_as_text(tmp_path, read_only):
    rows = [list(r) for r in WIDE]
    rows[1][2] = " 5.25 "
    path = save(tmp_path, rows)
    err = refused(path, "A1:D4", read_only=read_only)
    assert (err.sheet, err.cell) == ("Trial", "C2")
    assert "stored as text" in err.message and "--text-numbers" in err.message
    (table,) = read_trials(path, "A1:D4", text_numbers=True, read_only=read_only)
    assert table.values[1] == 5.25


def test_plain_text_in_body(tmp_path):
    rows = [list(r) for r in WIDE]
    rows[3][3] = "n/a"
    err = refused(save(tmp_path, rows), "A1:D4", layout="wide", text_numbers=True)
    assert (err.sheet, err.cell) == ("Trial", "D4")


@pytest.mark.parametrize("code", ["#N/A", "#DIV/0!", "#VALUE!", "#SPILL!"])
def test_error_values(tmp_path, code):
    rows = [list(r) for r in WIDE]
    rows[2][1] = code
    path = save(tmp_path, rows)
    err = refused(path, "A1:D4")
    assert (err.sheet, err.cell) == ("Trial", "B3") and code in err.message
    assert "--errors-as-missing" in err.message
    (table,) = read_trials(path, "A1:D4", errors_as_missing=True)
    assert table.missing_cells == [("2", "Control", "B3"), ("2", "Low N", "C3")]


@pytest.mark.parametrize("value, kind", [
    (True, "logical"), (dt.datetime(2024, 5, 1), "date"), (dt.date(2024, 5, 1), "date"), (dt.time(8, 30), "time"),
])
def test_booleans_and_dates_refused(tmp_path, value, kind):
    rows = [list(r) for r in WIDE]
    rows[1][3] = value
    err = refused(save(tmp_path, rows), "A1:D4")
    assert (err.sheet, err.cell) == ("Trial", "D2") and kind in err.message


def test_labels_from_numbers_and_dates(tmp_path):
    rows = [["", 0, 2.5, dt.datetime(2024, 5, 1)], [1.0, 1, 2, 3], [2, 4, 5, 6]]
    (table,) = read_trials(save(tmp_path, rows), "A1:D3", layout="wide")
    assert table.treatments[:3] == ["0", "2.5", "2024-05-01"] and table.blocks[:3] == ["1"] * 3


def patched_sheet(path, patched, old: bytes, new: bytes):
    """A copy of the workbook at ``path`` with ``old`` replaced by ``new`` in the first sheet's XML."""
    with zipfile.ZipFile(path) as src, zipfile.ZipFile(patched, "w") as dst:
        for item in src.infolist():
            data = src.read(item)
            if item.filename == "xl/worksheets/sheet1.xml":
                assert old in data
                data = data.replace(old, new)
            dst.writestr(item, data)
    return patched


def test_non_finite_number(tmp_path):
    rows = [list(r) for r in WIDE]
    rows[1][1] = 12345.678
    # No writer stores infinity; put an overflowing number into the sheet XML by hand.
    patched = patched_sheet(save(tmp_path, rows), tmp_path / "inf.xlsx", b"<v>12345.678</v>", b"<v>1e999</v>")
    err = refused(patched, "A1:D4")
    assert (err.sheet, err.cell) == ("Trial", "B2") and "finite" in err.message


@pytest.mark.parametrize("read_only", [False, True])
def test_merged_cells_in_data(tmp_path, read_only):
    path = save(tmp_path, WIDE, extra=lambda wb, ws: ws.merge_cells("B3:B4"))
    err = refused(path, "A1:D4", read_only=read_only)
    assert (err.sheet, err.cell) == ("Trial", "B3:B4")


def test_merged_caption_outside_range_is_fine(tmp_path):
    def caption(wb, ws):
        ws["A1"] = "Trial 7"
        ws.merge_cells("A1:D1")
    path = save(tmp_path, WIDE, at="A2", extra=caption)
    (table,) = read_trials(path, "A2:D5")
    assert len(table.values) == 8


def test_openpyxl_formula_without_value(tmp_path):
    def formulas(wb, ws):
        ws["C2"] = "=B2*2"
        ws["D4"] = "=SUM(B4:C4)"
    err = refused(save(tmp_path, WIDE, extra=formulas), "A1:D4")
    assert (err.sheet, err.cell) == ("Trial", "C2")
    assert "never calculated and stored" in err.message and "C2, D4" in err.message
    assert "2 cell(s)" in err.message


def xlsxwriter_trial(path, *formula):
    """WIDE written by xlsxwriter, with one formula (cell, text[, stored result]) replacing a value."""
    book = xlsxwriter.Workbook(path)
    sheet = book.add_worksheet("Trial")
    for i, row in enumerate(WIDE):
        for j, value in enumerate(row):
            if value is not None:
                sheet.write(i, j, value)
    cell, text, *result = formula
    sheet.write_formula(cell, text, None, *result)
    book.close()
    return path


def test_xlsxwriter_formulas(tmp_path):
    path = xlsxwriter_trial(tmp_path / "script.xlsx", "C3", "=B3+1")  # no result given: stored as 0
    err = refused(path, "A1:D4")
    assert (err.sheet, err.cell) == ("Trial", "C3") and "spreadsheet application" in err.message


def test_xlsxwriter_formula_with_stored_result(tmp_path):
    path = xlsxwriter_trial(tmp_path / "script.xlsx", "C3", "=B3+1", 4.9)
    (table,) = read_trials(path, "A1:D4")
    assert table.values[table.cells.index("C3")] == 4.9


def test_duplicate_labels(tmp_path):
    rows = [list(r) for r in WIDE]
    rows[3][0] = "1"  # text "1" repeats the number 1 in A2
    err = refused(save(tmp_path, rows), "A1:D4")
    assert (err.sheet, err.cell) == ("Trial", "A4") and "A2" in err.message
    rows = [list(r) for r in WIDE]
    rows[0][3] = " Control "
    err = refused(save(tmp_path, rows, name="t2.xlsx"), "A1:D4")
    assert (err.sheet, err.cell) == ("Trial", "D1") and "B1" in err.message


def test_empty_label_with_data(tmp_path):
    rows = [list(r) for r in WIDE]
    rows[0][2] = None
    err = refused(save(tmp_path, rows), "A1:D4", layout="wide")
    assert (err.sheet, err.cell) == ("Trial", "C1")


def test_ambiguous_layout(tmp_path):
    rows = [["Plot", "Variety", "Yield"], [1, "A", 5], [2, "B", 6]]
    err = refused(save(tmp_path, rows), "A1:C3")
    assert (err.sheet, err.cell) == ("Trial", "A1:C3")
    for option in ("--layout wide", "--layout long", "--block", "--treatment", "--response"):
        assert option in err.message


def test_empty_range(tmp_path):
    err = refused(save(tmp_path, WIDE), "H10:K20")
    assert (err.sheet, err.cell) == ("Trial", "H10:K20")


def test_file_problems(tmp_path):
    assert "does not exist" in refused(tmp_path / "none.xlsx", "A1:B2").message
    assert "folder" in refused(tmp_path, "A1:B2").message
    csv = tmp_path / "data.xlsx"
    csv.write_text("Block,A,B\n1,2,3\n")
    assert "not a workbook" in refused(csv, "A1:B2").message
    xls = tmp_path / "old.xls"
    xls.write_bytes(b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1" + bytes(500))
    assert ".xls" in refused(xls, "A1:B2").message
    ods = tmp_path / "calc.ods"
    with zipfile.ZipFile(ods, "w") as z:
        z.writestr("mimetype", "application/vnd.oasis.opendocument.spreadsheet")
    assert "OpenDocument" in refused(ods, "A1:B2").message
    other = tmp_path / "other.xlsx"
    with zipfile.ZipFile(other, "w") as z:
        z.writestr("readme.txt", "hello")
    assert "could not be read" in refused(other, "A1:B2").message


def test_input_file_untouched(tmp_path):
    path = save(tmp_path, WIDE)
    before = path.read_bytes()
    read_trials(path, "A1:D4")
    read_trials(path, "A1:D4", read_only=True)
    assert path.read_bytes() == before


def test_guess_wide_with_block_caption(tmp_path):
    rows = [["Block", "A", "B"], [1, 5, 6], [2, 7, 8]]
    (table,) = read_trials(save(tmp_path, rows), "A1:C3")
    assert table.layout == "wide" and table.treatments == ["A", "B", "A", "B"]


def test_guess_long_from_headers_with_numeric_codes(tmp_path):
    rows = [["Block", "Treatment", "Yield"], [1, 1, 5], [1, 2, 6], [2, 1, 7], [2, 2, 8]]
    (table,) = read_trials(save(tmp_path, rows), "A1:C5")
    assert (table.layout, table.response) == ("long", "Yield") and table.treatments == ["1", "2", "1", "2"]


@pytest.mark.parametrize("empty_value", [b"<v></v>", b"<v/>", b""])
def test_formula_with_an_empty_stored_value_is_uncalculated(tmp_path, empty_value):
    # openpyxl writes an uncalculated formula as <v></v> with lxml and <v/> without it;
    # either, or no <v> at all, means no stored result.
    rows = [list(r) for r in WIDE]
    rows[1][2] = 777.25
    patched = patched_sheet(save(tmp_path, rows), tmp_path / "formula.xlsx", b"<v>777.25</v>",
                            b"<f>B2*2</f>" + empty_value)
    err = refused(patched, "A1:D4")
    assert (err.sheet, err.cell) == ("Trial", "C2") and "never calculated" in err.message
