"""Every citation of the project's own documents resolves in a clone.

Code, tests and notes cite ``docs/design.md §n`` and ``docs/references.md §n``; each
cited number must be a section heading of that document (``## n. Title``, or
``### n.m Title`` for a sub-section), so a reader of a fresh clone can look it up. The
briefing documents the citations once pointed to are not part of the repository, so
their old citation form must not come back.
"""

from __future__ import annotations

import re
import subprocess
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]
DOCS = {"design": ROOT / "docs" / "design.md", "references": ROOT / "docs" / "references.md"}

# A heading "## 4. Physics" or "### 4.2 Series-through" defines section "4" or "4.2".
HEADING = re.compile(r"^#{2,6}\s+(\d+(?:\.\d+)*)\.?\s", re.MULTILINE)
NUMBER = r"§\s?\d+(?:\.\d+)*"
# "docs/references.md §1", also chained: "§1, §4", "§1-§4", "§1 and §9", and split over a
# comment line break ("docs/design.md\n# §4").
BREAK = r"(?:\s*(?:#|//|\*)?\s*)"
CITATION = re.compile(
    rf"docs/(design|references)\.md{BREAK}({NUMBER}(?:\s*(?:,|-|–|and|or|/){BREAK}{NUMBER})*)"
)
# Inside docs/, the documents cite each other as "references §n" or "design.md §n".
CROSS = re.compile(
    rf"\b(design|references)(?:\.md\]\([a-z./]*\))?(?:\.md)?\s({NUMBER}"
    rf"(?:\s*(?:,|-|–|and|or|/)\s*{NUMBER})*)"
)
# The old form, written in pieces so this file does not match itself.
_OLD_NAMES = "REFER" + "ENCES|DES" + "IGN"
OLD_FORM = re.compile(rf"\b(?:{_OLD_NAMES})(?:\.md\b|{BREAK}§)|\bdesign notes \(?§")
SKIP_SUFFIXES = {".s1p", ".s2p", ".z1p", ".png", ".ico", ".gz", ".zip"}


def tracked_files() -> list[Path]:
    """Files of the repository: git's list in a clone, else every file outside dot-folders."""
    try:
        out = subprocess.run(
            ["git", "ls-files", "-z"], cwd=ROOT, capture_output=True, check=True, timeout=30
        ).stdout
        names = [n for n in out.decode("utf-8", "surrogateescape").split("\0") if n]
    except (OSError, subprocess.SubprocessError):
        names = [
            str(p.relative_to(ROOT))
            for p in ROOT.rglob("*")
            if p.is_file() and not any(part.startswith(".") for part in p.relative_to(ROOT).parts)
        ]
    files = [ROOT / n for n in names]
    return [p for p in files if p.is_file() and p.suffix.lower() not in SKIP_SUFFIXES]


def read_text(path: Path) -> str | None:
    try:
        return path.read_text(encoding="utf-8")
    except (UnicodeDecodeError, OSError):
        return None


def sections(doc: str) -> set[str]:
    return set(HEADING.findall(DOCS[doc].read_text(encoding="utf-8")))


def numbers(chain: str) -> list[str]:
    """Every section number in a chain such as "§1, §4-§6": both ends of a range and all
    numbers between them."""
    found = [n.replace(" ", "") for n in re.findall(r"§\s?(\d+(?:\.\d+)*)", chain)]
    out = list(found)
    for lo, hi in re.findall(r"§\s?(\d+)\s*[-–]\s*§\s?(\d+)(?!\.\d)", chain):
        out += [str(k) for k in range(int(lo) + 1, int(hi))]
    return out


def line_of(text: str, index: int) -> int:
    return text.count("\n", 0, index) + 1


@pytest.fixture(scope="module")
def corpus() -> dict[Path, str]:
    """Text of every tracked file but this one, whose examples of the patterns cite
    sections that need not exist."""
    here = Path(__file__).resolve()
    texts = {p: read_text(p) for p in tracked_files() if p.resolve() != here}
    return {p: t for p, t in texts.items() if t is not None}


def test_both_documents_exist_with_numbered_sections():
    for doc, path in DOCS.items():
        assert path.is_file(), f"{path.relative_to(ROOT)} is missing"
        found = sections(doc)
        # The numbering the code was written against: design §1-§8, references §1-§9.
        expected = range(1, 9) if doc == "design" else range(1, 10)
        assert {str(k) for k in expected} <= found, (doc, sorted(found))


def test_every_citation_lands_on_a_section(corpus):
    known = {doc: sections(doc) for doc in DOCS}
    cited = 0
    missing = []
    for path, text in corpus.items():
        for match in CITATION.finditer(text):
            doc = match.group(1)
            for number in numbers(match.group(2)):
                cited += 1
                if number not in known[doc]:
                    where = f"{path.relative_to(ROOT)}:{line_of(text, match.start())}"
                    missing.append(f"{where}: docs/{doc}.md §{number}")
    assert not missing, "citations of sections that do not exist:\n" + "\n".join(missing)
    # The code cites both documents widely; finding none means the pattern is broken.
    assert cited > 50


def test_the_documents_cite_each_other_by_existing_sections():
    known = {doc: sections(doc) for doc in DOCS}
    missing = []
    for path in DOCS.values():
        text = path.read_text(encoding="utf-8")
        for match in CROSS.finditer(text):
            doc = match.group(1)
            for number in numbers(match.group(2)):
                if number not in known[doc]:
                    missing.append(f"{path.name}:{line_of(text, match.start())}: {doc} §{number}")
    assert not missing, "\n".join(missing)


def test_no_file_cites_the_old_documents(corpus):
    hits = [
        f"{path.relative_to(ROOT)}:{line_of(text, m.start())}: {m.group(0)!r}"
        for path, text in corpus.items()
        for m in OLD_FORM.finditer(text)
    ]
    assert not hits, "cite docs/design.md §n or docs/references.md §n instead:\n" + "\n".join(hits)


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("see docs/references.md §4.", [("references", ["4"])]),
        (
            "(docs/design.md §4, docs/references.md §1 and §9)",
            [("design", ["4"]), ("references", ["1", "9"])],
        ),
        ("docs/references.md §1-§4", [("references", ["1", "4", "2", "3"])]),
        ("# handbooks; docs/references.md\n# §4", [("references", ["4"])]),
        ("docs/references.md §8.2 and IEEE 488.2 §8.7.9", [("references", ["8.2"])]),
    ],
)
def test_citation_pattern(text, expected):
    got = [(m.group(1), numbers(m.group(2))) for m in CITATION.finditer(text)]
    assert got == expected


def test_old_form_pattern():
    old = "REFER" + "ENCES"
    assert OLD_FORM.search(f"# ({old} §4)")
    assert OLD_FORM.search(f"see {old}.md")
    assert OLD_FORM.search(f"handbooks; {old}\n# §4")
    assert not OLD_FORM.search("docs/references.md §4")
    assert not OLD_FORM.search("DEVELOPERS.md")
    assert OLD_FORM.search("the design notes (§8)")
    assert not OLD_FORM.search("the design notes, [docs/design.md](docs/design.md)")
