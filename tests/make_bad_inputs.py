"""Generate the catalogue of broken, odd and hostile-looking inputs for ``workbook-tools analyze``.

Every file is built here from code (openpyxl, xlsxwriter, zipfile, a few crafted bytes);
no binary is committed. Each `BadInput` says how to build its file, which command-line
arguments to run it with, and what must come out: the exit code (2 for a problem with the
input, 0 for a valid input with a documented result), words the one message must contain,
and the sheet and cell it must name when there is one. ``mishap`` names a system problem
the test simulates (no permission to read, a read-only folder, a full disk).

Run ``python tests/make_bad_inputs.py FOLDER`` to write every input into ``FOLDER``.
"""

from __future__ import annotations

import datetime as dt
import sys
import zipfile
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

import openpyxl
from openpyxl.workbook.defined_name import DefinedName
from openpyxl.worksheet.table import Table

EXIT_OK, EXIT_INPUT = 0, 2
SHEET = "Trial"
WIDE = ("--range", "Trial!A1:D5", "--layout", "wide")
TREATMENTS = ["Alpha", "Beta", "Gamma"]
BLOCKS = ["Day 1", "Day 2", "Day 3", "Day 4"]
BODY = [[10.1, 11.3, 12.0], [9.8, 11.0, 12.4], [10.6, 11.9, 12.1], [10.0, 10.8, 11.7]]
OFFSET = 1e12


@dataclass(frozen=True)
class BadInput:
    """One catalogue entry; ``args`` may hold ``{folder}``, replaced by the folder of the input."""

    name: str
    build: Callable[[Path], Path]
    args: tuple[str, ...] = WIDE
    exit_code: int = EXIT_INPUT
    says: tuple[str, ...] = ()
    where: str | None = None
    mishap: str | None = None


def grid_rows(body=None, treatments=None, blocks=None) -> list[list]:
    """Rows of a wide trial: a caption cell, treatment labels across, block labels down."""
    body = BODY if body is None else body
    treatments = TREATMENTS if treatments is None else treatments
    blocks = BLOCKS if blocks is None else blocks
    return [["Trial"] + list(treatments)] + [[b] + list(row) for b, row in zip(blocks, body)]


def with_cell(row: int, col: int, value, body=None) -> list[list]:
    """The standard body with one value replaced (1-based position inside the body)."""
    body = [list(r) for r in (BODY if body is None else body)]
    body[row - 1][col - 1] = value
    return body


def save_rows(folder: Path, name: str, rows, edit=None, *, suffix=".xlsx") -> Path:
    """Write ``rows`` to sheet 'Trial' from A1 with openpyxl; ``edit(wb, ws)`` adds features."""
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = SHEET
    for r, row in enumerate(rows, start=1):
        for c, value in enumerate(row, start=1):
            if value is not None:
                ws.cell(r, c, value)
    if edit:
        edit(wb, ws)
    path = folder / f"{name}{suffix}"
    wb.save(path)
    return path


def book(name: str, rows=None, edit=None) -> Callable[[Path], Path]:
    return lambda folder: save_rows(folder, name, grid_rows() if rows is None else rows, edit)


def rewrite_part(path: Path, part: str, change: Callable[[str], str]) -> Path:
    """Rewrite one XML part of a package (used to craft what no writer produces)."""
    with zipfile.ZipFile(path) as source:
        items = [(info, source.read(info)) for info in source.infolist()]
    with zipfile.ZipFile(path, "w", zipfile.ZIP_DEFLATED) as target:
        for info, data in items:
            if info.filename == part:
                data = change(data.decode("utf-8")).encode("utf-8")
            target.writestr(info.filename, data)
    return path


def crafted_value(name: str, text: str) -> Callable[[Path], Path]:
    """A workbook whose cell C3 holds the number text ``text`` in the sheet XML."""
    def build(folder):
        path = save_rows(folder, name, grid_rows(with_cell(2, 2, 777.25)))
        return rewrite_part(path, "xl/worksheets/sheet1.xml", lambda xml: xml.replace(">777.25<", f">{text}<"))
    return build


def raw_file(name: str, data: bytes, suffix=".xlsx") -> Callable[[Path], Path]:
    def build(folder):
        path = folder / f"{name}{suffix}"
        path.write_bytes(data)
        return path
    return build


def zip_file(name: str, members: dict[str, bytes], suffix=".xlsx") -> Callable[[Path], Path]:
    def build(folder):
        path = folder / f"{name}{suffix}"
        with zipfile.ZipFile(path, "w", zipfile.ZIP_DEFLATED) as package:
            for member, data in members.items():
                package.writestr(member, data, zipfile.ZIP_STORED if member == "mimetype" else zipfile.ZIP_DEFLATED)
        return path
    return build


def ole_file(stream_names: list[str]) -> bytes:
    """The start of an OLE compound file: its signature, a header and one directory sector.

    Only what identifies the file is written (signature, sector size, the directory entry
    names in UTF-16); it is not a complete compound file.
    """
    header = bytearray(512)
    header[:8] = b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1"
    header[0x18:0x1A] = (0x3E).to_bytes(2, "little")   # minor version
    header[0x1A:0x1C] = (3).to_bytes(2, "little")      # major version 3: 512-byte sectors
    header[0x1C:0x1E] = (0xFFFE).to_bytes(2, "little")  # little-endian
    header[0x1E:0x20] = (9).to_bytes(2, "little")      # sector size 2**9
    directory = bytearray(512)
    for k, name in enumerate(["Root Entry"] + stream_names):
        encoded = (name + "\0").encode("utf-16-le")
        directory[128 * k:128 * k + len(encoded)] = encoded
        directory[128 * k + 64:128 * k + 66] = len(encoded).to_bytes(2, "little")
        directory[128 * k + 66] = 5 if k == 0 else 2  # root storage, then streams
    return bytes(header + directory)


def encrypted_workbook(folder: Path) -> Path:
    """A really encrypted workbook when msoffcrypto-tool is installed, else a crafted one."""
    path = folder / "encrypted_workbook.xlsx"
    try:
        from msoffcrypto.format.ooxml import OOXMLFile
    except ImportError:  # the crafted container names the same streams
        path.write_bytes(ole_file(["EncryptionInfo", "EncryptedPackage"]))
        return path
    plain = save_rows(folder, "plain_for_encryption", grid_rows())
    with open(plain, "rb") as source, open(path, "wb") as target:
        OOXMLFile(source).encrypt("secret", target)
    plain.unlink()
    return path


def truncated(folder: Path) -> Path:
    path = save_rows(folder, "truncated_zip", grid_rows())
    data = path.read_bytes()
    path.write_bytes(data[: len(data) // 2])
    return path


def corrupt_member(folder: Path) -> Path:
    """Damage the compressed bytes of the sheet (the zip directory stays intact)."""
    path = save_rows(folder, "corrupt_zip_member", grid_rows())
    data = bytearray(path.read_bytes())
    with zipfile.ZipFile(path) as package:
        info = package.getinfo("xl/worksheets/sheet1.xml")
    start = info.header_offset + 30 + len(info.filename.encode()) + len(info.extra)
    for k in range(start + 5, start + min(info.compress_size, 60)):
        data[k] ^= 0x5A
    path.write_bytes(bytes(data))
    return path


def folder_entry(folder: Path) -> Path:
    path = folder / "a_folder.xlsx"
    path.mkdir()
    return path


def merged(wb, ws):
    ws.merge_cells("B3:C3")


def formula(wb, ws):
    ws["C3"] = "=B3*1.1"


def several_areas(wb, ws):
    wb.defined_names["Pieces"] = DefinedName("Pieces", attr_text="Trial!$A$1:$B$2,Trial!$C$3:$D$4")


def table(wb, ws):
    ws.add_table(Table(displayName="OvenRuns", ref="A1:D5"))


def hidden(wb, ws):
    ws.row_dimensions[3].hidden = True
    ws.column_dimensions["C"].hidden = True


def protected(wb, ws):
    ws.protection.sheet = True
    ws.protection.password = "lab"


def clashing_sheet(wb, ws):
    wb.create_sheet("wbt-anova")["A1"] = "my own notes"


def disconnected_body():
    return [[10.1, 11.3, None, None], [9.8, 11.0, None, None], [None, None, 12.4, 13.0], [None, None, 12.1, 12.9]]


def _entries() -> list[BadInput]:
    sheet = "Sheet 'Trial'"
    cell = lambda a1: f"{sheet}, cell {a1}"  # noqa: E731
    csv = b"Block,Alpha,Beta,Gamma\nDay 1,10.1,11.3,12.0\nDay 2,9.8,11.0,12.4\n"
    return [
        # --- what is inside the cells
        BadInput("text_in_data", book("text_in_data", grid_rows(with_cell(2, 2, "about 11"))),
                 says=("text 'about 11'", "not a number"), where=cell("C3")),
        BadInput("number_stored_as_text", book("number_stored_as_text", grid_rows(with_cell(2, 2, "11.0"))),
                 says=("stored as text", "--text-numbers"), where=cell("C3")),
        BadInput("boolean_in_data", book("boolean_in_data", grid_rows(with_cell(2, 2, True))),
                 says=("logical value TRUE",), where=cell("C3")),
        BadInput("date_in_data", book("date_in_data", grid_rows(with_cell(2, 2, dt.date(2024, 5, 3)))),
                 says=("a date", "number format"), where=cell("C3")),
        BadInput("time_in_data", book("time_in_data", grid_rows(with_cell(2, 2, dt.time(9, 30)))),
                 says=("time of day",), where=cell("C3")),
        BadInput("error_value_in_data", book("error_value_in_data", grid_rows(with_cell(2, 2, "#DIV/0!"))),
                 says=("error value #DIV/0!", "--errors-as-missing"), where=cell("C3")),
        BadInput("formula_without_stored_value", book("formula_without_stored_value", edit=formula),
                 says=("never calculated",), where=cell("C3")),
        BadInput("merged_cells_in_range", book("merged_cells_in_range", edit=merged),
                 says=("merged cells B3:C3",), where=cell("B3:C3")),
        BadInput("infinity_in_sheet_xml", crafted_value("infinity_in_sheet_xml", "1E999"),
                 says=("not a finite number",), where=cell("C3")),
        BadInput("nan_in_sheet_xml", crafted_value("nan_in_sheet_xml", "NaN"),
                 says=("not a finite number",), where=cell("C3")),
        BadInput("empty_block_label_with_data", book("empty_block_label_with_data",
                                                     grid_rows(blocks=["Day 1", None, "Day 3", "Day 4"])),
                 says=("block label is empty",), where=cell("A3")),
        BadInput("duplicate_treatment_labels", book("duplicate_treatment_labels",
                                                    grid_rows(treatments=["Alpha", "Beta", "Alpha"])),
                 says=("treatment label 'Alpha' appears twice",), where=cell("D1")),
        BadInput("duplicate_block_labels", book("duplicate_block_labels",
                                                grid_rows(blocks=["Day 1", "Day 2", "Day 1", "Day 4"])),
                 says=("block label 'Day 1' appears twice",), where=cell("A4")),
        BadInput("layout_cannot_be_told", book("layout_cannot_be_told", grid_rows(treatments=[1, 2, 3])),
                 args=("--range", "Trial!A1:D5"), says=("Cannot tell how the data", "--layout"), where=cell("A1:D5")),
        BadInput("labels_but_no_values", book("labels_but_no_values", grid_rows([[None] * 3] * 4)),
                 says=("holds no values",), where=cell("A1:D5")),
        # --- the range
        BadInput("empty_range", book("empty_range"), args=("--range", "Trial!H10:J12"),
                 says=("range H10:J12 is empty",), where=cell("H10:J12")),
        BadInput("range_beyond_the_sheet", book("range_beyond_the_sheet"), args=("--range", "Trial!A1:D1048577"),
                 says=("beyond what a worksheet holds",)),
        BadInput("range_not_valid", book("range_not_valid"), args=("--range", "Trial!B3:"),
                 says=("not a valid cell range",)),
        BadInput("unknown_sheet", book("unknown_sheet"), args=("--range", "Oven!A1:D5"),
                 says=("no sheet named 'Oven'", "'Trial'"), where=sheet.replace("Trial", "Oven")),
        BadInput("unknown_name", book("unknown_name"), args=("--range", "TrialData"),
                 says=("no defined name or table called 'TrialData'",)),
        BadInput("unknown_table", book("unknown_table", edit=table), args=("--range", "OvenRun"),
                 says=("no defined name or table called 'OvenRun'", "'OvenRuns'")),
        BadInput("name_of_several_areas", book("name_of_several_areas", edit=several_areas),
                 args=("--range", "Pieces"), says=("not to one plain block of cells",)),
        BadInput("long_layout_unknown_column", book("long_layout_unknown_column",
                                                    [["Block", "Treatment", "Yield"], ["1", "A", 3.0]]),
                 args=("--range", "Trial!A1:C2", "--layout", "long", "--block", "Strip"),
                 says=("no column headed 'Strip'", "Headers found"), where=cell("A1:C1")),
        BadInput("long_options_for_wide_grid", book("long_options_for_wide_grid"),
                 args=(*WIDE, "--block", "Day"), says=("apply to the long layout only",),
                 where=cell("A1:D5")),
        # --- the design
        BadInput("single_block", book("single_block", grid_rows(BODY[:1], blocks=BLOCKS[:1])),
                 args=("--range", "Trial!A1:D2"), says=("At least two blocks",), where=cell("A1:D2")),
        BadInput("single_treatment", book("single_treatment", grid_rows([r[:1] for r in BODY], TREATMENTS[:1])),
                 args=("--range", "Trial!A1:B5"), says=("At least two treatments",), where=cell("A1:B5")),
        BadInput("treatment_missing_from_every_block", book("treatment_missing_from_every_block",
                                                            grid_rows([r[:2] + [None] for r in BODY])),
                 says=("no observations at all", "'Gamma'"), where=cell("A1:D5")),
        BadInput("blocks_do_not_connect_treatments", book("blocks_do_not_connect_treatments",
                                                          grid_rows(disconnected_body(), TREATMENTS + ["Delta"])),
                 args=("--range", "Trial!A1:E5"), says=("do not connect the treatments",), where=cell("A1:E5")),
        BadInput("no_error_degrees_of_freedom", book("no_error_degrees_of_freedom",
                                                     grid_rows([[1.0, 2.0], [3.0, None]], TREATMENTS[:2], BLOCKS[:2])),
                 args=("--range", "Trial!A1:C3"), says=("No degrees of freedom are left for the error",),
                 where=cell("A1:C3")),
        BadInput("values_near_1e300", book("values_near_1e300", grid_rows([[v * 1e300 for v in r] for r in BODY])),
                 says=("cannot be analysed reliably", "overflow"), where=cell("A1:D5")),
        BadInput("subnormal_values", book("subnormal_values", grid_rows([[v * 1e-310 for v in r] for r in BODY])),
                 says=("smaller than 1e-40",), where=cell("A1:D5")),
        BadInput("control_not_a_treatment", book("control_not_a_treatment"),
                 args=(*WIDE, "--compare", "dunnett", "--control", "Omega"),
                 says=("control 'Omega' is not one of the treatments",)),
        BadInput("alpha_out_of_range", book("alpha_out_of_range"), args=(*WIDE, "--alpha", "1.5"),
                 says=("alpha must lie between 0 and 1",)),
        # --- valid inputs with a documented result (exit 0)
        BadInput("all_values_equal", book("all_values_equal", grid_rows([[7.5] * 3] * 4)), exit_code=EXIT_OK,
                 says=("error mean square is zero",)),
        BadInput("offsets_of_1e12", book("offsets_of_1e12", grid_rows([[OFFSET + v for v in r] for r in BODY])),
                 exit_code=EXIT_OK),
        BadInput("hidden_rows_and_columns", book("hidden_rows_and_columns", edit=hidden), exit_code=EXIT_OK,
                 says=("Hidden row 3 and column C", "analysed like the others")),
        BadInput("protected_sheet", book("protected_sheet", edit=protected), exit_code=EXIT_OK),
        BadInput("user_sheet_named_like_a_result", book("user_sheet_named_like_a_result", edit=clashing_sheet),
                 exit_code=EXIT_OK),
        # --- the file itself
        BadInput("legacy_xls", raw_file("legacy_xls", ole_file(["Workbook", "\x05SummaryInformation"]), ".xls"),
                 args=("--range", "Sheet1!A1:D5"), says=("old-style .xls workbook",)),
        BadInput("encrypted_workbook", encrypted_workbook, says=("password-protected (encrypted)",)),
        BadInput("binary_xlsb", zip_file("binary_xlsb", {"[Content_Types].xml": b"<Types/>",
                                                         "xl/workbook.bin": b"\x83\x01\x00"}, ".xlsb"),
                 says=("binary Excel workbook (.xlsb)",)),
        BadInput("opendocument_ods", zip_file("opendocument_ods", {
            "mimetype": b"application/vnd.oasis.opendocument.spreadsheet", "content.xml": b"<office/>"}, ".ods"),
                 says=("OpenDocument spreadsheet (.ods)",)),
        BadInput("csv_renamed_to_xlsx", raw_file("csv_renamed_to_xlsx", csv), says=("CSV text file",)),
        BadInput("zip_without_a_workbook", zip_file("zip_without_a_workbook", {"notes.txt": b"hello"}),
                 says=("could not be read as an Excel workbook",)),
        BadInput("truncated_zip", truncated, says=("damaged or incomplete",)),
        BadInput("corrupt_zip_member", corrupt_member, says=("damaged", "xl/worksheets/sheet1.xml")),
        BadInput("empty_file", raw_file("empty_file", b""), says=("is empty (0 bytes)",)),
        BadInput("a_folder", folder_entry, says=("is a folder",)),
        BadInput("missing_file", lambda folder: folder / "never_saved.xlsx", says=("does not exist",)),
        BadInput("unreadable_file", book("unreadable_file"), says=("No permission to read",),
                 mishap="no_read_permission"),
        # --- writing the results
        BadInput("missing_output_folder", book("missing_output_folder"),
                 args=(*WIDE, "--out", "{folder}/not/there/out.xlsx"), says=("does not exist", "No file was written")),
        BadInput("read_only_output_folder", book("read_only_output_folder"), says=("read-only drive",),
                 mishap="read_only_folder"),
        BadInput("disk_full_on_write", book("disk_full_on_write"), says=("disk is full", "No file was written"),
                 mishap="disk_full"),
        BadInput("output_is_the_input", book("output_is_the_input"),
                 args=(*WIDE, "--out", "{folder}/output_is_the_input.xlsx"), says=("is the input workbook itself",)),
        BadInput("output_not_a_workbook_name", book("output_not_a_workbook_name"),
                 args=(*WIDE, "--out", "{folder}/results.csv"), says=("must end in .xlsx or .xlsm",)),
    ]


CATALOGUE: list[BadInput] = _entries()


def build_all(folder) -> dict[str, Path]:
    """Write every catalogue input into ``folder`` (one sub-folder each); name -> path."""
    folder = Path(folder)
    built = {}
    for entry in CATALOGUE:
        home = folder / entry.name
        home.mkdir(parents=True, exist_ok=True)
        built[entry.name] = entry.build(home)
    return built


def main(argv=None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    if len(argv) != 1:
        print("usage: python tests/make_bad_inputs.py FOLDER", file=sys.stderr)
        return 2
    for name, path in build_all(argv[0]).items():
        print(f"{name}: {path}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
