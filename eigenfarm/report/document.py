"""A report page as a list of blocks, rendered to Markdown and to a standalone HTML page by one code path.

Blocks: :class:`Heading`, :class:`Text`, :class:`Items`, :class:`Table`, :class:`Figure`.  Text is plain
(no markup); renderers escape it as their format needs.
"""

from __future__ import annotations

import html
from dataclasses import dataclass


@dataclass(frozen=True)
class Heading:
    text: str
    level: int = 2


@dataclass(frozen=True)
class Text:
    text: str


@dataclass(frozen=True)
class Items:
    items: tuple[str, ...]


@dataclass(frozen=True)
class Table:
    header: tuple[str, ...]
    rows: tuple[tuple[str, ...], ...]


@dataclass(frozen=True)
class Figure:
    """An image file (relative path) and its caption."""

    path: str
    caption: str


def _md_cell(text: str) -> str:
    return text.replace("|", "\\|")


def to_markdown(blocks: list) -> str:
    """The page as GitHub-flavoured Markdown."""
    out = []
    for block in blocks:
        if isinstance(block, Heading):
            out.append("#" * block.level + " " + block.text)
        elif isinstance(block, Text):
            out.append(block.text)
        elif isinstance(block, Items):
            out.append("\n".join(f"- {item}" for item in block.items))
        elif isinstance(block, Table):
            lines = ["| " + " | ".join(map(_md_cell, block.header)) + " |",
                     "|" + "---|" * len(block.header)]
            lines += ["| " + " | ".join(map(_md_cell, row)) + " |" for row in block.rows]
            out.append("\n".join(lines))
        elif isinstance(block, Figure):
            out.append(f"![{block.caption}]({block.path})\n\n*{block.caption}*")
    return "\n\n".join(out) + "\n"


_STYLE = ("body{font-family:system-ui,sans-serif;max-width:60rem;margin:2rem auto;padding:0 1rem;color:#222}"
          "table{border-collapse:collapse;margin:0.5rem 0}td,th{border:1px solid #bbb;padding:0.2rem 0.5rem;"
          "text-align:right}th{background:#eee}figure{margin:1rem 0}img{max-width:100%}"
          "figcaption{font-size:0.9rem;color:#555}")


def to_html(blocks: list, title: str) -> str:
    """The page as one standalone HTML file (images referenced by relative path)."""
    esc = html.escape
    body = []
    for block in blocks:
        if isinstance(block, Heading):
            body.append(f"<h{block.level}>{esc(block.text)}</h{block.level}>")
        elif isinstance(block, Text):
            body.append(f"<p>{esc(block.text)}</p>")
        elif isinstance(block, Items):
            body.append("<ul>" + "".join(f"<li>{esc(i)}</li>" for i in block.items) + "</ul>")
        elif isinstance(block, Table):
            head = "".join(f"<th>{esc(h)}</th>" for h in block.header)
            rows = "".join("<tr>" + "".join(f"<td>{esc(c)}</td>" for c in row) + "</tr>" for row in block.rows)
            body.append(f"<table><thead><tr>{head}</tr></thead><tbody>{rows}</tbody></table>")
        elif isinstance(block, Figure):
            body.append(f'<figure><img src="{esc(block.path)}" alt="{esc(block.caption)}">'
                        f"<figcaption>{esc(block.caption)}</figcaption></figure>")
    return (f"<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\"><title>{esc(title)}</title>"
            f"<style>{_STYLE}</style></head><body>\n" + "\n".join(body) + "\n</body></html>\n")
