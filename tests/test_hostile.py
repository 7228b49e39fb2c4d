"""Hostile workbooks: each refused before parsing, quickly, with its own message and bounded memory.

The files are built here: zip bombs from a small high-ratio payload (streamed, never held in
memory), XML entity expansion, absurd dimension claims, huge shared string tables, deep
nesting and member names that climb out of the package.
"""

from __future__ import annotations

import re
import struct
import time
import tracemalloc
import zipfile
from pathlib import Path

import openpyxl
import pytest

from tests.make_bad_inputs import grid_rows
from workbook_tools.analysis.errors import TrialInputError
from workbook_tools.cli import EXIT_INPUT, EXIT_OK, main
from workbook_tools.sheets import limits
from workbook_tools.sheets.limits import Limits, applied, check_package
from workbook_tools.sheets.reader import read_trials

SHEET_PART = "xl/worksheets/sheet1.xml"
SHEET_HEAD = ('<?xml version="1.0" encoding="UTF-8" standalone="yes"?>\n'
              '<worksheet xmlns="http://schemas.openxmlformats.org/spreadsheetml/2006/main">')
LAUGHS = ('<?xml version="1.0"?>\n<!DOCTYPE lolz [<!ENTITY lol "lol">'
          + "".join(f'<!ENTITY lol{k} "{("&lol" + (str(k - 1) if k > 1 else "") + ";") * 10}">' for k in range(1, 10))
          + ']>\n')


def plain(folder: Path, name="trial.xlsx") -> Path:
    """The standard trial written by xlsxwriter (which, unlike openpyxl, writes a shared string table)."""
    import xlsxwriter

    path = folder / name
    workbook = xlsxwriter.Workbook(str(path))
    sheet = workbook.add_worksheet("Trial")
    for r, row in enumerate(grid_rows()):
        sheet.write_row(r, 0, row)
    workbook.close()
    return path


def rebuilt(path: Path, replace: dict[str, object], extra: dict[str, bytes] | None = None) -> Path:
    """Copy the package, replacing members; a value may be an iterable of byte chunks (streamed)."""
    with zipfile.ZipFile(path) as source:
        items = [(info.filename, source.read(info)) for info in source.infolist()]
    out = path.with_name("hostile-" + path.name)
    with zipfile.ZipFile(out, "w", zipfile.ZIP_DEFLATED, compresslevel=1) as target:
        for name, data in items + list((extra or {}).items()):
            new = replace.get(name, data)
            if isinstance(new, (bytes, str)):
                target.writestr(name, new)
            else:
                with target.open(name, "w", force_zip64=True) as stream:
                    for chunk in new:
                        stream.write(chunk)
    return out


def spaces_sheet(megabytes: int):
    yield (SHEET_HEAD + "<sheetData>").encode()
    block = b" " * (1024 * 1024)
    for _ in range(megabytes):
        yield block
    yield b"</sheetData></worksheet>"


def refusal(path: Path, *options) -> str:
    """Run the command line; it must refuse the file with one message, which is returned."""
    import io
    from contextlib import redirect_stderr

    err = io.StringIO()
    with redirect_stderr(err):
        code = main(["analyze", str(path), "--range", "Trial!A1:D5", "--layout", "wide", "--no-workbook", *options])
    assert code == EXIT_INPUT, err.getvalue()
    lines = err.getvalue().strip().splitlines()
    assert len(lines) == 1, lines
    return lines[0]


def test_zip_bomb_by_compression_ratio_is_refused_from_the_directory(tmp_path):
    bomb = rebuilt(plain(tmp_path), {SHEET_PART: spaces_sheet(200)})
    assert bomb.stat().st_size < 2 * 1024 * 1024
    message = refusal(bomb)
    assert "compressed" in message and "zip bomb" in message and "--max-ratio" in message


def test_declared_total_size_is_capped(tmp_path):
    big = rebuilt(plain(tmp_path), {SHEET_PART: spaces_sheet(3)})
    message = refusal(big, "--max-unzipped-mb", "2", "--max-ratio", "100000")
    assert "unpacks to 3 MB" in message and "--max-unzipped-mb 2" in message


def lie_about_size(path: Path, member: str, size: int) -> Path:
    """Rewrite the declared decompressed size of ``member`` in both zip headers."""
    data = bytearray(path.read_bytes())
    with zipfile.ZipFile(path) as package:
        info = package.getinfo(member)
    struct.pack_into("<I", data, info.header_offset + 22, size)  # local header
    central = data.find(b"PK\x01\x02")
    while central >= 0:
        name_length = struct.unpack_from("<H", data, central + 28)[0]
        if data[central + 46:central + 46 + name_length] == member.encode():
            struct.pack_into("<I", data, central + 24, size)
            break
        central = data.find(b"PK\x01\x02", central + 4)
    path.write_bytes(bytes(data))
    return path


def test_member_holding_more_than_it_declares_is_refused(tmp_path):
    liar = lie_about_size(rebuilt(plain(tmp_path), {SHEET_PART: spaces_sheet(2)}), SHEET_PART, 1000)
    message = refusal(liar, "--max-ratio", "100000")
    assert "damaged" in message and SHEET_PART in message


def test_too_many_members(tmp_path):
    crowd = rebuilt(plain(tmp_path), {}, {f"xl/media/dust{k}.bin": b"" for k in range(10_001)})
    message = refusal(crowd)
    assert "10,0" in message and "zip members" in message and "--max-members" in message


@pytest.mark.parametrize("part", ["xl/sharedStrings.xml", SHEET_PART])
def test_entity_expansion_is_refused(tmp_path, part):
    laughs = (LAUGHS + '<sst xmlns="http://schemas.openxmlformats.org/spreadsheetml/2006/main">'
              '<si><t>&lol9;</t></si></sst>') if "shared" in part else (LAUGHS + SHEET_HEAD +
                                                                       "<sheetData/><x>&lol9;</x></worksheet>")
    path = plain(tmp_path)
    assert part in zipfile.ZipFile(path).namelist()
    bomb = rebuilt(path, {part: laughs})
    message = refusal(bomb)
    assert "DOCTYPE or entities" in message and part in message


def test_openpyxl_parses_with_defusedxml(tmp_path):
    # openpyxl/xml/__init__.py: DEFUSEDXML is on when defusedxml is importable (a dependency here),
    # so openpyxl itself refuses entity declarations even without the checks in limits.py.
    from defusedxml import DTDForbidden, EntitiesForbidden
    from openpyxl.xml import DEFUSEDXML

    assert DEFUSEDXML
    bomb = rebuilt(plain(tmp_path), {SHEET_PART: LAUGHS + SHEET_HEAD + "<sheetData/><x>&lol9;</x></worksheet>"})
    with pytest.raises(Exception) as caught:
        openpyxl.load_workbook(bomb)
    chain, error = [], caught.value
    while error is not None:
        chain.append(error)
        error = error.__cause__ or error.__context__
    assert any(isinstance(e, (EntitiesForbidden, DTDForbidden)) for e in chain)


def absurd_dimension(folder: Path) -> Path:
    path = plain(folder)
    with zipfile.ZipFile(path) as package:
        xml = package.read(SHEET_PART).decode()
    xml = re.sub(r'<dimension ref="A1:D5"\s*/>', '<dimension ref="A1:XFD1048576"/>', xml)
    assert "A1:XFD1048576" in xml
    return rebuilt(path, {SHEET_PART: xml})


def test_absurd_dimension_claim_does_not_allocate_the_claimed_grid(tmp_path):
    path = absurd_dimension(tmp_path)
    assert main(["analyze", str(path), "--range", "Trial!A1:XFD1048576", "--layout", "wide",
                 "--no-workbook"]) == EXIT_OK  # the full reader sizes the grid by the cells present
    with pytest.raises(TrialInputError) as caught:  # streaming mode believes the claim: capped
        read_trials(path, "Trial!A1:XFD1048576", layout="wide", read_only=True)
    assert "covers 17,179,869,184 cells" in str(caught.value) and "--max-cells" in str(caught.value)
    assert caught.value.sheet == "Trial"


def test_workbook_storing_more_cells_than_allowed(tmp_path):
    message = refusal(plain(tmp_path), "--max-cells", "10")
    assert "stores 20 cells" in message and "--max-cells 10" in message


def test_huge_shared_string_table(tmp_path):
    entries = "".join("<si><t>x</t></si>" for _ in range(2_001))
    table = ('<sst xmlns="http://schemas.openxmlformats.org/spreadsheetml/2006/main">' + entries + "</sst>")
    path = rebuilt(plain(tmp_path), {"xl/sharedStrings.xml": table})
    message = refusal(path, "--max-shared-strings", "2000")
    assert "shared string table" in message and "--max-shared-strings 2,000" in message


def test_deep_nesting(tmp_path):
    deep = SHEET_HEAD + "<sheetData/>" + "<x>" * 100_000 + "</x>" * 100_000 + "</worksheet>"
    message = refusal(rebuilt(plain(tmp_path), {SHEET_PART: deep}))
    assert "nests XML elements more than 100 deep" in message and "--max-xml-depth" in message


@pytest.mark.parametrize("name", ["../outside.xml", "/etc/absolute.xml", "xl\\worksheets\\sheet9.xml",
                                  "C:/windows.xml", "xl/../../climb.xml"])
def test_member_names_leaving_the_package(tmp_path, name):
    path = rebuilt(plain(tmp_path), {}, {name: b"<x/>"})
    message = refusal(path)
    assert "not a safe workbook package" in message and repr(name) in message


def test_duplicate_member_names(tmp_path):
    path = plain(tmp_path)
    with pytest.warns(UserWarning, match="Duplicate name"):
        with zipfile.ZipFile(path, "a") as package:
            package.writestr(SHEET_PART, SHEET_HEAD + "<sheetData/></worksheet>")
    message = refusal(path)
    assert "appears twice" in message


def test_file_size_cap(tmp_path):
    message = refusal(plain(tmp_path), "--max-file-mb", "0.001")
    assert "larger than allowed" in message and "--max-file-mb 0.000999" in message


def test_time_limit_stops_the_scan(tmp_path):
    path = plain(tmp_path, "slow.xlsx")
    with pytest.raises(TrialInputError, match="took longer than"):
        with applied(Limits(seconds=1e-9)):
            check_package(path)


def test_time_limit_interrupts_openpyxl(tmp_path, monkeypatch):
    def stuck(*args, **kwargs):
        time.sleep(30)

    monkeypatch.setattr(openpyxl, "load_workbook", stuck)
    monkeypatch.setattr("workbook_tools.sheets.reader._read_grid_fast", lambda *args: None)  # the openpyxl route
    message = refusal(plain(tmp_path), "--max-seconds", "0.3")
    assert "took longer than 0.3 seconds" in message and "--max-seconds 0.3" in message


def test_limits_are_positive():
    import io
    from contextlib import redirect_stderr

    with redirect_stderr(io.StringIO()) as err:
        code = main(["analyze", "x.xlsx", "--range", "A1:B2", "--max-cells", "0"])
    assert code == EXIT_INPUT and "--max-cells must be positive" in err.getvalue()


def test_memory_stays_bounded_while_streaming_a_large_member(tmp_path):
    path = rebuilt(plain(tmp_path), {SHEET_PART: spaces_sheet(64)})
    tracemalloc.start()
    try:
        with applied(Limits(max_ratio=1e9)):
            check_package(path)  # 64 MB decompressed and scanned in 1 MB chunks
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    assert peak < 32 * 1024 * 1024


def test_a_passed_package_is_not_scanned_twice(tmp_path, monkeypatch):
    path = plain(tmp_path, "twice.xlsx")
    calls = []
    real = limits._check_file
    monkeypatch.setattr(limits, "_check_file", lambda *a: calls.append(1) or real(*a))
    check_package(path)
    check_package(path)
    assert calls == [1]
