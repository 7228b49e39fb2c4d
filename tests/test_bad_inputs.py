"""Every input of the generated catalogue (tests/make_bad_inputs.py) through the command line.

Each must end with its exit code (2: a problem with the input; 0: a valid input with a
documented result), one message naming the problem (and the sheet and cell where there is
one), the input byte-identical afterwards, and no partial or temporary file left behind.
"""

from __future__ import annotations

import builtins
import contextlib
import errno
import hashlib
import json
import os
import zipfile
from pathlib import Path

import numpy as np
import openpyxl
import pytest

from tests.make_bad_inputs import BLOCKS, BODY, CATALOGUE, OFFSET, TREATMENTS, build_all
from workbook_tools.cli import EXIT_INPUT, EXIT_OK, main
from workbook_tools.sheets import safety

PREFIX = "workbook-tools: "


def snapshot(folder: Path) -> dict[str, str]:
    """Relative path -> SHA-256 of every file (and '<folder>' for every folder) under ``folder``."""
    found = {}
    for root, dirs, files in os.walk(folder):
        for d in dirs:
            found[os.path.relpath(os.path.join(root, d), folder)] = "<folder>"
        for f in files:
            full = os.path.join(root, f)
            found[os.path.relpath(full, folder)] = hashlib.sha256(Path(full).read_bytes()).hexdigest()
    return found


@contextlib.contextmanager
def simulated(mishap: str | None, path: Path, monkeypatch):
    """Set up the system problem a catalogue entry names."""
    if mishap == "no_read_permission":  # chmod 000 does not stop root, so refuse the open itself
        real_open = builtins.open

        def refusing_open(file, *args, **kwargs):
            if Path(os.fspath(file)) == path if isinstance(file, (str, os.PathLike)) else False:
                raise PermissionError(errno.EACCES, "Permission denied", str(file))
            return real_open(file, *args, **kwargs)

        monkeypatch.setattr(builtins, "open", refusing_open)
    elif mishap == "read_only_folder":
        def read_only(*args, **kwargs):
            raise OSError(errno.EROFS, "Read-only file system")

        monkeypatch.setattr(safety.tempfile, "NamedTemporaryFile", read_only)
    elif mishap == "disk_full":
        real_writestr = zipfile.ZipFile.writestr

        def half_written(self, name, data, *args, **kwargs):  # every save route writes its parts so
            if "w" in self.mode and len(self.namelist()) >= 2:
                raise OSError(errno.ENOSPC, "No space left on device")
            return real_writestr(self, name, data, *args, **kwargs)

        monkeypatch.setattr(zipfile.ZipFile, "writestr", half_written)
    elif mishap is not None:
        raise AssertionError(f"unknown mishap {mishap}")
    yield


def run(entry, folder: Path, monkeypatch, capsys, *extra):
    path = entry.build(folder)
    before = snapshot(folder)
    args = ["analyze", str(path), *(a.format(folder=folder) for a in entry.args), *extra]
    with simulated(entry.mishap, path, monkeypatch):
        code = main(args)
    out, err = capsys.readouterr()
    return path, before, snapshot(folder), code, out, err


def test_catalogue_is_large_and_distinct():
    names = [e.name for e in CATALOGUE]
    assert len(names) >= 40 and len(set(names)) == len(names)


def test_generator_writes_every_input(tmp_path):
    built = build_all(tmp_path)
    assert set(built) == {e.name for e in CATALOGUE}
    assert all(p.parent.parent == tmp_path for p in built.values())


REFUSED = [e for e in CATALOGUE if e.exit_code == EXIT_INPUT]
VALID = [e for e in CATALOGUE if e.exit_code == EXIT_OK]


@pytest.mark.parametrize("entry", REFUSED, ids=lambda e: e.name)
def test_refused_with_one_message_and_nothing_changed(entry, tmp_path, monkeypatch, capsys):
    path, before, after, code, out, err = run(entry, tmp_path, monkeypatch, capsys)
    assert code == EXIT_INPUT, err
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith(PREFIX), err
    message = lines[0][len(PREFIX):]
    for words in entry.says:
        assert words.lower() in message.lower(), message
    if entry.where:
        assert message.startswith(entry.where + ": "), message
    assert "Traceback" not in err and "internal error" not in err
    assert after == before  # the input byte-identical, no output, no temporary file


@pytest.mark.parametrize("entry", VALID, ids=lambda e: e.name)
def test_valid_odd_inputs_give_their_documented_result(entry, tmp_path, monkeypatch, capsys):
    path, before, after, code, out, err = run(entry, tmp_path, monkeypatch, capsys, "--json", "-")
    assert code == EXIT_OK, err
    result = json.loads(out)
    for words in entry.says:
        assert any(words.lower() in w.lower() for w in result["warnings"]), result["warnings"]
    written = safety.default_output_path(path)
    assert set(after) - set(before) == {written.name}
    assert all(after[k] == v for k, v in before.items())
    openpyxl.load_workbook(written).close()  # the result is a whole workbook


def entry_named(name):
    return next(e for e in CATALOGUE if e.name == name)


def test_offsets_of_1e12_match_statsmodels_on_the_data_without_offset(tmp_path, monkeypatch, capsys):
    smf = pytest.importorskip("statsmodels.formula.api")
    sm = pytest.importorskip("statsmodels.api")
    import pandas as pd

    *_, code, out, err = run(entry_named("offsets_of_1e12"), tmp_path, monkeypatch, capsys, "--json", "-")
    assert code == EXIT_OK, err
    result = json.loads(out)
    # Reference: statsmodels OLS + anova_lm(typ=2) on the values with the offset taken away
    # (exact in floating point: Sterbenz's lemma), where no precision is at stake.
    frame = pd.DataFrame([(b, t, (OFFSET + BODY[i][j]) - OFFSET) for i, b in enumerate(BLOCKS)
                          for j, t in enumerate(TREATMENTS)], columns=["block", "treatment", "y"])
    table = sm.stats.anova_lm(smf.ols("y ~ C(block) + C(treatment)", frame).fit(), typ=2)
    rows = {r["source"]: r for r in result["anova"]}
    # The stored values carry ~1e-4 absolute rounding (1e12 has 16 significant digits): compare loosely.
    assert rows["treatment"]["ss"] == pytest.approx(table.loc["C(treatment)", "sum_sq"], rel=1e-6)
    assert rows["error"]["ss"] == pytest.approx(table.loc["Residual", "sum_sq"], rel=1e-4)
    assert rows["treatment"]["f"] == pytest.approx(table.loc["C(treatment)", "F"], rel=1e-4)
    assert rows["treatment"]["p"] == pytest.approx(table.loc["C(treatment)", "PR(>F)"], rel=1e-3)
    means = {m["treatment"]: m["mean"] for m in result["means"]}
    for j, t in enumerate(TREATMENTS):
        assert means[t] - OFFSET == pytest.approx(np.mean([(OFFSET + r[j]) - OFFSET for r in BODY]), abs=1e-3)


def test_protected_sheet_stays_protected_in_the_result(tmp_path, monkeypatch, capsys):
    path, *_, code, out, err = run(entry_named("protected_sheet"), tmp_path, monkeypatch, capsys)
    assert code == EXIT_OK, err
    written = openpyxl.load_workbook(safety.default_output_path(path))
    assert written["Trial"].protection.sheet


def test_user_sheet_named_like_a_result_is_kept(tmp_path, monkeypatch, capsys):
    path, *_, code, out, err = run(entry_named("user_sheet_named_like_a_result"), tmp_path, monkeypatch, capsys)
    assert code == EXIT_OK, err
    written = openpyxl.load_workbook(safety.default_output_path(path))
    assert written["wbt-anova"]["A1"].value == "my own notes"
    assert any(name.startswith("wbt-anova") and name != "wbt-anova" for name in written.sheetnames)
