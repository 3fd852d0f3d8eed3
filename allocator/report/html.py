"""``report.html``: one self-contained page that opens offline.

Pictures are embedded as ``data:image/png;base64`` URIs, the style sheet is inline, there is
no script, no web font and no link to anything outside the file.  Every piece of text that
comes from the workbook or the plan is escaped with :func:`html.escape`.
"""

from __future__ import annotations

import base64
import html
import math
from pathlib import Path

import numpy as np

from .. import vocab
from ..version import __version__
from ..check import Check, ScenarioChecks, exporting_feeders
from ..export import as_set, stacked
from ..runrecord import SIGN_OFF
from . import content

#: windows listed in the page (all of them are in the workbook)
WINDOWS_SHOWN = 25

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


def _n(x: object, fmt: str = ".2f") -> str:
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


def _td(x: object, fmt: str = ".2f", cls: str = "") -> str:
    c = f' class="n {cls}"' if cls else ' class="n"'
    return f"<td{c}>{_n(x, fmt)}</td>"


def _band_cls(v: float, lo: float, hi: float) -> str:
    if v is None or not math.isfinite(float(v)):
        return ""
    return "below" if v < lo else "above" if v > hi else ""


def _table(headers: list[str], rows: list[str]) -> str:
    head = "".join(f"<th>{esc(h)}</th>" for h in headers)
    return (f'<div class="wide"><table><thead><tr>{head}</tr></thead>'
            f"<tbody>{''.join(rows)}</tbody></table></div>")


def _verdict_box(cs: ScenarioChecks, label: str) -> str:
    from ..check import verdict_covers

    ok = cs.compliant
    word = vocab.headline(ok)
    return (f'<div class="verdict {"ok" if ok else "bad"}"><div class="small">{esc(label)}'
            f'</div><div class="word">{word}</div><p>{esc(content.verdict_words_set(cs))}</p>'
            f'<p class="small">{esc(verdict_covers(cs))}</p></div>')


def _scenario_table(cs: ScenarioChecks) -> str:
    heads = ["scenario", "PV", "PV scale", "load scale", "calendar year", "all blocks in band "
             "% of intervals", "worst distance outside band pp", "verdict"]
    rows = []
    for c in cs.checks:
        i = c.year.scenario_info
        bad = [s.block for s in c.stats if not s.compliant]
        rows.append(f"<tr><td>{esc(c.scenario)}</td><td>{esc(i.get('pv', c.year.source))}</td>"
                    f"{_td(i.get('pv_scale', 1.0), 'g')}{_td(i.get('load_scale', 1.0), 'g')}"
                    f"{_td(c.year.calendar_year, 'd')}{_td(100 * c.all_in_band_fraction, '.1f')}"
                    f"{_td(c.worst_violation_pp, '.2f')}"
                    f'<td class="{"good" if c.compliant else "bad"}">'
                    f'{vocab.compliance_word(c.compliant)}'
                    f'{": " + esc(", ".join(bad)) if bad else ""}'
                    "</td></tr>")
    return _table(heads, rows)


def _settings_table(check: Check) -> str:
    heads = ["block", "order", "pickup Hz", "time delay s", "RoCoF Hz/s", "band min %",
             "target %", "band max %"]
    rows = []
    for b in check.blocks:
        rows.append(f"<tr><td>{esc(b.name)}</td>{_td(b.order, 'd')}{_td(b.pickup_hz, '.3f')}"
                    f"{_td(b.delay_s, '.3f')}{_td(b.rocof_hz_per_s, '.2f')}"
                    f"{_td(b.min_pct, 'g')}{_td(b.target_pct, 'g')}{_td(b.max_pct, 'g')}</tr>")
    return _table(heads, rows)


def _block_table(cs: ScenarioChecks, before: ScenarioChecks | None) -> str:
    rp = content.rule_percentiles(cs.study.settings)
    extra = rp is not None and rp[0] != "P5"
    heads = ["scenario", "block", "band %", "lowest %", "P5 %", "mean %", "P95 %", "highest %"]
    heads += [f"{rp[0]} % (the rule's)", f"{rp[1]} % (the rule's)"] if extra else []
    heads += ["room above min pp", "room below max pp", "intervals below min",
              "intervals above max", "shortfall MWh", "status"]
    if before is not None:
        heads += ["current: lowest %", "current: intervals below min", "current: status"]
    prev = {c.scenario: c for c in before.checks} if before is not None else {}
    rows = []
    for c in cs.checks:
        for k, s in enumerate(c.stats):
            lo, hi = s.min_pct, s.max_pct
            cells = [f"<td>{esc(c.scenario)}</td><td>{esc(s.block)}</td>",
                     f'<td class="n">{_n(lo, "g")}-{_n(hi, "g")}</td>']
            shown = [s.min_share_pct, s.p5_share_pct, s.mean_share_pct, s.p95_share_pct,
                     s.max_share_pct]
            shown += [s.rule_low_share_pct, s.rule_high_share_pct] if extra else []
            for v in shown:
                cells.append(_td(v, ".2f", _band_cls(v, lo, hi)))
            cells += [_td(s.headroom_to_min_pp, "+.2f"), _td(s.headroom_to_max_pp, "+.2f"),
                      _td(s.intervals_below_min, "d"), _td(s.intervals_above_max, "d"),
                      _td(s.shortfall_mwh, ".1f"),
                      f'<td class="{"good" if s.compliant else "bad"}">'
                      f'{esc(s.status)}</td>']
            if c.scenario in prev:
                bs = prev[c.scenario].stats[k]
                cells += [_td(bs.min_share_pct, ".2f", _band_cls(bs.min_share_pct, lo, hi)),
                          _td(bs.intervals_below_min, "d"),
                          f'<td class="{"good" if bs.compliant else "bad"}">'
                          f'{esc(bs.status)}</td>']
            elif before is not None:
                cells += ["<td></td>"] * 3
            rows.append("<tr>" + "".join(cells) + "</tr>")
    key = ('<p class="key small"><span style="background:var(--below)">below the band\'s '
           'minimum</span><span style="background:var(--above)">above the band\'s maximum'
           '</span> Share = armed MW of the block / netted demand, per interval. Room = the '
           'smallest distance to the band\'s edge over the year (negative: outside).</p>')
    return _table(heads, rows) + key


def _windows(check: ScenarioChecks) -> str:
    w = content.windows_table(check)
    if w.empty:
        return "<p>No interval lies outside any block's band in any scenario.</p>"
    heads = ["rank", "scenario", "block", "status", "start (local)", "end (local)", "hours",
             "worst share %", "band limit %", "MWh outside band"]
    rows = []
    for r in w.head(WINDOWS_SHOWN).itertuples():
        cls = "below" if r.kind == "below_min" else "above"
        rows.append(f"<tr>{_td(r.rank, 'd')}<td>{esc(r.scenario)}</td><td>{esc(r.block)}</td>"
                    f"<td>{esc(r.status)}</td>"
                    f"<td>{esc(r.start_local)}</td><td>{esc(r.end_local)}</td>"
                    f"{_td(r.duration_h, 'g')}{_td(r.worst_share_pct, '.2f', cls)}"
                    f"{_td(r.band_pct, 'g')}{_td(r.energy_mwh, '.1f')}</tr>")
    more = (f'<p class="small">{len(w)} windows in all; the {WINDOWS_SHOWN} with the most MWh '
            "outside the band are listed. The full list is on the workbook's windows sheet."
            "</p>" if len(w) > WINDOWS_SHOWN else
            f'<p class="small">{vocab.count(len(w), "window")} in all.</p>')
    return _table(heads, rows) + more


def _exports(check: ScenarioChecks, limit: int = 15) -> str:
    df = stacked(check, exporting_feeders)
    if df.empty or "substation" not in df.columns:
        return "<p>No armed feeder exports at any interval of any scenario.</p>"
    heads = ["scenario", "feeder", "substation", "block", "relay", "exporting hours",
             "largest export MW", "time of largest export (local)", "negative contribution MWh"]
    rows = []
    for r in df.head(limit).itertuples():
        rows.append(f"<tr><td>{esc(r.scenario)}</td><td>{esc(r.feeder_id)}</td>"
                    f"<td>{esc(r.substation)}</td>"
                    f"<td>{esc(r.block)}</td><td>{esc(r.relay)}</td>"
                    f"{_td(r.exporting_hours, 'g')}{_td(r.most_export_mw, '.2f')}"
                    f"<td>{esc(r.most_export_local_time)}</td>"
                    f"{_td(r.negative_contribution_mwh, '.1f')}</tr>")
    note = (f"<p>{vocab.count(len(df), '(scenario, armed feeder) pair')} "
            f"{'exports' if len(df) == 1 else 'export'} at some interval (PV above "
            "load). On a standard "
            "relay an exporting feeder lowers its block's share: tripping it would raise the "
            "system's net load. A direction-blocked relay does not trip it while it exports."
            + (f" The {limit} with the largest negative contribution are listed; all are on "
               "the workbook's exports sheet." if len(df) > limit else "") + "</p>")
    return note + _table(heads, rows)


def _kv(pairs: list[tuple[str, str]]) -> str:
    return ('<dl class="kv">' + "".join(f"<dt>{esc(k)}</dt><dd>{esc(v)}</dd>" for k, v in pairs)
            + "</dl>")


def _plan(plan_info: dict | None) -> str:
    if not plan_info:
        return ""
    pt = content.plan_text(plan_info)
    out = ["<h3>Plan</h3>"]
    if pt.explanation:
        out.append("<p>Why the plan looks as it does:</p><ul>"
                   + "".join(f"<li>{esc(x)}</li>" for x in pt.explanation) + "</ul>")
    if pt.key:
        out.append(_kv([(f.label, f.text()) for f in pt.key]))
    if pt.notes:
        out.append("<p>Planner notes:</p><ul>"
                   + "".join(f"<li>{esc(x)}</li>" for x in pt.notes) + "</ul>")
    if pt.details:
        out.append("<details><summary>How the planner got there</summary>"
                   + _kv([(f.label, f.text()) for f in pt.details]) + "</details>")
    return "".join(out)


def _run_record(run: dict | None) -> str:
    """The run record (run.json) and a printable sign-off box with blank lines."""
    if not run:
        return ""
    rows = "".join(f"<tr><td>{esc(f['role'])}</td><td>{esc(f['name'])}</td>"
                   f'<td class="hash">{esc(f["sha256"])}</td></tr>'
                   for f in run.get("inputs", []))
    sign = "".join(f'<tr><th>{esc(who)}</th><td class="blank"></td><td class="blank"></td>'
                   '<td class="blank"></td></tr>' for who in SIGN_OFF)
    return ('<div class="run-record">'
            + _kv([("tool and version", f"{run.get('tool', '')} {run.get('version', '')}"),
                   ("run time (local, ISO 8601)", run.get("run_time", "")),
                   ("command line", run.get("command_line") or "(called from Python)")])
            + _table(["input", "file", "SHA-256"], [rows])
            + '<table class="sign"><thead><tr><th>sign-off</th><th>name</th><th>date</th>'
            f"<th>signature</th></tr></thead><tbody>{sign}</tbody></table></div>")


def _figures(figs) -> str:
    if not figs:
        return "<p>No figures were rendered.</p>"
    out = []
    for f in figs:
        b64 = base64.b64encode(f.png).decode("ascii")
        w, h = f.size_px
        out.append(f'<figure><h3>{esc(f.title)}</h3><img alt="{esc(f.title)}" width="{w}" '
                   f'height="{h}" src="data:image/png;base64,{b64}">'
                   f"<figcaption>{esc(f.caption)}</figcaption></figure>")
    return "".join(out)


def _frequency(freq: dict | None) -> str:
    """Frequency indication section: largest loss kept within limits per examined interval,
    before and after when both are given (see allocator.frequency_study)."""
    if not freq:
        return ""
    after, bef = freq.get("after"), freq.get("before")
    key = lambda r: (r.get("scenario", ""), r["interval"])  # noqa: E731
    bmap = {key(r): r for r in (bef or {}).get("intervals", [])}
    heads = ["scenario", "interval", "local time", "demand MW", "armed %", "largest loss %"]
    if bef:
        heads = heads[:4] + ["armed % before", "armed % after", "largest loss % before",
                             "largest loss % after"]
    rows = []
    for r in after["intervals"]:
        lc = r["largest_covered_pct"]
        cells = [f"<td>{esc(r.get('scenario', ''))}</td>", f"<td>{esc(r['interval'])}</td>",
                 f"<td>{esc(r['local_time'])}</td>", _td(r["demand_mw"], ".0f")]
        if bef:
            b = bmap.get(key(r))
            cells += [_td(b["total_armed_pct"] if b else None, ".1f"),
                      _td(r["total_armed_pct"], ".1f"),
                      _td(b["largest_covered_pct"] if b else None, ".0f"), _td(lc, ".0f")]
        else:
            cells += [_td(r["total_armed_pct"], ".1f"), _td(lc, ".0f")]
        rows.append("<tr>" + "".join(cells) + "</tr>")
    out = [f"<p>Largest generation loss (% of demand at that interval) after which frequency "
           f"stays within {after['floor_hz']:g}–{after['ceiling_hz']:g} Hz, with each block "
           "shedding the share the check found at that interval. "
           + ("Intervals are those flagged for the planned allocation; 'before' is the "
              "current allocation at its own flagged intervals where the labels match. "
              if bef else "") + "</p>", _table(heads, rows)]
    png = freq.get("figure_png")
    if png:
        b64 = base64.b64encode(png).decode("ascii")
        out.append(f'<figure><img alt="frequency traces" src="data:image/png;base64,{b64}" '
                   'style="max-width:100%"><figcaption>Frequency after losses of several '
                   "sizes at the most critical interval.</figcaption></figure>")
    out.append("<ul class=\"cautions\">" + "".join(f"<li>{esc(c)}</li>"
                                                   for c in after.get("cautions", [])) + "</ul>")
    return "".join(out)


def render_html(checks: Check | ScenarioChecks, figs, previous_idx: np.ndarray | None = None,
                plan_info: dict | None = None, before: Check | ScenarioChecks | None = None,
                frequency: dict | None = None, run: dict | None = None) -> str:
    cs = as_set(checks)
    before = as_set(before) if before is not None else None
    what = ("a planned allocation" if plan_info else
            "a proposed assignment" if previous_idx is not None else
            "the workbook's current allocation")
    parts = _page_head(cs, what) + [
        "<h2>Verdict</h2>",
        _verdict_box(cs, "Planned allocation (after)" if before is not None
                     else "Allocation checked"),
    ]
    return _render_rest(parts, cs, figs, previous_idx, plan_info, before, frequency, run)


def _page_head(cs: ScenarioChecks, what: str) -> list[str]:
    """The page's head, title, one-line description and caution strip."""
    check = cs.checks[0]
    s = check.study.settings
    title = f"UFLS armed-load report - {s.utility}, study year {s.year}"
    return [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        # no network at all: images only from data: URIs, no scripts, fonts or frames
        '<meta http-equiv="Content-Security-Policy" content="default-src \'none\'; '
        'img-src data:; style-src \'unsafe-inline\'">',
        f"<title>{esc(title)}</title><style>{CSS}</style></head><body>",
        f"<h1>{esc(title)}</h1>",
        f'<p class="meta">Workbook {esc(content.workbook_name(check))}; this report checks '
        f"{esc(what)}; rule {esc(check.rule)}; scenarios {esc(', '.join(cs.names))}; "
        f"intervals of {check.year.interval_minutes} min; ufls-allocator "
        f"{esc(__version__)}.</p>",
        CAUTION_STRIP + " See the cautions at the end.</div>"]


#: the caution strip at the top of every page (closed by the caller, which may add a line)
CAUTION_STRIP = (
    '<div class="caution-strip"><strong>Caution:</strong> UFLS disconnects customers. '
    "Protect priority sites (hospitals, life-support customers, water pumping) as your "
    "local rules require. These results are indicative planning support; the system "
    "operator's requirements, local codes and licensed engineering practice govern. "
    "Verify relay settings before any change in the field.")


def _render_rest(parts, cs, figs, previous_idx, plan_info, before, frequency, run) -> str:
    """Everything after the verdict box, in page order; returns the page."""
    check = cs.checks[0]
    s = check.study.settings
    if before is not None:
        parts.append(_verdict_box(before, "Current allocation (before)"))
        parts.append(f"<p>Worst distance outside a band over every scenario: "
                     f"{before.worst_violation_pp:.2f} pp before, {cs.worst_violation_pp:.2f} "
                     "pp after.</p>")
    parts.append("<h3>Scenarios judged</h3>")
    parts.append(_scenario_table(cs))
    if previous_idx is not None:
        n = int(np.sum(np.asarray(previous_idx) != check.block_idx))
        parts.append(f"<p>{vocab.count(n, 'feeder').capitalize()} "
                     f"{'changes' if n == 1 else 'change'} block compared with the current "
                     "allocation.</p>")
    parts.append(f"<p>{esc(content.priority_summary(check).words(s.priority_policy))}</p>")
    parts.append(_plan(plan_info))
    parts.append("<h3>Per block</h3>")
    parts.append(_block_table(cs, before))
    parts.append("<h3>Block settings</h3>")
    parts.append(_settings_table(check))
    parts.append("<h2>Pictures</h2>")
    parts.append(_figures(figs))
    parts.append("<h2>Windows outside the band</h2>")
    parts.append(_windows(cs))
    parts.append("<h2>Exporting feeders</h2>")
    parts.append(_exports(cs))
    from . import fieldhtml

    parts.append(fieldhtml.work_sections(cs, previous_idx))
    parts.append(fieldhtml.statement_section(cs))
    if frequency:
        parts.append("<h2>Frequency indication (single-bus model)</h2>")
        parts.append(_frequency(frequency))
    parts.append("<h2>Assumptions</h2>")
    parts.append(_kv(content.assumptions(check)))
    warns = content.all_warnings(cs)
    if warns:
        parts.append(f"<h2>Warnings ({len(warns)})</h2><ul>"
                     + "".join(f"<li>{esc(w)}</li>" for w in warns[:200]) + "</ul>"
                     + (f"<p>... and {len(warns) - 200} more.</p>" if len(warns) > 200 else ""))
    if run:
        parts.append("<h2>Run record</h2>")
        parts.append(_run_record(run))
    parts.append("<h2>Cautions</h2><ul class=\"cautions\">"
                 + "".join(f"<li>{esc(c)}</li>" for c in content.CAUTIONS) + "</ul>")
    parts.append("</body></html>\n")
    return "\n".join(parts)


def write_html(check: Check | ScenarioChecks, path: Path, figs,
               previous_idx: np.ndarray | None = None, plan_info: dict | None = None,
               before: Check | ScenarioChecks | None = None,
               frequency: dict | None = None, run: dict | None = None) -> Path:
    path = Path(path)
    path.write_text(render_html(check, figs, previous_idx, plan_info, before, frequency,
                                run), encoding="utf-8")
    return path
