"""Readers for the outside reference data in tests/data (see tests/data/SOURCES.md)."""

from __future__ import annotations

import csv
import re
from pathlib import Path

DATA = Path(__file__).parent / "data"

NIST_LOWER = ("SiRstv", "SmLs01", "SmLs02", "SmLs03")
NIST_AVERAGE = ("AtmWtAg", "SmLs04", "SmLs05", "SmLs06")
NIST_HIGHER = ("SmLs07", "SmLs08", "SmLs09")


def _numbers(line: str) -> list[float]:
    return [float(x) for x in re.findall(r"[-+]?\d+\.?\d*(?:[Ee][-+]?\d+)?", line)]


def nist_one_way(name: str) -> dict:
    """Groups, values and certified figures of a NIST StRD one-way ANOVA file.

    The certified block is found by its content, not by line number.
    """
    lines = (DATA / "nist" / f"{name}.dat").read_text().splitlines()
    certified: dict = {}
    groups, values = [], []
    in_data = False
    for i, line in enumerate(lines):
        stripped = line.strip()
        if stripped.startswith("Between"):
            df, ss, ms, f = _numbers(stripped)[-4:]
            certified.update(between_df=int(df), between_ss=ss, between_ms=ms, f=f)
        elif stripped.startswith("Within"):
            df, ss, ms = _numbers(stripped)[-3:]
            certified.update(within_df=int(df), within_ss=ss, within_ms=ms)
        elif stripped.startswith("Certified R-Squared"):
            certified["r_squared"] = _numbers(stripped)[-1]
        elif stripped.startswith("Standard Deviation"):
            certified["residual_sd"] = _numbers(stripped)[-1]
        elif stripped.startswith("Data:") and len(stripped.split()) == 3 and i > 30:
            in_data = True
        elif in_data and stripped:
            group, value = stripped.split()
            groups.append(int(group))
            values.append(float(value))
    return {"groups": groups, "values": values, "certified": certified}


def replicate_blocks(groups: list[int]) -> list[int]:
    """Number the replicates within each group 1, 2, ... to serve as blocks."""
    seen: dict[int, int] = {}
    out = []
    for g in groups:
        seen[g] = seen.get(g, 0) + 1
        out.append(seen[g])
    return out


def worked_example(filename: str) -> tuple[list[str], list[str], list[float | None]]:
    """(treatments, blocks, values) of a long CSV: treatment, block, response; blank = missing."""
    treatments, blocks, values = [], [], []
    with open(DATA / "worked" / filename, newline="") as handle:
        reader = csv.reader(handle)
        next(reader)
        for treatment, block, value in reader:
            treatments.append(treatment)
            blocks.append(block)
            values.append(float(value) if value.strip() else None)
    return treatments, blocks, values
