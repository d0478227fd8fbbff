"""A self-contained HTML report: figures, tables, parameters and the cautions, readable offline.

plotly.js is embedded once in the page, so the file opens in a browser with no network.
"""

from __future__ import annotations

import html
import json
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import pandas as pd
import plotly.graph_objects as go
from plotly.offline import get_plotlyjs

CAUTION = (
    "These results support, and do not replace, expert review of the behaviour by people who know "
    "the species, and the local animal-welfare and ethics rules. Discovered motifs are statistical "
    "regularities in keypoint tracks: look at example bouts before trusting a name, and treat "
    "group differences with the scrutiny given to any other measurement."
)

_STYLE = """
body { font-family: system-ui, sans-serif; margin: 2em auto; max-width: 1100px; color: #222; }
h1 { font-size: 1.6em; } h2 { font-size: 1.25em; margin-top: 2em; border-bottom: 1px solid #ccc; }
table { border-collapse: collapse; font-size: 0.85em; margin: 0.5em 0; }
th, td { border: 1px solid #ddd; padding: 3px 8px; text-align: right; }
th { background: #f3f3f3; } td:first-child, th:first-child { text-align: left; }
.caution { background: #fff7e0; border-left: 4px solid #e0a800; padding: 0.7em 1em; }
pre { background: #f6f6f6; padding: 0.8em; overflow-x: auto; font-size: 0.8em; }
"""


@dataclass
class Section:
    """One titled part of the report: an optional text, figures and tables, in that order."""

    title: str
    text: str = ""
    figures: Sequence[go.Figure] = field(default_factory=list)
    tables: Sequence[tuple[str, pd.DataFrame]] = field(default_factory=list)


def _table_html(caption: str, table: pd.DataFrame, max_rows: int = 200) -> str:
    shown = table.head(max_rows)
    note = "" if len(table) <= max_rows else f" (first {max_rows} of {len(table)} rows)"
    body = shown.to_html(index=False, float_format=lambda v: f"{v:.4g}", na_rep="", border=0)
    return f"<h3>{html.escape(caption)}{note}</h3>{body}"


def render_report(
    title: str, sections: Sequence[Section], parameters: dict[str, Any] | None = None
) -> str:
    """The HTML text of a report.

    Examples
    --------
    >>> page = render_report("demo", [Section("Numbers", tables=[("t", pd.DataFrame({"a": [1]}))])])
    >>> "demo" in page and "animal-welfare" in page
    True
    """
    parts = [
        "<!DOCTYPE html><html><head><meta charset='utf-8'>",
        f"<title>{html.escape(title)}</title><style>{_STYLE}</style>",
        f"<script type='text/javascript'>{get_plotlyjs()}</script></head><body>",
        f"<h1>{html.escape(title)}</h1>",
        f"<p class='caution'><strong>Caution.</strong> {html.escape(CAUTION)}</p>",
    ]
    for section in sections:
        parts.append(f"<h2>{html.escape(section.title)}</h2>")
        if section.text:
            parts.append(f"<p>{html.escape(section.text)}</p>")
        for fig in section.figures:
            parts.append(fig.to_html(full_html=False, include_plotlyjs=False))
        for caption, table in section.tables:
            parts.append(_table_html(caption, table))
    if parameters is not None:
        text = json.dumps(parameters, indent=2, sort_keys=True, default=str)
        parts.append(f"<h2>Parameters, versions and seeds</h2><pre>{html.escape(text)}</pre>")
    parts.append("</body></html>")
    return "\n".join(parts)
