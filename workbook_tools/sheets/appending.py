"""Add result sheets to a copy of a workbook package, leaving every part already there as it was.

Loading a workbook into openpyxl and saving it again rewrites every part, and drops
what openpyxl does not model (see :mod:`workbook_tools.sheets.safety`): formula
results, form controls, text boxes. This route instead copies the user's package
part by part and only adds to it: the result sheets, their drawings and charts
(serialised by openpyxl from a scratch workbook that holds only them), their cell
styles appended to the package's style sheet, and the entries that make them part
of the workbook (the sheet list, relationships, content types, the custom property
that records the tool's sheets). Two small edits touch the user's parts: the
workbook opens on the first result sheet, and the user's sheet tabs are no longer
marked selected (two selected tabs would open as a sheet group). Result sheets of
an earlier run are dropped from the copy with the parts only they lead to (see
:mod:`workbook_tools.sheets.package_parts`), together with the calculation chain,
which a spreadsheet application rebuilds.

`inspect` says whether a package suits this route; when it does not (a strict-schema
workbook, a document type definition, a style sheet without its basic lists), the
caller uses the openpyxl route.

References
----------
ECMA-376 Office Open XML File Formats, 5th ed., Part 1 (SpreadsheetML: CT_Workbook,
CT_Stylesheet, CT_Worksheet) and Part 2 (Open Packaging Conventions: content types,
relationships).
"""

from __future__ import annotations

import json
import posixpath
import re
import zipfile
from dataclasses import dataclass, field
from pathlib import Path

from lxml import etree
from openpyxl.drawing.spreadsheet_drawing import SpreadsheetDrawing
from openpyxl.styles.cell_style import CellStyle
from openpyxl.styles.numbers import BUILTIN_FORMATS_MAX_SIZE, NumberFormat
from openpyxl.xml.functions import tostring

from workbook_tools.sheets.package_parts import parts_to_drop, relationship_graph, rels_part_of, resolve_target

MAIN = "http://schemas.openxmlformats.org/spreadsheetml/2006/main"
DOC_REL = "http://schemas.openxmlformats.org/officeDocument/2006/relationships"
PKG_REL = "http://schemas.openxmlformats.org/package/2006/relationships"
CONTENT_TYPES_NS = "http://schemas.openxmlformats.org/package/2006/content-types"
CUSTOM_NS = "http://schemas.openxmlformats.org/officeDocument/2006/custom-properties"
VT_NS = "http://schemas.openxmlformats.org/officeDocument/2006/docPropsVTypes"
CUSTOM_FMTID = "{D5CDD505-2E9C-101B-9397-08002B2CF9AE}"

WORKSHEET_TYPE = "application/vnd.openxmlformats-officedocument.spreadsheetml.worksheet+xml"
DRAWING_TYPE = "application/vnd.openxmlformats-officedocument.drawing+xml"
CHART_TYPE = "application/vnd.openxmlformats-officedocument.drawingml.chart+xml"
CUSTOM_TYPE = "application/vnd.openxmlformats-officedocument.custom-properties+xml"

CONTENT_TYPES = "[Content_Types].xml"
ROOT_RELS = "_rels/.rels"
STYLE_LISTS = ("numFmts", "fonts", "fills", "borders", "cellStyleXfs", "cellXfs")
_PARSER = etree.XMLParser(resolve_entities=False, no_network=True, load_dtd=False, huge_tree=False,
                          remove_blank_text=False)
_TAB_SELECTED = re.compile(rb"""\stabSelected=(["'])(?:1|true)\1""")


@dataclass
class Package:
    """What the route needs to know of the user's package, read once by `inspect`."""

    path: Path
    workbook_part: str
    sheet_names: list[str]
    sheet_parts: list[str]               # worksheet and chartsheet parts of the workbook
    styles_part: str
    custom_part: str | None
    names: set[str] = field(default_factory=set)   # every part name in the package
    replaced: dict[str, str] = field(default_factory=dict)   # earlier result sheet -> its part

    @property
    def user_sheets(self) -> list[str]:
        """The sheets that stay: every sheet but the earlier result sheets."""
        return [n for n in self.sheet_names if n not in self.replaced]


def _dump(root) -> bytes:
    """An edited part, as XML with its declaration."""
    return etree.tostring(root, xml_declaration=True, encoding="UTF-8", standalone=True)


def _parse(package: zipfile.ZipFile, name: str):
    root = etree.fromstring(package.read(name), _PARSER)
    if root.getroottree().docinfo.doctype:
        raise ValueError("document type definition")
    return root


def inspect(path, tool_property: str) -> Package | None:
    """Read the package's sheet list and parts; None when the route does not suit it.

    Parameters
    ----------
    path : path-like
        The user's workbook.
    tool_property : str
        Name of the custom property recording the tool's sheets; those still present
        are the earlier result sheets, which the new ones replace.
    """
    path = Path(path)
    try:
        with zipfile.ZipFile(path) as package:
            names = set(package.namelist())
            if CONTENT_TYPES not in names or ROOT_RELS not in names:
                return None
            root_rels = _parse(package, ROOT_RELS)
            office = [r.get("Target", "") for r in root_rels if r.get("Type") == DOC_REL + "/officeDocument"]
            custom = [r.get("Target", "") for r in root_rels if r.get("Type") == DOC_REL + "/custom-properties"]
            if len(office) != 1:
                return None
            workbook_part = resolve_target("", office[0])
            workbook = _parse(package, workbook_part)
            if workbook.tag != f"{{{MAIN}}}workbook" or workbook.find(f"{{{MAIN}}}sheets") is None:
                return None
            folder = posixpath.dirname(workbook_part)
            rels = {r.get("Id"): r for r in _parse(package, rels_part_of(workbook_part))}
            styles = [resolve_target(folder, r.get("Target", "")) for r in rels.values()
                      if r.get("Type") == DOC_REL + "/styles"]
            if len(styles) != 1 or styles[0] not in names:
                return None
            style_root = _parse(package, styles[0])
            if any(style_root.find(f"{{{MAIN}}}{tag}") is None
                   for tag in ("fonts", "fills", "borders", "cellStyleXfs", "cellXfs")) \
                    or not len(style_root.find(f"{{{MAIN}}}cellStyleXfs")):
                return None     # the appended cell styles refer to the first cell-style format
            sheet_names, sheet_parts, part_of = [], [], {}
            for sheet in workbook.find(f"{{{MAIN}}}sheets"):
                rel = rels.get(sheet.get(f"{{{DOC_REL}}}id"))
                sheet_names.append(sheet.get("name", ""))
                if rel is not None and rel.get("TargetMode") != "External":
                    sheet_parts.append(resolve_target(folder, rel.get("Target", "")))
                    part_of[sheet.get("name", "")] = sheet_parts[-1]
            custom_part = resolve_target("", custom[0]) if len(custom) == 1 else None
            custom_part = custom_part if custom_part in names else None
            recorded = set() if custom_part is None else {
                n.casefold() for n in _recorded(_parse(package, custom_part), tool_property)}
            replaced = {n: part_of.get(n) for n in sheet_names if n.casefold() in recorded}
            if None in replaced.values() or len(replaced) == len(sheet_names):
                return None     # a result sheet without a part of its own, or nothing of the user's left
    except (OSError, KeyError, ValueError, zipfile.BadZipFile, etree.XMLSyntaxError):
        return None
    return Package(path, workbook_part, sheet_names, sheet_parts, styles[0], custom_part, names, replaced)


def _recorded(custom_root, tool_property: str) -> list[str]:
    for prop in custom_root:
        if prop.get("name") == tool_property and len(prop):
            try:
                names = json.loads(prop[0].text or "")
            except ValueError:
                return []
            return [n for n in names if isinstance(n, str)] if isinstance(names, list) else []
    return []


def _free(names: set[str], pattern: str) -> int:
    """The next number ``n`` such that ``pattern.format(n)`` names no part (part names ignore case)."""
    prefix, suffix = pattern.split("{}")
    shape = re.compile(re.escape(prefix) + r"([0-9]+)" + re.escape(suffix), re.IGNORECASE)
    taken = [int(m.group(1)) for m in map(shape.fullmatch, names) if m]
    return max(taken, default=0) + 1


def _namespaced(elements) -> list:
    """openpyxl's style elements carry no namespace; the same elements in SpreadsheetML's, unprefixed."""
    text = "".join(tostring(element, encoding="unicode") for element in elements)
    return list(etree.fromstring(f'<styleSheet xmlns="{MAIN}">{text}</styleSheet>', _PARSER))


def style_lists(workbook) -> dict[str, list]:
    """The number formats, fonts, fills, borders and cell styles (``xf``) of an openpyxl workbook.

    The same elements openpyxl's ``write_stylesheet`` writes, in SpreadsheetML's namespace,
    without the named styles, colours and table styles it also writes.
    """
    xfs = []
    for style in workbook._cell_styles:
        xf = CellStyle.from_array(style)
        if style.alignmentId:
            xf.alignment = workbook._alignments[style.alignmentId]
        if style.protectionId:
            xf.protection = workbook._protections[style.protectionId]
        xfs.append(xf)
    lists = {
        "numFmts": [NumberFormat(i, code) for i, code in enumerate(workbook._number_formats, BUILTIN_FORMATS_MAX_SIZE)],
        "fonts": list(workbook._fonts), "fills": list(workbook._fills), "borders": list(workbook._borders),
        "cellXfs": xfs,
    }
    tags = {"numFmts": "numFmt"}   # a number format names its element only inside its list
    return {tag: _namespaced(item.to_tree(tags.get(tag)) for item in items) for tag, items in lists.items()}


def _merge_styles(styles_xml: bytes, scratch) -> tuple[bytes, int]:
    """Append the scratch workbook's formats, fonts, fills, borders and cell styles.

    Returns the new style sheet and the offset to add to a scratch cell-style index.
    """
    root = etree.fromstring(styles_xml, _PARSER)
    theirs = {tag: root.find(f"{{{MAIN}}}{tag}") for tag in STYLE_LISTS}
    mine = style_lists(scratch)
    if theirs["numFmts"] is None:
        theirs["numFmts"] = etree.Element(f"{{{MAIN}}}numFmts")
        root.insert(0, theirs["numFmts"])
    offsets = {tag: len(theirs[tag]) for tag in ("fonts", "fills", "borders")}
    custom_ids = [int(n.get("numFmtId")) for n in theirs["numFmts"] if (n.get("numFmtId") or "").isdigit()]
    next_id = max(custom_ids + [163]) + 1
    number_ids = {}
    for fmt in mine["numFmts"]:
        number_ids[fmt.get("numFmtId")] = str(next_id)
        fmt.set("numFmtId", str(next_id))
        theirs["numFmts"].append(fmt)
        next_id += 1
    for tag in ("fonts", "fills", "borders"):
        for item in mine[tag]:
            theirs[tag].append(item)
    xf_offset = len(theirs["cellXfs"])
    for xf in mine["cellXfs"]:
        for attribute, tag in (("fontId", "fonts"), ("fillId", "fills"), ("borderId", "borders")):
            xf.set(attribute, str(int(xf.get(attribute, "0")) + offsets[tag]))
        xf.set("numFmtId", number_ids.get(xf.get("numFmtId", "0"), xf.get("numFmtId", "0")))
        xf.set("xfId", "0")
        theirs["cellXfs"].append(xf)
    for tag in STYLE_LISTS:
        if theirs[tag] is not None:
            theirs[tag].set("count", str(len(theirs[tag])))
    if not len(theirs["numFmts"]):
        root.remove(theirs["numFmts"])
    return _dump(root), xf_offset


def _custom_properties(existing: bytes | None, tool_property: str, names: list[str]) -> bytes:
    root = (etree.fromstring(existing, _PARSER) if existing is not None
            else etree.Element(f"{{{CUSTOM_NS}}}Properties", nsmap={None: CUSTOM_NS, "vt": VT_NS}))
    for prop in list(root):
        if prop.get("name") == tool_property:
            root.remove(prop)
    pids = [int(p.get("pid", "1")) for p in root if (p.get("pid") or "").isdigit()]
    prop = etree.SubElement(root, f"{{{CUSTOM_NS}}}property", fmtid=CUSTOM_FMTID,
                            pid=str(max(pids + [1]) + 1), name=tool_property)
    etree.SubElement(prop, f"{{{VT_NS}}}lpwstr").text = json.dumps(list(names), ensure_ascii=False)
    return _dump(root)


def _new_id(existing: set[str]) -> str:
    n = len(existing) + 1
    while f"rId{n}" in existing:
        n += 1
    existing.add(f"rId{n}")
    return f"rId{n}"


def _dropped_parts(source: zipfile.ZipFile, package: Package) -> set[str]:
    """The earlier result sheets' parts, what only they lead to, their relationships parts, and the
    calculation chain (which may list their cells; a spreadsheet application rebuilds it)."""
    if not package.replaced:
        return set()
    graph = relationship_graph(source, _PARSER)
    parts = parts_to_drop(graph, set(package.replaced.values()))
    parts |= {p for p in graph.get(package.workbook_part, ()) if p.endswith("calcChain.xml")}
    return {name for p in parts for name in (p, rels_part_of(p)) if name in package.names}


def _drawing_parts(ws, requests: list, drawing_number: int, chart_number: int, added: dict,
                   overrides: list):
    """Serialise a scratch sheet's charts and their drawing into ``added``; the drawing, or None.

    Requested charts come from templates; one that cannot be templated, and any chart
    already on the sheet, is serialised by openpyxl.
    """
    from workbook_tools.sheets.chart_templates import chart_part

    prepared: dict[int, bytes] = {}       # chart parts made from templates, by stand-in
    for add, kwargs in requests:
        made = chart_part(add, ws.title, **kwargs)
        if made is None:
            add(ws, **kwargs)
            continue
        xml, stand_in = made
        ws._charts.append(stand_in)
        prepared[id(stand_in)] = xml
    if not ws._charts:
        return None
    drawing = SpreadsheetDrawing()
    drawing.charts = ws._charts
    drawing._id = drawing_number
    for offset, chart in enumerate(ws._charts):
        chart._id = chart_number + offset
        added[chart.path[1:]] = prepared.get(id(chart)) or tostring(chart._write())
        overrides.append((chart.path, CHART_TYPE))
    added[drawing.path[1:]] = tostring(drawing._write())
    added[rels_part_of(drawing.path[1:])] = tostring(drawing._write_rels())
    overrides.append((drawing.path, DRAWING_TYPE))
    return drawing


def append_sheets(package: Package, scratch, filename, *, tool_property: str, record: list[str],
                  active: str, chart_requests: dict[str, list] | None = None) -> None:
    """Write ``package`` plus every sheet of the ``scratch`` workbook to ``filename``.

    Parameters
    ----------
    package : Package
        From `inspect`.
    scratch : openpyxl.Workbook
        A workbook holding only the new sheets (plain cells, charts), named as they
        should appear; each sheet's cells may use any of its styles.
    filename : path-like
        Where to write (a temporary file of `safety.atomic_write`).
    tool_property, record : str, list of str
        The custom property that records the tool's sheets, and the names to record.
    active : str
        The sheet the workbook opens on (one of the scratch sheets).
    chart_requests : dict, optional
        Sheet name -> ``(chart function, keyword arguments)`` pairs of
        :mod:`workbook_tools.sheets.charts`, made from templates (see
        :mod:`workbook_tools.sheets.chart_templates`) rather than built; charts
        already on a scratch sheet are serialised by openpyxl.
    """
    from workbook_tools.sheets.package_writer import sheet_xml

    with zipfile.ZipFile(package.path) as source:
        dropped = _dropped_parts(source, package)
        names = set(package.names)
        added: dict[str, bytes] = {}
        overrides: list[tuple[str, str]] = []
        sheet_number = _free(names, "xl/worksheets/sheet{}.xml")
        drawing_number = _free(names, "xl/drawings/drawing{}.xml")
        chart_number = _free(names, "xl/charts/chart{}.xml")
        new_sheets = []
        for ws in scratch.worksheets:
            part = f"xl/worksheets/sheet{sheet_number}.xml"
            sheet_number += 1
            drawing = _drawing_parts(ws, (chart_requests or {}).get(ws.title, []), drawing_number, chart_number,
                                     added, overrides)
            if drawing is not None:
                drawing_number += 1
                chart_number += len(drawing.charts)
            new_sheets.append((ws, part, drawing))
        for ws in scratch.worksheets:   # every cell style in the scratch list, before it is merged
            for cell in ws._cells.values():
                if cell.has_style:
                    scratch._cell_styles.add(cell._style)
        styles, xf_offset = _merge_styles(source.read(package.styles_part), scratch)
        for ws, part, drawing in new_sheets:
            xml, rels = sheet_xml(ws, drawing_target=None if drawing is None else drawing.path,
                                  style_offset=xf_offset)
            added[part] = xml
            if rels is not None:
                added[rels_part_of(part)] = rels
            overrides.append(("/" + part, WORKSHEET_TYPE))

        edited = {package.styles_part: styles}
        edited.update(_workbook_edits(source, package, [(ws.title, part) for ws, part, _ in new_sheets], active,
                                      dropped))
        custom_part = package.custom_part or "docProps/custom.xml"
        edited[custom_part] = _custom_properties(
            source.read(package.custom_part) if package.custom_part else None, tool_property, record)
        if package.custom_part is None:
            overrides.append(("/" + custom_part, CUSTOM_TYPE))
            edited[ROOT_RELS] = _add_relationship(source.read(ROOT_RELS), PKG_REL, DOC_REL + "/custom-properties",
                                                  custom_part)
        edited[CONTENT_TYPES] = _content_types(source.read(CONTENT_TYPES), overrides, dropped)
        user_sheet_parts = set(package.sheet_parts) - dropped

        with zipfile.ZipFile(filename, "w", zipfile.ZIP_DEFLATED, allowZip64=True) as out:
            for info in source.infolist():
                if info.filename in dropped:
                    continue
                data = edited.pop(info.filename, None)
                if data is None:
                    data = source.read(info)
                    if info.filename in user_sheet_parts:
                        data = _unselected(data)
                if info.compress_type not in (zipfile.ZIP_STORED, zipfile.ZIP_DEFLATED):
                    info.compress_type = zipfile.ZIP_DEFLATED   # what every spreadsheet application reads
                out.writestr(info, data)
            for name, data in list(edited.items()) + list(added.items()):
                out.writestr(name, data)


def _unselected(sheet: bytes) -> bytes:
    """A user's sheet part without its selected-tab marks (looked for before the cells only)."""
    end = sheet.find(b"sheetData")
    head = sheet if end < 0 else sheet[:end]
    return _TAB_SELECTED.sub(b"", head) + sheet[len(head):] if _TAB_SELECTED.search(head) else sheet


def _add_relationship(rels_xml: bytes, namespace: str, kind: str, target: str) -> bytes:
    root = etree.fromstring(rels_xml, _PARSER)
    rel_id = _new_id({r.get("Id") for r in root})
    etree.SubElement(root, f"{{{namespace}}}Relationship", Id=rel_id, Type=kind, Target=target)
    return _dump(root)


def _content_types(xml: bytes, overrides: list[tuple[str, str]], dropped: set[str]) -> bytes:
    root = etree.fromstring(xml, _PARSER)
    for override in list(root):
        if (override.get("PartName") or "").lstrip("/") in dropped:
            root.remove(override)
    defaults = {d.get("Extension", "").lower() for d in root if etree.QName(d).localname == "Default"}
    for extension, kind in (("rels", "application/vnd.openxmlformats-package.relationships+xml"),
                            ("xml", "application/xml")):
        if extension not in defaults:
            root.insert(0, etree.Element(f"{{{CONTENT_TYPES_NS}}}Default", Extension=extension, ContentType=kind))
    existing = {(o.get("PartName") or "").casefold(): o for o in root if o.get("PartName")}
    for part, kind in overrides:
        if part.casefold() in existing:       # a part of that name was there (unlisted by the workbook)
            existing[part.casefold()].set("ContentType", kind)
        else:
            etree.SubElement(root, f"{{{CONTENT_TYPES_NS}}}Override", PartName=part, ContentType=kind)
    return _dump(root)


def _drop_sheets(workbook, rels, folder: str, package: Package, dropped: set[str]) -> None:
    """Take the earlier result sheets (and any dropped part) out of the workbook and its relationships.

    Sheet-scoped defined names follow their sheets: those of a dropped sheet go, the
    others' sheet positions (``localSheetId``) shift to the sheets' new positions.
    """
    for rel in list(rels):
        if rel.get("TargetMode") != "External" and resolve_target(folder, rel.get("Target", "")) in dropped:
            rels.remove(rel)
    sheet_list = workbook.find(f"{{{MAIN}}}sheets")
    gone = []
    for position, sheet in enumerate(list(sheet_list)):
        if sheet.get("name") in package.replaced:
            gone.append(position)
            sheet_list.remove(sheet)
    names = workbook.find(f"{{{MAIN}}}definedNames")
    for name in [] if names is None else list(names):
        local = name.get("localSheetId")
        if local is None or not local.isdigit():
            continue
        if int(local) in gone:
            names.remove(name)
        else:
            name.set("localSheetId", str(int(local) - sum(1 for g in gone if g < int(local))))


def _workbook_edits(source, package: Package, sheets: list[tuple[str, str]], active: str,
                    dropped: set[str]) -> dict[str, bytes]:
    """The workbook part and its relationships: earlier result sheets out, the new sheets in, ``active`` opened on."""
    workbook = _parse(source, package.workbook_part)
    rels_part = rels_part_of(package.workbook_part)
    rels = _parse(source, rels_part)
    folder = posixpath.dirname(package.workbook_part)
    if package.replaced:
        _drop_sheets(workbook, rels, folder, package, dropped)
    ids = {r.get("Id") for r in rels}
    sheet_list = workbook.find(f"{{{MAIN}}}sheets")
    sheet_id = max([int(s.get("sheetId", "0")) for s in sheet_list if (s.get("sheetId") or "").isdigit()] + [0])
    for name, part in sheets:
        rel_id = _new_id(ids)
        etree.SubElement(rels, f"{{{PKG_REL}}}Relationship", Id=rel_id, Type=DOC_REL + "/worksheet",
                         Target=posixpath.relpath(part, folder) if folder else part)
        sheet_id += 1
        element = etree.SubElement(sheet_list, f"{{{MAIN}}}sheet", name=name, sheetId=str(sheet_id))
        element.set(f"{{{DOC_REL}}}id", rel_id)
    position = [s.get("name") for s in sheet_list].index(active)
    views = workbook.find(f"{{{MAIN}}}bookViews")
    if views is None:
        views = etree.Element(f"{{{MAIN}}}bookViews")
        sheet_list.addprevious(views)
    view = views.find(f"{{{MAIN}}}workbookView")
    if view is None:
        view = etree.SubElement(views, f"{{{MAIN}}}workbookView")
    view.set("activeTab", str(position))
    if int(view.get("firstSheet", "0") or 0) > position:
        view.set("firstSheet", str(position))
    return {package.workbook_part: _dump(workbook), rels_part: _dump(rels)}
