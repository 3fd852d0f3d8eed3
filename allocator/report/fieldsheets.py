"""The field sheets of report.xlsx: ``statement`` (the annual statement to the system
operator).

The tables are small, so they are written cell by cell with openpyxl (text always as text,
never a formula: :func:`allocator.report.xlsxtable.put_text`).  Every sheet is set up for
printing (SpreadsheetML page setup, ECMA-376 Part 1 §18.3.1.63 ``pageSetup`` and §18.3.1.65
``pageSetUpPr``): landscape on A4, fitted to one page wide and as many pages down as it needs
(the same fit holds when the paper is switched to Letter), the header row repeated on every
page (print titles) and frozen on screen.
"""

from __future__ import annotations

import numpy as np
from openpyxl.styles import Alignment, Border, Font, Side
from openpyxl.utils import get_column_letter

from .. import statement as stm
from ..check import ScenarioChecks
from .content import json_number
from .xlsxtable import HEADER_ALIGN, HEADER_BORDER, HEADER_FILL, HEADER_FONT, put, put_text

TITLE_FONT = Font(bold=True, size=14)
BOLD = Font(bold=True)
WRAP = Alignment(wrap_text=True, vertical="top")
BOX = Border(bottom=Side(style="thin", color="808080"))

#: where the new sheet goes: right after the summary
AFTER = "summary"


def print_setup(ws, title_row: int, last_col: int) -> None:
    """Landscape A4, one page wide (any height), header row repeated and frozen."""
    ws.page_setup.orientation = ws.ORIENTATION_LANDSCAPE
    ws.page_setup.paperSize = ws.PAPERSIZE_A4
    ws.page_setup.fitToWidth = 1
    ws.page_setup.fitToHeight = 0
    ws.sheet_properties.pageSetUpPr.fitToPage = True
    ws.print_title_rows = f"{title_row}:{title_row}"
    ws.freeze_panes = f"A{title_row + 1}"
    ws.print_options.gridLines = True
    ws.page_margins.left = ws.page_margins.right = 0.4
    ws.oddFooter.center.text = "&P / &N"
    ws.print_area = f"A1:{get_column_letter(last_col)}{ws.max_row}"


def _grid(ws, top: int, heads: list[str], rows: list[tuple], fmts: list[str | None],
          widths: list[float] | None = None) -> int:
    """A header row at ``top`` and the rows under it; returns the next free row."""
    for j, h in enumerate(heads, 1):
        c = put_text(ws, top, j, h)
        c.font, c.fill, c.alignment, c.border = HEADER_FONT, HEADER_FILL, HEADER_ALIGN, \
            HEADER_BORDER
    for i, row in enumerate(rows, top + 1):
        for j, (v, f) in enumerate(zip(row, fmts), 1):
            put(ws, i, j, v, f)
    for j, h in enumerate(heads, 1):
        vals = [len(str(r[j - 1])) for r in rows if isinstance(r[j - 1], str)]
        w = widths[j - 1] if widths else max([min(len(h), 14), 8] + [min(v, 40) + 1
                                                                     for v in vals])
        ws.column_dimensions[get_column_letter(j)].width = w
    return top + 1 + len(rows)


def _nan(v):
    """A float as summary.json stores it (9 decimals; NaN empty), anything else as it is."""
    return json_number(v) if isinstance(v, (float, np.floating)) else v


def statement_sheet(wb, cs: ScenarioChecks) -> None:
    ws = wb.create_sheet("statement")
    s = cs.study.settings
    df = stm.statement_table(cs)
    put_text(ws, 1, 1, stm.TITLE).font = TITLE_FONT
    put_text(ws, 2, 1, f"{s.utility} - study year {s.year}")
    put_text(ws, 3, 1, stm.CITATION).font = BOLD
    for r, text in ((4, stm.EXPLANATION), (5, stm.statement_basis(cs)), (6, stm.CAUTION)):
        put_text(ws, r, 1, text).alignment = WRAP
        ws.merge_cells(start_row=r, start_column=1, end_row=r, end_column=len(stm.COLUMNS))
    ws.row_dimensions[4].height = 64
    heads = [stm.LABELS[k] for k, _ in stm.COLUMNS]
    fmts = [None, None, None, "0", "0.000", "0.000", "0.00", "0.00", "0.00", "0.00", None,
            "0.00", "0.00", "0.00", "0.00", None]
    rows = [tuple(_nan(v) for v in r) for r in df.itertuples(index=False)]
    widths = [12, 16, 10, 7] + [11] * 6 + [20] + [11] * 4 + [20]
    r = _grid(ws, 8, heads, rows, fmts, widths) + 1
    for label in ("prepared by", "checked by", "date"):
        put_text(ws, r, 1, label).font = BOLD
        for j in range(2, 5):
            ws.cell(row=r, column=j).border = BOX
        r += 2
    print_setup(ws, 8, len(heads))
    ws.freeze_panes = None  # the heading stays at the top of a short sheet anyway


def field_sheets(wb, cs: ScenarioChecks, previous_idx) -> None:
    """Add the statement sheet right after the summary."""
    statement_sheet(wb, cs)
    at = wb.sheetnames.index(AFTER) + 1 if AFTER in wb.sheetnames else len(wb.sheetnames)
    for k, name in enumerate(("statement",)):
        wb.move_sheet(name, offset=at + k - wb.sheetnames.index(name))
