"""Every citation in the project resolves inside the repository.

Tests name their outside sources beside each check; cases shared by several tests live in
``tests/REFERENCES.md`` and are cited as ``tests/REFERENCES.md#<case>``. This module fails
when a file cites a case the catalogue does not have, a catalogue other than
``tests/REFERENCES.md``, or any path that climbs out of the repository.
"""
from __future__ import annotations

import re
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
CATALOGUE = ROOT / "tests" / "REFERENCES.md"
# Written in pieces so that this file does not trip its own scan.
_UP = "." + "./"
_CITE = re.compile(r"(?P<path>[\w./-]*)REFERENCES\.md(?:#(?P<case>[\w-]*))?")
_OLD_ID = re.compile(r"\bREF-\d+\b")
SCANNED = ("engine", "gui", "tests", "bench", "resources", "samples", ".ci")
SUFFIXES = {".py", ".md", ".toml", ".json", ".lwd", ".txt", ".cfg", ".ini", ""}


def catalogue_cases(text: str) -> set[str]:
    """The case ids of a catalogue: its level-two headings that are a single slug."""
    return set(re.findall(r"^## ([a-z0-9]+(?:-[a-z0-9]+)*)\s*$", text, flags=re.M))


def citation_problems(text: str, cases: set[str], *, where: str) -> list[str]:
    """One line per citation in ``text`` that does not resolve inside the repository."""
    problems = []
    for n, line in enumerate(text.splitlines(), 1):
        if _UP in line:
            problems.append(f"{where}:{n}: path outside the repository: {line.strip()}")
        if _OLD_ID.search(line):
            problems.append(f"{where}:{n}: catalogue id of an outside file: {_OLD_ID.search(line).group(0)}")
        for m in _CITE.finditer(line):
            if m.group("path") not in ("tests/", ""):
                problems.append(f"{where}:{n}: cites {m.group(0)!r}; the catalogue is tests/REFERENCES.md")
            elif m.group("path") == "" and m.group("case") is not None:
                problems.append(f"{where}:{n}: cite the case by its path, tests/REFERENCES.md#{m.group('case')}")
            if m.group("case") is not None and m.group("case") not in cases:
                problems.append(f"{where}:{n}: no case '{m.group('case')}' in tests/REFERENCES.md")
    return problems


def _project_files():
    files = [ROOT / "README.md", ROOT / "DEVELOPERS.md", ROOT / "pyproject.toml"]
    for top in SCANNED:
        for path in sorted((ROOT / top).rglob("*")):
            if path.is_file() and path.suffix in SUFFIXES and "__pycache__" not in path.parts and "_screenshots" not in path.parts:
                files.append(path)
    return files


def test_the_catalogue_has_the_cases_the_tests_share():
    cases = catalogue_cases(CATALOGUE.read_text(encoding="utf-8"))
    assert {"stage-place", "stage-observer", "oven-margins", "rotor-sensitivity-integral"} <= cases
    assert len(cases) == 12


def test_every_citation_in_the_project_resolves_inside_the_repository():
    cases = catalogue_cases(CATALOGUE.read_text(encoding="utf-8"))
    problems = []
    for path in _project_files():
        if path in (CATALOGUE, Path(__file__).resolve()):
            continue  # the catalogue defines the cases; this module holds deliberate bad examples
        problems += citation_problems(path.read_text(encoding="utf-8", errors="replace"), cases, where=str(path.relative_to(ROOT)))
    assert problems == []


def test_shared_cases_are_cited_somewhere():
    # a case nobody cites is dead weight in the catalogue
    cases = catalogue_cases(CATALOGUE.read_text(encoding="utf-8"))
    text = "\n".join(p.read_text(encoding="utf-8") for p in (ROOT / "tests").rglob("*.py"))
    assert sorted(c for c in cases if f"tests/REFERENCES.md#{c}" not in text) == []


@pytest.mark.parametrize(
    "line, fragment",
    [
        ("# tests/REFERENCES.md#no-such-case: K = 8", "no case 'no-such-case'"),
        ("# see " + _UP + "shared/REFERENCES.md", "outside the repository"),
        ("# REFERENCES.md REF-03", "outside file"),
        ("# docs/REFERENCES.md#stage-place", "the catalogue is tests/REFERENCES.md"),
        ("# REFERENCES.md#stage-place", "cite the case by its path"),
    ],
    ids=["unknown-case", "climbs-out", "old-id", "other-catalogue", "bare-catalogue"],
)
def test_the_checker_rejects_bad_citations(line, fragment):
    problems = citation_problems(line, {"stage-place"}, where="x.py")
    assert len(problems) >= 1 and any(fragment in p for p in problems)


def test_the_checker_accepts_a_good_citation():
    assert citation_problems("# tests/REFERENCES.md#stage-place (hand computation)", {"stage-place"}, where="x.py") == []
