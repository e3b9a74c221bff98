"""Every document a tracked file cites exists in the repository.

A citation is a ``.md`` file name or path, optionally with a ``#section``
anchor (``docs/equations.md#reported-numbers``), an in-page markdown link
``](#section)``, or any path that climbs with ``../``. It resolves against the citing file's folder or the
repository root and must stay inside the repository. An anchor must be the
slug of a heading of the target page. GitHub's heading slugs are used: lower
case, punctuation other than ``-`` and ``_`` dropped, spaces to hyphens
(common practice, no source).
"""
from __future__ import annotations

import os
import re
import subprocess

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))

CITATION = re.compile(r"(?<![\w./-])((?:\.{1,2}/)*[\w./-]*\w\.md)(#[\w-]+)?")
UPWARD = re.compile(r"(?<![\w./-])((?:\.\./)+[\w./-]*)")
IN_PAGE = re.compile(r"\]\((#[\w-]+)\)")
HEADING = re.compile(r"^#{1,6}\s+(.*?)\s*#*\s*$", re.M)
TEXT_SUFFIXES = (".py", ".md", ".toml", ".yaml", ".yml", ".in", ".cfg", ".txt", "")


def tracked_text_files(root: str) -> list[str]:
    """Tracked files with a text suffix (scripts without one included)."""
    out = subprocess.run(["git", "ls-files"], cwd=root, capture_output=True, text=True, check=True)
    return [f for f in out.stdout.split("\n")
            if f and os.path.splitext(f)[1] in TEXT_SUFFIXES and os.path.isfile(os.path.join(root, f))]


def slug(heading: str) -> str:
    """GitHub's anchor for a markdown heading."""
    text = re.sub(r"[^\w\- ]", "", heading.strip().lower())
    return text.replace(" ", "-")


def anchors(path: str) -> set[str]:
    with open(path, encoding="utf-8") as fh:
        return {slug(h) for h in HEADING.findall(fh.read())}


def inside(root: str, base: str, target: str) -> bool:
    real_root = os.path.realpath(root)
    cand = os.path.realpath(os.path.join(base, target))
    return os.path.commonpath([cand, real_root]) == real_root


def resolve(root: str, citing: str, target: str) -> str | None:
    """The cited file inside ``root``, from the citing file's folder or the root."""
    for base in (os.path.dirname(os.path.join(root, citing)), root):
        cand = os.path.realpath(os.path.join(base, target))
        if inside(root, base, target) and os.path.isfile(cand):
            return cand
    return None


def dangling_citations(root: str, files: list[str]) -> list[str]:
    """``file:line: citation`` for each citation that does not resolve."""
    bad = []
    for rel in files:
        try:
            with open(os.path.join(root, rel), encoding="utf-8") as fh:
                lines = fh.read().split("\n")
        except UnicodeDecodeError:
            continue
        for n, line in enumerate(lines, 1):
            for m in CITATION.finditer(line):
                target, anchor = m.group(1), m.group(2)
                if "*" in target or target.startswith(("http", "www.")):
                    continue
                found = resolve(root, rel, target)
                if found is None:
                    bad.append(f"{rel}:{n}: {m.group(0)} (no such file in the repository)")
                elif anchor and anchor[1:] not in anchors(found):
                    bad.append(f"{rel}:{n}: {m.group(0)} (no such section)")
            for m in UPWARD.finditer(line):
                path = m.group(1).rstrip(".")
                if not inside(root, os.path.dirname(os.path.join(root, rel)), path):
                    bad.append(f"{rel}:{n}: {path} (a path outside the repository)")
            if rel.endswith(".md"):
                own = anchors(os.path.join(root, rel))
                bad += [f"{rel}:{n}: {a} (no such section)"
                        for a in IN_PAGE.findall(line) if a[1:] not in own]
    return bad


def test_slug_follows_github_headings():
    assert slug("Budget identities") == "budget-identities"
    assert slug("Full Boussinesq (`model: boussinesq`)") == "full-boussinesq-model-boussinesq"


def test_checker_finds_a_missing_document_and_a_path_outside(tmp_path):
    (tmp_path / "docs").mkdir()
    (tmp_path / "docs" / "here.md").write_text("# Top\n\n## A part\n", encoding="utf-8")
    (tmp_path / "outside.md").write_text("x\n", encoding="utf-8")
    (tmp_path / "repo").mkdir()
    (tmp_path / "repo" / "docs").mkdir()
    (tmp_path / "repo" / "docs" / "here.md").write_text("# Top\n\n## A part\n[x](#a-part)\n",
                                                      encoding="utf-8")
    (tmp_path / "repo" / "m.py").write_text(
        '"""See docs/here.md#a-part and here.md, NOTES.md, ../outside.md, docs/here.md#none."""\n'
        '# notes in ../elsewhere/ (../repo/docs/ comes back inside)\n',
        encoding="utf-8")
    bad = dangling_citations(str(tmp_path / "repo"), ["m.py", "docs/here.md"])
    assert [b.split(": ", 1)[1] for b in bad] == [
        "here.md (no such file in the repository)",
        "NOTES.md (no such file in the repository)",
        "../outside.md (no such file in the repository)",
        "docs/here.md#none (no such section)",
        "../outside.md (a path outside the repository)",
        "../elsewhere/ (a path outside the repository)",
    ]


def test_every_cited_document_exists_in_the_repository():
    # this file's fixtures cite missing documents on purpose
    files = [f for f in tracked_text_files(ROOT) if f != "tests/test_citations.py"]
    assert "docs/equations.md" in files and len(files) > 50
    bad = dangling_citations(ROOT, files)
    assert not bad, "citations of documents that are not in the repository:\n" + "\n".join(bad)
