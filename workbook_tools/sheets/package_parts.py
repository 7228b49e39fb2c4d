"""Which parts of a package hang off which: the relationship graph, for dropping earlier result sheets.

A part belongs to a sheet being dropped when it can be reached from that sheet
through relationships and cannot be reached from the package root without passing
through a dropped sheet (a picture two sheets share stays).

References
----------
ECMA-376 Office Open XML File Formats, 5th ed., Part 2 (Open Packaging Conventions),
section 9.3: relationships parts and the resolution of relative targets.
"""

from __future__ import annotations

import posixpath
import zipfile

from lxml import etree


def source_of(rels_part: str) -> str:
    """The part a relationships part belongs to (``""`` for the package itself)."""
    folder, base = posixpath.split(rels_part)
    owner_folder = posixpath.dirname(folder)
    return posixpath.join(owner_folder, base[: -len(".rels")]) if base != ".rels" else ""


def resolve_target(folder: str, target: str) -> str:
    """The part a relationship target names, from the folder of the part that holds the relationship."""
    return target.lstrip("/") if target.startswith("/") else posixpath.normpath(posixpath.join(folder, target))


def relationship_graph(package: zipfile.ZipFile, parser) -> dict[str, set[str]]:
    """Part -> the internal parts its relationships point at (``""`` is the package root)."""
    graph: dict[str, set[str]] = {}
    for name in package.namelist():
        if not name.endswith(".rels"):
            continue
        owner = source_of(name)
        folder = posixpath.dirname(owner)
        targets = graph.setdefault(owner, set())
        for rel in etree.fromstring(package.read(name), parser):
            target = rel.get("Target") or ""
            if rel.get("TargetMode") == "External" or not target:
                continue
            targets.add(resolve_target(folder, target))
    return graph


def _reachable(graph: dict[str, set[str]], start: set[str], blocked: set[str]) -> set[str]:
    seen, todo = set(), [p for p in start if p not in blocked]
    while todo:
        part = todo.pop()
        if part in seen:
            continue
        seen.add(part)
        todo.extend(t for t in graph.get(part, ()) if t not in blocked and t not in seen)
    return seen


def parts_to_drop(graph: dict[str, set[str]], dropped_sheets: set[str]) -> set[str]:
    """The dropped sheets' parts, and every part only they lead to (relationships parts not included)."""
    kept = _reachable(graph, {""}, dropped_sheets)
    theirs = _reachable(graph, dropped_sheets, set())
    return theirs - kept


def rels_part_of(part: str) -> str:
    """The relationships part of ``part``."""
    folder, base = posixpath.split(part)
    return posixpath.join(folder, "_rels", base + ".rels")
