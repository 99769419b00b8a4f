"""Single-file HTML reports: PNG figures embedded as data, one shared style, the safety notice on top."""

from __future__ import annotations

import base64
import html
import io

from fusion import SAFETY_NOTICE

__all__ = ["png_of", "figures_html", "page", "pyplot", "line_style", "shade_spans"]

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


LINE_STYLES = ("-", "--", "-.", ":")
MARKERS = ("o", "s", "^", "D", "v", "x", "P", "*")
"""Lines differ in style and marker as well as colour, so no line hides another and print stays readable."""


def line_style(i: int) -> dict:
    """The line style and marker of the ``i``-th line of a plot (matplotlib keyword arguments)."""
    return {"ls": LINE_STYLES[i % len(LINE_STYLES)], "marker": MARKERS[i % len(MARKERS)]}


def shade_spans(ax, spans, name_them: bool = True) -> None:
    """Shade each (start s, end s, what) span of time, the first labelled "fault or carry" for the legend, and
    with ``name_them`` write what it was, upright, at its start."""
    for k, (a, b, what) in enumerate(spans):
        ax.axvspan(a, b, color="#f2c14e", alpha=0.25, lw=0, label="fault or carry" if k == 0 else None)
        if name_them:
            ax.text(a, 1.0, f" {what}", transform=ax.get_xaxis_transform(), fontsize=7, va="top", rotation=90)


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
