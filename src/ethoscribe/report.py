"""A self-contained HTML report: figures, tables, parameters and the cautions, readable offline.

plotly.js is embedded once in the page, so the file opens in a browser with no network. The
cartesian plotly.js bundle shipped in ``ethoscribe/_vendor`` (1.5 MB, every trace type the
reports draw) is used when it is the version the installed plotly package expects; otherwise the
full bundle (4.8 MB).
"""

from __future__ import annotations

import html
import json
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from functools import cache
from importlib import resources
from typing import Any

import pandas as pd
import plotly.graph_objects as go
from plotly.offline import get_plotlyjs, get_plotlyjs_version

CAUTION = (
    "These results support, and do not replace, expert review of the behaviour by people who know "
    "the species, and the local animal-welfare and ethics rules. Discovered motifs are statistical "
    "regularities in keypoint tracks: look at example bouts before trusting a name, and treat "
    "group differences with the scrutiny given to any other measurement."
)

_STYLE = """
body { font-family: system-ui, sans-serif; margin: 2em auto; max-width: 1100px; color: #222; }
h1 { font-size: 1.6em; } h2 { font-size: 1.25em; margin-top: 2em; border-bottom: 1px solid #ccc; }
.table-wrap { overflow-x: auto; max-width: 100%; }
table { border-collapse: collapse; font-size: 0.85em; margin: 0.5em 0; }
th, td { border: 1px solid #ddd; padding: 3px 8px; text-align: right; white-space: nowrap; }
th { background: #f3f3f3; white-space: normal; }
td:first-child, th:first-child { text-align: left; }
table.parameters td { white-space: normal; text-align: left; overflow-wrap: anywhere; }
table.parameters td:first-child { white-space: nowrap; font-family: monospace; }
.caution { background: #fff7e0; border-left: 4px solid #e0a800; padding: 0.7em 1em; }
.headline { font-size: 1.05em; } .note { color: #555; font-size: 0.9em; }
nav ol { columns: 2; font-size: 0.9em; }
#no-plotly { display: none; background: #fde8e8; padding: 0.5em 1em; }
"""
_NO_PLOTLY = (
    "<p id='no-plotly'>The figures need JavaScript; the tables below are complete without it.</p>"
    "<script>if (!window.Plotly) document.getElementById('no-plotly').style.display = 'block';"
    "</script>"
)
MAX_VALUE_CHARS = 300  # longer parameter values are cut in the table (the JSON file has them)


@cache
def plotly_js() -> str:
    """The plotly.js source embedded in reports: the vendored cartesian bundle when its version
    is the one the installed plotly package expects, else plotly's full bundle."""
    wanted = get_plotlyjs_version()
    try:
        text = resources.files("ethoscribe").joinpath("_vendor/plotly-cartesian.min.js").read_text()
    except (FileNotFoundError, OSError):
        return get_plotlyjs()
    found = re.search(r"plotly\.js \(cartesian - minified\) v(\S+)", text[:400])
    return text if found and found.group(1) == wanted else get_plotlyjs()


@dataclass
class Section:
    """One titled part of the report: a text, figures, tables and a note, in that order."""

    title: str
    text: str = ""
    figures: Sequence[go.Figure] = field(default_factory=list)
    tables: Sequence[tuple[str, pd.DataFrame]] = field(default_factory=list)
    note: str = ""


# Column names (motif names in a transition matrix, long metric names) may break after an
# underscore, so a wide table fits a laptop page; the copied text is unchanged (<wbr>).
_HEADER = re.compile(r"<th>[^<]*</th>")


def _table_html(caption: str, table: pd.DataFrame, max_rows: int = 200) -> str:
    shown = table.head(max_rows)
    shown.columns = [str(c) for c in shown.columns]  # no header row for a columns' name
    note = "" if len(table) <= max_rows else f" (first {max_rows} of {len(table)} rows)"
    body = shown.to_html(index=False, float_format=lambda v: f"{v:.4g}", na_rep="", border=0)
    body = _HEADER.sub(lambda m: m.group(0).replace("_", "_<wbr>"), body)
    return f"<h3>{html.escape(caption)}{note}</h3><div class='table-wrap'>{body}</div>"


def _flat(value: Any, key: str = "") -> list[tuple[str, str]]:
    """``(dotted key, text)`` rows of nested parameters; short lists on one row."""
    if isinstance(value, Mapping) and value:
        rows = []
        for k in sorted(value, key=str):
            rows += _flat(value[k], f"{key}.{k}" if key else str(k))
        return rows
    if isinstance(value, (list, tuple)) and any(isinstance(v, (Mapping, list)) for v in value):
        text = json.dumps(value, default=str)
    elif isinstance(value, (list, tuple)):
        text = ", ".join(str(v) for v in value)
    elif isinstance(value, float):
        text = f"{value:.6g}"
    else:
        text = "" if value is None else str(value)
    if len(text) > MAX_VALUE_CHARS:
        text = text[:MAX_VALUE_CHARS] + " ..."
    return [(key, text)]


def parameters_html(parameters: dict[str, Any], link: str | None = None) -> str:
    """A readable two-column table of (nested) parameters, with a link to the full JSON."""
    rows = "".join(
        f"<tr><td>{html.escape(k)}</td><td>{html.escape(v)}</td></tr>" for k, v in _flat(parameters)
    )
    where = (
        f" Every value in full: <a href='{html.escape(link)}'>{html.escape(link)}</a>."
        if link
        else ""
    )
    return (
        "<h2 id='parameters'>Parameters, versions and seeds</h2>"
        f"<p class='note'>Nested settings are written with dots.{where}</p>"
        f"<div class='table-wrap'><table class='parameters'><tr><th>setting</th><th>value</th>"
        f"</tr>{rows}</table></div>"
    )


def render_report(
    title: str,
    sections: Sequence[Section],
    parameters: dict[str, Any] | None = None,
    parameters_link: str | None = None,
) -> str:
    """The HTML text of a report: contents, sections, then the parameters as a table.

    ``parameters_link``: a file beside the report holding the parameters as JSON (linked).

    Examples
    --------
    >>> page = render_report("demo", [Section("Numbers", tables=[("t", pd.DataFrame({"a": [1]}))])])
    >>> "demo" in page and "animal-welfare" in page
    True
    """
    parts = [
        "<!DOCTYPE html><html><head><meta charset='utf-8'>",
        f"<title>{html.escape(title)}</title><style>{_STYLE}</style>",
        f"<script type='text/javascript'>{plotly_js()}</script></head><body>",
        f"<h1>{html.escape(title)}</h1>",
        _NO_PLOTLY,
        f"<p class='caution'><strong>Caution.</strong> {html.escape(CAUTION)}</p>",
    ]
    entries = [(f"section-{i + 1}", s.title) for i, s in enumerate(sections)]
    if parameters is not None:
        entries.append(("parameters", "Parameters, versions and seeds"))
    items = "".join(f"<li><a href='#{a}'>{html.escape(t)}</a></li>" for a, t in entries)
    parts.append(f"<nav><ol>{items}</ol></nav>")
    for i, section in enumerate(sections):
        parts.append(f"<h2 id='section-{i + 1}'>{html.escape(section.title)}</h2>")
        if section.text:
            parts.append(f"<p class='headline'>{html.escape(section.text)}</p>")
        for fig in section.figures:
            parts.append(
                fig.to_html(full_html=False, include_plotlyjs=False, config={"responsive": True})
            )
        for caption, table in section.tables:
            parts.append(_table_html(caption, table))
        if section.note:
            parts.append(f"<p class='note'>{html.escape(section.note)}</p>")
    if parameters is not None:
        parts.append(parameters_html(parameters, parameters_link))
    parts.append("</body></html>")
    return "\n".join(parts)
