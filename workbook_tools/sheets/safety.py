"""Write result sheets without harming the user's workbook.

By default results go to a new file beside the input. Saving is atomic: a
temporary file in the same folder, flushed to disk, then ``os.replace``. The
headless main job usually copies the user's parts as they are and adds its
sheets (:mod:`workbook_tools.sheets.appending`); where a workbook goes through
openpyxl instead (the job runner, or a package that route does not suit),
saving in place is allowed only when the package holds nothing openpyxl would
drop. Sheets the tool made are recorded in a custom document
property, so a re-run replaces those and never a sheet the user made.

What openpyxl 3.1.5 keeps and drops was measured by building workbooks with
xlsxwriter 3.3 and openpyxl, loading and saving them with openpyxl, and
comparing the parts and XML elements before and after (see
``tests/test_safety.py``).

*Kept*: cell values and styles, charts (line, bar, in worksheets and in
chartsheets), pictures (with Pillow installed), legacy comments, data
validation, conditional formatting without extensions, defined names, tables,
freeze panes, hyperlinks, merged cells, autofilters, outlines, sheet
protection, page setup, custom document properties, and a ``.xlsm`` VBA
project (byte-identical with ``keep_vba=True``). Rich text inside a cell
survives only when loaded with ``rich_text=True``, which `open_for_writing`
does.

*Dropped or damaged*: text boxes and other drawing shapes (the whole drawing
goes when it holds no chart or picture), form controls such as buttons (VML),
new-style checkboxes (feature property bag), sparklines and data bars stored in
``<extLst>``, dynamic array formulas (``metadata.xml``: they come back as legacy
array formulas), pictures in cells (rich data), sheet background pictures,
header and footer pictures, and the "ignore error" markers. By reading the
openpyxl source rather than by test, the same holds for the parts listed in
``_PART_WORDS`` (custom XML, ActiveX, OLE objects, connections, query tables,
slicers, timelines, threaded comments, printer settings, signatures, macro and
dialog sheets, the data model). Pivot tables are read by openpyxl into its own
model; they are listed as at risk because no sample could be checked here.
Links to other workbooks are kept because the workbook is loaded with
``keep_links=True``.
"""

from __future__ import annotations

import errno
import json
import os
import posixpath
import re
import tempfile
import zipfile
from pathlib import Path

import openpyxl
from defusedxml.ElementTree import fromstring
from openpyxl.packaging.custom import StringProperty

from workbook_tools.analysis.errors import TrialInputError
from workbook_tools.sheets.package_parts import rels_part_of, resolve_target

TOOL_PROPERTY = "workbook-tools sheets"
"""Name of the custom document property listing the sheets the tool made."""

_VBA_PART = "xl/vbaProject.bin"
_EXTENSIONS = (".xlsx", ".xlsm")

# Part-name prefixes (lower case) of things openpyxl does not read, in plain words.
_PART_WORDS = {
    "customxml/": "custom XML data",
    "xl/activex/": "ActiveX controls",
    "xl/ctrlprops/": "form controls",
    "xl/embeddings/": "embedded objects (OLE)",
    "xl/connections.xml": "data connections",
    "xl/querytables/": "query tables",
    "xl/pivottables/": "pivot tables (rewritten by openpyxl; newer settings may be lost)",
    "xl/pivotcache/": "pivot caches (rewritten by openpyxl; newer settings may be lost)",
    "xl/slicers/": "slicers",
    "xl/slicercaches/": "slicers",
    "xl/timelines/": "timelines",
    "xl/timelinecaches/": "timelines",
    "xl/threadedcomments/": "threaded comments (only their plain-note copies are kept)",
    "xl/persons/": "threaded comment authors",
    "xl/printersettings/": "printer settings",
    "_xmlsignatures/": "digital signatures",
    "xl/macrosheets/": "Excel 4 macro sheets",
    "xl/dialogsheets/": "dialog sheets",
    "xl/model/": "the data model (Power Pivot)",
    "xl/webextensions/": "add-in (web extension) data",
    "xl/featurepropertybag/": "checkboxes in cells",
    "xl/richdata/": "pictures in cells",
    "xl/metadata.xml": "cell metadata (dynamic array formulas would become legacy array formulas)",
    "xl/namedsheetviews/": "named sheet views",
    "xl/revisions/": "shared-workbook change history",
}
_CHARTEX = re.compile(r"xl/charts/chartex\d*\.xml")

# Extensions whose loss changes nothing the user sees (Excel writes them to every file).
_HARMLESS_EXT = {"workbookPr", "ArchID", "calcFeatures", "slicerStyles", "timelineStyles"}
_EXT_WORDS = {
    "conditionalFormattings": "newer conditional formatting (data bars, icon sets)",
    "dataValidations": "data validation stored in the extension list",
    "sparklineGroups": "sparklines",
    "slicerList": "slicers",
    "slicerCaches": "slicers",
    "timelineRefs": "timelines",
    "timelineCacheRefs": "timelines",
    "pivotCaches": "pivot caches",
    "dataModel": "the data model (Power Pivot)",
    "webExtensions": "add-in data",
    "dxfs": "styles for newer conditional formatting",
}
_CHART_URI = "http://schemas.openxmlformats.org/drawingml/2006/chart"
_SHAPES = {"sp", "grpSp", "cxnSp", "contentPart"}
_SHEET_ELEMENT_WORDS = {
    "picture": "a background picture",
    "legacyDrawingHF": "header or footer pictures",
    "controls": "form or ActiveX controls",
    "oleObjects": "embedded objects (OLE)",
    "ignoredErrors": "choices to hide Excel's error-check markers",
}


def default_output_path(input_path, suffix="-analysed") -> Path:
    """Path of the new file written beside the input: ``trial.xlsx`` -> ``trial-analysed.xlsx``."""
    path = Path(input_path)
    return path.with_name(f"{path.stem}{suffix}{path.suffix}")


def _open_package(path: Path) -> zipfile.ZipFile:
    try:
        return zipfile.ZipFile(path)
    except (OSError, zipfile.BadZipFile) as exc:
        raise TrialInputError(f"'{path.name}' could not be opened as an Excel workbook ({exc}).") from exc


def _local(tag: str) -> str:
    return tag.rsplit("}", 1)[-1]


def _xml(package: zipfile.ZipFile, name: str):
    try:
        return fromstring(package.read(name))
    except KeyError:
        return None


def _rels_of(package: zipfile.ZipFile, part: str) -> list[tuple[str, str]]:
    """(relationship type suffix, absolute target part) for each internal relationship of ``part``."""
    folder = posixpath.dirname(part)
    root = _xml(package, rels_part_of(part))
    found = []
    for rel in [] if root is None else root:
        if rel.get("TargetMode") == "External" or not rel.get("Target"):
            continue
        found.append((rel.get("Type", "").rsplit("/", 1)[-1], resolve_target(folder, rel.get("Target"))))
    return found


def sheet_parts(package: zipfile.ZipFile) -> dict[str, str]:
    """Worksheet and chartsheet part name -> sheet name, from the workbook and its relationships."""
    workbook = _xml(package, "xl/workbook.xml")
    if workbook is None:
        return {}
    targets = {}
    root = _xml(package, "xl/_rels/workbook.xml.rels")
    for rel in [] if root is None else root:
        target = rel.get("Target", "")
        targets[rel.get("Id")] = target.lstrip("/") if target.startswith("/") else posixpath.join("xl", target)
    parts = {}
    for element in workbook.iter():
        if _local(element.tag) == "sheet":
            rel_id = next((v for k, v in element.attrib.items() if _local(k) == "id"), None)
            if rel_id in targets:
                parts[posixpath.normpath(targets[rel_id])] = element.get("name", "?")
    return parts


def _extension_losses(root, where: str) -> list[str]:
    """Words for each ``<ext>`` under ``<extLst>`` whose content openpyxl drops."""
    lost = []  # only the top-level list: nested ones (in a rule, a style) point into it
    for ext_list in (e for e in root if _local(e.tag) == "extLst"):
        for ext in ext_list:
            kinds = [_local(child.tag) for child in ext]
            kind = kinds[0] if kinds else "?"
            harmless = kind in _HARMLESS_EXT and all(len(child) == 0 for child in ext)
            if not harmless:
                words = _EXT_WORDS.get(kind, f"Excel extension data ({kind})")
                lost.append(f"{words} {where}")
    return lost


def _drawing_losses(package: zipfile.ZipFile, drawing: str, where: str) -> list[str]:
    root = _xml(package, drawing)
    if root is None:
        return []
    lost = []
    if any(_local(e.tag) in _SHAPES for e in root.iter()):
        lost.append(f"text boxes or drawn shapes {where}")
    for data in (e for e in root.iter() if _local(e.tag) == "graphicData"):
        if data.get("uri") != _CHART_URI:
            lost.append(f"SmartArt, a newer chart type or another drawing object {where}")
    return lost


def _vml_losses(package: zipfile.ZipFile, vml: str, where: str) -> list[str]:
    # VML written by Excel is often not well-formed XML, so it is scanned as text, not parsed.
    text = package.read(vml).decode("utf-8", "replace") if vml in package.namelist() else ""
    kinds = sorted(set(re.findall(r'ObjectType\s*=\s*"(\w+)"', text)) - {"Note"})
    return [f"form controls ({', '.join(kinds)}) {where}"] if kinds else []


def _sheet_losses(package: zipfile.ZipFile, part: str, name: str) -> list[str]:
    where = f"on sheet '{name}'"
    root = _xml(package, part)
    if root is None:
        return []
    present = {_local(e.tag) for e in root.iter()}
    lost = [f"{words} {where}" for tag, words in _SHEET_ELEMENT_WORDS.items() if tag in present]
    lost += _extension_losses(root, where)
    for kind, target in _rels_of(package, part):
        if kind == "drawing":
            lost += _drawing_losses(package, target, where)
        elif kind == "vmlDrawing":
            lost += _vml_losses(package, target, where)
    return lost


def what_would_be_lost(path) -> list[str]:
    """List, in plain words, what an openpyxl 3.1 load and save would drop or damage.

    The package is inspected as a zip file (``[Content_Types].xml``, the parts,
    workbook and sheet XML, drawings and VML); openpyxl is not used. See the
    module docstring for what was measured to be kept and dropped.

    Parameters
    ----------
    path : str or os.PathLike
        An ``.xlsx`` or ``.xlsm`` workbook.

    Returns
    -------
    list of str
        One entry per loss, naming the sheet where possible, without
        repeats. Empty means saving in place loses nothing known.
    """
    path = Path(path)
    with _open_package(path) as package:
        names = package.namelist()
        lost = []
        if _VBA_PART in names and path.suffix.lower() != ".xlsm":
            lost.append("macros (VBA project): a file that is not .xlsm cannot keep them")
        for name in names:
            lower = name.lower()
            lost += [words for prefix, words in _PART_WORDS.items() if lower.startswith(prefix)]
            if _CHARTEX.fullmatch(lower):
                lost.append("a newer chart type (waterfall, histogram, map and the like)")
        sheets = sheet_parts(package)
        for part, sheet in sheets.items():
            lost += _sheet_losses(package, part, sheet)
        for part in ("xl/workbook.xml", "xl/styles.xml"):
            root = _xml(package, part)
            if root is not None:
                lost += _extension_losses(root, "in the workbook")
        drawn = {t for p in sheets for k, t in _rels_of(package, p) if k == "drawing"}
        for name in names:  # drawings hanging off charts (shapes drawn on a chart)
            if name.startswith("xl/drawings/drawing") and name.endswith(".xml") and name not in drawn:
                lost += _drawing_losses(package, name, "inside a chart")
    return list(dict.fromkeys(lost))


def _umask() -> int:
    try:
        status = Path("/proc/self/status").read_text()
        return int(re.search(r"^Umask:\s*([0-7]+)", status, re.M).group(1), 8)
    except (OSError, AttributeError, ValueError):
        return 0o022


def _save_failure(exc: BaseException, target: Path) -> TrialInputError:
    folder = target.parent
    code = getattr(exc, "errno", None)
    kept = "The existing file was not changed." if target.exists() else "No file was written."
    words = {
        errno.ENOSPC: f"The disk is full: there is no room to save '{target.name}' in '{folder}'.",
        errno.EDQUOT: f"The disk quota is used up: there is no room to save '{target.name}' in '{folder}'.",
        errno.EACCES: f"No permission to write '{target.name}' in '{folder}' "
                      "(or the file is open in another program).",
        errno.EPERM: f"No permission to write '{target.name}' in '{folder}'.",
        errno.EROFS: f"The folder '{folder}' is on a read-only drive; save the results somewhere else.",
        errno.ENOENT: f"The folder '{folder}' does not exist.",
    }
    message = words.get(code, f"Could not save '{target.name}' in '{folder}': {exc}.")
    return TrialInputError(f"{message} {kept}")


def atomic_save(workbook, target_path, own_sheets=None) -> None:
    """Save an openpyxl ``workbook`` atomically (see :func:`atomic_write`).

    ``own_sheets`` names the sheets this tool made (default: those recorded by
    `record_tool_sheets`); their rows are written by the faster route of
    :mod:`workbook_tools.sheets.package_writer`.
    """
    from workbook_tools.sheets.package_writer import save_workbook

    fast = tool_sheet_names(workbook) if own_sheets is None else list(own_sheets)
    atomic_write(target_path, lambda name: save_workbook(workbook, name, fast))


def atomic_write_text(target_path, text: str) -> None:
    """Write a UTF-8 text file atomically (see :func:`atomic_write`)."""
    atomic_write(target_path, lambda name: Path(name).write_text(text, encoding="utf-8"))


def atomic_write(target_path, write_to) -> None:
    """Write a file so that the target is either the old file or the whole new one.

    ``write_to(temporary_path)`` writes the content to a temporary file in the
    target's folder; the file is flushed
    and synced to disk, given the old file's permissions (or the usual ones for
    a new file), then moved over the target with ``os.replace``.

    Raises
    ------
    TrialInputError
        When saving fails (disk full, no permission, read-only drive, missing
        folder, ...); the temporary file is removed first.
    """
    target = Path(target_path)
    temp_name = None
    try:
        mode = target.stat().st_mode & 0o7777 if target.exists() else 0o666 & ~_umask()
        with tempfile.NamedTemporaryFile(dir=target.parent, prefix=f".{target.stem}-", suffix=target.suffix + ".tmp",
                                         delete=False) as handle:
            temp_name = handle.name
        write_to(temp_name)
        with open(temp_name, "rb+") as written:
            written.flush()
            os.fsync(written.fileno())
        os.chmod(temp_name, mode)
        os.replace(temp_name, target)
        temp_name = None
        _sync_folder(target.parent)
    except BaseException as exc:
        if temp_name is not None:
            try:
                os.unlink(temp_name)
            except OSError:
                pass
        if not isinstance(exc, Exception):
            raise
        if isinstance(exc, TrialInputError):
            raise
        raise _save_failure(exc, target) from exc


def _sync_folder(folder: Path) -> None:
    """Make the rename itself durable where the system allows it (not on Windows)."""
    try:
        descriptor = os.open(folder, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(descriptor)
    except OSError:
        pass
    finally:
        os.close(descriptor)


def _has_vba(path: Path) -> bool:
    with _open_package(path) as package:
        return _VBA_PART in package.namelist()


def _same_file(a: Path, b: Path) -> bool:
    if b.exists():
        return os.path.samefile(a, b)
    return a.resolve() == b.resolve()


def output_target(input_path, output_path=None, *, in_place=False, lossless=False) -> tuple[Path, Path, bool]:
    """Check the input and decide where results will be saved, before anything is read.

    Parameters
    ----------
    input_path : str or os.PathLike
        The user's workbook (``.xlsx`` or ``.xlsm``).
    output_path : str or os.PathLike, optional
        Where to save. Naming the input itself needs ``in_place=True``.
    in_place : bool
        Save over the input; refused when `what_would_be_lost` lists anything,
        unless ``lossless``.
    lossless : bool
        The workbook will be written by copying its parts (see
        :mod:`workbook_tools.sheets.appending`), so nothing can be lost.

    Returns
    -------
    (pathlib.Path, pathlib.Path, bool)
        The input, the path to pass to `atomic_write`, and whether the input holds macros.
    """
    source = Path(input_path)
    if not source.is_file():
        raise TrialInputError(f"The workbook '{source}' was not found.")
    if output_path is not None:
        target = Path(output_path)
    else:
        target = source if in_place else default_output_path(source)
    if _same_file(source, target):
        if not in_place:
            raise TrialInputError(f"The output '{target.name}' is the input workbook itself; choose another "
                                  "file name, or ask for saving in place.")
        lost = [] if lossless else what_would_be_lost(source)
        if lost:
            raise TrialInputError(f"'{source.name}' cannot be saved in place because these would be lost: "
                                  + "; ".join(lost) + ". The results can be written to a new file instead.")
    macros = _has_vba(source)
    suffix = target.suffix.lower()
    if suffix not in _EXTENSIONS:
        raise TrialInputError(f"The output '{target.name}' must end in .xlsx or .xlsm.")
    if macros and suffix != ".xlsm":
        raise TrialInputError(f"'{source.name}' contains macros, which an .xlsx file cannot hold; "
                              f"name the output '{target.stem}.xlsm'.")
    if not macros and suffix == ".xlsm":
        raise TrialInputError(f"'{source.name}' has no macros, so the output should end in .xlsx, "
                              f"not '{target.name}'.")
    return source, target, macros


def load_for_writing(source: Path, macros: bool):
    """Load the user's workbook into openpyxl for adding sheets (macros, external links, rich text kept)."""
    try:
        return openpyxl.load_workbook(source, keep_vba=macros, keep_links=True, rich_text=True)
    except Exception as exc:
        raise TrialInputError(f"'{source.name}' could not be read as an Excel workbook ({exc}).") from exc


def open_for_writing(input_path, output_path=None, *, in_place=False):
    """Load a workbook for adding result sheets and decide where it will be saved.

    See `output_target` for the parameters and checks.

    Returns
    -------
    (openpyxl.Workbook, pathlib.Path)
        The loaded workbook (see `load_for_writing`) and the path to pass to `atomic_save`.
    """
    source, target, macros = output_target(input_path, output_path, in_place=in_place)
    return load_for_writing(source, macros), target


def tool_sheet_names(workbook) -> list[str]:
    """Names of the sheets recorded (by `record_tool_sheets`) as made by workbook-tools."""
    try:
        text = workbook.custom_doc_props[TOOL_PROPERTY].value
        names = json.loads(text)
    except (KeyError, TypeError, ValueError):
        return []
    return [n for n in names if isinstance(n, str)] if isinstance(names, list) else []


def record_tool_sheets(workbook, names: list[str]) -> None:
    """Store ``names`` as JSON text in the custom document property `TOOL_PROPERTY`."""
    props = workbook.custom_doc_props
    if TOOL_PROPERTY in props.names:
        del props[TOOL_PROPERTY]
    props.append(StringProperty(name=TOOL_PROPERTY, value=json.dumps(list(names), ensure_ascii=False)))


def replace_tool_sheets(workbook, names_to_write: list[str]) -> None:
    """Remove the sheets the tool made before, after checking the new names are free.

    Sheet names are compared as Excel does, ignoring case. Nothing is removed
    when a check fails.

    Raises
    ------
    TrialInputError
        Naming the sheet, when a name in ``names_to_write`` belongs to a sheet
        the user made (one not recorded as made by the tool).
    """
    recorded = {n.casefold() for n in tool_sheet_names(workbook)}
    existing = {ws.title.casefold(): ws.title for ws in workbook.worksheets + workbook.chartsheets}
    for name in names_to_write:
        key = name.casefold()
        if key in existing and key not in recorded:
            raise TrialInputError("This sheet was not made by workbook-tools, so it is not replaced; rename it "
                                  "or choose another name for the results.", sheet=existing[key])
    for sheet in list(workbook.worksheets + workbook.chartsheets):
        if sheet.title.casefold() in recorded:
            workbook.remove(sheet)
    if workbook.sheetnames and workbook.active is None:  # the active sheet was removed
        workbook.active = 0
    record_tool_sheets(workbook, [])
