"""The field sheets of report.xlsx: ``statement`` (the annual statement to the system
operator), ``work_list`` (one row per relay to change, in visit order) and ``visit_order``
(the worst violation after each substation visit).

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

from ..field import statement as stm
from ..field.plan import FieldPlan
from ..field.visits import VisitOrder, order_words
from .content import json_number
from .xlsxtable import HEADER_ALIGN, HEADER_BORDER, HEADER_FILL, HEADER_FONT, put, put_text

TITLE_FONT = Font(bold=True, size=14)
BOLD = Font(bold=True)
WRAP = Alignment(wrap_text=True, vertical="top")
BOX = Border(bottom=Side(style="thin", color="808080"))

#: where the new sheets go: right after the summary
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


def statement_sheet(wb, fp: FieldPlan) -> None:
    ws = wb.create_sheet("statement")
    s = fp.study.settings
    df = fp.statement
    put_text(ws, 1, 1, stm.TITLE).font = TITLE_FONT
    put_text(ws, 2, 1, f"{s.utility} - study year {s.year}")
    put_text(ws, 3, 1, stm.CITATION).font = BOLD
    for r, text in ((4, stm.EXPLANATION), (5, fp.statement_basis), (6, stm.CAUTION)):
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


WORK_HEADS = (
    ("visit", "visit", "0"), ("visit_substation", "visit at substation", None),
    ("substations", "substation(s)", None), ("feeders", "feeder(s)", None),
    ("relay", "relay kind", None), ("action", "action", None),
    ("now_block", "now: block", None), ("now_pickup_hz", "now: pickup Hz", "0.000"),
    ("now_delay_s", "now: time delay s", "0.000"),
    ("now_rocof_hz_per_s", "now: RoCoF setting Hz/s", "0.00"),
    ("now_rocof_arm_hz", "now: RoCoF arming Hz", "0.00"),
    ("new_block", "new: block", None), ("new_pickup_hz", "new: pickup Hz", "0.000"),
    ("new_delay_s", "new: time delay s", "0.000"),
    ("new_rocof_hz_per_s", "new: RoCoF setting Hz/s", "0.00"),
    ("new_rocof_arm_hz", "new: RoCoF arming Hz", "0.00"),
    ("moved_mean_mw", "MW moved: mean", "0.00"),
    ("moved_mw_at_block_lowest", "MW moved at the block's lowest share", "0.00"),
    ("block_lowest_local_time", "time of that lowest share (local)", None),
    ("customers", "customers", "0"), ("priority", "priority site", None),
    ("done_by", "done by", None), ("date", "date", None), ("checked_by", "checked by", None),
)


def work_list_sheet(wb, fp: FieldPlan) -> None:
    ws = wb.create_sheet("work_list")
    heads = [h for _, h, _ in WORK_HEADS]
    fmts = [f for _, _, f in WORK_HEADS]
    df = fp.work_list if fp.compares else None
    if df is None or df.empty:
        msg = ("No relay changes: this report checks the allocation in service now."
               if df is None else "No relay changes: every relay keeps the setting it has now.")
        rows = [(msg,) + (None,) * (len(heads) - 1)]
    else:
        sc = next((x for x in df["mw_scenario"] if x), "")
        keys = [k for k, _, _ in WORK_HEADS]
        for k in ("moved_mean_mw", "moved_mw_at_block_lowest"):
            heads[keys.index(k)] += f" ({sc})" if sc else ""
        rows = [tuple(_nan(v) for v in r)
                for r in df[[k for k, _, _ in WORK_HEADS]].itertuples(index=False)]
    widths = [6, 14, 14, 16, 12, 8] + [9] * 10 + [9, 10, 18, 9, 10, 12, 10, 12]
    _grid(ws, 1, heads, rows, fmts, widths)
    if df is None or df.empty:
        ws.column_dimensions["A"].width = 60
    print_setup(ws, 1, len(heads))
    ws.freeze_panes = "C2"


def visit_order_sheet(wb, order: VisitOrder | None, visits) -> None:
    ws = wb.create_sheet("visit_order")
    heads = ["visit", "substation", "relays", "feeders", "worst violation after the visit pp",
             "least room to a band edge pp", "scenario", "block", "band edge", "local time",
             "status", "over the limit by pp"]
    fmts = ["0", None, "0", "0", "0.00", "0.00", None, None, None, None, None, "0.00"]
    if order is None or not order.visits:
        rows = [("No visits: no relay setting changes in the field.",)
                + (None,) * (len(heads) - 1)]
        _grid(ws, 1, heads, rows, fmts)
        ws.column_dimensions["A"].width = 40
    else:
        rows = [tuple(_nan(v) for v in x) for x in visits.itertuples(index=False)]
        r = _grid(ws, 1, heads, rows, fmts,
                  [6, 16, 7, 8, 12, 12, 12, 8, 7, 20, 18, 10]) + 1
        put_text(ws, r, 1, order_words(order))
        put_text(ws, r + 1, 1, f"Limit: {order.limit_pp:.2f} pp (the worst violation of the "
                               "allocation in service now, or 0 when it is in band).")
    print_setup(ws, 1, len(heads))


def field_sheets(wb, fp: FieldPlan) -> None:
    """Add the statement, work_list and visit_order sheets right after the summary."""
    statement_sheet(wb, fp)
    work_list_sheet(wb, fp)
    visit_order_sheet(wb, fp.order, fp.visits)
    at = wb.sheetnames.index(AFTER) + 1 if AFTER in wb.sheetnames else len(wb.sheetnames)
    for k, name in enumerate(("statement", "work_list", "visit_order")):
        wb.move_sheet(name, offset=at + k - wb.sheetnames.index(name))
