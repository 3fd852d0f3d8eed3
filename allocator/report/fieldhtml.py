"""The field sections of report.html: the annual statement to the system operator.  Every
text from the workbook is escaped (``html.escape``)."""

from __future__ import annotations

from .. import statement as stm
from ..check import ScenarioChecks
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
