"""The report page: one self-contained HTML file (inline CSS, figures as base64 PNG data URIs).

Nothing on the page refers to the network or to other files, so it can be mailed or archived
alone. Every text from the study (names, values, reasons) is HTML-escaped.
"""

from __future__ import annotations

import base64
import math
from collections.abc import Mapping, Sequence
from html import escape
from typing import Any

import pandas as pd

from studies.report.figures import FigureEntry

__all__ = ["TABLE_METRICS", "render_page", "format_value"]

#: Metrics shown in the table of best designs (every metric is in the CSV export).
TABLE_METRICS: tuple[str, ...] = (
    "resonance_mhz", "s11_db", "bandwidth_mhz", "efficiency", "gain_dbi", "zin_re_ohm",
    "zin_im_ohm", "modulation_factor", "delta_rcs_dbsm", "read_range_m",
)

_CSS = """
body{font-family:system-ui,-apple-system,"Segoe UI",sans-serif;margin:2em auto;max-width:70em;
color:#222;line-height:1.4;padding:0 1em}
h1{font-size:1.6em;margin-bottom:.2em}h2{border-bottom:1px solid #ccc;padding-bottom:.2em}
.meta{color:#555}table{border-collapse:collapse;font-size:.9em;margin:.5em 0}
th,td{border:1px solid #ccc;padding:.25em .5em;text-align:right}th{background:#f3f3f3}
td.id,th.id{text-align:left;font-family:monospace}
figure{margin:1.5em 0}figure img{max-width:100%;border:1px solid #eee}
figcaption{color:#444;font-size:.9em;max-width:60em}
.missing{background:#fff8e1;border-left:4px solid #f0b400;padding:.6em 1em}
.cautions{background:#fdecea;border-left:4px solid #c62828;padding:.4em 1em}
.note{color:#555;font-size:.9em}
"""


def format_value(value: Any) -> str:
    """A table cell: 4 significant digits for numbers, an em dash for a missing value."""
    if value is None:
        return "\u2014"
    if isinstance(value, bool):
        return str(value)
    if isinstance(value, int | float):
        if not math.isfinite(float(value)):
            return "\u2014"
        return f"{float(value):.4g}"
    return str(value)


def _data_uri(png: bytes) -> str:
    return "data:image/png;base64," + base64.b64encode(png).decode("ascii")


def _figure(entry: FigureEntry) -> str:
    head = f'<figure id="fig-{escape(entry.key)}" data-key="{escape(entry.key)}">' \
           f"<h3>{escape(entry.title)}</h3>"
    if entry.png is None:
        return (head + f'<p class="missing" data-missing="{escape(entry.key)}">Not shown: '
                f"{escape(entry.reason or 'not available')}</p></figure>")
    return (head + f'<img alt="{escape(entry.title)}" src="{_data_uri(entry.png)}">'
            f"<figcaption>{escape(entry.caption)} "
            f'<span class="note">({escape(entry.key)}.png)</span></figcaption></figure>')


def _best_table(table: pd.DataFrame, parameters: Sequence[str], units: Mapping[str, str]) -> str:
    if table.empty:
        return '<p class="missing">No design to show.</p>'
    metrics = [m for m in TABLE_METRICS if m in table.columns]
    head = ['<th>rank</th>', '<th class="id">point_id</th>']
    head += [f"<th>{escape(p)}</th>" for p in parameters]
    for m in metrics:
        u = units.get(m, "1")
        head.append(f"<th>{escape(m)}" + (f" ({escape(u)})" if u != "1" else "") + "</th>")
    rows = []
    for _, r in table.iterrows():
        cells = [f"<td>{int(r['rank'])}</td>", f'<td class="id">{escape(str(r["point_id"]))}</td>']
        cells += [f"<td>{escape(format_value(r.get(p)))}</td>" for p in parameters]
        cells += [f"<td>{escape(format_value(None if pd.isna(r[m]) else r[m]))}</td>"
                  for m in metrics]
        rows.append("<tr>" + "".join(cells) + "</tr>")
    return ('<table id="best-designs"><thead><tr>' + "".join(head) + "</tr></thead><tbody>"
            + "".join(rows) + "</tbody></table>")


def render_page(*, study: str, summary: Mapping[str, Any], rule: str, notes: Sequence[str],
                table: pd.DataFrame, parameters: Sequence[str], units: Mapping[str, str],
                figures: Sequence[FigureEntry], cautions: Sequence[str]) -> str:
    """The whole page as one string.

    Parameters
    ----------
    study : str
        Study name (the title).
    summary : mapping
        Label -> value lines under the title (config, store, point counts ...).
    rule, notes
        How the best designs were chosen, and remarks.
    table : DataFrame
        The best designs (rows of the study table with ``rank``).
    parameters : sequence of str
        The study's parameter columns.
    units : mapping
        Metric -> unit (``"1"`` for dimensionless).
    figures : sequence of FigureEntry
    cautions : sequence of str
    """
    parts = ["<!DOCTYPE html>", '<html lang="en"><head><meta charset="utf-8">',
             f"<title>filamant report: {escape(study)}</title>",
             f"<style>{_CSS}</style></head><body>",
             f"<h1>Study {escape(study)}</h1>", '<ul class="meta">']
    parts += [f"<li>{escape(k)}: {escape(str(v))}</li>" for k, v in summary.items()]
    parts.append("</ul>")
    parts.append('<section id="cautions" class="cautions"><h2>Cautions</h2><ul>')
    parts += [f"<li>{escape(c)}</li>" for c in cautions]
    parts.append("</ul></section>")
    parts.append('<section id="best"><h2>Best designs</h2>')
    parts.append(f"<p>How they were chosen: {escape(rule)}.</p>")
    parts += [f'<p class="note">{escape(n)}</p>' for n in notes]
    parts.append(_best_table(table, parameters, units))
    parts.append('<p class="note">Every design of the study, with every metric: '
                 "filamant export STUDY.toml --table FILE.csv</p></section>")
    parts.append('<section id="figures"><h2>Figures</h2>')
    parts += [_figure(f) for f in figures]
    parts.append("</section></body></html>")
    return "\n".join(parts) + "\n"
