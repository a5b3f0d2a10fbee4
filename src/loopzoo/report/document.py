"""A small neutral document (headings, paragraphs, lists, tables, figures) rendered to both
Markdown and HTML, so the two files always say the same thing."""

from __future__ import annotations

from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass
from typing import Any

__all__ = [
    "Block", "Bullets", "Column", "Contents", "Figure", "Heading", "Paragraph", "Table",
    "contents_of", "table",
]


@dataclass(frozen=True)
class Heading:
    """A section title; ``anchor`` is a stable id for links inside the HTML page."""

    level: int
    text: str
    anchor: str = ""


@dataclass(frozen=True)
class Paragraph:
    """Plain text; ``note`` paragraphs are shown as side remarks."""

    text: str
    note: bool = False


@dataclass(frozen=True)
class Bullets:
    """A list of plain-text items."""

    items: tuple[str, ...]


@dataclass(frozen=True)
class Contents:
    """Links to sections of the page: (text, anchor) pairs; plain list items in Markdown."""

    entries: tuple[tuple[str, str], ...]


@dataclass(frozen=True)
class Table:
    """A table of text cells; ``numeric`` marks columns to right-align."""

    caption: str
    headers: tuple[str, ...]
    rows: tuple[tuple[str, ...], ...]
    numeric: tuple[bool, ...] = ()


@dataclass(frozen=True)
class Column:
    """One table column declared once: its title, how a cell is made from an item, and whether
    it holds numbers (right-aligned)."""

    title: str
    cell: Callable[[Any], str]
    numeric: bool = False


def table(caption: str, columns: Sequence[Column], items: Iterable[Any]) -> Table:
    """A :class:`Table` of one line per item, headers and alignment taken from ``columns``."""
    return Table(
        caption,
        tuple(column.title for column in columns),
        tuple(tuple(column.cell(item) for column in columns) for item in items),
        tuple(column.numeric for column in columns),
    )


@dataclass(frozen=True)
class Figure:
    """A PNG picture with its alternative text and caption (HTML only; Markdown names it)."""

    png: bytes
    alt: str
    caption: str


Block = Heading | Paragraph | Bullets | Contents | Table | Figure


def contents_of(blocks: Sequence[Block], level: int = 2) -> Contents:
    """The table of contents of ``blocks``: every heading of ``level`` that has an anchor."""
    return Contents(tuple(
        (block.text, block.anchor)
        for block in blocks
        if isinstance(block, Heading) and block.level == level and block.anchor
    ))
