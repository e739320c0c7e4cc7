"""Relative links between the Markdown pages (README.md and docs/) point at files and headings that exist."""

from __future__ import annotations

import re
from pathlib import Path
from urllib.parse import unquote

REPO = Path(__file__).resolve().parents[1]
PAGES = sorted((REPO / "docs").rglob("*.md")) + [REPO / "README.md"]
LINK = re.compile(r"(?<!\!)\[[^\]]*\]\(([^)\s]+)(?:\s+\"[^\"]*\")?\)|!\[[^\]]*\]\(([^)\s]+)\)")


def _strip_code(text: str) -> str:
    text = re.sub(r"^(`{3,}|~{3,}).*?^\1\s*$", "", text, flags=re.S | re.M)
    return re.sub(r"`[^`\n]*`", "", text)


def anchors(path: Path) -> set[str]:
    """Heading anchors as a code host makes them: lower case, punctuation dropped, spaces to '-'."""
    out: set[str] = set()
    seen: dict[str, int] = {}
    text = re.sub(r"^(`{3,}|~{3,}).*?^\1\s*$", "", path.read_text(encoding="utf-8"), flags=re.S | re.M)
    for line in text.splitlines():
        m = re.match(r"^#{1,6}\s+(.*?)\s*#*\s*$", line)
        if not m:
            continue
        slug = re.sub(r"[^\w\- ]", "", m.group(1).strip().lower()).replace(" ", "-")
        n = seen.get(slug, 0)
        out.add(slug if n == 0 else f"{slug}-{n}")
        seen[slug] = n + 1
    return out


def test_relative_links_resolve():
    broken = []
    for page in PAGES:
        for m in LINK.finditer(_strip_code(page.read_text(encoding="utf-8"))):
            target = m.group(1) or m.group(2)
            if re.match(r"^[a-z]+:", target) or target.startswith("//"):
                continue  # an absolute URL: not checked offline
            file_part, _, anchor = target.partition("#")
            dest = (page.parent / unquote(file_part)).resolve() if file_part else page
            if not dest.exists():
                broken.append(f"{page.relative_to(REPO)}: {target} (no such file)")
            elif anchor and dest.suffix == ".md" and anchor not in anchors(dest):
                broken.append(f"{page.relative_to(REPO)}: {target} (no such heading)")
    assert not broken, "broken links:\n" + "\n".join(broken)


def test_anchor_rule_matches_the_code_hosts():
    p = REPO / "docs" / "reference" / "cli.md"
    a = anchors(p)
    assert "bench-run" in a and "bench-robot-init" in a


def test_every_page_says_who_it_is_for_and_what_they_will_have_done():
    lacking = []
    for page in sorted((REPO / "docs").rglob("*.md")):
        head = page.read_text(encoding="utf-8")[:1500]
        if "**For**" not in head or "**at the end**" not in head:
            lacking.append(str(page.relative_to(REPO)))
    assert not lacking, "pages without a '**For** ...; **at the end** ...' opening: " + ", ".join(lacking)
