"""The field sections of report.html: the annual statement to the system operator, the relay
work list and the visit order, rendered from one
:class:`~allocator.field.plan.FieldPlan` (the same tables as statement.csv, work_list.csv and
visit_order.csv).  Every text from the workbook is escaped (``html.escape``)."""

from __future__ import annotations

from .. import vocab
from ..field import statement as stm
from ..field.plan import FieldPlan
from ..field.visits import VisitOrder, order_words
from ..field.worklist import REMOTE_ACTION
from .htmlkit import esc, table, td


def statement_section(fp: FieldPlan) -> str:
    """The annual statement (statement.csv) with its citation, basis and caution."""
    df = fp.statement
    keys = [k for k, _ in stm.COLUMNS if k not in ("scenario", "made_from", "order")]
    fmts = {"pickup_hz": ".3f", "delay_s": ".3f", "rocof_hz_per_s": ".2f",
            "rocof_arm_hz": ".2f"}
    rows = []
    for r in df.to_dict("records"):
        cells = [f"<td>{esc(r[k])}</td>" if isinstance(r[k], str) else
                 td(r[k], fmts.get(k, ".2f")) for k in keys]
        rows.append("<tr>" + "".join(cells) + "</tr>")
    return (f'<h2 id="statement">{esc(stm.TITLE)}</h2>'
            f"<p><strong>{esc(stm.CITATION)}.</strong> {esc(stm.EXPLANATION)}</p>"
            f'<p class="statement-basis">{esc(fp.statement_basis)}</p>'
            + table([stm.LABELS[k] for k in keys], rows)
            + f'<p class="small">{esc(stm.CAUTION)}</p>')


def _setting_cells(r: dict, side: str) -> str:
    return (f"<td>{esc(r[side + '_block'])}</td>{td(r[side + '_pickup_hz'], '.3f')}"
            f"{td(r[side + '_delay_s'], '.3f')}{td(r[side + '_rocof_hz_per_s'], '.2f')}"
            f"{td(r[side + '_rocof_arm_hz'], '.2f')}")


def _work_row(r: dict) -> str:
    return (f"<tr>{td(r['visit'], 'd')}<td>{esc(r['substations'])}</td>"
            f"<td>{esc(r['feeders'])}</td><td>{esc(r['relay'])}</td>"
            f"<td>{esc(r['action'])}</td>{_setting_cells(r, 'now')}"
            f"{_setting_cells(r, 'new')}{td(r['moved_mean_mw'], '.2f')}"
            f"{td(r['moved_mw_at_block_lowest'], '.2f')}"
            f"<td>{esc(r['block_lowest_local_time'])}</td>{td(r['customers'], 'd')}"
            f"<td>{esc(r['priority'])}</td></tr>")


def _work_words(fp: FieldPlan, sc: str) -> str:
    c = fp.counts
    remote = (f" Then {vocab.count(c.remote_relays, 'relay')} set by remote schedule from the "
              "control room (action 'set remote schedule', no site visit; 'visit' is the step "
              "of the visit order at which the control room applies it; 'new: block' gives "
              "the block of each period)." if c.remote_relays else "")
    return (f"<p>{vocab.count(c.field_relays, 'relay').capitalize()} at "
            f"{vocab.count(c.substations, 'substation')} change setting in the field, one row "
            "per relay (a trip group is one relay: its row lists every feeder it trips), in "
            f"visit order.{remote} 'disarm' takes the relay's UFLS trip out of the scheme. "
            f"MW moved: the relay's tripped MW in scenario {esc(sc)}, as the mean over the year "
            "and at the interval of the lowest share of the block it goes to (for disarm: the "
            "block it leaves). The workbook's work_list sheet has sign-off columns and prints "
            "on one page wide.</p>")


def _work_list(fp: FieldPlan) -> str:
    df = fp.work_list
    if df.empty:
        return "<p>No relay changes: every relay keeps the setting it has now.</p>"
    field_rows = df[df["action"] != REMOTE_ACTION]
    sc = field_rows["mw_scenario"].iloc[0] if not field_rows.empty else ""
    heads = ["visit", "substation(s)", "feeder(s)", "relay kind", "action", "now: block",
             "now: pickup Hz", "now: delay s", "now: RoCoF Hz/s", "now: RoCoF arming Hz",
             "new: block", "new: pickup Hz", "new: delay s", "new: RoCoF Hz/s",
             "new: RoCoF arming Hz", f"MW moved: mean ({sc})",
             "MW moved at the block's lowest share", "time of that lowest share (local)",
             "customers", "priority site"]
    rows = [_work_row(r) for r in df.to_dict("records")]
    return _work_words(fp, sc) + table(heads, rows)


def _visit_order(order: VisitOrder, df) -> str:
    heads = ["visit", "substation", "relays", "feeders", "worst violation after it pp",
             "least room pp", "scenario", "block", "band edge", "local time", "status",
             "over the limit by pp"]
    rows = []
    for r in df.to_dict("records"):
        cls = "bad" if r["status"] == "breaks the band" else "good" if r["status"] == \
            "in band" else ""
        rows.append(f"<tr>{td(r['visit'], 'd')}<td>{esc(r['substation'])}</td>"
                    f"{td(r['relays'], 'd')}{td(r['feeders'], 'd')}"
                    f"{td(r['worst_violation_pp'], '.2f')}{td(r['least_room_pp'], '+.2f')}"
                    f"<td>{esc(r['scenario'])}</td><td>{esc(r['block'])}</td>"
                    f"<td>{esc(r['band_edge'])}</td><td>{esc(r['local_time'])}</td>"
                    f'<td class="{cls}">{esc(r["status"])}</td>'
                    f"{td(r['excess_over_limit_pp'], '.2f')}</tr>")
    return (f'<p class="visit-words">{esc(order_words(order))}</p>'
            f"<p>Limit: {order.limit_pp:.2f} pp (the worst violation of the allocation in "
            "service now, or 0 when it is in band). Visit 0 is the network as it is now. "
            "The order is judged on the scenarios named only.</p>" + table(heads, rows))


def work_sections(fp: FieldPlan) -> str:
    """The relay work list and the visit order (or why there are none)."""
    out = ['<h2 id="work-list">Relay work list (field work list)</h2>']
    if not fp.compares:
        return out[0] + ("<p>No relay changes: this report checks the allocation in service "
                         "now.</p>")
    out.append(_work_list(fp))
    if fp.order is not None and fp.order.visits:
        out += ['<h2 id="visit-order">Visit order</h2>', _visit_order(fp.order, fp.visits)]
    return "".join(out)
