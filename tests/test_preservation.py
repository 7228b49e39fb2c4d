"""Lossless write-back, shown by comparing cells and package parts before and after.

A corpus workbook holding charts, a picture, comments, data validation, conditional
formatting, defined names, a table, freeze panes, hyperlinks and several sheets (built with
xlsxwriter), and a macro-enabled workbook from ``xlwings quickstart --standalone`` (a crafted
VBA part when that cannot run), are analysed to a copy and in place. Every original sheet's
values, formulas and cell styles, its sheet features, and the parts hanging off it (pictures
and the VBA project byte for byte; charts, drawings, comments and tables by content) must be
unchanged. Saving in place copies the user's parts as they are; where a workbook has to go
through openpyxl and saving in place would lose something, the run is refused, the loss
listed and the file left byte-identical. Two runs writing one output at once leave a whole file.
"""

from __future__ import annotations

import hashlib
import io
import posixpath
import subprocess
import sys
import zipfile
from pathlib import Path

import openpyxl
import pytest
from defusedxml.ElementTree import fromstring
from PIL import Image

from tests.make_bad_inputs import grid_rows
from workbook_tools.cli import EXIT_INPUT, EXIT_OK, main
from workbook_tools.sheets.safety import _rels_of, default_output_path, sheet_parts

RANGE = ("--range", "Trial!A1:D5", "--layout", "wide")


def png_bytes() -> bytes:
    buffer = io.BytesIO()
    Image.new("RGB", (24, 16), (200, 40, 40)).save(buffer, format="PNG")
    return buffer.getvalue()


def rich_book(path: Path) -> Path:
    """The corpus workbook: every feature openpyxl is known to keep, on several sheets."""
    import xlsxwriter

    wb = xlsxwriter.Workbook(str(path))
    bold = wb.add_format({"bold": True, "bg_color": "#DDEEFF", "border": 1})
    number = wb.add_format({"num_format": "0.00", "italic": True, "font_color": "#993300", "align": "center"})
    trial = wb.add_worksheet("Trial")
    for r, row in enumerate(grid_rows()):
        for c, value in enumerate(row):
            trial.write(r, c, value, bold if r == 0 or c == 0 else number)
    trial.write_formula("F2", "=AVERAGE(B2:D5)", number, 11.2)
    trial.write_comment("B2", "Re-measured on day 2", {"author": "Lab"})
    trial.data_validation("B2:D5", {"validate": "decimal", "criteria": "between", "minimum": 0, "maximum": 100})
    trial.conditional_format("B2:D5", {"type": "cell", "criteria": ">", "value": 12, "format": bold})
    trial.freeze_panes(1, 1)
    trial.write_url("F4", "https://example.org/protocol", string="Protocol")
    trial.set_column("A:A", 14)
    trial.insert_image("H2", "dot.png", {"image_data": io.BytesIO(png_bytes())})
    chart = wb.add_chart({"type": "column"})
    chart.add_series({"name": "Day 1", "categories": "=Trial!$B$1:$D$1", "values": "=Trial!$B$2:$D$2"})
    chart.set_title({"name": "Day 1 by treatment"})
    trial.insert_chart("H8", chart)
    log = wb.add_worksheet("Log")
    log.add_table("A1:C3", {"name": "RunLog", "columns": [{"header": "Run"}, {"header": "Operator"},
                                                          {"header": "Note"}],
                            "data": [[1, "AB", "ok"], [2, "CD", "oven door opened"]]})
    log.merge_range("E1:F1", "Merged note", bold)
    wb.define_name("TrialData", "=Trial!$A$1:$D$5")
    line = wb.add_chart({"type": "line"})
    line.add_series({"values": "=Trial!$B$2:$B$5"})
    sheet3 = wb.add_worksheet("Charts")
    sheet3.insert_chart("B2", line)
    wb.close()
    return path


def macro_book(folder: Path) -> Path:
    """xlwings' standalone quickstart workbook with the trial added; a crafted VBA part if it cannot run."""
    made = folder / "quick" / "quick.xlsm"
    try:
        subprocess.run([sys.executable, "-m", "xlwings.cli", "quickstart", "quick", "--standalone"], cwd=folder,
                       check=True, capture_output=True, timeout=60)
        wb = openpyxl.load_workbook(made, keep_vba=True)
    except (subprocess.SubprocessError, OSError):
        wb = None
    if wb is None:  # crafted: an openpyxl workbook given a VBA part and the macro content type
        wb = openpyxl.Workbook()
        wb.active.title = "Sheet1"
        made.parent.mkdir(parents=True, exist_ok=True)
        wb.save(made)
        _add_vba(made)
        wb = openpyxl.load_workbook(made, keep_vba=True)
    ws = wb.create_sheet("Trial", 0)
    for row in grid_rows():
        ws.append(row)
    path = folder / "macros.xlsm"
    wb.save(path)
    return path


def _add_vba(path: Path) -> None:
    with zipfile.ZipFile(path) as package:
        items = {i.filename: package.read(i) for i in package.infolist()}
    types = items["[Content_Types].xml"].decode()
    types = types.replace("application/vnd.openxmlformats-officedocument.spreadsheetml.sheet.main+xml",
                          "application/vnd.ms-excel.sheet.macroEnabled.main+xml")
    types = types.replace("</Types>", '<Default Extension="bin" ContentType="application/vnd.ms-office.vbaProject"/>'
                                      "</Types>")
    items["[Content_Types].xml"] = types.encode()
    rels = items["xl/_rels/workbook.xml.rels"].decode().replace("</Relationships>", (
        '<Relationship Id="rIdVBA" Type="http://schemas.microsoft.com/office/2006/relationships/vbaProject" '
        'Target="vbaProject.bin"/></Relationships>'))
    items["xl/_rels/workbook.xml.rels"] = rels.encode()
    items["xl/vbaProject.bin"] = b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1" + bytes(range(256)) * 8
    with zipfile.ZipFile(path, "w", zipfile.ZIP_DEFLATED) as package:
        for name, data in items.items():
            package.writestr(name, data)


# ---------------------------------------------------------------- what is compared

def cell_facts(ws, skip=()) -> dict:
    """Value, number format and every style attribute (as text) of each used cell."""
    return {c.coordinate: (c.value, c.number_format, *(repr(s) for s in (c.font, c.fill, c.border, c.alignment,
                                                                          c.protection)))
            for row in ws.iter_rows() for c in row
            if (c.value is not None or c.has_style) and c.coordinate not in skip}


def formula_cells(ws) -> set:
    return {c.coordinate for row in ws.iter_rows() for c in row if c.data_type == "f"}


def sheet_facts(ws) -> dict:
    return {
        "freeze": ws.freeze_panes,
        "validation": sorted((str(v.sqref), v.type, v.operator, v.formula1, v.formula2)
                             for v in ws.data_validations.dataValidation),
        "conditional": sorted((str(rng.sqref), rule.type, rule.operator, tuple(rule.formula))
                              for rng in ws.conditional_formatting for rule in rng.rules),
        "links": sorted((h.ref, h.target, h.display) for h in ws._hyperlinks) if ws._hyperlinks else
        sorted((c.coordinate, c.hyperlink.target) for row in ws.iter_rows() for c in row if c.hyperlink),
        "comments": sorted((c.coordinate, c.comment.text, c.comment.author)
                           for row in ws.iter_rows() for c in row if c.comment),
        "merged": sorted(str(m) for m in ws.merged_cells.ranges),
        "tables": sorted((t.displayName, t.ref, tuple(col.name for col in t.tableColumns)) for t in ws.tables.values()),
        "widths": {k: d.width for k, d in ws.column_dimensions.items() if d.customWidth},
        "images": len(ws._images), "charts": len(ws._charts),
    }


def book_facts(path: Path, sheets) -> dict:
    facts, formulas = {}, {}
    for data_only in (False, True):  # formulas, then the stored values of the other cells
        wb = openpyxl.load_workbook(path, data_only=data_only, rich_text=True)
        for name in sheets:
            if not data_only:
                formulas[name] = formula_cells(wb[name])
            skip = formulas[name] if data_only else ()  # see test_stored_formula_results_survive
            facts[(name, data_only)] = (cell_facts(wb[name], skip), sheet_facts(wb[name]))
        facts[("names", data_only)] = sorted((n, d.attr_text) for n, d in wb.defined_names.items())
        wb.close()
    return facts


def part_facts(path: Path, sheets) -> dict:
    """What hangs off each named sheet: media and VBA by SHA-256, charts and drawings by content."""
    facts = {}
    with zipfile.ZipFile(path) as package:
        names = set(package.namelist())
        if "xl/vbaProject.bin" in names:
            facts["vba"] = hashlib.sha256(package.read("xl/vbaProject.bin")).hexdigest()
        for part, sheet in sheet_parts(package).items():
            if sheet in sheets:
                facts[sheet] = _related(package, part, names)
    return facts


def _related(package, part: str, names) -> list:
    found = []
    for kind, target in sorted(_rels_of(package, part)):
        if target not in names:
            continue
        if kind == "image":
            found.append((kind, hashlib.sha256(package.read(target)).hexdigest()))
        elif kind in ("drawing", "chart", "comments", "table"):
            found.append((kind, _xml_content(package.read(target))))
            found += _related(package, target, names)
        else:
            found.append((kind,))
    return found


def _xml_content(data: bytes) -> tuple:
    """What a part says, without how it is spelled: element kinds, texts, and position attributes."""
    root = fromstring(data)
    kinds = sorted({e.tag.rsplit("}", 1)[-1] for e in root.iter()} & {
        "barChart", "lineChart", "pic", "graphicFrame", "comment", "table", "tableColumn", "twoCellAnchor",
        "oneCellAnchor"})
    texts = sorted((e.text or "").strip() for e in root.iter()
                   if e.tag.rsplit("}", 1)[-1] in ("f", "t", "v", "col", "row") and (e.text or "").strip())
    refs = sorted(e.get("ref") for e in root.iter() if e.get("ref"))
    return tuple(kinds), tuple(texts), tuple(refs)


def snapshot(path: Path, sheets) -> tuple:
    return book_facts(path, sheets), part_facts(path, sheets)


def run(*args) -> int:
    return main(["analyze", *map(str, args)])


# ---------------------------------------------------------------- the proof

@pytest.fixture()
def corpus(tmp_path):
    return [rich_book(tmp_path / "rich.xlsx"), macro_book(tmp_path)]


def test_results_to_a_copy_change_nothing_of_the_original_sheets(corpus, capsys):
    for book in corpus:
        sheets = openpyxl.load_workbook(book, read_only=True).sheetnames
        before_bytes = book.read_bytes()
        before = snapshot(book, sheets)
        assert run(book, *RANGE) == EXIT_OK, capsys.readouterr().err
        assert book.read_bytes() == before_bytes
        out = default_output_path(book)
        assert snapshot(out, sheets) == before
        written = openpyxl.load_workbook(out, read_only=True).sheetnames
        assert written[:len(sheets)] == sheets and "wbt-anova" in written


def test_results_in_place_change_nothing_of_the_original_sheets(corpus, capsys):
    for book in corpus:
        sheets = openpyxl.load_workbook(book, read_only=True).sheetnames
        before = snapshot(book, sheets)
        assert run(book, *RANGE, "--in-place") == EXIT_OK, capsys.readouterr().err
        assert snapshot(book, sheets) == before
        first = book.read_bytes()
        assert run(book, *RANGE, "--in-place") == EXIT_OK  # a re-run replaces only its own sheets
        assert snapshot(book, sheets) == before
        with zipfile.ZipFile(io.BytesIO(first)) as a, zipfile.ZipFile(book) as b:
            media = [n for n in a.namelist() if n.startswith("xl/media/") or n == "xl/vbaProject.bin"]
            assert all(a.read(n) == b.read(n) for n in media)
        assert openpyxl.load_workbook(book).sheetnames.count("wbt-anova") == 1


def xlsxwriter_with(path: Path, add) -> Path:
    import xlsxwriter

    wb = xlsxwriter.Workbook(str(path))
    ws = wb.add_worksheet("Trial")
    for r, row in enumerate(grid_rows()):
        ws.write_row(r, 0, row)
    add(ws)
    wb.close()
    return path


LOSSES = {
    "textbox": (lambda ws: ws.insert_textbox("G2", "Randomised by hand"), "text boxes"),
    "button": (lambda ws: ws.insert_button("G6", {"macro": "run", "caption": "Run"}), "form controls"),
    "sparkline": (lambda ws: ws.add_sparkline("E2", {"range": "Trial!B2:D2"}), "sparklines"),
}


@pytest.mark.parametrize("feature", sorted(LOSSES))
def test_in_place_keeps_what_openpyxl_would_drop(tmp_path, feature, capsys):
    """The copy-and-append route leaves every part of the user's sheets as it was."""
    add, _ = LOSSES[feature]
    book = xlsxwriter_with(tmp_path / f"{feature}.xlsx", add)
    with zipfile.ZipFile(book) as package:
        before = {n: package.read(n) for n in package.namelist()}
    assert run(book, *RANGE, "--in-place") == EXIT_OK, capsys.readouterr().err
    edited = {"xl/workbook.xml", "xl/_rels/workbook.xml.rels", "[Content_Types].xml", "xl/styles.xml",
              "docProps/custom.xml", "_rels/.rels", "xl/worksheets/sheet1.xml"}
    with zipfile.ZipFile(book) as package:
        for name, data in before.items():
            assert name in edited or package.read(name) == data, name
        sheet = package.read("xl/worksheets/sheet1.xml")
        assert sheet == before["xl/worksheets/sheet1.xml"].replace(b' tabSelected="1"', b"", 1)


@pytest.mark.parametrize("feature", sorted(LOSSES))
def test_in_place_refused_and_the_loss_listed_when_something_would_be_lost(tmp_path, feature, capsys,
                                                                         monkeypatch):
    """Where the workbook must go through openpyxl, in place is refused if openpyxl would drop something."""
    monkeypatch.setattr("workbook_tools.sheets.appending.inspect", lambda *args: None)
    add, words = LOSSES[feature]
    book = xlsxwriter_with(tmp_path / f"{feature}.xlsx", add)
    before = book.read_bytes()
    assert run(book, *RANGE, "--in-place") == EXIT_INPUT
    err = capsys.readouterr().err
    assert "cannot be saved in place" in err and words in err and "sheet 'Trial'" in err
    assert book.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == [book.name]


def test_two_runs_writing_one_output_at_once_leave_a_whole_file(tmp_path):
    book = rich_book(tmp_path / "rich.xlsx")
    out = tmp_path / "shared.xlsx"
    command = [sys.executable, "-m", "workbook_tools.cli", "analyze", str(book), *RANGE, "--out", str(out)]
    if True:  # one race of two processes
        runs = [subprocess.Popen(command, stdout=subprocess.PIPE, stderr=subprocess.PIPE) for _ in range(2)]
        results = [(p.wait(timeout=120), p.stderr.read().decode()) for p in runs]
        for p in runs:
            p.stdout.close()
            p.stderr.close()
        assert all(code == EXIT_OK for code, _ in results), results
        with zipfile.ZipFile(out) as package:
            assert package.testzip() is None
        assert "wbt-anova" in openpyxl.load_workbook(out).sheetnames
        assert sorted(p.name for p in tmp_path.iterdir()) == ["rich.xlsx", "shared.xlsx"]


def test_comparison_sees_a_change(tmp_path):
    # The comparison itself must notice a changed style, value or picture.
    book = rich_book(tmp_path / "rich.xlsx")
    sheets = ["Trial", "Log", "Charts"]
    before = snapshot(book, sheets)
    wb = openpyxl.load_workbook(book)
    wb["Trial"]["B3"].font = openpyxl.styles.Font(bold=True)
    changed = tmp_path / "changed.xlsx"
    wb.save(changed)
    assert snapshot(changed, sheets)[0] != before[0]
    with zipfile.ZipFile(changed) as package:
        media = [n for n in package.namelist() if posixpath.dirname(n) == "xl/media"]
    assert media  # the picture survived, so its hash is compared


def test_stored_formula_results_survive(tmp_path, capsys):
    """The first analysis copies the user's parts as they are (workbook_tools.sheets.appending)."""
    book = rich_book(tmp_path / "rich.xlsx")
    assert openpyxl.load_workbook(book, data_only=True)["Trial"]["F2"].value == 11.2
    assert run(book, *RANGE) == EXIT_OK
    assert openpyxl.load_workbook(default_output_path(book), data_only=True)["Trial"]["F2"].value == 11.2


def test_stored_formula_results_survive_a_rerun(tmp_path, capsys):
    book = rich_book(tmp_path / "rich.xlsx")
    assert run(book, *RANGE) == EXIT_OK
    again = default_output_path(book)
    assert run(again, *RANGE, "--out", str(tmp_path / "again.xlsx")) == EXIT_OK
    assert openpyxl.load_workbook(tmp_path / "again.xlsx", data_only=True)["Trial"]["F2"].value == 11.2
