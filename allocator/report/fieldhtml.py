"""The field sections of report.html: the annual statement to the system operator, the relay
work list and the visit order.  Every text from the workbook is escaped (``html.escape``)."""

from __future__ import annotations

import numpy as np

from .. import statement as stm
from ..check import ScenarioChecks
from ..visits import VisitOrder, order_words, visit_order, visit_order_table
from ..worklist import work_list_table
from .html import _table, _td, esc


def statement_section(cs: ScenarioChecks) -> str:
    df = stm.statement_table(cs)
    keys = [k for k, _ in stm.COLUMNS if k not in ("scenario", "made_from", "order")]
    fmts = {"pickup_hz": ".3f", "delay_s": ".3f", "rocof_hz_per_s": ".2f",
            "rocof_arm_hz": ".2f"}
    rows = []
    for r in df.to_dict("records"):
        cells = [f"<td>{esc(r[k])}</td>" if isinstance(r[k], str) else
                 _td(r[k], fmts.get(k, ".2f")) for k in keys]
        rows.append("<tr>" + "".join(cells) + "</tr>")
    return (f'<h2 id="statement">{esc(stm.TITLE)}</h2>'
            f"<p><strong>{esc(stm.CITATION)}.</strong> {esc(stm.EXPLANATION)}</p>"
            f'<p class="statement-basis">{esc(stm.statement_basis(cs))}</p>'
            + _table([stm.LABELS[k] for k in keys], rows)
            + f'<p class="small">{esc(stm.CAUTION)}</p>')


def _setting_cells(r: dict, side: str) -> str:
    return (f"<td>{esc(r[side + '_block'])}</td>{_td(r[side + '_pickup_hz'], '.3f')}"
            f"{_td(r[side + '_delay_s'], '.3f')}{_td(r[side + '_rocof_hz_per_s'], '.2f')}"
            f"{_td(r[side + '_rocof_arm_hz'], '.2f')}")


def _work_list(cs: ScenarioChecks, previous_idx, order: VisitOrder) -> str:
    df = work_list_table(cs, previous_idx, order)
    if df.empty:
        return "<p>No relay changes: every relay keeps the setting it has now.</p>"
    sc = df["mw_scenario"].iloc[0]
    heads = ["visit", "substation(s)", "feeder(s)", "relay kind", "action", "now: block",
             "now: pickup Hz", "now: delay s", "now: RoCoF Hz/s", "now: RoCoF arming Hz",
             "new: block", "new: pickup Hz", "new: delay s", "new: RoCoF Hz/s",
             "new: RoCoF arming Hz", f"MW moved: mean ({sc})",
             "MW moved at the block's lowest share", "time of that lowest share (local)",
             "customers", "priority site"]
    rows = []
    for r in df.to_dict("records"):
        rows.append(f"<tr>{_td(r['visit'], 'd')}<td>{esc(r['substations'])}</td>"
                    f"<td>{esc(r['feeders'])}</td><td>{esc(r['relay'])}</td>"
                    f"<td>{esc(r['action'])}</td>{_setting_cells(r, 'now')}"
                    f"{_setting_cells(r, 'new')}{_td(r['moved_mean_mw'], '.2f')}"
                    f"{_td(r['moved_mw_at_block_lowest'], '.2f')}"
                    f"<td>{esc(r['block_lowest_local_time'])}</td>{_td(r['customers'], 'd')}"
                    f"<td>{esc(r['priority'])}</td></tr>")
    n_sub = len(order.visits)
    return (f"<p>{len(df)} relays at {n_sub} substations change setting, one row per relay "
            "(a trip group is one relay: its row lists every feeder it trips). Rows are in "
            "visit order. 'disarm' takes the relay's UFLS trip out of the scheme. MW moved: "
            f"the relay's tripped MW in scenario {esc(sc)}, as the mean over the year and at "
            "the interval of the lowest share of the block it goes to (for disarm: the block "
            "it leaves). The workbook's work_list sheet has sign-off columns and prints on "
            "one page wide.</p>" + _table(heads, rows))


def _visit_order(order: VisitOrder) -> str:
    df = visit_order_table(order)
    heads = ["visit", "substation", "relays", "feeders", "worst violation after it pp",
             "least room pp", "scenario", "block", "band edge", "local time", "status",
             "over the limit by pp"]
    rows = []
    for r in df.to_dict("records"):
        cls = "bad" if r["status"] == "breaks the band" else "good" if r["status"] == \
            "in band" else ""
        rows.append(f"<tr>{_td(r['visit'], 'd')}<td>{esc(r['substation'])}</td>"
                    f"{_td(r['relays'], 'd')}{_td(r['feeders'], 'd')}"
                    f"{_td(r['worst_violation_pp'], '.2f')}{_td(r['least_room_pp'], '+.2f')}"
                    f"<td>{esc(r['scenario'])}</td><td>{esc(r['block'])}</td>"
                    f"<td>{esc(r['band_edge'])}</td><td>{esc(r['local_time'])}</td>"
                    f'<td class="{cls}">{esc(r["status"])}</td>'
                    f"{_td(r['excess_over_limit_pp'], '.2f')}</tr>")
    return (f'<p class="visit-words">{esc(order_words(order))}</p>'
            f"<p>Limit: {order.limit_pp:.2f} pp (the worst violation of the allocation in "
            "service now, or 0 when it is in band). Visit 0 is the network as it is now. "
            "The order is judged on the scenarios named only.</p>" + _table(heads, rows))


def work_sections(cs: ScenarioChecks, previous_idx: np.ndarray | None) -> str:
    """The relay work list and the visit order (or why there are none)."""
    out = ['<h2 id="work-list">Relay work list (field work list)</h2>']
    if previous_idx is None:
        return out[0] + ("<p>No relay changes: this report checks the allocation in service "
                         "now.</p>")
    order = visit_order(cs, previous_idx)
    out.append(_work_list(cs, previous_idx, order))
    if order.visits:
        out += ['<h2 id="visit-order">Visit order</h2>', _visit_order(order)]
    return "".join(out)
