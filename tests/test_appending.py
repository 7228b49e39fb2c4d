"""The copy-and-append route writes the workbook the openpyxl route writes, and leaves the user's parts alone.

References for the checks: openpyxl (the reference writer: the same result read back
from both routes, and its own serialisation of the same charts and styles), and the
package itself (every part the route does not list as edited is byte-identical).
"""

from __future__ import annotations

import datetime as real_datetime
import zipfile
from pathlib import Path

import openpyxl
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from lxml import etree
from openpyxl.styles.stylesheet import write_stylesheet
from openpyxl.xml.functions import tostring

from workbook_tools.sheets import appending, book, charts
from workbook_tools.sheets.book import analyse_book, write_analyses
from workbook_tools.sheets.chart_templates import chart_part
from workbook_tools.sheets.safety import TOOL_PROPERTY, tool_sheet_names

LONG = dict(layout="long", block="Block", treatment="Treatment")


def trial_book(path: Path, *, extra=None) -> Path:
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = "Runs"
    ws.append(["Block", "Treatment", "Response"])
    values = [[12.1, 13.4, 11.8, 14.0], [12.9, 14.1, 12.2, 14.6], [11.7, 13.0, 11.1, 13.9]]
    for b, row in enumerate(values):
        for t, value in enumerate(row):
            ws.append([f"Batch {b + 1}", f"Supplier {'ABCD'[t]}", value])
    notes = wb.create_sheet("Notes")
    notes["A1"] = "=AVERAGE(Runs!C2:C13)"
    if extra:
        extra(wb)
    wb.save(path)
    return path


class _FixedClock(real_datetime.datetime):
    @classmethod
    def now(cls, tz=None):
        return real_datetime.datetime(2026, 3, 4, 5, 6, 7, tzinfo=tz)


@pytest.fixture
def fixed_clock(monkeypatch):
    fake = type("dt", (), {"datetime": _FixedClock, "timezone": real_datetime.timezone})
    monkeypatch.setattr(book, "dt", fake)


def _both_routes(tmp_path, monkeypatch, source: Path, **options):
    analyses = analyse_book(source, "Runs!A1:C13", **LONG, **options)
    appended = write_analyses(source, analyses, out=tmp_path / "appended.xlsx")
    with monkeypatch.context() as patch:
        patch.setattr(appending, "inspect", lambda *args: None)
        through_openpyxl = write_analyses(source, analyses, out=tmp_path / "openpyxl.xlsx")
    return appended, through_openpyxl


def _cell_facts(cell):
    return (cell.value, cell.number_format, cell.font.b, cell.font.i, cell.font.sz,
            cell.font.color.rgb if cell.font.color is not None else None,
            cell.fill.fill_type, cell.fill.fgColor.rgb, cell.border.bottom.style,
            cell.alignment.wrap_text, cell.alignment.vertical)


def _chart_facts(ws):
    facts = []
    for chart in ws._charts:
        tree = etree.fromstring(tostring(chart._write()))
        refs = sorted(e.text for e in tree.iter() if isinstance(e.tag, str) and e.tag.endswith("}f"))
        facts.append((type(chart).__name__, chart.anchor._from.col, chart.anchor._from.row, tuple(refs)))
    return facts


def test_both_routes_write_the_same_result_sheets(tmp_path, monkeypatch, fixed_clock):
    source = trial_book(tmp_path / "trial.xlsx")
    appended, through_openpyxl = _both_routes(tmp_path, monkeypatch, source)
    a, b = openpyxl.load_workbook(appended), openpyxl.load_workbook(through_openpyxl)
    assert a.sheetnames == b.sheetnames and a.active.title == b.active.title == "wbt-anova"
    assert tool_sheet_names(a) == tool_sheet_names(b)
    for name in tool_sheet_names(b):
        x, y = a[name], b[name]
        assert x.max_row == y.max_row and x.max_column == y.max_column, name
        for row_x, row_y in zip(x.iter_rows(), y.iter_rows()):
            for cx, cy in zip(row_x, row_y):
                assert _cell_facts(cx) == _cell_facts(cy), (name, cx.coordinate)
        assert {k: d.width for k, d in x.column_dimensions.items()} == {k: d.width for k, d in y.column_dimensions.items()}
        assert {k: d.height for k, d in x.row_dimensions.items() if d.height} == \
            {k: d.height for k, d in y.row_dimensions.items() if d.height}
        assert x.freeze_panes == y.freeze_panes and x.sheet_view.tabSelected == y.sheet_view.tabSelected
        assert (x.page_setup.orientation, x.page_setup.fitToWidth, x.sheet_properties.pageSetUpPr.fitToPage) == \
            (y.page_setup.orientation, y.page_setup.fitToWidth, y.sheet_properties.pageSetUpPr.fitToPage)
        assert _chart_facts(x) == _chart_facts(y), name
    assert sum(len(a[n]._charts) for n in a.sheetnames) == 3


def test_the_users_parts_are_copied_byte_for_byte(tmp_path, monkeypatch):
    source = trial_book(tmp_path / "trial.xlsx")
    out = write_analyses(source, analyse_book(source, "Runs!A1:C13", **LONG), out=tmp_path / "out.xlsx")
    edited = {"xl/workbook.xml", "xl/_rels/workbook.xml.rels", "[Content_Types].xml", "xl/styles.xml",
              "docProps/custom.xml", "_rels/.rels", "xl/worksheets/sheet1.xml"}   # sheet1: tab no longer selected
    with zipfile.ZipFile(source) as before, zipfile.ZipFile(out) as after:
        for name in before.namelist():
            if name not in edited:
                assert after.read(name) == before.read(name), name
        assert b"tabSelected" not in after.read("xl/worksheets/sheet1.xml").split(b"<sheetData")[0]
        styles = after.read("xl/styles.xml")
        assert b"xmlns:" not in styles and styles.count(b"<cellXfs") == 1   # appended in place, unprefixed
        # the edit of the user's sheet is that attribute only
        assert after.read("xl/worksheets/sheet1.xml") == before.read("xl/worksheets/sheet1.xml").replace(
            b' tabSelected="1"', b"", 1)
    # the formula's cell keeps its formula, and nothing the user had is lost
    assert openpyxl.load_workbook(out)["Notes"]["A1"].value == "=AVERAGE(Runs!C2:C13)"


def test_existing_custom_properties_and_styles_are_kept(tmp_path):
    from openpyxl.packaging.custom import StringProperty
    from openpyxl.styles import Font

    def extra(wb):
        wb.custom_doc_props.append(StringProperty(name="Study", value="Batch comparison 7"))
        wb["Runs"]["A1"].font = Font(bold=True, color="FF0000")
        wb["Runs"]["C2"].number_format = "0.000"

    source = trial_book(tmp_path / "trial.xlsx", extra=extra)
    out = write_analyses(source, analyse_book(source, "Runs!A1:C13", **LONG), out=tmp_path / "out.xlsx")
    wb = openpyxl.load_workbook(out)
    assert wb.custom_doc_props["Study"].value == "Batch comparison 7"
    assert wb["Runs"]["A1"].font.b and wb["Runs"]["A1"].font.color.rgb == "00FF0000"
    assert wb["Runs"]["C2"].number_format == "0.000"
    assert TOOL_PROPERTY in wb.custom_doc_props.names


def _reachable_parts(path: Path) -> tuple[set[str], set[str]]:
    """(parts reachable from the package root through relationships, every part of the package)."""
    from workbook_tools.sheets.package_parts import relationship_graph, rels_part_of

    with zipfile.ZipFile(path) as package:
        graph = relationship_graph(package, appending._PARSER)
        everything = set(package.namelist())
    seen, todo = set(), [""]
    while todo:
        part = todo.pop()
        if part not in seen:
            seen.add(part)
            todo.extend(graph.get(part, ()))
    reachable = {p for p in seen if p} | {rels_part_of(p) for p in seen if p} | {"_rels/.rels", "[Content_Types].xml"}
    return reachable & everything, everything


def test_a_rerun_on_the_output_replaces_the_result_sheets(tmp_path, monkeypatch, fixed_clock):
    def extra(wb):
        wb["Notes"].print_area = "A1:C10"     # a sheet-scoped defined name, on a sheet after the results

    source = trial_book(tmp_path / "trial.xlsx")
    first = write_analyses(source, analyse_book(source, "Runs!A1:C13", **LONG), out=tmp_path / "first.xlsx")
    wb = openpyxl.load_workbook(first)
    wb.move_sheet("Notes", offset=len(wb.sheetnames))     # the user moves a sheet behind the results
    extra(wb)
    wb.save(first)
    second = write_analyses(first, analyse_book(first, "Runs!A1:C13", **LONG, compare="lsd"),
                            out=tmp_path / "second.xlsx")
    after = openpyxl.load_workbook(second)
    assert after.sheetnames.count("wbt-anova") == 1 and len(after.sheetnames) == len(wb.sheetnames)
    assert after.sheetnames[:2] == ["Runs", "Notes"]          # the results came out and went back at the end
    assert after["Notes"].print_area == "'Notes'!$A$1:$C$10"
    assert sum(len(ws._charts) for ws in after.worksheets) == 3
    assert "compare lsd" in after["wbt-anova"]["A3"].value
    reachable, everything = _reachable_parts(second)
    assert everything == reachable                            # nothing of the earlier results is left over
    with zipfile.ZipFile(second) as package:
        declared = {o.get("PartName").lstrip("/") for o in etree.fromstring(package.read("[Content_Types].xml"))
                    if o.get("PartName")}
    assert declared <= everything


def test_a_rerun_writes_what_the_openpyxl_route_writes(tmp_path, monkeypatch, fixed_clock):
    source = trial_book(tmp_path / "trial.xlsx")
    first = write_analyses(source, analyse_book(source, "Runs!A1:C13", **LONG), out=tmp_path / "first.xlsx")
    analyses = analyse_book(first, "Runs!A1:C13", **LONG)
    appended = write_analyses(first, analyses, out=tmp_path / "appended.xlsx")
    with monkeypatch.context() as patch:
        patch.setattr(appending, "inspect", lambda *args: None)
        through_openpyxl = write_analyses(first, analyses, out=tmp_path / "openpyxl.xlsx")
    a, b = openpyxl.load_workbook(appended), openpyxl.load_workbook(through_openpyxl)
    assert a.sheetnames == b.sheetnames and a.active.title == b.active.title
    for name in tool_sheet_names(b):
        assert [[_cell_facts(c) for c in row] for row in a[name].iter_rows()] == \
            [[_cell_facts(c) for c in row] for row in b[name].iter_rows()], name


def test_unsuitable_packages_go_to_openpyxl(tmp_path):
    source = trial_book(tmp_path / "trial.xlsx")
    assert appending.inspect(source, TOOL_PROPERTY) is not None
    out = write_analyses(source, analyse_book(source, "Runs!A1:C13", **LONG), out=tmp_path / "out.xlsx")
    again = appending.inspect(out, TOOL_PROPERTY)                 # its result sheets are to be replaced
    assert again is not None and sorted(again.replaced) == sorted(tool_sheet_names(openpyxl.load_workbook(out)))
    assert again.user_sheets == ["Runs", "Notes"]
    with zipfile.ZipFile(source) as package:
        parts = {n: package.read(n) for n in package.namelist()}
    parts["xl/workbook.xml"] = b'<!DOCTYPE workbook [<!ENTITY x "y">]>' + parts["xl/workbook.xml"].split(b"?>", 1)[-1]
    crafted = tmp_path / "crafted.xlsx"
    with zipfile.ZipFile(crafted, "w") as package:
        for name, data in parts.items():
            package.writestr(name, data)
    assert appending.inspect(crafted, TOOL_PROPERTY) is None


def test_style_lists_are_openpyxls_own(tmp_path):
    source = trial_book(tmp_path / "trial.xlsx")
    wb = openpyxl.load_workbook(source)
    from workbook_tools.sheets.writer import write_sheet
    from workbook_tools.layout import sheet_plans

    analysis = analyse_book(source, "Runs!A1:C13", **LONG)[0]
    for plan in sheet_plans(analysis.as_dict()):
        write_sheet(wb.create_sheet(plan.family), plan, ["context"])
    for ws in wb.worksheets:
        for cell in ws._cells.values():
            if cell.has_style:
                wb._cell_styles.add(cell._style)
    reference = etree.fromstring(tostring(write_stylesheet(wb)))
    ours = appending.style_lists(wb)
    for tag, items in ours.items():
        expected = reference.find(f"{{{appending.MAIN}}}{tag}")
        assert [etree.tostring(i, method="c14n") for i in items] == \
            [etree.tostring(e, method="c14n") for e in expected], tag


names = st.one_of(st.sampled_from(["wbt-residuals", "wbt-means Yield", "O'Brien & Co <1>", "Ausbeute ü 中"]),
                  st.text(st.characters(whitelist_categories=("Lu", "Ll", "Nd", "Zs")), min_size=1, max_size=20))
rows = st.integers(1, 5000)
cols = st.integers(1, 60)


@settings(max_examples=40, deadline=None)
@given(names, cols, cols, rows, st.integers(0, 300), cols, cols, rows, st.integers(0, 1), st.tuples(rows, cols))
def test_chart_templates_match_openpyxls_serialisation(title, x, y, first, extent, lx, ly, lfirst, lextent, anchor):
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = title.strip() or "x"
    calls = [
        (charts.add_qq_chart, dict(x_col=x, y_col=y, first_row=first, last_row=first + extent, line_x_col=lx,
                                   line_y_col=ly, line_first_row=lfirst, line_last_row=lfirst + lextent,
                                   anchor=anchor)),
        (charts.add_residual_chart, dict(x_col=x, y_col=y, first_row=first, last_row=first + extent, anchor=anchor)),
        (charts.add_means_chart, dict(label_col=x, mean_col=y, low_col=lx, high_col=ly, plus_col=lx + 1,
                                      minus_col=lx + 1, first_row=first, last_row=first + extent, anchor=anchor,
                                      title="Means", y_title="Yield")),
    ]
    for add, kwargs in calls:
        xml, stand_in = chart_part(add, ws.title, **kwargs)
        direct = add(ws, **kwargs)
        assert xml == tostring(direct._write()), add.__name__
        assert (stand_in.anchor, stand_in.width, stand_in.height) == (direct.anchor, direct.width, direct.height)


def test_a_chart_that_reads_cell_values_is_not_templated():
    # without plus/minus columns the means chart stores bar lengths read from the cells
    made = chart_part(charts.add_means_chart, "wbt-means", label_col=1, mean_col=2, low_col=3, high_col=4,
                      first_row=2, last_row=5, anchor=(2, 8))
    assert made is None


def test_the_output_opens_on_the_first_result_sheet_with_one_selected_tab(tmp_path):
    source = trial_book(tmp_path / "trial.xlsx")
    out = write_analyses(source, analyse_book(source, "Runs!A1:C13", **LONG), out=tmp_path / "out.xlsx")
    wb = openpyxl.load_workbook(out)
    assert wb.active.title == "wbt-anova"
    assert [ws.title for ws in wb.worksheets if ws.sheet_view.tabSelected] == ["wbt-anova"]
    with zipfile.ZipFile(out) as package:
        assert package.testzip() is None
        types = etree.fromstring(package.read("[Content_Types].xml"))
        declared = {o.get("PartName").lstrip("/") for o in types if o.get("PartName")}
        for name in package.namelist():
            if name.startswith(("xl/worksheets/sheet", "xl/charts/", "xl/drawings/drawing")):
                assert name in declared, name


EXCEL_WORKBOOK_HEAD = (
    b'<workbook xmlns="http://schemas.openxmlformats.org/spreadsheetml/2006/main" '
    b'xmlns:r="http://schemas.openxmlformats.org/officeDocument/2006/relationships" '
    b'xmlns:mc="http://schemas.openxmlformats.org/markup-compatibility/2006" mc:Ignorable="x15" '
    b'xmlns:x15="http://schemas.microsoft.com/office/spreadsheetml/2010/11/main">'
)


def test_a_package_with_markup_compatibility_and_extensions_keeps_them(tmp_path):
    """Spreadsheet applications write prefixes, ignorable namespaces and extension lists (ECMA-376 Part 3)."""
    source = trial_book(tmp_path / "trial.xlsx")
    with zipfile.ZipFile(source) as package:
        parts = {n: package.read(n) for n in package.namelist()}
    workbook = parts["xl/workbook.xml"]
    body = workbook[workbook.index(b"<workbookPr"):].replace(b"</workbook>", b"")
    body = body.replace(b'<sheet name=', b'<sheet xmlns:r="http://schemas.openxmlformats.org/officeDocument/2006/'
                        b'relationships" name=')
    extension = (b'<extLst><ext uri="{140A7094-0E35-4892-8432-C4D2E57EDEB5}">'
                 b'<x15:workbookPr chartTrackingRefBase="1"/></ext></extLst>')
    parts["xl/workbook.xml"] = b"<?xml version='1.0' encoding='UTF-8'?>" + EXCEL_WORKBOOK_HEAD + body + extension \
        + b"</workbook>"
    crafted = tmp_path / "crafted.xlsx"
    with zipfile.ZipFile(crafted, "w", zipfile.ZIP_DEFLATED) as package:
        for name, data in parts.items():
            package.writestr(name, data)
    assert appending.inspect(crafted, TOOL_PROPERTY) is not None
    out = write_analyses(crafted, analyse_book(crafted, "Runs!A1:C13", **LONG), out=tmp_path / "out.xlsx")
    with zipfile.ZipFile(out) as package:
        root = etree.fromstring(package.read("xl/workbook.xml"))
    assert root.get("{http://schemas.openxmlformats.org/markup-compatibility/2006}Ignorable") == "x15"
    assert root.nsmap.get("x15") and root[-1].tag.endswith("extLst")
    assert "wbt-anova" in openpyxl.load_workbook(out).sheetnames


def test_a_part_two_sheets_share_stays_when_one_sheet_goes():
    from workbook_tools.sheets.package_parts import parts_to_drop, source_of

    graph = {"": {"xl/workbook.xml"}, "xl/workbook.xml": {"s1", "s2", "styles"},
             "s1": {"d1"}, "d1": {"c1", "picture"}, "c1": {"c1-colours"}, "s2": {"d2"}, "d2": {"picture"}}
    assert parts_to_drop(graph, {"s1"}) == {"s1", "d1", "c1", "c1-colours"}
    assert parts_to_drop(graph, {"s1", "s2"}) == {"s1", "s2", "d1", "d2", "c1", "c1-colours", "picture"}
    assert source_of("xl/worksheets/_rels/sheet3.xml.rels") == "xl/worksheets/sheet3.xml"
    assert source_of("_rels/.rels") == ""
