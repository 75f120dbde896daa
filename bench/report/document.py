"""The report's document model and its two renderings: Markdown, and self-contained HTML.

A ``Document`` is a title and a list of blocks (``Heading``, ``Paragraph``, ``Table``, ``Picture``);
``render_markdown`` links the figures, ``render_html`` embeds them (base64 PNG) so that one file
can be shared. Paragraph and caption text is Markdown inline: `code` and *emphasis* only. Table
cells are formatted by ``tables.format_value`` in both renderings.
"""

from __future__ import annotations

import base64
import html
import re
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from ..tables import format_value, to_markdown


@dataclass
class Heading:
    level: int
    text: str


@dataclass
class Paragraph:
    text: str


@dataclass
class Table:
    frame: pd.DataFrame
    caption: str = ""
    csv_name: str | None = None  # written as tables/<csv_name>.csv by the report


@dataclass
class Picture:
    path: Path  # relative to the report folder
    caption: str
    number: int = 0


@dataclass
class Document:
    title: str
    blocks: list = field(default_factory=list)
    figures: int = 0
    attachments: dict = field(default_factory=dict)  # name -> DataFrame written as CSV only, not shown

    def add(self, *blocks) -> None:
        self.blocks.extend(blocks)

    def picture(self, path: Path, caption: str) -> Picture:
        """The next numbered figure (the caller adds it where it belongs)."""
        self.figures += 1
        return Picture(path, caption, self.figures)

    def tables(self) -> dict[str, pd.DataFrame]:
        """The tables that carry a CSV name, by that name, and the attachments."""
        shown = {b.csv_name: b.frame for b in self.blocks if isinstance(b, Table) and b.csv_name}
        return {**self.attachments, **shown}

    def pictures(self) -> list[Picture]:
        return [b for b in self.blocks if isinstance(b, Picture)]


def render_markdown(document: Document) -> str:
    lines = [f"# {document.title}", ""]
    for block in document.blocks:
        if isinstance(block, Heading):
            lines += ["#" * block.level + " " + block.text, ""]
        elif isinstance(block, Paragraph):
            lines += [block.text, ""]
        elif isinstance(block, Table):
            if block.caption:
                lines += [f"*{block.caption}*", ""]
            lines += [to_markdown(block.frame), ""]
        elif isinstance(block, Picture):
            lines += [f"![Figure {block.number}]({block.path.as_posix()})", "",
                      f"*Figure {block.number}: {block.caption}*", ""]
    return "\n".join(lines)


HTML_STYLE = """
body { font-family: system-ui, sans-serif; max-width: 75em; margin: 2em auto; padding: 0 1em; line-height: 1.45; }
table { border-collapse: collapse; font-size: 0.85em; margin: 0.5em 0 1.5em; }
th, td { border: 1px solid #bbb; padding: 0.2em 0.5em; text-align: right; }
th { background: #eee; }
figure { margin: 1em 0 2em; }
figure img { max-width: 100%; }
figcaption, .caption { font-size: 0.9em; color: #333; }
code { background: #f3f3f3; padding: 0 0.2em; }
"""


def _inline_html(text: str) -> str:
    escaped = html.escape(text, quote=False)
    escaped = re.sub(r"`([^`]+)`", r"<code>\1</code>", escaped)
    return re.sub(r"\*([^*]+)\*", r"<em>\1</em>", escaped)


def _table_html(frame: pd.DataFrame) -> str:
    head = "".join(f"<th>{html.escape(str(c))}</th>" for c in frame.columns)
    body = "".join("<tr>" + "".join(f"<td>{html.escape(format_value(v))}</td>" for v in row) + "</tr>"
                   for row in frame.itertuples(index=False))
    if not body:
        body = f'<tr><td colspan="{max(len(frame.columns), 1)}">(no rows)</td></tr>'
    return f"<table><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>"


def render_html(document: Document, folder: Path) -> str:
    """One HTML page; pictures are read from ``folder`` and embedded."""
    parts = ["<!DOCTYPE html>", '<html lang="en"><head><meta charset="utf-8">',
             f"<title>{html.escape(document.title)}</title><style>{HTML_STYLE}</style></head><body>",
             f"<h1>{html.escape(document.title)}</h1>"]
    for block in document.blocks:
        if isinstance(block, Heading):
            parts.append(f"<h{block.level}>{html.escape(block.text)}</h{block.level}>")
        elif isinstance(block, Paragraph):
            parts.append(f"<p>{_inline_html(block.text)}</p>")
        elif isinstance(block, Table):
            if block.caption:
                parts.append(f'<p class="caption"><em>{_inline_html(block.caption)}</em></p>')
            parts.append(_table_html(block.frame))
        elif isinstance(block, Picture):
            data = base64.b64encode((Path(folder) / block.path).read_bytes()).decode("ascii")
            parts.append(f'<figure><img alt="Figure {block.number}" src="data:image/png;base64,{data}">'
                         f"<figcaption>Figure {block.number}: {_inline_html(block.caption)}</figcaption></figure>")
    parts.append("</body></html>")
    return "\n".join(parts)
