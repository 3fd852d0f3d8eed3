"""``report.html``: one self-contained page that opens offline.

Pictures are embedded as ``data:image/png;base64`` URIs, the style sheet is inline, there is
no script, no web font and no link to anything outside the file.  Every piece of text that
comes from the workbook or the plan is escaped with :func:`html.escape`.
"""

from __future__ import annotations

import base64
from pathlib import Path


from .. import vocab
from ..version import __version__
from ..check import Check, ScenarioChecks, exporting_feeders
from ..check import as_set
from ..files import stacked
from ..runrecord import SIGN_OFF
from . import content
from .htmlkit import CAUTION_STRIP, CSS, band_cls, esc, kv, num, table, td

#: windows listed in the page (all of them are in the workbook)
WINDOWS_SHOWN = 25

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
                    f"{td(i.get('pv_scale', 1.0), 'g')}{td(i.get('load_scale', 1.0), 'g')}"
                    f"{td(c.year.calendar_year, 'd')}{td(100 * c.all_in_band_fraction, '.1f')}"
                    f"{td(c.worst_violation_pp, '.2f')}"
                    f'<td class="{"good" if c.compliant else "bad"}">'
                    f'{vocab.compliance_word(c.compliant)}'
                    f'{": " + esc(", ".join(bad)) if bad else ""}'
                    "</td></tr>")
    return table(heads, rows)


def _settings_table(check: Check) -> str:
    heads = ["block", "order", "pickup Hz", "time delay s", "RoCoF Hz/s", "band min %",
             "target %", "band max %"]
    rows = []
    for b in check.blocks:
        rows.append(f"<tr><td>{esc(b.name)}</td>{td(b.order, 'd')}{td(b.pickup_hz, '.3f')}"
                    f"{td(b.delay_s, '.3f')}{td(b.rocof_hz_per_s, '.2f')}"
                    f"{td(b.min_pct, 'g')}{td(b.target_pct, 'g')}{td(b.max_pct, 'g')}</tr>")
    return table(heads, rows)


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
                     f'<td class="n">{num(lo, "g")}-{num(hi, "g")}</td>']
            shown = [s.min_share_pct, s.p5_share_pct, s.mean_share_pct, s.p95_share_pct,
                     s.max_share_pct]
            shown += [s.rule_low_share_pct, s.rule_high_share_pct] if extra else []
            for v in shown:
                cells.append(td(v, ".2f", band_cls(v, lo, hi)))
            cells += [td(s.headroom_to_min_pp, "+.2f"), td(s.headroom_to_max_pp, "+.2f"),
                      td(s.intervals_below_min, "d"), td(s.intervals_above_max, "d"),
                      td(s.shortfall_mwh, ".1f"),
                      f'<td class="{"good" if s.compliant else "bad"}">'
                      f'{esc(s.status)}</td>']
            if c.scenario in prev:
                bs = prev[c.scenario].stats[k]
                cells += [td(bs.min_share_pct, ".2f", band_cls(bs.min_share_pct, lo, hi)),
                          td(bs.intervals_below_min, "d"),
                          f'<td class="{"good" if bs.compliant else "bad"}">'
                          f'{esc(bs.status)}</td>']
            elif before is not None:
                cells += ["<td></td>"] * 3
            rows.append("<tr>" + "".join(cells) + "</tr>")
    key = ('<p class="key small"><span style="background:var(--below)">below the band\'s '
           'minimum</span><span style="background:var(--above)">above the band\'s maximum'
           '</span> Share = armed MW of the block / netted demand, per interval. Room = the '
           'smallest distance to the band\'s edge over the year (negative: outside).</p>')
    return table(heads, rows) + key


def _windows(check: ScenarioChecks) -> str:
    w = content.windows_table(check)
    if w.empty:
        return "<p>No interval lies outside any block's band in any scenario.</p>"
    heads = ["rank", "scenario", "block", "status", "start (local)", "end (local)", "hours",
             "worst share %", "band limit %", "MWh outside band"]
    rows = []
    for r in w.head(WINDOWS_SHOWN).itertuples():
        cls = "below" if r.kind == "below_min" else "above"
        rows.append(f"<tr>{td(r.rank, 'd')}<td>{esc(r.scenario)}</td><td>{esc(r.block)}</td>"
                    f"<td>{esc(r.status)}</td>"
                    f"<td>{esc(r.start_local)}</td><td>{esc(r.end_local)}</td>"
                    f"{td(r.duration_h, 'g')}{td(r.worst_share_pct, '.2f', cls)}"
                    f"{td(r.band_pct, 'g')}{td(r.energy_mwh, '.1f')}</tr>")
    more = (f'<p class="small">{len(w)} windows in all; the {WINDOWS_SHOWN} with the most MWh '
            "outside the band are listed. The full list is on the workbook's windows sheet."
            "</p>" if len(w) > WINDOWS_SHOWN else
            f'<p class="small">{vocab.count(len(w), "window")} in all.</p>')
    return table(heads, rows) + more


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
                    f"{td(r.exporting_hours, 'g')}{td(r.most_export_mw, '.2f')}"
                    f"<td>{esc(r.most_export_local_time)}</td>"
                    f"{td(r.negative_contribution_mwh, '.1f')}</tr>")
    note = (f"<p>{vocab.count(len(df), '(scenario, armed feeder) pair')} "
            f"{'exports' if len(df) == 1 else 'export'} at some interval (PV above "
            "load). On a standard "
            "relay an exporting feeder lowers its block's share: tripping it would raise the "
            "system's net load. A direction-blocked relay does not trip it while it exports."
            + (f" The {limit} with the largest negative contribution are listed; all are on "
               "the workbook's exports sheet." if len(df) > limit else "") + "</p>")
    return note + table(heads, rows)


def _plan(plan_info: dict | None) -> str:
    if not plan_info:
        return ""
    pt = content.plan_text(plan_info)
    out = ["<h3>Plan</h3>"]
    if pt.explanation:
        out.append("<p>Why the plan looks as it does:</p><ul>"
                   + "".join(f"<li>{esc(x)}</li>" for x in pt.explanation) + "</ul>")
    if pt.key:
        out.append(kv([(f.label, f.text()) for f in pt.key]))
    if pt.notes:
        out.append("<p>Planner notes:</p><ul>"
                   + "".join(f"<li>{esc(x)}</li>" for x in pt.notes) + "</ul>")
    if pt.details:
        out.append("<details><summary>How the planner got there</summary>"
                   + kv([(f.label, f.text()) for f in pt.details]) + "</details>")
    names, rows = content.arming_table(plan_info)
    if names:
        out.append('<h3 id="arming">Fixed and switched plans (the same counting)</h3>'
                   f"<p>{esc(content.arming_words(plan_info))}</p>"
                   + table([""] + names, [f"<tr><td>{esc(label)}</td>"
                                          + "".join(f"<td>{esc(f.text())}</td>" for f in fs)
                                          + "</tr>" for label, fs in rows]))
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
            + kv([("tool and version", f"{run.get('tool', '')} {run.get('version', '')}"),
                   ("run time (local, ISO 8601)", run.get("run_time", "")),
                   ("command line", run.get("command_line") or "(called from Python)")])
            + table(["input", "file", "SHA-256"], [rows])
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
    before and after when both are given (see allocator.frequency_indication)."""
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
                 f"<td>{esc(r['local_time'])}</td>", td(r["demand_mw"], ".0f")]
        if bef:
            b = bmap.get(key(r))
            cells += [td(b["total_armed_pct"] if b else None, ".1f"),
                      td(r["total_armed_pct"], ".1f"),
                      td(b["largest_covered_pct"] if b else None, ".0f"), td(lc, ".0f")]
        else:
            cells += [td(r["total_armed_pct"], ".1f"), td(lc, ".0f")]
        rows.append("<tr>" + "".join(cells) + "</tr>")
    out = [f"<p>Largest generation loss (% of demand at that interval) after which frequency "
           f"stays within {after['floor_hz']:g}–{after['ceiling_hz']:g} Hz, with each block "
           "shedding the share the check found at that interval. "
           + ("Intervals are those flagged for the planned allocation; 'before' is the "
              "current allocation at its own flagged intervals where the labels match. "
              if bef else "") + "</p>", table(heads, rows)]
    png = freq.get("figure_png")
    if png:
        b64 = base64.b64encode(png).decode("ascii")
        out.append(f'<figure><img alt="frequency traces" src="data:image/png;base64,{b64}" '
                   'style="max-width:100%"><figcaption>Frequency after losses of several '
                   "sizes at the most critical interval.</figcaption></figure>")
    out.append("<ul class=\"cautions\">" + "".join(f"<li>{esc(c)}</li>"
                                                   for c in after.get("cautions", [])) + "</ul>")
    return "".join(out)


def render_html(checks: Check | ScenarioChecks, figs, field=None,
                plan_info: dict | None = None, before: Check | ScenarioChecks | None = None,
                frequency: dict | None = None, run: dict | None = None) -> str:
    """The page of ``checks`` (``field``: its
    :class:`~allocator.field.plan.FieldPlan`, made here with nothing to compare when None)."""
    from ..field.plan import field_plan

    cs = as_set(checks)
    before = as_set(before) if before is not None else None
    field = field_plan(cs) if field is None else field
    parts = _page_head(cs, content.what_is_checked(field, plan_info)) + [
        "<h2>Verdict</h2>",
        _verdict_box(cs, "Planned allocation (after)" if before is not None
                     else "Allocation checked"),
    ]
    return _render_rest(parts, cs, figs, field, plan_info, before, frequency, run)


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


def _render_rest(parts, cs, figs, field, plan_info, before, frequency, run) -> str:
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
    if field.compares and not plan_info:  # a plan's facts say it themselves
        parts.append(kv([(f.label, f.text()) for f in content.change_facts(field.counts)]))
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

    parts.append(fieldhtml.work_sections(field))
    parts.append(fieldhtml.statement_section(field))
    if frequency:
        parts.append("<h2>Frequency indication (single-bus model)</h2>")
        parts.append(_frequency(frequency))
    parts.append("<h2>Assumptions</h2>")
    parts.append(kv(content.assumptions(check)))
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


def write_html(check: Check | ScenarioChecks, path: Path, figs, field=None,
               plan_info: dict | None = None,
               before: Check | ScenarioChecks | None = None,
               frequency: dict | None = None, run: dict | None = None) -> Path:
    """Write report.html (see :func:`render_html`) and return its path."""
    path = Path(path)
    path.write_text(render_html(check, figs, field, plan_info, before, frequency, run),
                    encoding="utf-8")
    return path
