"""The project's references live in docs/, and every citation of them resolves.

- No tracked file outside docs/ may cite the two team-internal reference files that a clone
  does not contain (their names are built from parts below, so this file does not cite them).
- Every ``docs/<page>.md`` path cited in a tracked .py or .md file (and every relative link
  between the docs pages) names a page that exists, and its ``#anchor``, if any, is one of that
  page's headings as GitHub makes heading anchors.
"""

from __future__ import annotations

import re
import shutil
import subprocess
from functools import cache
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
DOCS = ROOT / "docs"

#: The internal reference files' names, assembled so that this test does not mention them itself.
INTERNAL_NAMES = ("FIELD" + "REF", "DESIGN" + ".md")

#: A docs page citation, with or without its ``#anchor``, anywhere in a text (also after ``../``).
CITATION = re.compile(r"(?<![\w-])docs/([\w.-]+\.md)(?:#([\w-]+))?")
#: A markdown link target inside docs/: ``(page.md)``, ``(page.md#anchor)`` or ``(#anchor)``.
DOC_LINK = re.compile(r"\]\((?!\w+://)([\w.-]*\.md)?(?:#([\w-]+))?\)")
HEADING = re.compile(r"^(#{1,6})\s+(.+?)\s*#*\s*$")
FENCE = re.compile(r"^\s*(```|~~~)")


def _tracked_files() -> list[Path]:
    if shutil.which("git") is None or not (ROOT / ".git").exists():
        pytest.skip("not a git checkout: tracked files cannot be listed")
    out = subprocess.run(["git", "ls-files", "-z"], cwd=ROOT, capture_output=True, check=True).stdout
    return [ROOT / name for name in out.decode("utf-8").split("\0") if name]


def _text(path: Path) -> str | None:
    """A file's text, or None when it is gone or not text."""
    try:
        data = path.read_bytes()
    except (FileNotFoundError, IsADirectoryError):
        return None
    if b"\0" in data[:8192]:
        return None
    return data.decode("utf-8", errors="replace")


def github_anchor(heading: str) -> str:
    """The anchor GitHub gives a heading: lower case, punctuation dropped, spaces to hyphens."""
    text = re.sub(r"\[([^\]]*)\]\([^)]*\)", r"\1", heading)  # a link's text, not its target
    text = text.strip().lower()
    text = re.sub(r"[^\w\- ]", "", text)
    return text.replace(" ", "-")


@cache
def anchors(page: Path) -> frozenset[str]:
    """Every heading anchor of a markdown page, with GitHub's -1, -2 ... for repeated headings."""
    seen: dict[str, int] = {}
    out: set[str] = set()
    in_fence = False
    for line in page.read_text(encoding="utf-8").splitlines():
        if FENCE.match(line):
            in_fence = not in_fence
            continue
        m = None if in_fence else HEADING.match(line)
        if not m:
            continue
        base = github_anchor(m.group(2))
        n = seen.get(base, 0)
        seen[base] = n + 1
        out.add(base if n == 0 else f"{base}-{n}")
    return frozenset(out)


def test_github_anchor_follows_githubs_rules():
    assert github_anchor("Peukert's law") == "peukerts-law"
    assert github_anchor("Tables (per 12 V block, about 25 °C)") == "tables-per-12-v-block-about-25-c"
    assert github_anchor("NMEA 0183 XDR") == "nmea-0183-xdr"
    assert github_anchor("`system.toml` keys") == "systemtoml-keys"


def test_no_tracked_file_outside_docs_cites_the_internal_references():
    offenders = []
    for path in _tracked_files():
        rel = path.relative_to(ROOT).as_posix()
        if rel.startswith("docs/"):
            continue
        text = _text(path)
        if text is None:
            continue
        for lineno, line in enumerate(text.splitlines(), 1):
            if any(name in line for name in INTERNAL_NAMES):
                offenders.append(f"{rel}:{lineno}: {line.strip()}")
    assert not offenders, "cite the docs/ pages instead:\n" + "\n".join(offenders)


def _citations() -> list[tuple[str, Path, str | None]]:
    """(where, page, anchor) for every docs citation in tracked .py/.md files and the docs pages."""
    sources = {p for p in _tracked_files() if p.suffix in (".py", ".md")}
    sources |= set(DOCS.glob("*.md"))  # pages not yet committed link to each other too
    found = []
    for path in sorted(sources):
        text = _text(path)
        if text is None:
            continue
        rel = path.relative_to(ROOT).as_posix()
        for lineno, line in enumerate(text.splitlines(), 1):
            where = f"{rel}:{lineno}"
            for m in CITATION.finditer(line):
                found.append((where, DOCS / m.group(1), m.group(2)))
            if path.parent == DOCS and path.suffix == ".md":
                for m in DOC_LINK.finditer(line):
                    if m.group(1) is None and m.group(2) is None:
                        continue
                    found.append((where, DOCS / m.group(1) if m.group(1) else path, m.group(2)))
    return found


def test_every_cited_docs_page_and_anchor_exists():
    found = _citations()
    assert found, "expected the code to cite docs/ pages"
    broken = []
    for where, page, anchor in found:
        if not page.is_file():
            broken.append(f"{where}: no page docs/{page.name}")
        elif anchor is not None and anchor not in anchors(page):
            broken.append(f"{where}: docs/{page.name} has no heading #{anchor} "
                          f"(it has: {', '.join(sorted(anchors(page)))})")
    assert not broken, "\n".join(broken)


def test_every_docs_page_is_listed_in_the_docs_readme():
    readme = (DOCS / "README.md").read_text(encoding="utf-8")
    missing = [p.name for p in sorted(DOCS.glob("*.md")) if p.name != "README.md" and f"]({p.name})" not in readme]
    assert not missing, f"add these pages to the table in docs/README.md: {missing}"


def test_the_system_toml_example_in_contracts_validates():
    from drawdown.analysis.system import parse_system

    text = (DOCS / "contracts.md").read_text(encoding="utf-8")
    blocks = re.findall(r"```toml\n(.*?)```", text, flags=re.S)
    assert blocks, "docs/contracts.md should show a system.toml example"
    for block in blocks:
        system = parse_system(block, source="docs/contracts.md")
        assert system.battery.rated_capacity_Ah > 0
