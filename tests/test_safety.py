"""Safe writing of result sheets: what openpyxl loses, atomic saves, tool-made sheets.

No published source is involved. The "kept" and "lost" cases are checked
against openpyxl itself: each test builds a workbook, loads and saves it with
openpyxl, and looks at what came back, so the expectations follow the
installed openpyxl rather than anything the code under test computes.
"""

from __future__ import annotations

import errno
import os
import re
import threading
import zipfile
from pathlib import Path

import openpyxl
import pytest
import xlsxwriter
from hypothesis import given, settings, strategies as st
from openpyxl.chart import BarChart, Reference
from openpyxl.comments import Comment
from openpyxl.packaging.custom import StringProperty
from openpyxl.drawing.image import Image as SheetImage
from openpyxl.workbook.defined_name import DefinedName
from openpyxl.worksheet.datavalidation import DataValidation
from openpyxl.worksheet.table import Table
from PIL import Image

from workbook_tools.analysis.errors import TrialInputError
from workbook_tools.sheets.safety import (
    TOOL_PROPERTY, atomic_save, atomic_write, default_output_path, open_for_writing, record_tool_sheets,
    replace_tool_sheets, tool_sheet_names, what_would_be_lost,
)

VBA_BYTES = b"\xd0\xcf\x11\xe0 not a real VBA project, only bytes to carry through " * 20
CUSTOM_XML = b'<?xml version="1.0"?><data xmlns="urn:example"><item>42</item></data>'


def png(tmp_path) -> Path:
    path = tmp_path / "red.png"
    Image.new("RGB", (20, 10), (200, 30, 30)).save(path)
    return path


def xlsxwriter_book(tmp_path, name, add_feature) -> Path:
    """A one-sheet workbook made by xlsxwriter, with ``add_feature(workbook, sheet)`` applied."""
    path = tmp_path / name
    book = xlsxwriter.Workbook(str(path))
    sheet = book.add_worksheet("Data")
    for row in range(5):
        sheet.write_row(row, 0, [row, row * 2, row * 3])
    add_feature(book, sheet)
    book.close()
    return path


def plain_book(tmp_path, name="trial.xlsx", sheets=("Trial",)) -> Path:
    book = openpyxl.Workbook()
    book.active.title = sheets[0]
    for title in sheets[1:]:
        book.create_sheet(title)
    book[sheets[0]]["A1"] = "yield"
    book[sheets[0]]["A2"] = 4.5
    path = tmp_path / name
    book.save(path)
    return path


def add_part(path, name, data, *, content_type=None, default_ext=None) -> None:
    """Rewrite the zip package at ``path`` with one more part (and its content type)."""
    with zipfile.ZipFile(path) as old:
        parts = {n: old.read(n) for n in old.namelist()}
    types = parts["[Content_Types].xml"].decode()
    if content_type and default_ext:
        entry = f'<Default Extension="{default_ext}" ContentType="{content_type}"/>'
    elif content_type:
        entry = f'<Override PartName="/{name}" ContentType="{content_type}"/>'
    else:
        entry = ""
    parts["[Content_Types].xml"] = types.replace("</Types>", entry + "</Types>").encode()
    parts[name] = data
    with zipfile.ZipFile(path, "w", zipfile.ZIP_DEFLATED) as new:
        for part, content in parts.items():
            new.writestr(part, content)


def round_trip(path, **load_options) -> Path:
    """Load and save ``path`` with openpyxl; return the saved copy."""
    copy = path.with_name(path.stem + "-roundtrip" + path.suffix)
    openpyxl.load_workbook(path, **load_options).save(copy)
    return copy


def part_names(path) -> list[str]:
    with zipfile.ZipFile(path) as package:
        return package.namelist()


def sheet_xml(path) -> str:
    with zipfile.ZipFile(path) as package:
        return package.read("xl/worksheets/sheet1.xml").decode()


def leftovers(folder) -> list[str]:
    return sorted(p.name for p in Path(folder).iterdir() if p.name.endswith(".tmp"))


# --- default_output_path -------------------------------------------------------------------

def test_default_output_path_is_beside_the_input_and_keeps_the_extension(tmp_path):
    assert default_output_path(tmp_path / "trial.xlsx") == tmp_path / "trial-analysed.xlsx"
    assert default_output_path(tmp_path / "trial.xlsm") == tmp_path / "trial-analysed.xlsm"
    assert default_output_path("a/b.c.xlsx", suffix="-out") == Path("a/b.c-out.xlsx")


# --- what openpyxl drops: each case is checked against an openpyxl load and save -----------

def test_textbox_is_dropped_by_openpyxl_and_reported(tmp_path):
    path = xlsxwriter_book(tmp_path, "box.xlsx", lambda b, s: s.insert_textbox("E2", "Note to self"))
    assert not any(n.startswith("xl/drawings/") for n in part_names(round_trip(path)))
    lost = what_would_be_lost(path)
    assert any("text box" in item and "'Data'" in item for item in lost)


def test_button_is_dropped_by_openpyxl_and_reported(tmp_path):
    path = xlsxwriter_book(tmp_path, "button.xlsx", lambda b, s: s.insert_button("E2", {"caption": "Go"}))
    assert not any(n.endswith(".vml") for n in part_names(round_trip(path)))
    assert any("form controls" in item and "'Data'" in item for item in what_would_be_lost(path))


def test_sparkline_is_dropped_by_openpyxl_and_reported(tmp_path):
    path = xlsxwriter_book(tmp_path, "spark.xlsx", lambda b, s: s.add_sparkline("D1", {"range": "Data!A1:C1"}))
    assert "sparkline" in sheet_xml(path)
    with pytest.warns(UserWarning):
        assert "sparkline" not in sheet_xml(round_trip(path))
    assert any("sparklines" in item for item in what_would_be_lost(path))


def test_newer_data_bars_are_dropped_and_reported_once(tmp_path):
    path = xlsxwriter_book(tmp_path, "bars.xlsx", lambda b, s: s.conditional_format(
        "A1:A5", {"type": "data_bar", "data_bar_2010": True}))
    with pytest.warns(UserWarning):
        assert "extLst" not in sheet_xml(round_trip(path))
    assert what_would_be_lost(path) == ["newer conditional formatting (data bars, icon sets) on sheet 'Data'"]


def test_custom_xml_part_is_dropped_and_reported(tmp_path):
    path = plain_book(tmp_path)
    add_part(path, "customXml/item1.xml", CUSTOM_XML)
    assert "customXml/item1.xml" not in part_names(round_trip(path))
    assert any("custom XML" in item for item in what_would_be_lost(path))


@pytest.mark.parametrize("feature, marker, words", [
    (lambda b, s: s.write_dynamic_array_formula("E12", "=SORT(A1:A5)"), ' cm="', "dynamic array"),
    (lambda b, s: s.ignore_errors({"number_stored_as_text": "A1:A5"}), "<ignoredErrors", "error-check"),
])
def test_other_xlsxwriter_features_openpyxl_drops_are_reported(tmp_path, feature, marker, words):
    path = xlsxwriter_book(tmp_path, "feature.xlsx", feature)
    assert marker in sheet_xml(path) and marker not in sheet_xml(round_trip(path))
    assert any(words in item for item in what_would_be_lost(path))


def test_background_picture_is_dropped_and_reported(tmp_path):
    picture = png(tmp_path)
    path = xlsxwriter_book(tmp_path, "bg.xlsx", lambda b, s: s.set_background(str(picture)))
    assert "<picture" not in sheet_xml(round_trip(path))
    assert any("background picture" in item for item in what_would_be_lost(path))


def test_plain_workbook_with_features_openpyxl_keeps_is_safe(tmp_path):
    book = openpyxl.Workbook()
    sheet = book.active
    sheet.title = "Data"
    for row in range(1, 6):
        sheet.append([row, row * 2])
    sheet["A1"].font = openpyxl.styles.Font(bold=True)
    chart = BarChart()
    chart.add_data(Reference(sheet, min_col=1, min_row=1, max_row=5))
    sheet.add_chart(chart, "D2")
    sheet.add_image(SheetImage(png(tmp_path)), "D20")
    sheet["B1"].comment = Comment("check this", "grower")
    validation = DataValidation(type="whole", operator="greaterThan", formula1="0")
    validation.add("B2:B5")
    sheet.add_data_validation(validation)
    book.defined_names["Values"] = DefinedName("Values", attr_text="Data!$A$1:$A$5")
    sheet["F1"], sheet["G1"], sheet["F2"], sheet["G2"] = "x", "y", 1, 2
    sheet.add_table(Table(displayName="Pairs", ref="F1:G2"))
    sheet.freeze_panes = "A2"
    sheet["A7"].hyperlink = "https://example.org"
    path = tmp_path / "kept.xlsx"
    book.save(path)

    back = openpyxl.load_workbook(round_trip(path))["Data"]
    assert len(back._charts) == 1 and len(back._images) == 1
    assert back["B1"].comment.text == "check this"
    assert back.data_validations.dataValidation[0].sqref == validation.sqref
    assert "Values" in back.parent.defined_names and "Pairs" in back.tables
    assert back.freeze_panes == "A2" and back["A7"].hyperlink.target == "https://example.org"
    assert what_would_be_lost(path) == []


@pytest.mark.parametrize("feature", [
    lambda b, s, p: s.insert_chart("E2", _line_chart(b)),
    lambda b, s, p: s.insert_image("E2", str(p)),
    lambda b, s, p: s.write_comment("A1", "hello"),
    lambda b, s, p: s.data_validation("B1:B5", {"validate": "list", "source": ["a", "b"]}),
    lambda b, s, p: s.conditional_format("A1:A5", {"type": "cell", "criteria": ">", "value": 2,
                                                   "format": b.add_format({"bold": 1})}),
    lambda b, s, p: b.define_name("Vals", "=Data!$A$1:$A$5"),
    lambda b, s, p: s.add_table("G1:H4", {"columns": [{"header": "x"}, {"header": "y"}]}),
    lambda b, s, p: s.write_url("A7", "https://example.org"),
    lambda b, s, p: s.merge_range("A10:B10", "merged"),
    lambda b, s, p: b.add_chartsheet("Plot").set_chart(_line_chart(b)),
])
def test_xlsxwriter_features_openpyxl_keeps_are_not_reported(tmp_path, feature):
    picture = png(tmp_path)
    path = xlsxwriter_book(tmp_path, "kept.xlsx", lambda b, s: feature(b, s, picture))
    renumbered = {re.sub(r"\d+", "N", n) for n in part_names(path)} - {"xl/sharedStrings.xml"}
    after = {re.sub(r"\d+", "N", n) for n in part_names(round_trip(path))}
    kinds = {n.replace("comments/commentN", "commentsN").replace("commentsDrawing", "vmlDrawing") for n in after}
    assert renumbered <= kinds  # every kind of part survives (comments are renamed, strings inlined)
    assert what_would_be_lost(path) == []


def _line_chart(book):
    chart = book.add_chart({"type": "line"})
    chart.add_series({"values": "=Data!$A$1:$A$5"})
    return chart


def test_rich_text_survives_the_load_used_for_writing(tmp_path):
    path = xlsxwriter_book(tmp_path, "rich.xlsx", lambda b, s: s.write_rich_string(
        "A12", b.add_format({"bold": True}), "bo", "ld"))
    assert openpyxl.load_workbook(round_trip(path))["Data"]["A12"].value == "bold"  # flattened by default
    book, target = open_for_writing(path)
    atomic_save(book, target)
    runs = openpyxl.load_workbook(target, rich_text=True)["Data"]["A12"].value
    assert [(run.text, bool(run.font.b)) for run in runs] == [("bo", True), ("ld", False)]


# --- macros --------------------------------------------------------------------------------

def macro_book(tmp_path, name) -> Path:
    path = plain_book(tmp_path, name)
    add_part(path, "xl/vbaProject.bin", VBA_BYTES, content_type="application/vnd.ms-office.vbaProject",
             default_ext="bin")
    return path


def test_vba_project_in_an_xlsx_is_reported(tmp_path):
    assert any("macros" in item for item in what_would_be_lost(macro_book(tmp_path, "macros.xlsx")))
    assert what_would_be_lost(macro_book(tmp_path, "macros.xlsm")) == []


def test_xlsm_keeps_its_vba_bytes_identical(tmp_path):
    book, target = open_for_writing(macro_book(tmp_path, "macros.xlsm"))
    assert target.name == "macros-analysed.xlsm"
    book.create_sheet("Results")
    atomic_save(book, target)
    with zipfile.ZipFile(target) as package:
        assert package.read("xl/vbaProject.bin") == VBA_BYTES
        assert "macroEnabled" in package.read("[Content_Types].xml").decode()


def test_macros_are_not_saved_to_xlsx_and_xlsx_not_renamed_xlsm(tmp_path):
    with pytest.raises(TrialInputError, match="macros"):
        open_for_writing(macro_book(tmp_path, "macros.xlsm"), tmp_path / "out.xlsx")
    with pytest.raises(TrialInputError, match="no macros"):
        open_for_writing(plain_book(tmp_path), tmp_path / "out.xlsm")


# --- open_for_writing ----------------------------------------------------------------------

def test_default_target_is_a_new_file_and_the_input_is_untouched(tmp_path):
    path = plain_book(tmp_path)
    original = path.read_bytes()
    book, target = open_for_writing(path)
    assert target == tmp_path / "trial-analysed.xlsx"
    book.create_sheet("Results")
    atomic_save(book, target)
    assert path.read_bytes() == original
    assert openpyxl.load_workbook(target).sheetnames == ["Trial", "Results"]


def test_output_naming_the_input_needs_in_place(tmp_path):
    path = plain_book(tmp_path)
    with pytest.raises(TrialInputError, match="input workbook itself"):
        open_for_writing(path, tmp_path / "." / "trial.xlsx")
    _, target = open_for_writing(path, path, in_place=True)
    assert target == path


def test_in_place_is_refused_with_the_losses_listed(tmp_path):
    path = xlsxwriter_book(tmp_path, "box.xlsx", lambda b, s: s.insert_textbox("E2", "keep me"))
    with pytest.raises(TrialInputError, match="text boxes or drawn shapes on sheet 'Data'"):
        open_for_writing(path, in_place=True)
    _, target = open_for_writing(path)  # a new file is still allowed
    assert target.name == "box-analysed.xlsx"


def test_in_place_save_of_a_safe_workbook(tmp_path):
    path = plain_book(tmp_path)
    book, target = open_for_writing(path, in_place=True)
    book.create_sheet("Results")
    atomic_save(book, target)
    assert openpyxl.load_workbook(path).sheetnames == ["Trial", "Results"]


def test_missing_or_broken_input_is_refused(tmp_path):
    with pytest.raises(TrialInputError, match="not found"):
        open_for_writing(tmp_path / "absent.xlsx")
    broken = tmp_path / "broken.xlsx"
    broken.write_bytes(b"not a zip")
    with pytest.raises(TrialInputError, match="could not be opened"):
        open_for_writing(broken)


# --- atomic_save ---------------------------------------------------------------------------

def failing_save(error):
    def save(filename):
        with open(filename, "wb") as handle:
            handle.write(b"PK\x03\x04 half a workbook")
        raise error
    return save


@pytest.mark.parametrize("existing", [True, False])
def test_disk_full_leaves_the_target_as_it_was_and_no_temporary_file(tmp_path, monkeypatch, existing):
    target = tmp_path / "out.xlsx"
    if existing:
        target.write_bytes(plain_book(tmp_path).read_bytes())
    before = target.read_bytes() if existing else None
    with pytest.raises(TrialInputError, match="disk is full"):
        atomic_write(target, failing_save(OSError(errno.ENOSPC, "No space left on device")))
    assert (target.read_bytes() if existing else target.exists()) == (before if existing else False)
    assert leftovers(tmp_path) == []


def test_permission_denied_is_worded_and_cleaned_up(tmp_path, monkeypatch):
    with pytest.raises(TrialInputError, match="No permission"):
        atomic_write(tmp_path / "out.xlsx", failing_save(PermissionError(errno.EACCES, "Permission denied")))
    assert leftovers(tmp_path) == [] and not (tmp_path / "out.xlsx").exists()


def test_read_only_drive_is_worded(tmp_path, monkeypatch):
    def refuse(*args, **kwargs):
        raise OSError(errno.EROFS, "Read-only file system")
    monkeypatch.setattr("workbook_tools.sheets.safety.os.replace", refuse)
    with pytest.raises(TrialInputError, match="read-only drive"):
        atomic_save(openpyxl.Workbook(), tmp_path / "out.xlsx")
    assert leftovers(tmp_path) == []


@pytest.mark.skipif(os.name != "posix" or os.geteuid() == 0, reason="root ignores folder permissions")
def test_read_only_folder_for_real(tmp_path):
    folder = tmp_path / "locked"
    folder.mkdir()
    folder.chmod(0o555)
    try:
        with pytest.raises(TrialInputError, match="No permission"):
            atomic_save(openpyxl.Workbook(), folder / "out.xlsx")
    finally:
        folder.chmod(0o755)


def test_missing_folder_is_worded(tmp_path):
    with pytest.raises(TrialInputError, match="does not exist"):
        atomic_save(openpyxl.Workbook(), tmp_path / "nowhere" / "out.xlsx")


@pytest.mark.skipif(os.name != "posix", reason="file modes are POSIX")
def test_existing_file_mode_is_kept(tmp_path):
    target = plain_book(tmp_path, "out.xlsx")
    target.chmod(0o640)
    atomic_save(openpyxl.Workbook(), target)
    assert target.stat().st_mode & 0o777 == 0o640


def test_concurrent_writers_leave_one_whole_workbook(tmp_path):
    target = tmp_path / "out.xlsx"
    errors = []

    def writer(label):
        for _ in range(5):
            book = openpyxl.Workbook()
            book.active["A1"] = label
            for row in range(2, 300):
                book.active.cell(row, 1, row)
            try:
                atomic_save(book, target)
            except Exception as exc:  # noqa: BLE001 - reported by the assertion below
                errors.append(exc)

    threads = [threading.Thread(target=writer, args=(label,)) for label in ("first", "second")]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join()
    assert errors == []
    assert openpyxl.load_workbook(target).active["A1"].value in {"first", "second"}
    assert leftovers(tmp_path) == []


# --- tool-made sheets ----------------------------------------------------------------------

def test_recorded_sheets_survive_save_and_load(tmp_path):
    book = openpyxl.Workbook()
    record_tool_sheets(book, ["ANOVA", "Means, Yield"])
    record_tool_sheets(book, ["ANOVA", "Means"])  # recording again replaces the list
    path = tmp_path / "props.xlsx"
    book.save(path)
    back = openpyxl.load_workbook(path)
    assert tool_sheet_names(back) == ["ANOVA", "Means"]
    assert back.custom_doc_props.names.count(TOOL_PROPERTY) == 1


@settings(max_examples=50, deadline=None)
@given(st.lists(st.text(min_size=1, max_size=31), max_size=6))
def test_any_names_are_read_back_as_recorded(names):
    book = openpyxl.Workbook()
    record_tool_sheets(book, names)
    assert tool_sheet_names(book) == names


def test_nothing_recorded_or_unreadable_record_means_no_tool_sheets():
    book = openpyxl.Workbook()
    assert tool_sheet_names(book) == []
    book.custom_doc_props.append(StringProperty(name=TOOL_PROPERTY, value="not json"))
    assert tool_sheet_names(book) == []


def test_user_sheet_with_a_wanted_name_is_refused_and_nothing_removed(tmp_path):
    book = openpyxl.load_workbook(plain_book(tmp_path, sheets=("Trial", "ANOVA", "Old results")))
    record_tool_sheets(book, ["Old results"])
    with pytest.raises(TrialInputError) as refused:
        replace_tool_sheets(book, ["anova"])
    assert refused.value.sheet == "ANOVA"
    assert book.sheetnames == ["Trial", "ANOVA", "Old results"]


def test_rerun_replaces_only_tool_sheets(tmp_path):
    path = plain_book(tmp_path, sheets=("Trial", "Notes"))
    for run in range(2):
        book, target = open_for_writing(path, in_place=True)
        replace_tool_sheets(book, ["ANOVA", "Means"])
        for name in ("ANOVA", "Means"):
            book.create_sheet(name)["A1"] = f"run {run}"
        record_tool_sheets(book, ["ANOVA", "Means"])
        atomic_save(book, target)
    final = openpyxl.load_workbook(path)
    assert final.sheetnames == ["Trial", "Notes", "ANOVA", "Means"]
    assert final["ANOVA"]["A1"].value == "run 1" and final["Trial"]["A2"].value == 4.5
    assert tool_sheet_names(final) == ["ANOVA", "Means"]


def test_removing_the_active_tool_sheet_leaves_a_valid_active_sheet(tmp_path):
    book = openpyxl.load_workbook(plain_book(tmp_path, sheets=("Trial", "ANOVA")))
    record_tool_sheets(book, ["ANOVA"])
    book.active = 1
    replace_tool_sheets(book, ["ANOVA"])
    assert book.active.title == "Trial"
    assert tool_sheet_names(book) == []
