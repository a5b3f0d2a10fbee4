"""A small neutral document (headings, paragraphs, lists, tables, figures) rendered to both
Markdown and HTML, so the two files always say the same thing."""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["Block", "Bullets", "Contents", "Figure", "Heading", "Paragraph", "Table"]


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
class Figure:
    """A PNG picture with its alternative text and caption (HTML only; Markdown names it)."""

    png: bytes
    alt: str
    caption: str


Block = Heading | Paragraph | Bullets | Contents | Table | Figure
