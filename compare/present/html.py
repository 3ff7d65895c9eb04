"""A self-contained HTML report with its tables as CSV and the whole result as JSON.

:func:`write_report` first builds every file in memory (figures rendered to PNG, tables to CSV
and HTML, the JSON document checked), so a failure anywhere leaves nothing behind; only then
does it write each file to a temporary sibling and move it into place with ``os.replace``
(atomic on one file system), ``report.html`` last, so a ``report.html`` on disk always comes
with the CSV and JSON files it describes. The HTML needs nothing from the network: figures are
embedded as base64 PNG, the style sheet is inline, and every string from the caller is escaped.
"""

from __future__ import annotations

import base64
import html
import io
import json
import os
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping

import numpy as np
import pandas as pd
from matplotlib.figure import Figure

from .swap import ReportFolderError, replace_folder, report_folder_problem  # noqa: F401
from fluid.json_values import json_ready

from .tables import fmt

__all__ = ["ReportFiles", "ReportFolderError", "write_report", "report_folder_problem",
           "json_ready", "figure_png"]

#: Resolution of the embedded figures (dots per inch).
DPI = 110
_NAME = re.compile(r"[A-Za-z0-9][A-Za-z0-9_.-]*")


_CSS = """
body { font-family: system-ui, -apple-system, "Segoe UI", Helvetica, Arial, sans-serif;
       max-width: 64rem; margin: 2rem auto; padding: 0 1rem; color: #1a1a1a; line-height: 1.45; }
h1 { font-size: 1.5rem; margin-bottom: 0.6rem; }
h2 { font-size: 1.15rem; margin-top: 2rem; border-bottom: 1px solid #ccc; }
.caution { border: 2px solid #D55E00; background: #fff4ec; padding: 0.7rem 1rem;
           margin: 1rem 0; border-radius: 4px; }
.caution strong { color: #8a3300; }
ul.summary li { margin: 0.15rem 0; }
table { border-collapse: collapse; margin: 0.5rem 0 1.5rem; font-size: 0.85rem; }
caption { text-align: left; font-weight: 600; padding-bottom: 0.3rem; }
th, td { border: 1px solid #ccc; padding: 0.2rem 0.5rem; }
th { background: #f2f2f2; text-align: left; }
td.num { text-align: right; font-variant-numeric: tabular-nums; }
figure { margin: 1rem 0 2rem; }
figure img { max-width: 100%; height: auto; border: 1px solid #eee; }
figcaption { font-size: 0.85rem; color: #444; }
footer { margin-top: 3rem; font-size: 0.8rem; color: #666; }
"""


@dataclass(frozen=True)
class ReportFiles:
    """Paths written by :func:`write_report`: ``html`` (report.html), ``json`` (result.json),
    ``csv`` table name -> path, ``png`` figure name -> path."""

    directory: Path
    html: Path
    json: Path
    csv: dict[str, Path] = field(default_factory=dict)
    png: dict[str, Path] = field(default_factory=dict)

    @property
    def paths(self) -> list[Path]:
        """Every file written, report.html last."""
        return [*self.csv.values(), *self.png.values(), self.json, self.html]


# --- content built in memory ----------------------------------------------------------------------


def figure_png(fig: Figure, dpi: int = DPI) -> bytes:
    """The figure as PNG bytes (no file, no screen)."""
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=dpi)
    return buf.getvalue()


def _tidy(table: pd.DataFrame) -> pd.DataFrame:
    """A meaningful index (anything but the default 0..n-1) becomes ordinary columns."""
    if isinstance(table.index, pd.RangeIndex) and table.index.name is None:
        return table
    return table.reset_index()


def _cell(value: Any) -> str:
    if isinstance(value, (float, np.floating)):
        return fmt(float(value))
    if isinstance(value, (bool, np.bool_)):
        return fmt(bool(value))
    if isinstance(value, (int, np.integer)):
        return str(int(value))
    if value is None or value is pd.NA:
        return "-"
    return str(value)


def _html_table(name: str, table: pd.DataFrame) -> str:
    e = html.escape
    numeric = [pd.api.types.is_numeric_dtype(table[c]) and not pd.api.types.is_bool_dtype(table[c])
               for c in table.columns]
    head = "".join(f'<th scope="col">{e(str(c))}</th>' for c in table.columns)
    rows = []
    for rec in table.itertuples(index=False, name=None):
        cells = "".join(
            f'<td class="num">{e(_cell(v))}</td>' if num else f"<td>{e(_cell(v))}</td>"
            for v, num in zip(rec, numeric))
        rows.append(f"<tr>{cells}</tr>")
    caption = f"{e(name)} ({len(table)} rows; full precision in {e(name)}.csv)"
    return (f"<table>\n<caption>{caption}</caption>\n<thead><tr>{head}</tr></thead>\n"
            f"<tbody>\n" + "\n".join(rows) + "\n</tbody>\n</table>")


def _alt_text(name: str, fig: Figure) -> str:
    """The figure's overall title, else its panel titles, else its name."""
    if fig.get_suptitle():
        return fig.get_suptitle()
    titles = [ax.get_title() for ax in fig.axes if ax.get_title()]
    return "; ".join(titles) if titles else name


def _html_document(title: str, summary_lines: list[str], tables: dict[str, pd.DataFrame],
                   figures: dict[str, tuple[str, bytes]], caution: str) -> str:
    e = html.escape
    parts = ["<!DOCTYPE html>", '<html lang="en">', "<head>", '<meta charset="utf-8">',
             '<meta name="viewport" content="width=device-width, initial-scale=1">',
             f"<title>{e(title)}</title>", f"<style>{_CSS}</style>", "</head>", "<body>",
             f"<h1>{e(title)}</h1>"]
    if caution:
        parts.append(f'<div class="caution" role="note"><strong>Caution.</strong> '
                     f"{e(caution)}</div>")
    if summary_lines:
        parts.append("<h2>Summary</h2>")
        parts.append('<ul class="summary">' +
                     "".join(f"<li>{e(line)}</li>" for line in summary_lines) + "</ul>")
    if figures:
        parts.append("<h2>Figures</h2>")
        for name, (alt, png) in figures.items():
            data = base64.b64encode(png).decode("ascii")
            parts.append(f'<figure id="fig-{e(name)}"><img src="data:image/png;base64,{data}" '
                         f'alt="{e(alt)}"><figcaption>{e(alt)}</figcaption></figure>')
    if tables:
        parts.append("<h2>Tables</h2>")
        parts.extend(_html_table(name, t) for name, t in tables.items())
    parts.append("<footer>Written by fluidgap. The CSV files and result.json beside this page "
                 "hold the same numbers at full precision.</footer>")
    parts += ["</body>", "</html>", ""]
    return "\n".join(parts)


def _check_names(kind: str, names) -> None:
    for n in names:
        if not isinstance(n, str) or not _NAME.fullmatch(n):
            raise ValueError(f"{kind} name {n!r} cannot be a file name: use letters, digits, "
                             "'_', '-' or '.', starting with a letter or digit")


# --- writing --------------------------------------------------------------------------------------


def write_report(directory: str | os.PathLike, *, title: str, summary_lines: list[str],
                 tables: Mapping[str, pd.DataFrame], figures: Mapping[str, Figure],
                 json_doc: Mapping[str, Any], caution: str,
                 write_png: bool = False, extra_files=()) -> ReportFiles:
    """Write the report into ``directory`` (created if missing) and return the paths written.

    Files: ``report.html`` (one self-contained page: the caution text in a box under the title,
    the summary lines, every figure as an embedded PNG with its title as alt text, every table
    with a caption), ``<name>.csv`` per table (index dropped unless it is meaningful, full
    precision), ``result.json`` (``json_doc`` with inf and nan as null, strict JSON) and, with
    ``write_png``, ``<name>.png`` per figure. Table and figure names become file names, so they
    must be plain (letters, digits, ``_ - .``). Everything is built before anything is written
    and the folder is swapped in whole (see the module docstring): if building or writing
    fails, nothing new is left behind and an earlier report in ``directory`` is kept whole
    (``extra_files``: more ``(name, bytes)`` written with them, e.g. Parquet tables); a
    ``directory`` that holds anything but a report raises :class:`ReportFolderError` before
    anything is built."""
    _check_names("table", tables)
    _check_names("figure", figures)
    directory = Path(directory)
    problem = report_folder_problem(directory)
    if problem is not None:
        raise ReportFolderError(f"{directory} {problem}")
    # 1. everything in memory; any error here leaves the disk untouched
    tidy = {name: _tidy(t) for name, t in tables.items()}
    csv_text = {name: t.to_csv(index=False, lineterminator="\n") for name, t in tidy.items()}
    pngs = {name: (_alt_text(name, fig), figure_png(fig)) for name, fig in figures.items()}
    json_text = json.dumps(json_ready(json_doc), allow_nan=False, indent=2) + "\n"
    page = _html_document(title, list(summary_lines), tidy, pngs, caution)

    contents: list[tuple[str, bytes]] = [(f"{n}.csv", t.encode("utf-8"))
                                         for n, t in csv_text.items()]
    if write_png:
        contents += [(f"{n}.png", png) for n, (_, png) in pngs.items()]
    contents += list(extra_files)
    contents += [("result.json", json_text.encode("utf-8")),
                 ("report.html", page.encode("utf-8"))]

    # 2. the whole folder at once (old or new, never a mix)
    replace_folder(directory, contents)
    return ReportFiles(
        directory=directory, html=directory / "report.html", json=directory / "result.json",
        csv={n: directory / f"{n}.csv" for n in tables},
        png={n: directory / f"{n}.png" for n in figures} if write_png else {},
    )
