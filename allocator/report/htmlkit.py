"""The HTML building blocks every page of the tool shares: the style sheet, escaping,
number cells, tables, definition lists and the caution strip.  report.html
(:mod:`allocator.report.html`, :mod:`allocator.report.fieldhtml`) and fleet.html
(:mod:`allocator.report.fleet`) are built from these; every text is escaped here
(``html.escape``)."""

from __future__ import annotations

import html
import math

CSS = """
:root { --ink:#1a1a1a; --muted:#5f5f5f; --line:#c9ced3; --head:#e4e8ec;
        --below:#f6c89f; --above:#a6d3f2; --ok:#0b6e4f; --bad:#a33c00; }
* { box-sizing: border-box; }
body { font-family: system-ui, -apple-system, "Segoe UI", Roboto, "Helvetica Neue", Arial,
       sans-serif; color: var(--ink); margin: 0 auto; max-width: 1180px; padding: 18px 22px 40px;
       line-height: 1.45; font-size: 15px; background: #fff; }
h1 { font-size: 1.6em; margin: 0 0 4px; }
h2 { font-size: 1.25em; margin: 28px 0 8px; padding-bottom: 3px;
     border-bottom: 2px solid var(--line); }
h3 { font-size: 1.05em; margin: 18px 0 6px; }
p.meta { color: var(--muted); margin: 0 0 14px; }
.caution-strip { border: 1px solid #b8860b; background: #fff8e6; padding: 8px 12px;
                 margin: 10px 0 16px; }
.verdict { border: 3px solid; padding: 12px 16px; margin: 12px 0 16px; }
.verdict.ok { border-color: var(--ok); background: #eef7f3; }
.verdict.bad { border-color: var(--bad); background: #fdf1ea; }
.verdict .word { font-size: 1.5em; font-weight: 700; letter-spacing: .02em; }
.verdict.ok .word { color: var(--ok); }
.verdict.bad .word { color: var(--bad); }
table { border-collapse: collapse; margin: 6px 0 12px; font-size: .88em; }
th, td { border: 1px solid var(--line); padding: 3px 6px; vertical-align: top; }
th { background: var(--head); text-align: left; }
td.n { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
td.below { background: var(--below); }
td.above { background: var(--above); }
td.bad { font-weight: 700; color: var(--bad); white-space: nowrap; }
td.good { color: var(--ok); white-space: nowrap; }
div.wide { overflow-x: auto; max-width: 100%; }
.key span { display: inline-block; padding: 1px 8px; margin-right: 10px;
            border: 1px solid var(--line); }
figure { margin: 14px 0 22px; }
figure img { max-width: 100%; height: auto; border: 1px solid #e2e2e2; }
figcaption { color: var(--muted); font-size: .92em; max-width: 900px; }
dl.kv { display: grid; grid-template-columns: max-content 1fr; gap: 3px 14px; margin: 6px 0; }
dl.kv dt { font-weight: 600; }
dl.kv dd { margin: 0; }
ul.cautions li { margin-bottom: 5px; }
details { margin: 6px 0 10px; }
details summary { cursor: pointer; color: var(--muted); }
.small { font-size: .9em; color: var(--muted); }
.run-record { border: 1px solid var(--line); padding: 8px 12px; margin: 10px 0; }
td.hash { font-family: ui-monospace, monospace; font-size: .85em; word-break: break-all; }
table.sign td.blank { min-width: 14em; height: 2.2em; }
pre.expl { white-space: pre-wrap; background: #f6f7f8; border: 1px solid var(--line);
           padding: 8px 10px; font-size: .9em; }
@media print {
  body { max-width: none; padding: 0; font-size: 11pt; }
  h2 { break-after: avoid; }
  figure, table, .verdict, .run-record { break-inside: avoid; }
  div.wide { overflow: visible; }
  table { font-size: 8pt; }
  .caution-strip, .verdict, th, td.below, td.above { -webkit-print-color-adjust: exact;
                                                     print-color-adjust: exact; }
}
"""


def esc(value: object) -> str:
    return html.escape(str(value), quote=True)


def num(x: object, fmt: str = ".2f") -> str:
    if x is None:
        return "-"
    try:
        f = float(x)
    except (TypeError, ValueError):
        return esc(x)
    if not math.isfinite(f):
        return "-"
    if fmt == "d":
        return str(int(round(f)))
    return format(f, fmt)


def td(x: object, fmt: str = ".2f", cls: str = "") -> str:
    c = f' class="n {cls}"' if cls else ' class="n"'
    return f"<td{c}>{num(x, fmt)}</td>"


def band_cls(v: float, lo: float, hi: float) -> str:
    if v is None or not math.isfinite(float(v)):
        return ""
    return "below" if v < lo else "above" if v > hi else ""


def table(headers: list[str], rows: list[str]) -> str:
    head = "".join(f"<th>{esc(h)}</th>" for h in headers)
    return (f'<div class="wide"><table><thead><tr>{head}</tr></thead>'
            f"<tbody>{''.join(rows)}</tbody></table></div>")


def kv(pairs: list[tuple[str, str]]) -> str:
    """A definition list of (label, text) pairs, both escaped."""
    return ('<dl class="kv">' + "".join(f"<dt>{esc(k)}</dt><dd>{esc(v)}</dd>" for k, v in pairs)
            + "</dl>")


#: the caution strip at the top of every page (closed by the caller, which may add a line)
CAUTION_STRIP = (
    '<div class="caution-strip"><strong>Caution:</strong> UFLS disconnects customers. '
    "Protect priority sites (hospitals, life-support customers, water pumping) as your "
    "local rules require. These results are indicative planning support; the system "
    "operator's requirements, local codes and licensed engineering practice govern. "
    "Verify relay settings before any change in the field.")


__all__ = ["CSS", "CAUTION_STRIP", "esc", "num", "td", "band_cls", "table", "kv"]
