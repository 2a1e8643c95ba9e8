"""A tiny document model rendered twice: to Markdown and to one self-contained HTML page.

The report is a list of blocks (:class:`Heading`, :class:`Para`, :class:`Bullets`,
:class:`Table`, :class:`Figure`, :class:`Code`, :class:`Note`). Text is plain; the only
inline markup is ``**bold**`` and ```code```, which both renderers understand. The HTML
page embeds every figure as a base64 PNG and its CSS inline, and carries one inline
script that records whether every image decoded (``<body data-figures="ok">``), so a
headless browser can check the page without a network.
"""

from __future__ import annotations

import base64
import html
import re
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

__all__ = ["Heading", "Para", "Bullets", "Table", "Figure", "Code", "Note", "to_markdown", "to_html"]


@dataclass(frozen=True)
class Heading:
    text: str
    level: int = 2
    anchor: str = ""


@dataclass(frozen=True)
class Para:
    text: str


@dataclass(frozen=True)
class Bullets:
    items: tuple


@dataclass(frozen=True)
class Table:
    frame: pd.DataFrame = field(repr=False)
    caption: str = ""
    files: tuple = ()  # relative paths of the exported CSV/TeX


@dataclass(frozen=True)
class Figure:
    png: str  # relative to the report directory
    svg: str
    caption: str
    alt: str


@dataclass(frozen=True)
class Code:
    text: str
    lang: str = ""


@dataclass(frozen=True)
class Note:
    text: str


# ------------------------------------------------------------------------------ markdown
def _md_cell(value) -> str:
    return str(value).replace("|", "\\|").replace("\n", " ")


def _md_table(t: Table) -> str:
    f = t.frame
    head = "| " + " | ".join(_md_cell(c) for c in f.columns) + " |"
    rule = "|" + "|".join("---" for _ in f.columns) + "|"
    body = [
        "| " + " | ".join(_md_cell(v) for v in row) + " |" for row in f.astype(str).to_numpy().tolist()
    ]  # loop over table rows of a summary
    lines = ([f"*{t.caption}*", ""] if t.caption else []) + [head, rule, *body]
    if t.files:
        lines += ["", "Files: " + ", ".join(f"[{p}]({p})" for p in t.files)]
    return "\n".join(lines)


def _md_block(b) -> str:
    if isinstance(b, Heading):
        return "#" * b.level + " " + b.text
    if isinstance(b, Para):
        return b.text
    if isinstance(b, Note):
        return f"> {b.text}"
    if isinstance(b, Bullets):
        return "\n".join(f"- {item}" for item in b.items)
    if isinstance(b, Table):
        return _md_table(b)
    if isinstance(b, Figure):
        return f"![{b.alt}]({b.png})\n\n*{b.caption}* (vector: [{b.svg}]({b.svg}))"
    if isinstance(b, Code):
        return f"```{b.lang}\n{b.text.rstrip()}\n```"
    raise TypeError(f"unknown block {type(b).__name__}")


def to_markdown(blocks) -> str:
    """Render blocks as GitHub-flavoured Markdown (figures linked, not embedded)."""
    return "\n\n".join(_md_block(b) for b in blocks) + "\n"


# ---------------------------------------------------------------------------------- html
_INLINE = re.compile(r"\*\*(.+?)\*\*|`(.+?)`")

CSS = """
:root { --ink: #1a1a1a; --muted: #555; --rule: #bbb; --tint: #f3f3f1; }
body { font: 16px/1.5 system-ui, -apple-system, "Segoe UI", Roboto, sans-serif;
       color: var(--ink); max-width: 68rem; margin: 2rem auto; padding: 0 1.25rem; }
h1 { font-size: 1.7rem; border-bottom: 3px solid var(--ink); padding-bottom: .3rem; }
h2 { font-size: 1.3rem; margin-top: 2.4rem; border-bottom: 1px solid var(--rule); }
h3 { font-size: 1.08rem; margin-top: 1.6rem; }
table { border-collapse: collapse; margin: .6rem 0 1.2rem; font-size: .86rem;
        font-variant-numeric: tabular-nums; display: block; overflow-x: auto; }
caption { caption-side: top; text-align: left; font-style: italic; color: var(--muted);
          padding-bottom: .3rem; }
th, td { padding: .25rem .6rem; border-bottom: 1px solid #ddd; text-align: left;
         vertical-align: top; }
thead th { border-bottom: 2px solid var(--ink); background: var(--tint); }
figure { margin: 1.2rem 0 2rem; }
figure img { max-width: 100%; height: auto; border: 1px solid #e4e4e4; }
figcaption { color: var(--muted); font-size: .9rem; }
blockquote { margin: .6rem 0; padding: .4rem .8rem; border-left: 4px solid var(--rule);
             background: var(--tint); }
pre { background: var(--tint); padding: .8rem; overflow-x: auto; font-size: .8rem; }
code { font-size: .9em; }
.files { font-size: .8rem; color: var(--muted); margin-top: -.8rem; }
"""

# Sets <body data-figures="ok|failed"> and a visible line once every image has loaded,
# so that a headless browser's DOM dump shows whether the figures decoded.
CHECK_SCRIPT = """
window.addEventListener("load", function () {
  var imgs = Array.prototype.slice.call(document.images);
  var bad = imgs.filter(function (i) { return !(i.complete && i.naturalWidth > 0); });
  document.body.setAttribute("data-figures", bad.length ? "failed" : "ok");
  document.body.setAttribute("data-figures-rendered", String(imgs.length - bad.length));
  document.body.setAttribute("data-figures-total", String(imgs.length));
  var line = document.getElementById("render-check");
  line.textContent = "Figures rendered: " + (imgs.length - bad.length) + " of " + imgs.length +
    (bad.length ? " (failed: " + bad.map(function (i) { return i.alt; }).join(", ") + ")" : "") + ".";
});
"""


def _inline(text: str) -> str:
    out, last = [], 0
    for m in _INLINE.finditer(text):
        out.append(html.escape(text[last : m.start()]))
        out.append(
            f"<strong>{html.escape(m.group(1))}</strong>" if m.group(1) else f"<code>{html.escape(m.group(2))}</code>"
        )
        last = m.end()
    out.append(html.escape(text[last:]))
    return "".join(out)


def _html_table(t: Table) -> str:
    head = "".join(f"<th>{_inline(str(c))}</th>" for c in t.frame.columns)
    rows = "".join(
        "<tr>" + "".join(f"<td>{_inline(v)}</td>" for v in row) + "</tr>"
        for row in t.frame.astype(str).to_numpy().tolist()
    )
    cap = f"<caption>{_inline(t.caption)}</caption>" if t.caption else ""
    files = ""
    if t.files:
        links = ", ".join(f'<a href="{html.escape(p)}">{html.escape(p)}</a>' for p in t.files)
        files = f'<p class="files">Files: {links}</p>'
    return f"<table>{cap}<thead><tr>{head}</tr></thead><tbody>{rows}</tbody></table>{files}"


def _html_figure(f: Figure, root: Path) -> str:
    data = base64.b64encode((root / f.png).read_bytes()).decode("ascii")
    return (
        f'<figure><img src="data:image/png;base64,{data}" alt="{html.escape(f.alt)}">'
        f"<figcaption>{_inline(f.caption)} Vector version: "
        f'<a href="{html.escape(f.svg)}">{html.escape(f.svg)}</a>.</figcaption></figure>'
    )


def _html_block(b, root: Path) -> str:
    if isinstance(b, Heading):
        anchor = f' id="{html.escape(b.anchor)}"' if b.anchor else ""
        return f"<h{b.level}{anchor}>{_inline(b.text)}</h{b.level}>"
    if isinstance(b, Para):
        return f"<p>{_inline(b.text)}</p>"
    if isinstance(b, Note):
        return f"<blockquote>{_inline(b.text)}</blockquote>"
    if isinstance(b, Bullets):
        return "<ul>" + "".join(f"<li>{_inline(i)}</li>" for i in b.items) + "</ul>"
    if isinstance(b, Table):
        return _html_table(b)
    if isinstance(b, Figure):
        return _html_figure(b, root)
    if isinstance(b, Code):
        return f"<pre><code>{html.escape(b.text)}</code></pre>"
    raise TypeError(f"unknown block {type(b).__name__}")


def to_html(blocks, title: str, root) -> str:
    """Render blocks as one self-contained HTML page (figures read from ``root``)."""
    body = "\n".join(_html_block(b, Path(root)) for b in blocks)
    return (
        '<!DOCTYPE html>\n<html lang="en"><head><meta charset="utf-8">'
        f'<meta name="viewport" content="width=device-width, initial-scale=1">'
        f"<title>{html.escape(title)}</title><style>{CSS}</style></head>\n<body>\n{body}\n"
        '<p id="render-check" class="files">Figures not checked (scripts disabled).</p>\n'
        f"<script>{CHECK_SCRIPT}</script>\n</body></html>\n"
    )
