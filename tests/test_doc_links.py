"""The README and the pages of docs/ stay usable: links land, the README stays short with its
review warning on the first screen, and the commands they name are commands ``dochar`` has.

Anchors follow GitHub's rule for heading ids (lower case; letters, digits, spaces, hyphens and
underscores kept; spaces become hyphens; a repeated heading gets ``-1``, ``-2``...), checked below
against the worked examples of GitHub's own documentation ("Basic writing and formatting
syntax", section links).
"""

from __future__ import annotations

import re
import unicodedata
from pathlib import Path

import pytest

from dochar import cli
from tests.helpers import REPO

PAGES = [REPO / "README.md", *sorted((REPO / "docs").glob("*.md"))]
FENCE = re.compile(r"^```.*?^```", re.DOTALL | re.MULTILINE)
LINK = re.compile(r"\[[^\]]*\]\(([^)\s]+)\)")
HEADING = re.compile(r"^#{1,6} +(.+?) *#*$", re.MULTILINE)
FIRST_SCREEN = 40      # lines a newcomer sees before scrolling (common practice: one screen)
README_LINES = 250


def slug(heading: str) -> str:
    """GitHub's id of a heading: the rendered text (no code ticks, emphasis or link targets),
    lower case, every character but letters, marks, digits, spaces, ``-`` and ``_`` dropped,
    spaces turned into hyphens."""
    text = re.sub(r"\[([^\]]*)\]\([^)]*\)", r"\1", heading)
    text = re.sub(r"(?<!\w)[*_]+|[*_]+(?!\w)|`", "", text)
    kept = "".join(c for c in text.lower()
                   if c in " -_" or unicodedata.category(c)[0] in "LMN")
    return kept.replace(" ", "-")


def anchors(path: Path) -> set[str]:
    """Every heading id of a page, repeated headings numbered as GitHub numbers them."""
    seen: dict[str, int] = {}
    found = set()
    for heading in HEADING.findall(FENCE.sub("", path.read_text(encoding="utf-8"))):
        base = slug(heading)
        count = seen.get(base, 0)
        found.add(base if count == 0 else f"{base}-{count}")
        seen[base] = count + 1
    return found


def links(path: Path) -> list[str]:
    """Relative link targets of a page, outside code blocks and code spans."""
    text = re.sub(r"`[^`\n]*`", "", FENCE.sub("", path.read_text(encoding="utf-8")))
    return [target for target in LINK.findall(text)
            if not re.match(r"[a-z][a-z0-9+.-]*:", target)]   # http:, https:, mailto: ...


def test_slug_follows_the_worked_examples_of_githubs_documentation(tmp_path):
    # GitHub docs, "Section links": the heading below gets this id, and the second of two equal
    # headings gets the suffix -1
    assert slug("This'll be a _Helpful_ Section About the Greek Letter Θ!") == \
        "thisll-be-a-helpful-section-about-the-greek-letter-θ"
    page = tmp_path / "p.md"
    page.write_text("# This heading is not unique in the file\n\ntext\n\n"
                    "# This heading is not unique in the file\n", encoding="utf-8")
    assert anchors(page) == {"this-heading-is-not-unique-in-the-file",
                             "this-heading-is-not-unique-in-the-file-1"}


def test_code_ticks_and_colons_leave_the_id_as_github_writes_it():
    # worked by hand with the rule above: ticks and the colon dropped, spaces hyphenated
    assert slug("Applying a model: `dochar predict`") == "applying-a-model-dochar-predict"


@pytest.mark.parametrize("page", PAGES, ids=lambda p: p.name)
def test_every_relative_link_and_anchor_resolves(page):
    broken = []
    for target in links(page):
        file_part, _, anchor = target.partition("#")
        destination = (page.parent / file_part).resolve() if file_part else page
        if not destination.exists():
            broken.append(f"{target}: no file {destination}")
        elif anchor and destination.suffix == ".md" and anchor not in anchors(destination):
            broken.append(f"{target}: no heading #{anchor} in {destination.name}")
    assert not broken, f"{page.name}: " + "; ".join(broken)


def test_the_readme_is_short_and_warns_on_its_first_screen():
    lines = (REPO / "README.md").read_text(encoding="utf-8").splitlines()
    assert len(lines) <= README_LINES
    first_screen = " ".join(" ".join(lines[:FIRST_SCREEN]).replace(">", " ").split())
    assert "human review" in first_screen and "your own documents" in first_screen


def subcommands(capsys) -> set[str]:
    """The subcommands `dochar --help` lists on its usage line."""
    with pytest.raises(SystemExit):
        cli.main(["--help"])
    return set(re.search(r"\{([^}]*)\}", capsys.readouterr().out).group(1).split(","))


def named_commands(path: Path) -> set[str]:
    """The word after ``dochar`` wherever a page quotes a command: code spans that start with
    ``dochar``, and code-block lines that do (after a ``$`` prompt or a ``.venv/bin/``)."""
    text = path.read_text(encoding="utf-8")
    quoted = re.findall(r"`dochar ([^`\s]+)", text)
    for block in FENCE.findall(text):
        quoted += re.findall(r"^(?:\$ )?(?:\.venv/bin/)?dochar ([^\s]+)", block, re.MULTILINE)
    # an error line quotes the command as `dochar predict: error: ...`
    return {word.rstrip(":") for word in quoted if not word.startswith("-")}


def test_commands_the_pages_name_are_in_dochar_help(capsys):
    known = subcommands(capsys)
    unknown = {f"{page.name}: dochar {word}" for page in PAGES
               for word in named_commands(page) - known}
    assert not unknown, sorted(unknown)


def test_a_command_dochar_lacks_is_caught(capsys, tmp_path):
    # the check above would pass on pages naming nothing: a page naming a made-up command
    page = tmp_path / "p.md"
    page.write_text("Run `dochar frobnicate now`, then:\n\n```bash\n$ dochar run x=1\n```\n",
                    encoding="utf-8")
    assert named_commands(page) - subcommands(capsys) == {"frobnicate"}
