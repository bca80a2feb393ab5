"""A small document model for study reports, rendered to self-contained HTML or to Markdown.

Holds:
    Paragraph -- a sentence or a few.
    Table -- a header and rows of text cells.
    Figure -- a PNG image (bytes) with its caption.
    Section -- a heading and its blocks.
    to_html -- one HTML page; figures embedded as base64 data URIs, styles inline, no links out.
    to_markdown -- the same text and tables as Markdown; figures named, not embedded.
"""

from __future__ import annotations

import base64
import html
from dataclasses import dataclass, field


@dataclass(frozen=True)
class Paragraph:
    """Example: ``Paragraph("Warm clears 50% at 100 new episodes.")``."""

    text: str


@dataclass(frozen=True)
class Table:
    """Example: ``Table(("strategy", "success"), (("warm", "61.0%"),), caption="Base cell")``."""

    header: tuple[str, ...]
    rows: tuple[tuple[str, ...], ...]
    caption: str = ""

    def __post_init__(self) -> None:
        for row in self.rows:
            if len(row) != len(self.header):
                raise ValueError(f"rows: got a row of {len(row)} cells {row!r}, expected "
                                 f"{len(self.header)} (one per header cell)")


@dataclass(frozen=True)
class Figure:
    """Example: ``Figure(png_bytes, "Success against new episodes")``."""

    png: bytes
    caption: str

    def __post_init__(self) -> None:
        if not self.png.startswith(b"\x89PNG"):
            raise ValueError("png: expected the bytes of a PNG image")


@dataclass(frozen=True)
class Section:
    """Example: ``Section("Data budget", [Paragraph("..."), Table(...)])``."""

    title: str
    blocks: list = field(default_factory=list)


_STYLE = """
body { font-family: sans-serif; max-width: 1100px; margin: 2em auto; color: #222; }
h1 { font-size: 1.6em; } h2 { font-size: 1.25em; margin-top: 2em; border-bottom: 1px solid #ccc; }
table { border-collapse: collapse; margin: 0.8em 0; font-size: 0.9em; }
th, td { border: 1px solid #bbb; padding: 0.25em 0.6em; text-align: right; }
th { background: #f0f0f0; } td:first-child, th:first-child { text-align: left; }
caption { caption-side: top; text-align: left; font-style: italic; padding-bottom: 0.3em; }
figure { margin: 1em 0; } figcaption { font-style: italic; font-size: 0.9em; }
img { max-width: 100%; }
"""


def _html_block(block) -> str:
    if isinstance(block, Paragraph):
        return f"<p>{html.escape(block.text)}</p>"
    if isinstance(block, Table):
        caption = f"<caption>{html.escape(block.caption)}</caption>" if block.caption else ""
        head = "".join(f"<th>{html.escape(cell)}</th>" for cell in block.header)
        body = "".join(
            "<tr>" + "".join(f"<td>{html.escape(cell)}</td>" for cell in row) + "</tr>"
            for row in block.rows
        )
        return f"<table>{caption}<thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>"
    if isinstance(block, Figure):
        data = base64.b64encode(block.png).decode("ascii")
        alt = html.escape(block.caption, quote=True)
        return (f'<figure><img alt="{alt}" src="data:image/png;base64,{data}">'
                f"<figcaption>{html.escape(block.caption)}</figcaption></figure>")
    raise ValueError(f"block: got {type(block).__name__}, expected Paragraph, Table or Figure")


def to_html(title: str, sections: list[Section]) -> str:
    """One self-contained HTML page: inline styles, images as data URIs, no external links."""
    parts = ["<!DOCTYPE html>", '<html lang="en"><head><meta charset="utf-8">',
             f"<title>{html.escape(title)}</title><style>{_STYLE}</style></head><body>",
             f"<h1>{html.escape(title)}</h1>"]
    for section in sections:
        parts.append(f"<h2>{html.escape(section.title)}</h2>")
        parts.extend(_html_block(block) for block in section.blocks)
    parts.append("</body></html>")
    return "\n".join(parts) + "\n"


def _markdown_cell(text: str) -> str:
    return text.replace("|", "\\|")


def _markdown_block(block) -> str:
    if isinstance(block, Paragraph):
        return block.text
    if isinstance(block, Table):
        lines = [f"*{block.caption}*", ""] if block.caption else []
        lines.append("| " + " | ".join(_markdown_cell(c) for c in block.header) + " |")
        lines.append("|" + "|".join("---" for _ in block.header) + "|")
        lines += ["| " + " | ".join(_markdown_cell(c) for c in row) + " |" for row in block.rows]
        return "\n".join(lines)
    if isinstance(block, Figure):
        return f"(Figure in report.html: {block.caption})"
    raise ValueError(f"block: got {type(block).__name__}, expected Paragraph, Table or Figure")


def to_markdown(title: str, sections: list[Section]) -> str:
    """The report's text and tables as Markdown; each figure is replaced by its caption."""
    parts = [f"# {title}"]
    for section in sections:
        parts.append(f"## {section.title}")
        parts.extend(_markdown_block(block) for block in section.blocks)
    return "\n\n".join(parts) + "\n"
