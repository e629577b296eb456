"""Named blocks of Markdown files between marker comments, read and replaced in place.

The blocks live in the README and the pages under ``docs/``; a block name belongs to one file.
"""

from __future__ import annotations

import re
import textwrap
from pathlib import Path

from dochar.errors import DocharError

OPEN = "<!-- figures: {name} -->"
CLOSE = "<!-- /figures -->"
_BLOCK = re.compile(r"<!-- figures: (?P<name>[a-z0-9-]+) -->\n(?P<body>.*?)<!-- /figures -->",
                    re.DOTALL)


class FigureBlockError(DocharError):
    """A file without the block asked for, or a block named twice."""


def read_blocks(text: str) -> dict[str, str]:
    """Block name -> its body (the text between the markers, ending in a newline)."""
    blocks: dict[str, str] = {}
    for match in _BLOCK.finditer(text):
        name = match["name"]
        if name in blocks:
            line = text.count("\n", 0, match.start()) + 1
            raise FigureBlockError(f"line {line}: figure block {name!r} appears twice")
        blocks[name] = match["body"]
    return blocks


def documents(root: Path) -> list[Path]:
    """The files that hold figure blocks: ``README.md``, ``DEVELOPERS.md`` (where the checkout
    has one) and ``docs/*.md`` under ``root``."""
    guide = [root / "DEVELOPERS.md"] if (root / "DEVELOPERS.md").is_file() else []
    return [root / "README.md", *guide, *sorted((root / "docs").glob("*.md"))]


def find_blocks(paths: list[Path]) -> dict[str, tuple[Path, str]]:
    """Block name -> (the file holding it, its body), over every file of ``paths``."""
    found: dict[str, tuple[Path, str]] = {}
    for path in paths:
        try:
            blocks = read_blocks(path.read_text(encoding="utf-8"))
        except FigureBlockError as error:
            raise FigureBlockError(f"{path}, {error}") from None
        for name, body in blocks.items():
            if name in found:
                raise FigureBlockError(f"figure block {name!r} appears in both "
                                       f"{found[name][0]} and {path}")
            found[name] = (path, body)
    return found


def replace_block(text: str, name: str, body: str) -> str:
    """``text`` with block ``name``'s body replaced by ``body``; a blank line closes the body,
    so a table or paragraph ends before the closing marker."""
    body = body.strip("\n") + "\n\n"
    pattern = re.compile(re.escape(OPEN.format(name=name)) + r"\n.*?" + re.escape(CLOSE),
                         re.DOTALL)
    found = pattern.findall(text)
    if len(found) != 1:
        raise FigureBlockError(f"expected one figure block {name!r} "
                               f"({OPEN.format(name=name)} ... {CLOSE}), found {len(found)}")
    return pattern.sub(lambda _: OPEN.format(name=name) + "\n" + body + CLOSE, text)


def wrap_prose(body: str, width: int = 98) -> str:
    """Paragraphs of ``body`` wrapped at ``width`` (as the pages are); table rows kept whole."""
    out = []
    for paragraph in body.strip("\n").split("\n\n"):
        if paragraph.lstrip().startswith("|"):
            out.append(paragraph)
        else:
            out.append(textwrap.fill(" ".join(paragraph.split()), width=width,
                                     break_long_words=False, break_on_hyphens=False))
    return "\n\n".join(out) + "\n"


def same_figures(old: str, new: str) -> bool:
    """Equal apart from the measurement date and the blank lines around the body."""
    def undated(text: str) -> str:
        return re.sub(r"\b\d{4}-\d{2}-\d{2}\b", "DATE", text.strip())

    return undated(old) == undated(new)
