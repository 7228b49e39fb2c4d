"""The faster save route writes the same sheet XML as openpyxl (the reference writer).

Each check builds a sheet, writes it once with openpyxl's own writer and once by the
fast route, and compares the two parts canonicalised (W3C Canonical XML 1.0, so
``<c/>`` and ``<c></c>`` count as the same element).
"""

from __future__ import annotations

import io
import zipfile

import openpyxl
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from lxml import etree
from openpyxl.comments import Comment
from openpyxl.styles import Alignment, Font, PatternFill

from workbook_tools.sheets.package_writer import plain_cells, save_workbook

FONTS = [None, Font(bold=True), Font(italic=True, color="555555")]
FORMATS = [None, "0", "0.000", "0.0%"]


def _parts(book, fast: bool) -> dict[str, bytes]:
    buffer = io.BytesIO()
    if fast:
        save_workbook(book, buffer, book.sheetnames)
    else:
        book.save(buffer)
    with zipfile.ZipFile(buffer) as package:
        return {name: package.read(name) for name in package.namelist()}


def _canonical(xml: bytes) -> bytes:
    return etree.tostring(etree.fromstring(xml), method="c14n")


def _same_sheets(make) -> None:
    """``make()`` builds the workbook afresh for each writer: a save changes a few sheet defaults."""
    reference, fast = _parts(make(), fast=False), _parts(make(), fast=True)
    assert set(reference) == set(fast)
    for name in reference:
        if name.startswith("xl/worksheets/sheet"):
            assert _canonical(fast[name]) == _canonical(reference[name]), name


values = st.one_of(
    st.none(), st.booleans(), st.integers(-10**12, 10**12),
    st.floats(allow_nan=False, allow_infinity=False),
    st.text(st.characters(blacklist_categories=("Cs", "Cc")), max_size=12),
    st.sampled_from(["", " padded ", "a & b < c > d", "line\nbreak", "tab\there", "x\ry", "é ü 中"]),
)
cells = st.lists(st.tuples(st.integers(1, 30), st.integers(1, 8), values,
                           st.integers(0, len(FONTS) - 1), st.integers(0, len(FORMATS) - 1)), max_size=60)


@settings(max_examples=60, deadline=None)
@given(cells, st.lists(st.tuples(st.integers(1, 35), st.floats(5, 90)), max_size=4))
def test_generated_sheets_match_openpyxl(entries, heights):
    def make():
        book = openpyxl.Workbook()
        ws = book.active
        for row, col, value, font, number_format in entries:
            cell = ws.cell(row, col, value)
            if FONTS[font] is not None:
                cell.font = FONTS[font]
            if FORMATS[number_format] is not None:
                cell.number_format = FORMATS[number_format]
        for row, height in heights:
            ws.row_dimensions[row].height = height
        assert plain_cells(ws)
        return book

    _same_sheets(make)


def test_result_sheet_features_match_openpyxl():
    def make():
        book = openpyxl.Workbook()
        ws = book.active
        ws.append(["Source", "df", "Sum of squares", "F", "p-value", "Significant"])
        ws.append(["treatment", 4, 12.3456789012345678, 3.2, 0.0123, True])
        ws["A1"].fill = PatternFill("solid", fgColor="E4EAF1")
        ws["A1"].alignment = Alignment(wrap_text=True, vertical="bottom")
        ws["A4"] = "  a note with spaces  "
        ws.column_dimensions["A"].width = 30
        ws.freeze_panes = "A3"
        ws.page_setup.orientation = "landscape"
        return book

    _same_sheets(make)


def test_an_empty_text_read_back_from_a_file_is_plain_and_matches():
    book = openpyxl.Workbook()
    book.active["B2"] = ""
    book.active["C2"] = 1.5
    buffer = io.BytesIO()
    book.save(buffer)

    def make():
        loaded = openpyxl.load_workbook(io.BytesIO(buffer.getvalue()))
        assert loaded.active["B2"].data_type == "inlineStr"
        assert plain_cells(loaded.active)
        return loaded

    _same_sheets(make)


@pytest.mark.parametrize("dress", [
    lambda ws: setattr(ws["A1"], "value", "=1+2"),
    lambda ws: setattr(ws["A1"], "hyperlink", "https://example.org/"),
    lambda ws: setattr(ws["A1"], "comment", Comment("checked", "lab")),
    lambda ws: ws.merge_cells("A1:B1"),
])
def test_sheets_with_more_than_plain_cells_are_left_to_openpyxl(dress):
    def make():
        book = openpyxl.Workbook()
        ws = book.active
        ws["A1"] = "text"
        dress(ws)
        assert not plain_cells(ws)
        return book

    _same_sheets(make)
    book = make()
    reloaded = openpyxl.load_workbook(_saved(book))
    assert reloaded.active["A1"].value == book.active["A1"].value


def _saved(book) -> io.BytesIO:
    buffer = io.BytesIO()
    save_workbook(book, buffer, book.sheetnames)
    buffer.seek(0)
    return buffer
