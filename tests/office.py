"""LibreOffice as a real spreadsheet client for tests: headless conversions.

Each test module runs LibreOffice with a private profile (so it neither reads
nor disturbs a user's settings and never meets a running instance), with a
time limit, converting many files per invocation because each start costs a
few seconds. Tests are skipped, with the reason, when ``soffice`` is missing
(Debian: ``apt-get install libreoffice-calc-nogui``).
"""

from __future__ import annotations

import functools
import os
import re
import shutil
import signal
import subprocess
from pathlib import Path

import pytest

SOFFICE = shutil.which("soffice")
TIMEOUT_SECONDS = 120
requires_office = pytest.mark.skipif(
    SOFFICE is None, reason="LibreOffice (soffice) is not on PATH; install libreoffice-calc-nogui to run these")

CSV_FILTER = "Text - txt - csv (StarCalc)"


def csv_every_sheet(*, as_shown: bool) -> str:
    """``--convert-to`` target writing every sheet to ``<base>-<sheet>.csv`` (LibreOffice 7.2 or later).

    Filter tokens: comma separator (44), double quote (34), UTF-8 (76), from line 1,
    no column formats, language 0, do not quote all text, detect special numbers,
    cell contents *as shown* (formatted) or raw, no formulas, keep spaces, and
    sheet -1 for every sheet.
    """
    shown = "true" if as_shown else "false"
    return f"csv:{CSV_FILTER}:44,34,76,1,,0,false,true,{shown},false,false,-1"


@functools.lru_cache(maxsize=None)
def office_version() -> tuple[int, ...]:
    """LibreOffice's version as numbers, e.g. (7, 4, 7, 2); () when it cannot be told."""
    done = _run([SOFFICE, "--version"], None)
    match = re.search(r"(\d+(?:\.\d+)+)", done.stdout)
    return tuple(int(x) for x in match.group(1).split(".")) if match else ()


def _run(argv: list[str], profile: Path | None) -> subprocess.CompletedProcess:
    """Run soffice in its own process group; on time-out end that group (only what this started)."""
    if profile is not None:
        argv = [argv[0], f"-env:UserInstallation={profile.as_uri()}", "--headless", "--norestore", *argv[1:]]
    process = subprocess.Popen(argv, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                               start_new_session=True)
    try:
        stdout, stderr = process.communicate(timeout=TIMEOUT_SECONDS)
    except subprocess.TimeoutExpired:
        os.killpg(process.pid, signal.SIGKILL)
        process.communicate()
        raise AssertionError(f"soffice did not finish within {TIMEOUT_SECONDS} s: {' '.join(argv)}") from None
    return subprocess.CompletedProcess(argv, process.returncode, stdout, stderr)


def convert(sources: list[Path], target: str, outdir: Path, profile: Path) -> subprocess.CompletedProcess:
    """Convert every file in ``sources`` with one soffice invocation (``--convert-to target``).

    Parameters
    ----------
    sources : list of Path
        Workbooks to open.
    target : str
        A ``--convert-to`` argument: ``pdf``, ``xlsx``, ``ods`` or ``csv:<filter>:<options>``.
    outdir : Path
        Folder for the converted files (created).
    profile : Path
        Private LibreOffice user profile folder for this test run.

    Returns
    -------
    subprocess.CompletedProcess
        Asserted to have exited 0; ``stdout`` lists each conversion.
    """
    outdir.mkdir(parents=True, exist_ok=True)
    done = _run([SOFFICE, "--convert-to", target, "--outdir", str(outdir), *map(str, sources)], profile)
    assert done.returncode == 0, f"soffice exited {done.returncode}: {done.stderr}"
    assert "Error" not in done.stderr, done.stderr
    return done
