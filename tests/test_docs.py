"""The documents the repository cites are in the repository.

Checks, over every file git tracks (plus new files not yet ignored):

* no file points at a document outside the repository: a methods or design document other than
  ``docs/methods.md`` and ``docs/design.md``, a shared folder beside the clone, or a relative
  path (``../...``, Markdown link) that leaves the repository or names a missing file;
* every ``docs/methods.md §N`` (or ``section N``) cited anywhere is a numbered heading of
  docs/methods.md, and every cross-reference inside docs/methods.md is too;
* every heading of docs/design.md cited by name (as ``docs/design.md, "Fit stage"``) exists;
* the source tags used beside check values ([V], [C], [M]) are defined in docs/methods.md §0.1.

The oracle is the file system and git's list of files; the detectors are themselves checked on
sample lines that must be flagged.
"""

from __future__ import annotations

import os
import re
import subprocess
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
METHODS_DOC = ROOT / "docs" / "methods.md"
DESIGN_DOC = ROOT / "docs" / "design.md"

# Written without the literal file names so that this file does not flag itself.
_OUTSIDE = [
    (re.compile(r"\b(?:METHODS|DESIGN)\.md\b"), "a methods/design document that is not in docs/"),
    (re.compile(r"\bMETHODS\s*(?:§|section\s+\d|\d+\.\d)"), "a section of a methods document outside docs/"),
    (re.compile(r"(?<![\w-])shared/(?:METHODS|DESIGN|methods|design)"), "a shared document"),
    (re.compile(r"\.\./shared\b"), "a folder beside the clone"),
    (re.compile(r"(?<![\w.])/w[o]rk/"), "an absolute path of a development machine"),
]
_RELATIVE = re.compile(r"(?<![\w./])((?:\.\./)+[\w.\-/]*[\w\-])")
_MD_LINK = re.compile(r"\]\(([^)\s#]+)(?:#[^)]*)?\)")
_SECTION = re.compile(r"(?:§\s?|\bsections?\s+)(\d+(?:\.\d+)*)")
_HEADING_NUMBER = re.compile(r"^#{2,6}\s+(\d+(?:\.\d+)*)\.?\s", re.M)
_DESIGN_CITE = re.compile(r"docs/design\.md,\s*\"([^\"]+)\"")


def _repository_files() -> list[Path]:
    try:
        out = subprocess.run(["git", "ls-files", "--cached", "--others", "--exclude-standard", "-z"],
                             cwd=ROOT, capture_output=True, check=True).stdout
        names = [n for n in out.decode("utf-8").split("\0") if n]
    except (OSError, subprocess.CalledProcessError):   # not a git checkout: walk the tree
        skip = {".git", ".venv", "results", "logs", ".snakemake", "__pycache__", ".pytest_cache"}
        names = []
        for folder, dirs, files in os.walk(ROOT):
            dirs[:] = [d for d in dirs if d not in skip and not d.endswith(".egg-info")]
            names += [os.path.relpath(os.path.join(folder, f), ROOT) for f in files]
    return [ROOT / n for n in sorted(names) if (ROOT / n).is_file()]


def _text(path: Path) -> str | None:
    data = path.read_bytes()
    if b"\0" in data:
        return None
    return data.decode("utf-8", errors="replace")


def _texts() -> dict[Path, str]:
    out = {}
    for path in _repository_files():
        text = _text(path)
        if text is not None:
            out[path] = text
    return out


TEXTS = _texts()


def outside_references(path: Path, text: str) -> list[str]:
    """Every place in ``text`` (the content of ``path``) that points outside the repository."""
    found = []
    for number, line in enumerate(text.splitlines(), 1):
        where = f"{path.relative_to(ROOT) if path.is_relative_to(ROOT) else path}:{number}"
        for pattern, what in _OUTSIDE:
            if pattern.search(line):
                found.append(f"{where}: {what}: {line.strip()[:120]}")
        targets = _RELATIVE.findall(line)
        if path.suffix == ".md":
            targets += [t for t in _MD_LINK.findall(line) if "://" not in t and not t.startswith("mailto:")]
        for target in targets:
            resolved = (path.parent / target).resolve()
            if not resolved.is_relative_to(ROOT):
                found.append(f"{where}: relative path {target!r} leaves the repository")
            elif not resolved.exists():
                found.append(f"{where}: relative path {target!r} names a missing file")
    return found


def methods_headings() -> set[str]:
    return set(_HEADING_NUMBER.findall(METHODS_DOC.read_text(encoding="utf-8")))


def cited_methods_sections(text: str, inside_methods: bool = False) -> list[str]:
    """Section numbers cited as ``docs/methods.md §N`` (any line naming methods.md)."""
    cited = []
    for line in text.splitlines():
        if inside_methods or "methods.md" in line:
            cited += _SECTION.findall(line)
    return cited


def test_the_detectors_flag_references_outside_the_repository():
    # Positive controls: each sample must be flagged, or the scan below proves nothing.
    fake = ROOT / "tests" / "sample.py"
    samples = ["see " + "METHODS" + ".md section 2", "(" + "DESIGN" + ".md, conventions)",
               "METHODS" + " §6.2", "../" + "shared/notes.txt", "/wo" + "rk/shared/x",
               "../" * 3 + "outside.txt"]
    for sample in samples:
        assert outside_references(fake, sample), sample
    assert not outside_references(fake, "docs/methods.md §5.2 and docs/design.md")
    assert outside_references(ROOT / "docs" / "x.md", "[a](" + "../" * 2 + "elsewhere.md)")
    assert not outside_references(ROOT / "docs" / "x.md", "[a](../DEVELOPERS.md) [b](https://x.org/a)")
    line = "docs/methods" + ".md §5.1 step 3, §5.2; section 9"
    assert cited_methods_sections(line) == ["5.1", "5.2", "9"]


def test_no_file_refers_to_a_document_outside_the_repository():
    assert len(TEXTS) > 50, "the file list is empty or nearly so: git ls-files failed?"
    problems = [p for path, text in TEXTS.items() for p in outside_references(path, text)]
    assert not problems, "\n".join(problems)


def test_both_documents_are_in_the_repository():
    assert METHODS_DOC.is_file() and DESIGN_DOC.is_file()
    tracked = {p.relative_to(ROOT).as_posix() for p in TEXTS}
    assert {"docs/methods.md", "docs/design.md"} <= tracked


def test_every_cited_methods_section_is_a_heading():
    headings = methods_headings()
    assert {"0.1", "1", "2", "7.1"} <= headings
    missing = []
    for path, text in TEXTS.items():
        for number in cited_methods_sections(text, inside_methods=path == METHODS_DOC):
            if number not in headings:
                missing.append(f"{path.relative_to(ROOT)}: §{number}")
    assert not missing, "cited sections missing from docs/methods.md:\n" + "\n".join(sorted(set(missing)))


def test_code_cites_methods_sections():
    # The package and the tests rest on docs/methods.md; if no file cites it, the check above is empty.
    package = [p for p in TEXTS if p.is_relative_to(ROOT / "workflow" / "ped2g")]
    tests = [p for p in TEXTS if p.is_relative_to(ROOT / "tests") and p != Path(__file__).resolve()]
    assert sum(bool(cited_methods_sections(TEXTS[p])) for p in package) >= 5
    assert sum(bool(cited_methods_sections(TEXTS[p])) for p in tests) >= 10


def test_every_cited_design_heading_exists():
    headings = [line.lstrip("#").strip() for line in DESIGN_DOC.read_text(encoding="utf-8").splitlines()
                if line.startswith("#")]
    missing = []
    for path, text in TEXTS.items():
        for name in _DESIGN_CITE.findall(text):
            if not any(name in h for h in headings):
                missing.append(f"{path.relative_to(ROOT)}: {name!r}")
    assert not missing, "cited headings missing from docs/design.md:\n" + "\n".join(missing)


@pytest.mark.parametrize("tag", ["[V", "[C]", "[M]"])
def test_source_tags_are_defined_in_the_methods_document(tag):
    text = METHODS_DOC.read_text(encoding="utf-8")
    section = text.split("### 0.1", 1)[1].split("\n### ", 1)[0]
    assert f"**{tag}" in section
