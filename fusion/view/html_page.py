"""Single-file HTML reports: PNG figures embedded as data, one shared style, the safety notice on top."""

from __future__ import annotations

import base64
import html
import io

from fusion import SAFETY_NOTICE

__all__ = ["png_of", "figures_html", "page", "pyplot"]

_STYLE = """
body { font-family: system-ui, sans-serif; margin: 2em; max-width: 1200px; }
table { border-collapse: collapse; font-size: 0.85em; }
th, td { border: 1px solid #ccc; padding: 0.25em 0.5em; text-align: right; }
td:nth-child(2) { text-align: left; }
.notice { background: #fff4e0; padding: 0.6em; border-left: 4px solid #e0a000; }
.warning { background: #ffe8e8; padding: 0.6em; border-left: 4px solid #c00000; }
img { max-width: 100%; }
"""


def pyplot():
    """matplotlib's pyplot, drawing off screen, with text shown literally: a name from an input such as
    ``$x$`` or ``a_b`` is not read as mathematics (which could fail to parse or restyle the label)."""
    import matplotlib

    matplotlib.use("Agg")
    matplotlib.rcParams["text.parse_math"] = False
    matplotlib.rcParams["text.usetex"] = False
    import matplotlib.pyplot as plt

    return plt


def png_of(fig, rect=None) -> bytes:
    """A matplotlib figure as PNG bytes (``rect``: the part of the figure the axes may fill, leaving room for a
    figure legend)."""
    buf = io.BytesIO()
    fig.tight_layout(rect=rect)
    fig.savefig(buf, format="png")
    return buf.getvalue()


def figures_html(images: dict[str, bytes]) -> str:
    return "".join(
        f'<figure><img alt="{html.escape(name)}" src="data:image/png;base64,{base64.b64encode(data).decode()}">'
        f"</figure>"
        for name, data in images.items()
    )


def page(title: str, body: str) -> str:
    """A whole HTML document: ``body`` is trusted HTML (escape its text before passing it)."""
    e = html.escape
    return (
        f'<!doctype html>\n<html lang="en"><head><meta charset="utf-8"><title>{e(title)}</title>\n'
        f"<style>{_STYLE}</style></head><body>\n<h1>{e(title)}</h1>\n"
        f'<p class="notice">{e(SAFETY_NOTICE)}</p>\n{body}\n</body></html>\n'
    )
