"""The fleet summary of a review as fleet_summary.csv, fleet_summary.xlsx and fleet.html.

One table (:func:`allocator.pipeline.review.summary_frame`): per study and block the verdict, the
lowest share, its scenario and local time (ISO 8601 with offset), the shortfall MWh; a study
that was not checked is one row with its status and message.  The page uses the reports'
style sheet and caution strip and links each checked study's own report.html.
"""

from __future__ import annotations

from pathlib import Path

import pandas as pd

from .. import vocab
from ..version import __version__
from ..safeio import write_csv
from .excel import time_cols
from .htmlkit import CAUTION_STRIP, CSS, esc, table, td
from .xlsxtable import Col, save, table_sheet

#: xlsx/HTML headers of the summary columns (the CSV keeps the machine names)
HEADS = {"study": "study", "status": "status", "study_verdict": "study verdict",
         "block": "block", "block_status": "block status", "min_pct": "band min %",
         "max_pct": "band max %", "min_share_pct": "lowest share %",
         "min_share_scenario": "lowest share scenario", "shortfall_mwh": "shortfall MWh",
         "seconds": "check s", "message": "message"}
_TEXT = {"study", "status", "study_verdict", "block", "block_status", "min_share_scenario",
         "message"}


def write_summary_xlsx(df: pd.DataFrame, path: Path) -> None:
    """One sheet ``fleet``: the summary with the local time as a date cell plus its offset."""
    from openpyxl import Workbook

    cols = []
    for c in df.columns:
        if c == "min_share_local_time":
            cols += time_cols("lowest share time", df[c].fillna("").tolist())
        else:
            cols.append(Col(HEADS[c], df[c].tolist(), "text" if c in _TEXT else "num",
                            None if c in _TEXT else "0.00"))
    wb = Workbook()
    wb.remove(wb.active)
    save(wb, path, [table_sheet(wb, "fleet", cols)])


def _row_html(r: dict, linked: set[str]) -> str:
    name = esc(r["study"])
    if r["study"] in linked:
        name = f'<a href="studies/{esc(r["study"])}/report.html">{name}</a>'
    bad = r["status"] != vocab.STUDY_CHECKED or r["study_verdict"] != vocab.COMPLIANT
    cls = "bad" if bad else "good"
    return ("<tr>" f"<td>{name}</td><td class=\"{cls}\">{esc(r['status'])}</td>"
            f"<td class=\"{cls}\">{esc(r['study_verdict'] or '')}</td>"
            f"<td>{esc(r['block'] or '')}</td><td>{esc(r['block_status'] or '')}</td>"
            + td(r["min_share_pct"]) + f"<td>{esc(r['min_share_scenario'] or '')}</td>"
            f"<td>{esc(r['min_share_local_time'] or '')}</td>" + td(r["shortfall_mwh"])
            + _message_td(r["message"]) + "</tr>")


def _message_td(message: str | None) -> str:
    """The study's messages as preformatted text (bad input lists one problem a line)."""
    return f'<td><pre class="expl">{esc(message)}</pre></td>' if message else "<td></td>"


def render_fleet_html(df: pd.DataFrame, run: dict, out: Path) -> str:
    """A short self-contained page: what was reviewed, the caution strip, the table."""
    linked = {s for s in df["study"].unique() if (out / "studies" / s / "report.html").exists()}
    rows = [_row_html(r, linked) for r in df.astype(object).where(df.notna(), None)
            .to_dict("records")]
    n, bad = df["study"].nunique(), df.loc[df["status"] != vocab.STUDY_CHECKED, "study"]
    title = "UFLS fleet review"
    heads = ["study", "status", "study verdict", "block", "block status", "lowest share %",
             "scenario", "lowest share local time", "shortfall MWh", "message"]
    return "".join([
        '<!DOCTYPE html><html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        '<meta http-equiv="Content-Security-Policy" content="default-src \'none\'; '
        'img-src data:; style-src \'unsafe-inline\'">',
        f"<title>{title}</title><style>{CSS}</style></head><body><h1>{title}</h1>",
        f'<p class="meta">{n} studies, {bad.nunique()} not checked; run '
        f"{esc(run.get('run_time', ''))} on {esc(run.get('cluster', ''))}; ufls-allocator "
        f"{esc(__version__)}. Per block the worst over every scenario of the study; the "
        "shortfall MWh is that of the worst scenario.</p>",
        CAUTION_STRIP + " Each study's own report carries its full cautions.</div>",
        table(heads, rows), "</body></html>"])


def write_fleet_files(df: pd.DataFrame, out: Path, run: dict) -> None:
    """fleet_summary.csv, fleet_summary.xlsx and fleet.html into ``out``."""
    write_csv(df, out / "fleet_summary.csv")
    write_summary_xlsx(df, out / "fleet_summary.xlsx")
    (out / "fleet.html").write_text(render_fleet_html(df, run, out), encoding="utf-8")
