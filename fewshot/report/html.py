"""The study report: one self-contained HTML file (figures embedded, no scripts, no requests).

Everything that comes from a user (names, checkpoints, paths, messages, the title) is
escaped with :func:`html.escape`; figures are PNG data URIs. The page is laid out for
reading on screen and for printing (tables and figures do not break across pages).
"""

from __future__ import annotations

import base64
import html
import io
import re
from collections.abc import Iterable, Sequence
from datetime import UTC, datetime

import pandas as pd

from fewshot import __version__

__all__ = ["figure_uri", "table_html", "page"]

CSS = """
body { font: 15px/1.5 Georgia, 'Times New Roman', serif; color: #1b1b1b; max-width: 62em; margin: 2em auto;
       padding: 0 1.2em; }
h1 { font-size: 1.7em; margin-bottom: 0.2em; } h2 { font-size: 1.25em; margin-top: 2em; border-bottom: 1px solid #ccc; }
.meta { color: #555; font-size: 0.9em; }
table { border-collapse: collapse; margin: 0.8em 0; font: 13px/1.35 'Helvetica Neue', Arial, sans-serif; }
th, td { padding: 0.25em 0.6em; border-bottom: 1px solid #ddd; text-align: left; vertical-align: top; }
th { border-bottom: 2px solid #444; } td.num { text-align: right; font-variant-numeric: tabular-nums; }
figure { margin: 1.2em 0; } figure img { max-width: 100%; } figcaption { font-size: 0.9em; color: #444; }
.caution { border-left: 4px solid #D55E00; background: #fdf3ec; padding: 0.6em 1em; }
.warn li, .findings li { margin: 0.2em 0; }
h3 { font-size: 1.05em; margin: 1em 0 0.3em; }
img, table { max-width: 100%; } table { display: block; overflow-x: auto; }
@media print { body { max-width: none; margin: 0; font-size: 11pt; } h2 { break-after: avoid; }
  table, figure { break-inside: avoid; } }
"""


PNG_COLOURS = 64  # a palette PNG: a figure's lines, bands and text need far fewer colours

_CODE = re.compile(r"`([^`<>]+)`")  # after escaping: `name` -> <code>name</code>


def figure_uri(fig, dpi: int = 150) -> str:  # type: ignore[no-untyped-def]
    """A matplotlib figure as a PNG data URI, in a palette of :data:`PNG_COLOURS` colours
    (about a quarter of the bytes of a full-colour PNG of a figure with many panels)."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from PIL import Image

    from fewshot.plots import style_context

    buf = io.BytesIO()
    with style_context():
        canvas = FigureCanvasAgg(fig)
        before = fig.dpi
        fig.set_dpi(dpi)
        try:
            rgba, size = canvas.print_to_buffer()
        finally:
            fig.set_dpi(before)
    image = Image.frombuffer("RGBA", size, rgba, "raw", "RGBA", 0, 1).convert("RGB")
    image.quantize(colors=PNG_COLOURS).save(buf, format="png")
    return "data:image/png;base64," + base64.b64encode(buf.getvalue()).decode("ascii")


def _e(x: object) -> str:
    return html.escape("" if x is None else str(x), quote=True)


def table_html(frame: pd.DataFrame | Sequence[dict[str, str]], numeric: Iterable[str] = ()) -> str:
    """An HTML table of text cells, every cell escaped."""
    rows = frame.to_dict("records") if isinstance(frame, pd.DataFrame) else list(frame)
    if not rows:
        return "<p><em>none</em></p>"
    cols = list(rows[0])
    num = set(numeric)
    head = "".join(f"<th>{_e(c)}</th>" for c in cols)
    body = "".join(
        "<tr>"
        + "".join(
            f'<td class="num">{_e(r[c])}</td>' if c in num else f"<td>{_e(r[c])}</td>" for c in cols
        )
        + "</tr>"
        for r in rows
    )
    return f"<table><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>"


def page(title: str, sections: Sequence[tuple[str, str]], *, subtitle: str = "") -> str:
    """The whole document; ``sections`` are (heading, HTML body) pairs whose bodies are already escaped."""
    stamp = datetime.now(UTC).strftime("%Y-%m-%d %H:%M UTC")
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{_e(title)}</title><style>{CSS}</style></head><body>",
        f"<h1>{_e(title)}</h1>",
        f'<p class="meta">{_e(subtitle)} Written by fewshot {_e(__version__)} on {stamp}.</p>',
    ]
    for heading, body in sections:
        slug = "-".join(heading.lower().split()[:1]) or "section"
        parts.append(f'<section id="{_e(slug)}"><h2>{_e(heading)}</h2>{body}</section>')
    parts.append("</body></html>")
    return "\n".join(parts)


def paragraph(text: str) -> str:
    return f"<p>{_e(text)}</p>"


def bullet_list(items: Iterable[str], cls: str = "") -> str:
    # a parameter a note names in backticks is set as code
    lis = "".join("<li>" + _CODE.sub(r"<code>\1</code>", _e(i)) + "</li>" for i in items)
    return f'<ul class="{cls}">{lis}</ul>' if lis else "<p><em>none</em></p>"


def figure_html(uri: str, caption: str) -> str:
    return f'<figure><img src="{uri}" alt="{_e(caption)}"><figcaption>{_e(caption)}</figcaption></figure>'
