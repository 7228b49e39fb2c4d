"""Limits on uploaded workbooks, checked before openpyxl parses anything.

An ``.xlsx`` file is a zip package of XML parts, so a small upload can claim or
hold far more than it looks: a zip bomb (huge decompressed size, extreme
compression ratio, thousands of members), XML entity expansion ("billion
laughs"), absurd nesting, an enormous shared string table, a range claiming the
whole sheet, member names that climb out of a folder. `check_package` looks at
the file's first bytes, its zip directory, then streams every member (counting
the bytes actually decompressed) and runs every XML part through expat with a
depth counter, refusing any DOCTYPE or ENTITY declaration. Each violated limit
raises `TrialInputError` with its own message naming the limit and the
command-line option that raises it.

openpyxl itself parses XML through ``defusedxml`` whenever it is installed
(``openpyxl.xml.DEFUSEDXML``, unless the environment sets
``OPENPYXL_DEFUSEDXML=False``); ``defusedxml`` is a dependency of this package,
so entity declarations are refused there too. The checks here run first and do
not depend on that flag.

The time limit (`Limits.seconds`) covers the whole read inside `applied`: loops
here and in the reader call `check_time`; on the main thread of a system with
``SIGALRM`` an interval timer also interrupts openpyxl's own parsing. In other
threads only the loops are checked, so a server running reads in worker threads
should also bound them from outside (for example a process pool with a timeout).
"""

from __future__ import annotations

import contextlib
import signal
import threading
import time
import zipfile
import zlib
from contextvars import ContextVar
from dataclasses import dataclass, fields
from pathlib import Path
from xml.parsers import expat

from workbook_tools.analysis.errors import TrialInputError

MB = 1024 * 1024
RATIO_FLOOR_BYTES = 1 * MB
"""Members smaller than this when decompressed are not held to the ratio limit."""
_CHUNK = 1 * MB
_OLE_SIGNATURE = b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1"
_ODS_MIMETYPE = b"application/vnd.oasis.opendocument.spreadsheet"
_XML_ENDINGS = (".xml", ".rels")


@dataclass(frozen=True)
class Limits:
    """Safety limits for reading one uploaded workbook.

    Attributes
    ----------
    max_file_bytes : int
        Size of the file itself.
    max_uncompressed_bytes : int
        Sum of the decompressed sizes of all zip members (declared and actual).
    max_ratio : float
        Decompressed / compressed size of any member of at least 1 MB decompressed.
    max_members : int
        Number of members in the zip package.
    max_cells : int
        Cells stored in the workbook's sheets, and cells of the range to read.
    max_shared_strings : int
        Entries of the shared string table.
    max_xml_depth : int
        Nesting depth of elements in any XML part.
    seconds : float
        Wall time for the whole read (see the module notes).
    """

    max_file_bytes: int = 50 * MB
    max_uncompressed_bytes: int = 256 * MB
    max_ratio: float = 200.0
    max_members: int = 10_000
    max_cells: int = 1_000_000
    max_shared_strings: int = 1_000_000
    max_xml_depth: int = 100
    seconds: float = 60.0


# limit field -> (command-line option, unit factor for the option's value, help text)
OPTIONS = {
    "max_file_bytes": ("--max-file-mb", MB, "largest input file in MB"),
    "max_uncompressed_bytes": ("--max-unzipped-mb", MB, "largest total decompressed size in MB"),
    "max_ratio": ("--max-ratio", 1, "largest compression ratio of a zip member"),
    "max_members": ("--max-members", 1, "most members in the zip package"),
    "max_cells": ("--max-cells", 1, "most cells in the workbook and in the range"),
    "max_shared_strings": ("--max-shared-strings", 1, "most entries in the shared string table"),
    "max_xml_depth": ("--max-xml-depth", 1, "deepest XML nesting"),
    "seconds": ("--max-seconds", 1, "longest time for reading the workbook, in seconds"),
}

_ACTIVE: ContextVar[Limits] = ContextVar("workbook_tools_limits", default=Limits())
_DEADLINE: ContextVar[float | None] = ContextVar("workbook_tools_deadline", default=None)
_checked: dict[tuple, bool] = {}
_KEEP_SHEET_BYTES = 64 * MB
_kept_parts: dict[tuple, bytes] = {}
"""Worksheet parts unpacked by the last check, handed once to the reader's byte scan."""


def _file_key(path: Path) -> tuple:
    status = path.stat()
    return str(path.resolve()), status.st_ino, status.st_size, status.st_mtime_ns


def drop_checked_parts() -> None:
    """Forget the kept worksheet bytes (once reading is over)."""
    _kept_parts.clear()


def take_checked_part(path, part: str) -> bytes | None:
    """The unpacked bytes of ``part`` if the last check of ``path`` kept them (each handed out once)."""
    try:
        return _kept_parts.pop((_file_key(Path(path)), part), None)
    except OSError:
        return None


def active() -> Limits:
    """The limits in effect (the defaults unless inside `applied`)."""
    return _ACTIVE.get()


def _raise_hint(field: str, value) -> str:
    option, factor, _ = OPTIONS[field]
    shown = f"{value / factor:.3g}" if factor != 1 else (f"{value:g}" if isinstance(value, float) else f"{value:,}")
    return f"(limit {option} {shown}; raise it only for files you trust)"


def _refuse(field: str, message: str, limits: Limits | None = None, **place) -> TrialInputError:
    value = getattr(limits or active(), field)
    return TrialInputError(f"{message} {_raise_hint(field, value)}.", **place)


# ---------------------------------------------------------------- time

class _TimeUp(BaseException):
    """Raised by the interval timer; a BaseException so that no ``except Exception`` swallows it."""


def check_time() -> None:
    """Raise `TrialInputError` when the time limit of the current read has passed."""
    deadline = _DEADLINE.get()
    if deadline is not None and time.monotonic() > deadline:
        raise _time_up_error()


def _time_up_error() -> TrialInputError:
    return _refuse("seconds", f"Reading the workbook took longer than {active().seconds:g} seconds and "
                              "was stopped; the file may be built to exhaust the reader")


@contextlib.contextmanager
def applied(limits: Limits | None = None):
    """Apply ``limits`` (and start its clock) for the reads inside the ``with`` block."""
    limits = limits or Limits()
    token = _ACTIVE.set(limits)
    deadline_token = _DEADLINE.set(time.monotonic() + limits.seconds)
    timer = (threading.current_thread() is threading.main_thread() and hasattr(signal, "setitimer"))
    running = [True]

    def on_alarm(signum, frame):
        if running[0]:
            raise _TimeUp()

    previous = signal.signal(signal.SIGALRM, on_alarm) if timer else None
    try:
        if timer:
            signal.setitimer(signal.ITIMER_REAL, limits.seconds)
        yield limits
    except _TimeUp:
        raise _time_up_error() from None
    finally:
        running[0] = False
        if timer:
            signal.setitimer(signal.ITIMER_REAL, 0)
            signal.signal(signal.SIGALRM, previous)
        _DEADLINE.reset(deadline_token)
        _ACTIVE.reset(token)


# ---------------------------------------------------------------- cells

def check_cells(sheet: str, a1: str, n_rows: int, n_cols: int) -> None:
    """Refuse reading a range of more than `Limits.max_cells` cells."""
    cells = max(n_rows, 0) * max(n_cols, 0)
    if cells > active().max_cells:
        raise _refuse("max_cells", f"The range {a1} covers {cells:,} cells, more than the {active().max_cells:,} "
                                   "allowed; choose a range that covers just the trial", sheet=sheet, cell=a1)


# ---------------------------------------------------------------- the package

def check_package(path) -> None:
    """Inspect the file at ``path`` as an uploaded workbook, before any parsing.

    Raises
    ------
    TrialInputError
        For an empty, unreadable or oversized file, a file that is not an Excel
        workbook (legacy ``.xls``, encrypted, ``.xlsb``, ``.ods``, text), a damaged
        zip, and for every limit of `active` that the package breaks.
    """
    path = Path(path)
    limits = active()
    try:
        status = path.stat()
        key = (str(path.resolve()), status.st_ino, status.st_size, status.st_mtime_ns, limits)
        if key in _checked:
            return
        with open(path, "rb") as handle:
            _check_file(path, handle, status.st_size, limits)
    except PermissionError:
        raise TrialInputError(f"No permission to read the file {path.name!r}. Check its permissions, "
                              "or copy it somewhere readable.") from None
    except IsADirectoryError:
        raise TrialInputError(f"{str(path)!r} is a folder, not a workbook file.") from None
    except FileNotFoundError:
        raise TrialInputError(f"The file {str(path)!r} does not exist. Check the name and folder.") from None
    if len(_checked) > 64:
        _checked.clear()
    _checked[key] = True


def _size(n_bytes: int) -> str:
    return f"{n_bytes / MB:,.1f} MB" if n_bytes >= MB else f"{n_bytes:,} bytes"


def _not_xlsx(path: Path, what: str, advice: str = "Save it as an Excel workbook (.xlsx) and try again.") -> TrialInputError:
    return TrialInputError(f"The file {path.name!r} is {what}. {advice}")


def _check_file(path: Path, handle, size: int, limits: Limits) -> None:
    if size == 0:
        raise TrialInputError(f"The file {path.name!r} is empty (0 bytes): nothing was saved in it. "
                              "Save the workbook again and try again.")
    if size > limits.max_file_bytes:
        raise _refuse("max_file_bytes", f"The file {path.name!r} is {_size(size)}, larger than allowed", limits)
    start = handle.read(8)
    if start == _OLE_SIGNATURE or start.startswith(_OLE_SIGNATURE[:4]):
        raise _ole_kind(path, handle)
    if not start.startswith(b"PK"):
        raise _not_xlsx(path, "not a workbook but " + _text_or_unknown(start + handle.read(4096)))
    handle.seek(0)
    try:
        archive = zipfile.ZipFile(handle)
    except (zipfile.BadZipFile, EOFError, ValueError, NotImplementedError) as exc:
        raise _not_xlsx(path, f"damaged or incomplete: its zip structure cannot be read ({exc})",
                        "It may have been cut off while copying or downloading; get a fresh copy "
                        "or save it again from a spreadsheet application.") from None
    with archive:
        members = archive.infolist()
        _check_directory(path, archive, members, limits)
        _check_members(path, archive, members, limits)


def _ole_kind(path: Path, handle) -> TrialInputError:
    """An OLE compound file: an encrypted workbook or a legacy binary Office file."""
    handle.seek(0)
    head = handle.read(4 * MB)
    if "EncryptedPackage".encode("utf-16-le") in head or "EncryptionInfo".encode("utf-16-le") in head:
        return _not_xlsx(path, "a password-protected (encrypted) workbook",
                         "Open it in a spreadsheet application, remove the password to open "
                         "(File > Info > Protect workbook), save it and try again.")
    return _not_xlsx(path, "an old-style .xls workbook (or another legacy binary Office file, possibly "
                           "encrypted)")


def _text_or_unknown(sample: bytes) -> str:
    try:
        text = sample.decode("utf-8")
    except UnicodeDecodeError:
        text = None
    if text is not None and text.strip() and all(ch.isprintable() or ch in "\r\n\t" for ch in text[:-4]):
        kind = "CSV" if ("," in text or ";" in text or "\t" in text) else "plain"
        return f"a {kind} text file with a workbook name"
    return "a file of an unknown kind"


def _check_directory(path: Path, archive: zipfile.ZipFile, members, limits: Limits) -> None:
    names = [m.filename for m in members]
    if "mimetype" in names and archive.read("mimetype").strip() == _ODS_MIMETYPE:
        raise _not_xlsx(path, "an OpenDocument spreadsheet (.ods)")
    if "xl/workbook.bin" in names:
        raise _not_xlsx(path, "a binary Excel workbook (.xlsb)")
    if len(members) > limits.max_members:
        raise _refuse("max_members", f"The file {path.name!r} holds {len(members):,} zip members, more than "
                                     "allowed", limits)
    seen = set()
    for name in names:
        if (name.startswith(("/", "\\")) or "\\" in name or ".." in name.split("/") or "\0" in name
                or (len(name) > 1 and name[1] == ":")):
            raise _not_xlsx(path, f"not a safe workbook package: it holds a member named {name!r}, which points "
                                  "outside the package", "It was refused unread.")
        if name.casefold() in seen:
            raise _not_xlsx(path, f"not a safe workbook package: the member {name!r} appears twice",
                            "It was refused unread.")
        seen.add(name.casefold())
    declared = sum(m.file_size for m in members)
    if declared > limits.max_uncompressed_bytes:
        raise _refuse("max_uncompressed_bytes", f"The file {path.name!r} unpacks to {declared / MB:,.0f} MB, more "
                                                f"than the {limits.max_uncompressed_bytes / MB:,.0f} MB allowed", limits)
    for m in members:
        if m.file_size >= RATIO_FLOOR_BYTES and m.file_size > limits.max_ratio * max(m.compress_size, 1):
            ratio = m.file_size / max(m.compress_size, 1)
            raise _refuse("max_ratio", f"The member {m.filename!r} of {path.name!r} is compressed {ratio:,.0f} to 1, "
                                       "beyond any real workbook: it looks like a zip bomb", limits)


def _check_members(path: Path, archive: zipfile.ZipFile, members, limits: Limits) -> None:
    budget = limits.max_uncompressed_bytes
    scan = _XmlScan(path, limits)
    _kept_parts.clear()
    for m in members:
        check_time()
        xml = scan.parser(m.filename) if m.filename.lower().endswith(_XML_ENDINGS) else None
        keep = [] if (m.filename.startswith("xl/worksheets/") and MB < m.file_size <= _KEEP_SHEET_BYTES) else None
        count, crc = 0, 0
        try:
            with archive.open(m) as stream:
                while chunk := stream.read(_CHUNK):
                    if keep is not None:
                        keep.append(chunk)
                    count += len(chunk)
                    crc = zlib.crc32(chunk, crc)
                    budget -= len(chunk)
                    if count > m.file_size or budget < 0:
                        raise _refuse("max_uncompressed_bytes", f"The member {m.filename!r} of {path.name!r} "
                                      "unpacks to more than its zip directory declares or than allowed", limits)
                    if xml is not None:
                        xml = scan.feed(xml, chunk)
                    check_time()
            if crc != m.CRC:  # zipfile stops at the declared size: a member holding more fails here
                raise zipfile.BadZipFile("its content does not match its checksum or its declared size")
            if xml is not None:
                scan.feed(xml, b"", final=True)
            if keep is not None:  # a large sheet: the reader's byte scan need not unpack it again
                _kept_parts[(_file_key(path), m.filename)] = b"".join(keep)
        except (zipfile.BadZipFile, zlib.error, EOFError, OSError, ValueError, NotImplementedError,
                RuntimeError) as exc:
            raise _not_xlsx(path, f"damaged: its part {m.filename!r} cannot be unpacked ({exc})",
                            "Get a fresh copy or save it again from a spreadsheet application.") from None
    if scan.cells > limits.max_cells:
        raise _refuse("max_cells", f"The file {path.name!r} stores {scan.cells:,} cells, more than allowed", limits)


class _XmlScan:
    """Expat pass over XML parts: refuse DOCTYPE/ENTITY, count depth, shared strings and cells."""

    def __init__(self, path: Path, limits: Limits):
        self.path, self.limits = path, limits
        self.cells = 0

    def parser(self, name: str):
        if name.startswith("xl/worksheets/") and name.endswith(".xml"):
            return _SheetPart(self, name)
        parser = expat.ParserCreate()
        depth = [0]
        shared = [0]
        in_sheet = name.startswith("xl/worksheets/")
        in_strings = name.lower().endswith("sharedstrings.xml")
        limits, path = self.limits, self.path

        def doctype(*_):
            raise _not_xlsx(path, f"not a safe workbook: its part {name!r} declares a DOCTYPE or entities, which "
                                  "Excel never writes and which can expand into huge amounts of text "
                                  "(an 'XML bomb')", "It was refused unread.")

        def start(tag, attrs):
            depth[0] += 1
            if depth[0] > limits.max_xml_depth:
                raise _refuse("max_xml_depth", f"The part {name!r} of {path.name!r} nests XML elements more than "
                                               f"{limits.max_xml_depth} deep", limits)
            local = tag.rsplit(":", 1)[-1]
            if in_strings and local == "si" and depth[0] == 2:
                shared[0] += 1
                if shared[0] > limits.max_shared_strings:
                    raise _refuse("max_shared_strings", f"The shared string table of {path.name!r} holds more "
                                                        f"than {limits.max_shared_strings:,} entries", limits)
            elif in_sheet and local == "c":
                self.cells += 1

        def end(tag):
            depth[0] -= 1

        parser.StartDoctypeDeclHandler = doctype
        parser.EntityDeclHandler = doctype
        parser.StartElementHandler = start
        parser.EndElementHandler = end
        return parser

    def feed(self, parser, chunk: bytes, final: bool = False):
        """Feed a chunk; returns the parser, or ``None`` once the part proves not to be well-formed XML.

        A part that is not XML is left for openpyxl to judge (it refuses the parts it reads).
        """
        if parser is None:
            return None
        try:
            parser.Parse(chunk, final)
        except expat.ExpatError:
            return None
        return parser

    def refuse_doctype(self, name: str) -> TrialInputError:
        return _not_xlsx(self.path, f"not a safe workbook: its part {name!r} declares a DOCTYPE or entities, "
                                    "which Excel never writes and which can expand into huge amounts of text "
                                    "(an 'XML bomb')", "It was refused unread.")

    def refuse_depth(self, name: str) -> TrialInputError:
        return _refuse("max_xml_depth", f"The part {name!r} of {self.path.name!r} nests XML elements more than "
                                        f"{self.limits.max_xml_depth} deep", self.limits)


class _SheetPart:
    """A worksheet part, checked on its bytes with numpy instead of element by element.

    Worksheets are the large parts, and a Python callback for every element made
    this check cost more than reading the sheet. On each chunk every ``<`` opens
    (+1), closes (``</``, -1) or neither (``<?``, ``<!``, ``.../>``), which gives the
    depth; ``<c`` tags are counted as cells; any ``<!DOCTYPE`` or ``<!ENTITY`` is
    refused. Comments and CDATA, which spreadsheet writers do not put in worksheets,
    could skew the tally. openpyxl parses through defusedxml, which refuses
    DTDs as well.
    """

    def __init__(self, scan: "_XmlScan", name: str):
        self.scan, self.name = scan, name
        self.depth = 0
        self.carry = b""

    def Parse(self, chunk: bytes, final: bool = False) -> None:  # noqa: N802 - the expat parser's name
        self._tally(chunk, final)

    def _tally(self, chunk: bytes, final: bool) -> None:
        import numpy as np

        data = self.carry + chunk
        open_at, close_at = data.rfind(b"<"), data.rfind(b">")
        if open_at > close_at and not final:          # a tag cut by the chunk boundary waits for the rest
            data, self.carry = data[:open_at], data[open_at:]
        else:
            self.carry = b""
        if not data:
            return
        b = np.frombuffer(data, dtype=np.uint8)
        last = b.size - 1
        tags = np.flatnonzero(b == ord("<"))
        ends = np.flatnonzero((b[:-1] == ord("/")) & (b[1:] == ord(">")))   # "/>" closes an empty element
        first = b[np.minimum(tags + 1, last)]
        second = b[np.minimum(tags + 2, last)]
        for at in tags[first == ord("!")].tolist():
            if data[at + 2:at + 9] in (b"DOCTYPE", b"ENTITY ") or data[at + 2:at + 8] == b"ENTITY":
                raise self.scan.refuse_doctype(self.name)
        closing = first == ord("/")
        opening = ~closing & (first != ord("!")) & (first != ord("?"))
        steps = opening.astype(np.int64) - closing
        # depth just after each tag starts: earlier tags' steps, less the empty elements closed before it
        depth = self.depth + np.cumsum(steps) - np.searchsorted(ends, tags)
        if depth.size and int(depth.max()) > self.scan.limits.max_xml_depth:
            raise self.scan.refuse_depth(self.name)
        self.depth += int(steps.sum()) - ends.size
        cell = opening & (first == ord("c")) & ((second == ord(" ")) | (second == ord(">")) | (second == ord("/"))
                                                | (second == 9) | (second == 10) | (second == 13))
        self.scan.cells += int(np.count_nonzero(cell))


# ---------------------------------------------------------------- command line

def add_limit_options(parser) -> None:
    """Add one option per limit (see `OPTIONS`) to an argparse parser."""
    group = parser.add_argument_group("limits for untrusted files")
    defaults = Limits()
    for name, (option, factor, words) in OPTIONS.items():
        default = getattr(defaults, name) / factor
        kind = float if name in ("max_ratio", "seconds", "max_file_bytes", "max_uncompressed_bytes") else int
        group.add_argument(option, dest=f"limit_{name}", type=kind, default=None, metavar="N",
                           help=f"{words} (default {default:,g})")


def limits_from_options(args) -> Limits:
    """The `Limits` given by the options `add_limit_options` added (defaults where not given)."""
    changes = {}
    for item in fields(Limits):
        value = getattr(args, f"limit_{item.name}", None)
        if value is None:
            continue
        if value <= 0:
            raise TrialInputError(f"The option {OPTIONS[item.name][0]} must be positive, not {value:g}.")
        factor = OPTIONS[item.name][1]
        changes[item.name] = type(getattr(Limits(), item.name))(value * factor)
    return Limits(**changes)

