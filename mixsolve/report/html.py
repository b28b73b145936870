"""Self-contained HTML pages: pure functions returning ``str``, nothing written.

A page is one file: figures are PNG images (matplotlib, Agg) embedded as base64 ``data:``
URIs, styles are inline, and there are no scripts or outside links, so the page can be
mailed or archived as it is. Every element is closed and all text is escaped, so the page
is well-formed for any HTML parser.
"""

from __future__ import annotations

import base64
import html
import io
from collections.abc import Iterable, Mapping, Sequence
from typing import Any

import numpy as np
import pandas as pd

from mixsolve.report.text import CAUTION

#: Cautions every report carries; local rules come first.
SAFETY_CAUTIONS = (
    "Extraction solvents (acetone, methanol, ethanol, DMSO) are flammable and harmful: work "
    "in a fume hood, away from ignition sources, with gloves and eye protection.",
    "Some standards are toxic: potassium dichromate, used to check the absorbance scale, is "
    "toxic, carcinogenic and an environmental hazard; read the supplier's safety data sheet "
    "and dispose of waste as your site requires.",
    "Deuterium and xenon lamps emit UV light that harms eyes and skin: do not look into the "
    "lamp housing or run a lamp with its covers removed.",
    "Follow your local safety rules first; nothing in this report overrides them.",
    CAUTION,
)

_STYLE = """
body { font-family: system-ui, sans-serif; margin: 2em auto; max-width: 72em; color: #1d2327;
       line-height: 1.4; padding: 0 1em; }
h1 { font-size: 1.5em; border-bottom: 3px solid #2f6f73; padding-bottom: .2em; }
h2 { font-size: 1.2em; color: #2f6f73; margin-top: 1.6em; }
table { border-collapse: collapse; font-size: .85em; margin: .5em 0; }
th, td { padding: .2em .6em; border-bottom: 1px solid #d5dadd; text-align: left; }
th { background: #eef3f3; }
td.num { text-align: right; font-variant-numeric: tabular-nums; }
figure { display: inline-block; margin: .5em 1em .5em 0; }
figcaption { font-size: .85em; color: #50575e; }
.note { background: #fff8e5; border-left: 4px solid #d9a400; padding: .4em .8em; }
.caution { background: #fcefee; border-left: 4px solid #b32d2e; padding: .4em .8em; }
"""


def escape(text: object) -> str:
    """Escape text (quotes included) for HTML."""
    return html.escape(str(text), quote=True)


def figure_img(fig: Any, alt: str, *, dpi: int = 110) -> str:
    """Render a matplotlib Figure as an embedded PNG ``<img>`` (base64 data URI).

    The figure is drawn with the Agg canvas (no display needed) as laid out (no tight
    bounding box, which would draw it twice) and cleared afterwards.
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    FigureCanvasAgg(fig)
    buffer = io.BytesIO()
    fig.savefig(buffer, format="png", dpi=dpi)
    fig.clear()
    data = base64.b64encode(buffer.getvalue()).decode("ascii")
    return f'<img src="data:image/png;base64,{data}" alt="{escape(alt)}" />'


def figure(fig: Any, caption: str, *, alt: str | None = None) -> str:
    """A ``<figure>`` holding the embedded image of ``fig`` and a caption."""
    return (f"<figure>{figure_img(fig, alt or caption)}"
            f"<figcaption>{escape(caption)}</figcaption></figure>")


def _cell(value: Any, digits: int) -> tuple[str, bool]:
    if isinstance(value, float | np.floating):
        return ("" if not np.isfinite(value) else f"{value:.{digits}g}"), True
    if isinstance(value, int | np.integer) and not isinstance(value, bool):
        return str(value), True
    return escape(value), False


def table(frame: pd.DataFrame, *, caption: str | None = None, digits: int = 4) -> str:
    """An HTML table of a DataFrame (no index); NaN shows as an empty cell."""
    head = "".join(f"<th>{escape(c)}</th>" for c in frame.columns)
    rows = []
    for values in frame.itertuples(index=False):
        cells = []
        for value in values:
            text, numeric = _cell(value, digits)
            cells.append(f'<td class="num">{text}</td>' if numeric else f"<td>{text}</td>")
        rows.append("<tr>" + "".join(cells) + "</tr>")
    cap = f"<caption>{escape(caption)}</caption>" if caption else ""
    return (f"<table>{cap}<thead><tr>{head}</tr></thead><tbody>{''.join(rows)}</tbody>"
            "</table>")


def key_values(items: Mapping[str, str]) -> str:
    """A two-column table of settings or facts."""
    rows = "".join(f"<tr><th>{escape(k)}</th><td>{escape(v)}</td></tr>" for k, v in
                   items.items())
    return f"<table><tbody>{rows}</tbody></table>"


def paragraph(text: str, *, kind: str | None = None) -> str:
    """A paragraph of escaped text; ``kind`` "note" or "caution" highlights it."""
    cls = f' class="{escape(kind)}"' if kind else ""
    return f"<p{cls}>{escape(text)}</p>"


def bullet_list(items: Iterable[str], *, kind: str | None = None) -> str:
    """An unordered list of escaped items."""
    cls = f' class="{escape(kind)}"' if kind else ""
    return f"<ul{cls}>" + "".join(f"<li>{escape(i)}</li>" for i in items) + "</ul>"


def section(title: str, *parts: str) -> str:
    """A titled ``<section>`` of already-built HTML parts."""
    return f"<section><h2>{escape(title)}</h2>{''.join(parts)}</section>"


def cautions(extra: Sequence[str] = ()) -> str:
    """The cautions section every report carries (safety first, then the limits)."""
    return section("Cautions", bullet_list([*SAFETY_CAUTIONS, *extra], kind="caution"))


def page(title: str, sections: Sequence[str]) -> str:
    """A complete, self-contained HTML5 page."""
    return ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\" />"
            f"<title>{escape(title)}</title><style>{_STYLE}</style></head>"
            f"<body><h1>{escape(title)}</h1>{''.join(sections)}</body></html>\n")
