"""Fast, injection-proof table sheets for openpyxl workbooks.

openpyxl needs about 20 µs per cell to serialise (no lxml here), so a year of 15-minute
intervals (35,040 rows x 15 columns) would take over ten seconds.  This module lets openpyxl
build everything around a table - header row, styles, column widths, frozen panes,
autofilter, conditional formats - with a single *prototype* data row whose cells carry each
column's style, and then replaces that row in the saved package with the real rows written as
plain SpreadsheetML (ECMA-376 Part 1, §18.3.1.73 ``row``, §18.3.1.4 ``c``): numbers as
``<v>`` with the shortest repr that reads back to the same float, text always as inline
strings (``t="inlineStr"``, §18.3.1.53 ``is``), never as ``<f>`` formulas, so a feeder id such
as ``=HYPERLINK(...)`` stays text whatever it starts with (OWASP, "CSV Injection").

If the prototype row cannot be found in openpyxl's output the table is written cell by cell
with openpyxl instead (slow but equivalent).
"""

from __future__ import annotations

import datetime
import io
import math
import re
import zipfile
from dataclasses import dataclass, field
from typing import Sequence

import numpy as np
import pandas as pd
from openpyxl.cell.cell import ILLEGAL_CHARACTERS_RE
from openpyxl.styles import Alignment, Border, Font, PatternFill, Side
from openpyxl.utils import get_column_letter
from openpyxl.worksheet.worksheet import Worksheet

from .. import vocab
from . import palette

#: Excel's longest cell text
MAX_TEXT = 32767
#: day 0 of Excel's 1900 date system as used by openpyxl (serial 1 = 1900-01-01)
EXCEL_EPOCH = pd.Timestamp("1899-12-30")
KINDS = ("num", "int", "text", "date", "bool")

HEADER_FONT = Font(bold=True)
HEADER_FILL = PatternFill("solid", start_color=palette.FILL_HEADER, end_color=palette.FILL_HEADER)
HEADER_ALIGN = Alignment(wrap_text=True, vertical="top")
HEADER_BORDER = Border(bottom=Side(style="thin", color="808080"))


def clean_text(value: object) -> str:
    """Text as it may go into a cell: characters XML 1.0 forbids removed, at most 32,767."""
    s = ILLEGAL_CHARACTERS_RE.sub("", str(value))
    return s[:MAX_TEXT]


def put_text(ws: Worksheet, row: int, col: int, value: object):
    """Write ``value`` as a text cell - never a formula, whatever it begins with."""
    cell = ws.cell(row=row, column=col)
    cell.value = clean_text(value)
    cell.data_type = "s"  # openpyxl makes "=..." a formula on assignment; force text
    return cell


def put(ws: Worksheet, row: int, col: int, value: object, fmt: str | None = None):
    """Write a number (None/NaN left empty), a boolean as the text yes/no (one way for every
    boolean a person reads: allocator.vocab), a datetime (naive wall-clock time, see
    :mod:`allocator.timefmt`) as a date cell, or anything else as text via
    :func:`put_text`."""
    if isinstance(value, (bool, np.bool_)):
        cell = put_text(ws, row, col, vocab.yes_no(value))
    elif isinstance(value, (pd.Timestamp, np.datetime64, datetime.datetime)):
        ts = pd.Timestamp(value)
        if ts.tzinfo is not None:
            raise ValueError("write local or UTC wall-clock times without a time zone")
        cell = ws.cell(row=row, column=col)
        if not pd.isna(ts):
            cell.value = ts.to_pydatetime()
            cell.number_format = "yyyy-mm-dd hh:mm"
    elif isinstance(value, (int, float, np.integer, np.floating)):
        f = float(value)
        cell = ws.cell(row=row, column=col)
        if math.isfinite(f):
            cell.value = int(value) if isinstance(value, (int, np.integer)) else f
    elif value is None:
        cell = ws.cell(row=row, column=col)
    else:
        cell = put_text(ws, row, col, value)
    if fmt:
        cell.number_format = fmt
    return cell


@dataclass
class Col:
    """One table column: header text, values, kind (num/int/text/date/bool), number format.
    ``bool`` columns are written as the text yes/no (:mod:`allocator.vocab`)."""

    header: str
    values: Sequence
    kind: str = "num"
    fmt: str | None = None
    width: float | None = None

    def __post_init__(self):
        if self.kind not in KINDS:
            raise ValueError(f"unknown column kind {self.kind}")


@dataclass
class Table:
    ws: Worksheet
    cols: list[Col]
    n_rows: int
    fast: bool = True
    fallback_used: bool = field(default=False)

    @property
    def last_col(self) -> str:
        return get_column_letter(len(self.cols))

    def col_letter(self, header: str) -> str:
        for i, c in enumerate(self.cols, 1):
            if c.header == header:
                return get_column_letter(i)
        raise KeyError(header)

    def data_range(self, header: str) -> str:
        L = self.col_letter(header)
        return f"{L}2:{L}{max(self.n_rows + 1, 2)}"


def _width(col: Col) -> float:
    if col.width:
        return col.width
    longest_word = max((len(w) for w in col.header.split()), default=4)
    w = max(len(col.header) * 0.55, longest_word + 1.5)
    if col.kind == "text":
        sample = [len(str(v)) for v in list(col.values[:500]) if v is not None]
        w = max(w, (max(sample) if sample else 0) + 1.5)
    elif col.kind == "date":
        w = max(w, 17.0)
    else:
        w = max(w, 9.0)
    return float(min(max(w, 6.0), 48.0))


def _style_proto(cell, col: Col) -> None:
    if col.fmt:
        cell.number_format = col.fmt
    elif col.kind == "date":
        cell.number_format = "yyyy-mm-dd hh:mm"
    if col.kind in ("text", "bool"):
        # quotePrefix (ECMA-376 §18.8.45 xf): Excel keeps the cell text even when edited
        cell.quotePrefix = True


def table_sheet(wb, title: str, cols: list[Col], freeze: str = "A2",
                autofilter: bool = True) -> Table:
    """Create sheet ``title`` with a styled header and a prototype row; the rows themselves
    are put in by :func:`finish` after ``wb.save``."""
    n = len(cols[0].values) if cols else 0
    for c in cols:
        if len(c.values) != n:
            raise ValueError(f"column {c.header!r} has {len(c.values)} values, expected {n}")
    ws = wb.create_sheet(title)
    for j, c in enumerate(cols, 1):
        h = put_text(ws, 1, j, c.header)
        h.font, h.fill, h.alignment, h.border = HEADER_FONT, HEADER_FILL, HEADER_ALIGN, \
            HEADER_BORDER
        ws.column_dimensions[get_column_letter(j)].width = _width(c)
        proto = ws.cell(row=2, column=j)
        if c.kind in ("text", "bool"):
            put_text(ws, 2, j, "x")
        else:
            proto.value = 0
        _style_proto(proto, c)
    longest = max((len(c.header) / max(_width(c), 1.0) for c in cols), default=1.0)
    ws.row_dimensions[1].height = 15 * max(1, math.ceil(longest)) + 3
    if freeze:
        ws.freeze_panes = freeze
    if autofilter and cols:
        ws.auto_filter.ref = f"A1:{get_column_letter(len(cols))}{max(n + 1, 1)}"
    return Table(ws, cols, n)


# --------------------------------------------------------------------------------------------
# rows as SpreadsheetML
# --------------------------------------------------------------------------------------------
def _xml_escape(s: str) -> str:
    """Element text: & < > escaped; a carriage return as a character reference, since XML
    parsers turn a literal one into a line feed (XML 1.0, §2.11)."""
    s = s.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")
    return s.replace("\r", "&#13;") if "\r" in s else s


def _cells(col: Col, letter: str, style: str, first: int) -> list[str]:
    n = len(col.values)
    rows = range(first, first + n)
    s_attr = f' s="{style}"' if style else ""
    if col.kind in ("num", "int", "date"):
        if col.kind == "date":
            idx = pd.DatetimeIndex(col.values)
            if idx.tz is not None:
                raise ValueError(f"column {col.header!r}: write local or UTC wall-clock times "
                                 "without a time zone")
            arr = ((idx - EXCEL_EPOCH) / pd.Timedelta(days=1)).to_numpy(dtype=float)
        else:
            try:
                arr = np.asarray(col.values, dtype=float)
            except (TypeError, ValueError):
                arr = np.asarray(pd.to_numeric(pd.Series(list(col.values)), errors="coerce"),
                                 dtype=float)
        ok = np.isfinite(arr).tolist()
        vals = arr.tolist()
        if col.kind == "int":
            return [f'<c r="{letter}{r}"{s_attr}><v>{int(x)}</v></c>' if g else ""
                    for r, x, g in zip(rows, vals, ok)]
        return [f'<c r="{letter}{r}"{s_attr}><v>{x!r}</v></c>' if g else ""
                for r, x, g in zip(rows, vals, ok)]
    values = [vocab.yes_no(v) for v in col.values] if col.kind == "bool" else col.values
    out = []
    for r, v in zip(rows, values):
        if v is None or (isinstance(v, float) and math.isnan(v)):
            out.append("")
            continue
        t = _xml_escape(clean_text(v))
        if not t:
            out.append("")
            continue
        out.append(f'<c r="{letter}{r}"{s_attr} t="inlineStr"><is><t xml:space="preserve">'
                   f'{t}</t></is></c>')
    return out


def rows_xml(cols: list[Col], styles: list[str], first: int = 2) -> str:
    per_col = [_cells(c, get_column_letter(j), styles[j - 1], first)
               for j, c in enumerate(cols, 1)]
    n = len(cols[0].values) if cols else 0
    parts = []
    for k, cells in enumerate(zip(*per_col)):
        parts.append(f'<row r="{first + k}">{"".join(cells)}</row>')
    return "".join(parts) if n else ""


_ROW2 = re.compile(r'<row r="2"[^>]*>(.*?)</row>', re.S)
_CELL = re.compile(r'<c r="([A-Z]+)2"(?: s="(\d+)")?')
_DIM = re.compile(r'<dimension ref="[^"]*"\s*/>')


def _inject(xml: str, table: Table) -> str | None:
    m = _ROW2.search(xml)
    if not m:
        return None
    found = {L: (s or "") for L, s in _CELL.findall(m.group(1))}
    letters = [get_column_letter(j) for j in range(1, len(table.cols) + 1)]
    if set(found) != set(letters):
        return None
    styles = [found[L] for L in letters]
    body = rows_xml(table.cols, styles)
    xml = xml[:m.start()] + body + xml[m.end():]
    last = max(table.n_rows + 1, 1)
    return _DIM.sub(f'<dimension ref="A1:{table.last_col}{last}"/>', xml, count=1)


def _slow_fill(table: Table) -> None:
    ws = table.ws
    for j, c in enumerate(table.cols, 1):
        proto = ws.cell(row=2, column=j)
        fmt = proto.number_format
        vals = list(c.values)
        if c.kind == "date":
            vals = list(pd.DatetimeIndex(c.values).to_pydatetime())
        for k, v in enumerate(vals):
            cell = ws.cell(row=2 + k, column=j)
            if c.kind == "text":
                if v is None or v == "" or (isinstance(v, float) and math.isnan(v)):
                    cell.value = None
                else:
                    put_text(ws, 2 + k, j, v)
                    cell.quotePrefix = True
            elif c.kind == "bool":
                t = vocab.yes_no(v)
                if t:
                    put_text(ws, 2 + k, j, t)
                    cell.quotePrefix = True
                else:
                    cell.value = None
            elif c.kind == "date":
                cell.value = None if pd.isna(v) else v
            else:
                f = float(v) if v is not None else math.nan
                cell.value = (int(f) if c.kind == "int" else f) if math.isfinite(f) else None
            cell.number_format = fmt
        if not vals:
            ws.cell(row=2, column=j).value = None


def save(wb, path, tables: list[Table]) -> None:
    """Save ``wb`` to ``path`` with every table's rows in place."""
    buf = io.BytesIO()
    wb.save(buf)
    # openpyxl assigns each sheet its part name (ws.path) while saving
    parts = {t.ws.path.lstrip("/"): t for t in tables}
    new: dict[str, str] = {}
    with zipfile.ZipFile(io.BytesIO(buf.getvalue())) as zin:
        for name, t in parts.items():
            xml = zin.read(name).decode("utf-8")
            out = _inject(xml, t) if t.fast else None
            if out is None:
                for t2 in tables:
                    t2.fallback_used = True
                break
            new[name] = out
        else:
            with zipfile.ZipFile(path, "w", zipfile.ZIP_DEFLATED, compresslevel=6) as zout:
                for info in zin.infolist():
                    data = new[info.filename].encode("utf-8") if info.filename in new \
                        else zin.read(info.filename)
                    zi = zipfile.ZipInfo(info.filename, date_time=(1980, 1, 1, 0, 0, 0))
                    zi.compress_type = zipfile.ZIP_DEFLATED
                    zi.external_attr = info.external_attr
                    zout.writestr(zi, data)
            return
    for t in tables:  # pragma: no cover - only if openpyxl's output changes shape
        _slow_fill(t)
    wb.save(path)
