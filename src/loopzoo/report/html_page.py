"""Render a document to one self-contained HTML page (pictures embedded as PNG data URIs)."""

from __future__ import annotations

import base64
from collections.abc import Sequence
from html import escape

from loopzoo.report.document import Block, Bullets, Contents, Figure, Heading, Paragraph, Table

__all__ = ["render_html"]

_STYLE = """
body { font-family: system-ui, sans-serif; max-width: 70rem; margin: 2rem auto; padding: 0 1rem;
       color: #1a1a1a; line-height: 1.45; }
h1 { border-bottom: 2px solid #1a1a1a; padding-bottom: .3rem; }
h2 { margin-top: 2.5rem; border-bottom: 1px solid #999; }
h3 { margin-top: 1.6rem; }
div.wide { overflow-x: auto; }
table { border-collapse: collapse; margin: .6rem 0 1.2rem; font-size: .9rem; }
caption { text-align: left; font-weight: 600; padding-bottom: .3rem; }
th, td { border: 1px solid #bbb; padding: .25rem .5rem; vertical-align: top; }
th { background: #eee; text-align: left; }
td.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
tbody tr:nth-child(even) { background: #f7f7f7; }
p.note { border-left: 4px solid #888; padding-left: .7rem; color: #333; }
figure { margin: 1rem 0 2rem; }
figure img { max-width: 100%; height: auto; border: 1px solid #ddd; }
figcaption { font-size: .9rem; color: #333; }
""".strip()


def _table(table: Table) -> str:
    numeric = table.numeric or (False,) * len(table.headers)
    head = "".join(f'<th scope="col">{escape(h)}</th>' for h in table.headers)
    body = "\n".join(
        "<tr>"
        + "".join(
            f'<td class="num">{escape(c)}</td>' if right else f"<td>{escape(c)}</td>"
            for c, right in zip(row, numeric, strict=True)
        )
        + "</tr>"
        for row in table.rows
    )
    caption = f"<caption>{escape(table.caption)}</caption>" if table.caption else ""
    return (
        f'<div class="wide"><table>{caption}\n<thead><tr>{head}</tr></thead>\n'
        f"<tbody>\n{body}\n</tbody></table></div>"
    )


def _figure(figure: Figure) -> str:
    data = base64.b64encode(figure.png).decode("ascii")
    return (
        f'<figure><img src="data:image/png;base64,{data}" alt="{escape(figure.alt)}">'
        f"<figcaption>{escape(figure.caption)}</figcaption></figure>"
    )


def _block(block: Block) -> str:
    if isinstance(block, Heading):
        anchor = f' id="{escape(block.anchor)}"' if block.anchor else ""
        return f"<h{block.level}{anchor}>{escape(block.text)}</h{block.level}>"
    if isinstance(block, Paragraph):
        css = ' class="note"' if block.note else ""
        return f"<p{css}>{escape(block.text)}</p>"
    if isinstance(block, Bullets):
        return "<ul>\n" + "\n".join(f"<li>{escape(i)}</li>" for i in block.items) + "\n</ul>"
    if isinstance(block, Contents):
        links = " · ".join(f'<a href="#{escape(a)}">{escape(t)}</a>' for t, a in block.entries)
        return f"<nav><p>Sections: {links}</p></nav>"
    if isinstance(block, Table):
        return _table(block)
    return _figure(block)


def render_html(title: str, blocks: Sequence[Block]) -> str:
    """A complete HTML5 page with inline style and no scripts or external resources."""
    body = "\n".join(_block(block) for block in blocks)
    return (
        "<!DOCTYPE html>\n"
        '<html lang="en">\n<head>\n<meta charset="utf-8">\n'
        '<meta name="viewport" content="width=device-width, initial-scale=1">\n'
        f"<title>{escape(title)}</title>\n<style>\n{_STYLE}\n</style>\n</head>\n<body>\n"
        f"{body}\n</body>\n</html>\n"
    )
