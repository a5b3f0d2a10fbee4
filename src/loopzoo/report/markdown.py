"""Render a document to GitHub-flavoured Markdown (pictures are left to the HTML page)."""

from __future__ import annotations

from collections.abc import Sequence

from loopzoo.report.document import Block, Bullets, Contents, Figure, Heading, Paragraph, Table

__all__ = ["render_markdown"]


def _cell(text: str) -> str:
    return text.replace("|", "\\|").replace("\n", " ")


def _table(table: Table) -> list[str]:
    numeric = table.numeric or (False,) * len(table.headers)
    align = ["---:" if right else "---" for right in numeric]
    lines = [f"**{table.caption}**", ""] if table.caption else []
    lines.append("| " + " | ".join(_cell(h) for h in table.headers) + " |")
    lines.append("| " + " | ".join(align) + " |")
    lines.extend("| " + " | ".join(_cell(c) for c in row) + " |" for row in table.rows)
    return lines


def render_markdown(blocks: Sequence[Block]) -> str:
    """Markdown text of ``blocks``; figures become a one-line pointer to the HTML page."""
    out: list[str] = []
    for block in blocks:
        if isinstance(block, Heading):
            out.append("#" * block.level + " " + block.text)
        elif isinstance(block, Paragraph):
            out.append(f"> {block.text}" if block.note else block.text)
        elif isinstance(block, Bullets):
            out.append("\n".join(f"- {item}" for item in block.items))
        elif isinstance(block, Contents):
            out.append("Sections: " + " · ".join(text for text, _ in block.entries))
        elif isinstance(block, Table):
            out.append("\n".join(_table(block)))
        elif isinstance(block, Figure):
            out.append(f"*Picture in report.html: {block.caption}*")
        out.append("")
    return "\n".join(out).rstrip("\n") + "\n"
