"""The planner's workbook, ``report.xlsx``.

Sheets: ``summary`` (verdicts, plan facts, worst windows, the run record with the sign-off
cells, fill legend, cautions), ``statement``, ``work_list`` and ``visit_order`` (the field
plan, :mod:`allocator.report.fieldsheets`), ``scenarios``, ``blocks`` (settings and the
statistics of summary.json, same values), ``feeders``, ``intervals`` (the year, one row per
interval), ``windows`` (runs outside a band), ``exports`` (armed feeders that export),
``substations`` and, for a schedule, ``schedule``.

Cells outside a band are filled by conditional formats (orange: below the minimum, blue:
above the maximum); the summary sheet explains the fills.  Text is always written as text,
never as a formula (see :mod:`allocator.report.xlsxtable`).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import openpyxl
import pandas as pd
from openpyxl.formatting.rule import CellIsRule
from openpyxl.styles import Alignment, Border, Font, PatternFill, Side

from .. import vocab
from ..version import __version__
from ..check import Check, ScenarioChecks, by_substation, exporting_feeders, summary_dict
from ..files import stacked
from ..runrecord import SIGN_OFF
from ..timefmt import offset_hours, split_iso
from . import content, palette
from .xlsxtable import Col, Table, put, put_text, save, table_sheet

F_MW, F_PCT, F_HZ, F_S, F_MWH, F_PP, F_INT, F_H = ("0.00", "0.0", "0.00", "0.00", "0.0",
                                                    "0.00", "0", "0.00")

FILL_BELOW = PatternFill("solid", start_color=palette.FILL_BELOW, end_color=palette.FILL_BELOW)
FILL_ABOVE = PatternFill("solid", start_color=palette.FILL_ABOVE, end_color=palette.FILL_ABOVE)
TITLE_FONT = Font(bold=True, size=14)
H2_FONT = Font(bold=True, size=12)
BOLD = Font(bold=True)
WRAP = Alignment(wrap_text=True, vertical="top")

#: blocks sheet: (summary.json key, header, kind, number format); the statistics are written
#: with the summary.json values (same rounding), so the two files show the same numbers.
#: Kind "time": an ISO 8601 local time, written as a date cell "<header> (local)" and its
#: "<header> UTC offset h" column (see time_cols)
BLOCK_COLUMNS: tuple[tuple[str, str, str, str | None], ...] = (
    ("block", "block", "text", None),
    ("order", "order", "int", F_INT),
    ("pickup_hz", "pickup Hz", "num", "0.000"),
    ("delay_s", "time delay s", "num", "0.000"),
    ("rocof_hz_per_s", "RoCoF setting Hz/s", "num", "0.00"),
    ("rocof_arm_hz", "RoCoF arming Hz", "num", "0.00"),
    ("target_pct", "target %", "num", F_PCT),
    ("min_pct", "band min %", "num", F_PCT),
    ("max_pct", "band max %", "num", F_PCT),
    ("min_share_pct", "lowest share %", "num", "0.00"),
    ("p1_share_pct", "P1 share %", "num", "0.00"),
    ("p5_share_pct", "P5 share %", "num", "0.00"),
    ("mean_share_pct", "mean share %", "num", "0.00"),
    ("p95_share_pct", "P95 share %", "num", "0.00"),
    ("p99_share_pct", "P99 share %", "num", "0.00"),
    ("max_share_pct", "highest share %", "num", "0.00"),
    ("intervals_below_min", "intervals below min", "int", F_INT),
    ("intervals_above_max", "intervals above max", "int", F_INT),
    ("shortfall_mwh", "shortfall MWh", "num", F_MWH),
    ("excess_mwh", "excess MWh", "num", F_MWH),
    ("worst_violation_pp", "worst distance outside band pp", "num", F_PP),
    ("min_share_local_time", "time of lowest share", "time", None),
    ("compliant", "compliant", "bool", None),
    ("status", "status", "text", None),
)
SHARE_KEYS = ("min_share_pct", "p1_share_pct", "p5_share_pct", "mean_share_pct",
              "p95_share_pct", "p99_share_pct", "max_share_pct")

SHEETS = {
    "summary": "verdicts, plan status, worst windows, what the fills mean, cautions",
    "statement": "the annual statement to the system operator (Regulation (EU) 2017/2196 "
                 "Art. 50(1)), with blank prepared-by / checked-by fields",
    "work_list": "one row per relay whose setting changes: the field visits in visit order "
                 "(the setting now and after, MW moved, blank sign-off columns), then the "
                 "relays the control room sets by schedule; prints one page wide",
    "visit_order": "the substation visits in order and the worst band violation over every "
                   "scenario after each",
    "scenarios": "every scenario judged: how its year was made and its verdict",
    "blocks": "per scenario, block settings and the year's statistics (the values of "
              "summary.json)",
    "feeders": "every feeder: its block, relay settings, net load and share of its block "
               "(net load figures of the first scenario)",
    "intervals": "every interval of every scenario: netted demand, MW and % of demand armed "
                 "in each block",
    "windows": "runs of intervals outside a block's band, worst (most MWh) first",
    "exports": "armed feeders that export at some interval",
    "substations": "mean armed MW per substation, zone and block",
}


F_DATE, F_OFFSET = "yyyy-mm-dd hh:mm", "+0.00;-0.00"


def time_cols(header: str, texts) -> list[Col]:
    """An ISO 8601 local time (``2025-06-02T03:00+02:00``) as two columns: a real date cell
    of the local wall-clock time, ``<header> (local)``, and ``<header> UTC offset h``.
    SpreadsheetML date cells are serial day numbers without a zone (ECMA-376 Part 1,
    §18.17.4), so the offset needs its own column; local − offset = UTC."""
    wall, off = split_iso(texts)
    return [Col(f"{header} (local)", wall, "date", F_DATE, 17),
            Col(f"{header} UTC offset h", off, "num", F_OFFSET, 8)]


def _cf_band(ws, rng: str, lo: str, hi: str) -> None:
    """Orange fill below ``lo``, blue fill above ``hi`` (formulas or numbers as text)."""
    ws.conditional_formatting.add(rng, CellIsRule(operator="lessThan", formula=[lo],
                                                  fill=FILL_BELOW))
    ws.conditional_formatting.add(rng, CellIsRule(operator="greaterThan", formula=[hi],
                                                  fill=FILL_ABOVE))


def _num(v: float) -> str:
    return repr(float(v))


# --------------------------------------------------------------------------------------------
# sheets
# --------------------------------------------------------------------------------------------
def _block_cols(checks: list[Check]) -> list[Col]:
    """The blocks sheet's columns for the (scenario, block) rows of ``checks``."""
    summ = [(c, r) for c in checks for r in summary_dict(c)["blocks"]]
    cols = [Col("scenario", [c.scenario for c, _ in summ], "text")]
    for key, header, kind, fmt in BLOCK_COLUMNS:
        if key in ("rocof_hz_per_s", "rocof_arm_hz"):
            vals = [getattr(c.blocks[i % len(c.blocks)], key) for i, (c, _) in enumerate(summ)]
            vals = [np.nan if v is None else v for v in vals]
        elif kind == "num":
            vals = [content.json_number(r[key]) for _, r in summ]
            vals = [np.nan if v is None else v for v in vals]
        else:
            vals = [r[key] for _, r in summ]
        cols += time_cols(header, vals) if kind == "time" else [Col(header, vals, kind, fmt)]
    rp = content.rule_percentiles(checks[0].study.settings) if checks else None
    if rp is not None and rp[0] not in ("P1", "P5"):
        for key, name in (("rule_low_share_pct", rp[0]), ("rule_high_share_pct", rp[1])):
            vals = [content.json_number(r[key]) for _, r in summ]
            cols.append(Col(f"{name} share % (the rule's)", [np.nan if v is None else v
                                                              for v in vals], "num", "0.00"))
    for key, header in (("headroom_to_min_pp", "room above band min pp"),
                        ("headroom_to_max_pp", "room below band max pp")):
        vals = [content.json_number(getattr(c.stats[i % len(c.blocks)], key))
                for i, (c, _) in enumerate(summ)]
        cols.append(Col(header, [np.nan if v is None else v for v in vals], "num", F_PP))
    return cols


def _blocks_sheet(wb, cs: ScenarioChecks, before: ScenarioChecks | None) -> Table:
    cols = _block_cols(list(cs.checks))
    if before is not None:
        nb = len(cs.blocks)
        prev = {c.scenario: c for c in before.checks}
        rows = [(c, j) for c in cs.checks for j in range(nb)]
        for key, header in (("min_share_pct", "current allocation: lowest share %"),
                            ("mean_share_pct", "current allocation: mean share %"),
                            ("intervals_below_min", "current allocation: intervals below min"),
                            ("intervals_above_max", "current allocation: intervals above max")):
            kind = "int" if key.startswith("intervals") else "num"
            vals = [content.json_number(getattr(prev[c.scenario].stats[j], key))
                    if c.scenario in prev else None for c, j in rows]
            cols.append(Col(header, [np.nan if v is None else v for v in vals], kind,
                            F_INT if kind == "int" else "0.00"))
        cols.append(Col("current allocation: compliant",
                        [prev[c.scenario].stats[j].compliant if c.scenario in prev else None
                         for c, j in rows], "bool"))
    t = table_sheet(wb, "blocks", cols, freeze="C2")
    lo = t.col_letter("band min %")
    hi = t.col_letter("band max %")
    share_headers = [h for k, h, _, _ in BLOCK_COLUMNS if k in SHARE_KEYS]
    share_headers += [c.header for c in cols if c.header.endswith("share % (the rule's)")]
    if before is not None:
        share_headers += ["current allocation: lowest share %",
                          "current allocation: mean share %"]
    for h in share_headers:
        _cf_band(t.ws, t.data_range(h), f"${lo}2", f"${hi}2")
    return t


def _scenarios_sheet(wb, cs: ScenarioChecks) -> Table:
    info = [c.year.scenario_info for c in cs.checks]
    cols = [Col("scenario", list(cs.names), "text"),
            Col("PV", [str(i.get("pv", "")) for i in info], "text"),
            Col("PV scale", [float(i.get("pv_scale", 1.0)) for i in info], "num", "0.00"),
            Col("load scale", [float(i.get("load_scale", 1.0)) for i in info], "num", "0.00"),
            Col("calendar year", [c.year.calendar_year for c in cs.checks], "int", F_INT),
            Col("data source", [c.year.source for c in cs.checks], "text"),
            Col("intervals", [c.year.n_intervals for c in cs.checks], "int", F_INT),
            Col("verdict", [vocab.compliance_word(c.compliant) for c in cs.checks], "text"),
            Col("worst distance outside band pp", [c.worst_violation_pp for c in cs.checks],
                "num", F_PP),
            Col("all blocks in band % of intervals",
                [100.0 * c.all_in_band_fraction for c in cs.checks], "num", F_PCT),
            Col("blocks not compliant", [", ".join(s.block for s in c.stats if not s.compliant)
                                       for c in cs.checks], "text")]
    return table_sheet(wb, "scenarios", cols, freeze="B2")


def _feeders_sheet(wb, check: Check, field, fc) -> Table:
    df = content.feeder_table(check, field, fc)
    spec = [
        ("feeder_id", "feeder", "text", None), ("substation", "substation", "text", None),
        ("zone", "zone", "text", None), ("profile", "profile (feeder class)", "text", None),
        ("relay", "relay", "text", None), ("priority", "priority site", "text", None),
        ("customers", "customers", "int", F_INT), ("block", "block", "text", None),
        ("pickup_hz", "pickup Hz", "num", "0.000"), ("delay_s", "time delay s", "num", "0.000"),
        ("rocof_hz_per_s", "RoCoF setting Hz/s", "num", "0.00"),
        ("previous_block", "previous block", "text", None), ("changed", "changed", "bool", None),
        ("mean_net_mw", "mean net MW", "num", F_MW), ("min_net_mw", "min net MW", "num", F_MW),
        ("max_net_mw", "max net MW", "num", F_MW),
        ("mean_contribution_mw", "mean armed MW (first scenario)", "num", F_MW),
        ("share_of_block_pct", "share of its block %", "num", F_PCT),
    ]
    cols = [Col(h, df[k].tolist() if kind in ("text", "bool") else df[k].to_numpy(), kind, fmt)
            for k, h, kind, fmt in spec]
    return table_sheet(wb, "feeders", cols, freeze="B2")


def _intervals_sheet(wb, cs: ScenarioChecks) -> Table:
    """Every interval of every scenario, one after the other (a scenario column first)."""
    checks = cs.checks
    tz = checks[0].year.timezone
    cat = lambda f: np.concatenate([f(c) for c in checks])  # noqa: E731
    cols = [Col("scenario", [c.scenario for c in checks for _ in range(c.year.n_intervals)],
                "text", None, 10),
            Col(f"local time ({tz})", cat(lambda c: c.year.local_times.tz_localize(None)
                                          .to_numpy()), "date", F_DATE, 17),
            Col("UTC offset h", cat(lambda c: offset_hours(c.year.local_times)), "num",
                F_OFFSET, 8),
            Col("UTC time", cat(lambda c: c.year.timestamps_utc.tz_localize(None).to_numpy()),
                "date", "yyyy-mm-dd hh:mm", 17),
            Col("netted demand MW", cat(lambda c: c.year.demand_mw), "num", F_MW, 11)]
    for j, b in enumerate(cs.blocks):
        cols.append(Col(f"{b.name} armed MW", cat(lambda c: c.armed_mw[j]), "num", F_MW, 10))
        cols.append(Col(f"{b.name} share %", cat(lambda c: c.share_pct[j]), "num", F_PCT, 10))
    t = table_sheet(wb, "intervals", cols, freeze="C2")
    for b in cs.blocks:
        _cf_band(t.ws, t.data_range(f"{b.name} share %"), _num(b.min_pct), _num(b.max_pct))
    return t


def _windows_sheet(wb, check: ScenarioChecks) -> Table:
    w = content.windows_table(check)
    if w.empty:
        heads = ["rank", "scenario", "block", "status", "start (local)", "end (local)",
                 "duration h", "MWh outside band"]
        cols = [Col(h, ["No interval lies outside any block's band."] if j == 0 else [None],
                    "text", None, width=20 if j == 0 else None) for j, h in enumerate(heads)]
        return table_sheet(wb, "windows", cols, autofilter=False)
    num = lambda k: w[k].to_numpy(dtype=float)  # noqa: E731
    cols = ([Col("rank", num("rank"), "int", F_INT), Col("scenario", w["scenario"].tolist(),
                                                         "text"),
             Col("block", w["block"].tolist(), "text"), Col("status", w["status"].tolist(),
                                                            "text")]
            + time_cols("start", w["start_local"]) + time_cols("end", w["end_local"])
            + [Col("duration h", num("duration_h"), "num", F_H),
               Col("intervals", num("intervals"), "int", F_INT),
               Col("worst share %", num("worst_share_pct"), "num", "0.00"),
               Col("band limit %", num("band_pct"), "num", F_PCT),
               Col("MWh outside band", num("energy_mwh"), "num", F_MWH)])
    t = table_sheet(wb, "windows", cols)
    # worst share: orange for below-min windows, blue for above-max ones
    rng = t.data_range("worst share %")
    band = t.col_letter("band limit %")
    t.ws.conditional_formatting.add(rng, CellIsRule(operator="lessThan", formula=[f"${band}2"],
                                                    fill=FILL_BELOW))
    t.ws.conditional_formatting.add(rng, CellIsRule(operator="greaterThan",
                                                    formula=[f"${band}2"], fill=FILL_ABOVE))
    return t


def _exports_sheet(wb, check: ScenarioChecks) -> Table:
    df = stacked(check, exporting_feeders)
    if df.empty or "substation" not in df.columns:
        heads = ["scenario", "feeder", "substation", "block", "relay", "exporting intervals",
                 "time of largest export (local)"]
        cols = [Col(h, ["No armed feeder exports at any interval."] if j == 0 else [None],
                    "text", None, width=20 if j == 0 else None) for j, h in enumerate(heads)]
        return table_sheet(wb, "exports", cols, autofilter=False)
    num = lambda k: df[k].to_numpy(dtype=float)  # noqa: E731
    text = lambda k: df[k].tolist()  # noqa: E731
    cols = ([Col("scenario", text("scenario"), "text"), Col("feeder", text("feeder_id"), "text"),
             Col("substation", text("substation"), "text"), Col("block", text("block"), "text"),
             Col("relay", text("relay"), "text"),
             Col("exporting intervals", num("exporting_intervals"), "int", F_INT),
             Col("exporting hours h", num("exporting_hours"), "num", F_H),
             Col("largest export MW", num("most_export_mw"), "num", F_MW)]
            + time_cols("time of largest export", df["most_export_local_time"])
            + [Col("negative contribution MWh", num("negative_contribution_mwh"), "num",
                   F_MWH)])
    return table_sheet(wb, "exports", cols, freeze="B2")


def _substations_sheet(wb, check: ScenarioChecks) -> Table:
    df = stacked(check, by_substation)
    spec = [("scenario", "scenario", "text", None),
            ("substation", "substation", "text", None), ("zone", "zone", "text", None),
            ("block", "block", "text", None), ("feeders", "feeders", "int", F_INT),
            ("customers", "customers", "int", F_INT),
            ("mean_armed_mw", "mean armed MW", "num", F_MW),
            ("armed_mw_at_block_min", "armed MW at the block's lowest share", "num", F_MW)]
    if df.empty:
        cols = [Col(h, ["No feeder is armed."] if j == 0 else
                    ([None] if kind == "text" else [np.nan]), "text" if j == 0 else kind, fmt)
                for j, (k, h, kind, fmt) in enumerate(spec)]
        return table_sheet(wb, "substations", cols, autofilter=False)
    cols = [Col(h, df[k].tolist() if kind == "text" else df[k].to_numpy(dtype=float), kind, fmt)
            for k, h, kind, fmt in spec]
    return table_sheet(wb, "substations", cols)


def _schedule_sheet(wb, cs: ScenarioChecks) -> Table | None:
    """A switched allocation's schedule: one row per feeder, one column per period (the
    block in force; blank = unarmed), and whether it switches."""
    sched = cs.schedule
    if sched is None:
        return None
    st = cs.study
    names = np.array(st.block_names + ("",), dtype=object)
    cols = [Col("feeder_id", list(st.feeder_ids), "text", None),
            Col("substation", [f.substation for f in st.feeders], "text", None)]
    cols += [Col(f"block in {p}", names[sched[:, k]].tolist(), "text", None)
             for k, p in enumerate(st.period_names)]
    cols.append(Col("switched by schedule",
                    (sched != sched[:, :1]).any(axis=1).tolist(), "bool", None))
    return table_sheet(wb, "schedule", cols)


class _Rows:
    """Writes the summary sheet top to bottom: ``self.r`` is the next row."""

    def __init__(self, ws):
        self.ws, self.r = ws, 1

    def text(self, value: object, col: int = 1, font=None):
        c = put_text(self.ws, self.r, col, value)
        if font is not None:
            c.font = font
        return c

    def line(self, value: object, font=None) -> None:
        self.text(value, font=font)
        self.r += 1

    def heading(self, value: str) -> None:
        self.r += 1
        self.line(value, H2_FONT)

    def pair(self, label: str, value: object, fmt: str | None = None, bold: bool = False,
             unit: str = "") -> None:
        """label | value (a number cell with its format, or text) | unit."""
        self.text(label, font=BOLD)
        c = put(self.ws, self.r, 2, value, fmt)
        if bold:
            c.font = BOLD
        if unit:
            self.text(unit, col=3)
        self.r += 1

    def fact(self, f: content.Fact, bold: bool = False) -> None:
        if f.is_number:
            self.pair(f.label, f.value, f.fmt, bold, f.unit)
        else:
            self.pair(f.label, f.text(), bold=bold)

    def header_row(self, heads: list[str]) -> None:
        for j, h in enumerate(heads, 1):
            c = self.text(h, col=j, font=BOLD)
            c.alignment = WRAP
        self.ws.row_dimensions[self.r].height = 30
        self.r += 1

    def values(self, vals: list, fmts: list) -> None:
        for j, (v, f) in enumerate(zip(vals, fmts), 1):
            put(self.ws, self.r, j, v, f)
        self.r += 1


def _summary_sheet(ws, cs: ScenarioChecks, field, plan_info,
                   before: ScenarioChecks | None, run: dict | None = None) -> None:
    check = cs.checks[0]
    s = check.study.settings
    ws.column_dimensions["A"].width = 34
    for col in "BCDEFGHIJKLM":
        ws.column_dimensions[col].width = 17  # a yyyy-mm-dd hh:mm date cell needs ~17
    w = _Rows(ws)
    w.line("UFLS armed-load report", TITLE_FONT)
    w.line(f"{s.utility} - study year {s.year} - workbook {content.workbook_name(check)} - "
           f"ufls-allocator {__version__}")
    w.line("Caution: UFLS disconnects customers; protect priority sites as local rules "
           "require; results are indicative planning support only; verify relay settings "
           "before any field change. See 'Cautions' below.", Font(bold=True, color="8A4B00"))
    w.r += 1
    _verdict_section(w, cs, field, plan_info, before)
    _run_section(w, run)
    if plan_info:
        _plan_section(w, plan_info)
    _block_section(w, cs, before)
    _arming_section(w, plan_info)
    _windows_section(w, cs)
    _legend_section(w, check)
    warns = content.all_warnings(cs)
    if warns:
        w.heading(f"Warnings ({len(warns)})")
        for text in warns[:200]:
            w.line(text)
        if len(warns) > 200:
            w.line(f"... and {len(warns) - 200} more")
    ws.sheet_view.showGridLines = False


def _verdict_section(w: _Rows, cs: ScenarioChecks, field, plan_info,
                     before: ScenarioChecks | None) -> None:
    from ..check import verdict_covers

    check = cs.checks[0]
    s = check.study.settings
    w.pair("allocation checked", content.what_is_checked(field, plan_info))
    w.pair("overall verdict", vocab.headline(cs.compliant), bold=True)
    w.line(content.verdict_words_set(cs))
    w.line(verdict_covers(cs))
    if before is not None:
        w.pair("current allocation", vocab.headline(before.compliant))
        w.line("Current allocation: " + content.verdict_words_set(before))
    w.pair("compliance rule", check.rule)
    w.pair("utility", s.utility)
    w.pair("study year", s.year, "0")
    w.pair("scenarios judged", ", ".join(cs.names))
    w.pair("interval length", check.year.interval_minutes, "0", unit="min")
    w.pair("worst distance outside a band", cs.worst_violation_pp, "0.00", unit="pp")
    w.pair("priority sites", content.priority_summary(check).words(s.priority_policy))
    if field.compares and not plan_info:  # a plan's facts say it themselves
        for f in content.change_facts(field.counts):
            w.fact(f)


def _plan_section(w: _Rows, plan_info: dict) -> None:
    """The plan's facts with labels, numbers as number cells and their units beside them."""
    pt = content.plan_text(plan_info)
    w.heading("Plan")
    for f in pt.key:
        w.fact(f, bold=f.label == "result")
    for title, lines in (("why", pt.explanation), ("planner notes", pt.notes)):
        if lines:
            w.line(title, BOLD)
            for line in lines:
                w.line(line)
    if pt.details:
        w.line("how the planner got there", BOLD)
        for f in pt.details:
            w.fact(f)


def _arming_section(w: _Rows, plan_info: dict | None) -> None:
    """The fixed and the switched plan side by side, when both were made: label | fixed |
    switched | unit (numbers as number cells)."""
    names, rows = content.arming_table(plan_info)
    if not names:
        return
    w.heading("Fixed and switched plans (the same counting)")
    w.line(content.arming_words(plan_info))
    w.header_row([""] + names + ["unit"])
    for label, facts in rows:
        w.text(label, font=BOLD)
        for j, f in enumerate(facts, 2):
            put(w.ws, w.r, j, f.value if f.is_number else f.text(), f.fmt if f.is_number
                else None)
        if facts[0].unit:
            w.text(facts[0].unit, col=len(facts) + 2)
        w.r += 1


def _block_section(w: _Rows, cs: ScenarioChecks, before: ScenarioChecks | None) -> None:
    w.heading("Verdict per block (worst over every scenario)")
    heads = ["block", "pickup Hz", "band min %", "band max %", "lowest share %",
             "scenario of lowest", "highest share %", "scenario of highest",
             "room above min pp", "room below max pp", "status"]
    if before is not None:
        heads += ["current: lowest share %", "current: status"]
    w.header_row(heads)
    first = w.r
    for k, v in enumerate(cs.verdicts):
        vals = [v.block, v.pickup_hz, v.min_pct, v.max_pct, v.min_share_pct,
                v.min_share_scenario, v.max_share_pct, v.max_share_scenario,
                v.headroom_to_min_pp, v.headroom_to_max_pp,
                v.status + (f" ({', '.join(v.failing_scenarios)})" if v.failing_scenarios
                            else "")]
        fmts = [None, "0.000", "0.0", "0.0", "0.00", None, "0.00", None, "0.00", "0.00", None]
        if before is not None:
            b = before.verdicts[k]
            vals += [b.min_share_pct, b.status]
            fmts += ["0.00", None]
        w.values(vals, fmts)
    last = w.r - 1
    for col in ("E", "G") + (("L",) if before is not None else ()):
        _cf_band(w.ws, f"{col}{first}:{col}{last}", f"$C{first}", f"$D{first}")


def _windows_section(w: _Rows, cs: ScenarioChecks) -> None:
    w.heading("Worst windows outside the band")
    win = content.windows_table(cs)
    if win.empty:
        w.line("No interval lies outside any block's band in any scenario.")
        return
    w.line(f"{len(win)} windows in all; the 10 with the most MWh outside the band (all of "
           "them on the 'windows' sheet):" if len(win) > 10 else
           f"{vocab.count(len(win), 'window').capitalize()} in all (also on the 'windows' "
           "sheet):")
    w.header_row(["rank", "scenario", "block", "status", "start (local)", "start UTC offset h",
                  "end (local)", "end UTC offset h", "duration h", "worst share %",
                  "MWh outside band"])
    top = win.head(10)
    (t0, o0), (t1, o1) = split_iso(top["start_local"]), split_iso(top["end_local"])
    for k, row in enumerate(top.itertuples()):
        # date cells are zone-less serial numbers (ECMA-376), hence the offset columns
        w.values([row.rank, row.scenario, row.block, row.status, t0[k], o0[k], t1[k], o1[k],
                  row.duration_h, row.worst_share_pct, row.energy_mwh],
                 ["0", None, None, None, F_DATE, F_OFFSET, F_DATE, F_OFFSET, "0.00", "0.00",
                  "0.0"])


SIGN_BORDER = Border(bottom=Side(style="thin", color="404040"))


def _run_section(w: _Rows, run: dict | None) -> None:
    """The run record (run.json): tool, version, run time, command line, every input file
    with its SHA-256, and the cells to fill in when the report is prepared and checked."""
    if not run:
        return
    w.heading("Run record")
    w.pair("tool and version", f"{run.get('tool', 'ufls-allocator')} {run.get('version', '')}")
    wall, off = split_iso([run.get("run_time", "")])
    w.pair("run time (local)", run.get("run_time", "") if pd.isna(wall[0]) else wall[0],
           F_DATE)
    w.pair("run time UTC offset", off[0], F_OFFSET, unit="h")
    w.pair("command line", run.get("command_line") or "(called from Python)")
    w.header_row(["input", "file", "SHA-256"])
    for f in run.get("inputs", []):
        w.values([f["role"], f["name"], f["sha256"]], [None, None, None])
    w.r += 1
    w.header_row(["sign-off", "name", "date", "signature"])
    for who in SIGN_OFF:
        w.text(who, font=BOLD)
        for j in (2, 3, 4):  # blank cells to fill in, underlined
            w.ws.cell(row=w.r, column=j).border = SIGN_BORDER
        w.ws.row_dimensions[w.r].height = 24
        w.r += 1


def _legend_section(w: _Rows, check: Check) -> None:
    w.heading("What the fills mean")
    w.text("below the band's minimum").fill = FILL_BELOW
    w.text("the block would shed too little netted demand in that interval (share % columns "
           "of 'intervals', share columns of 'blocks')", col=2)
    w.r += 1
    w.text("above the band's maximum").fill = FILL_ABOVE
    w.text("the block would shed too much netted demand in that interval", col=2)
    w.r += 1
    w.text("share %")
    w.text("armed MW of the block / netted demand MW x 100, per interval; an exporting "
           "feeder on a standard relay counts negative", col=2)
    w.r += 1
    w.heading("Sheets")
    for name, text in SHEETS.items():
        w.text(name, font=BOLD)
        w.text(text, col=2)
        w.r += 1
    w.heading("Assumptions")
    for topic, text in content.assumptions(check):
        w.text(topic, font=BOLD)
        w.text(text, col=2)
        w.r += 1
    w.heading("Cautions")
    for text in content.CAUTIONS:
        w.line("! " + text)


def write_workbook(check: Check | ScenarioChecks, path: Path, field=None,
                   plan_info: dict | None = None,
                   before: Check | ScenarioChecks | None = None,
                   fc: content.FeederContrib | None = None, run: dict | None = None) -> Path:
    """Write ``report.xlsx`` to ``path`` and return it (``field``: the
    :class:`~allocator.field.plan.FieldPlan`, made here when not given; ``run``: the run
    record)."""
    from ..check import as_set
    from ..field.plan import field_plan

    cs = as_set(check)
    field = field_plan(cs) if field is None else field
    before = as_set(before) if before is not None else None
    first = cs.checks[0]
    path = Path(path)
    fc = content.feeder_contrib(first) if fc is None else fc
    wb = openpyxl.Workbook()
    wb.properties.creator = f"ufls-allocator {__version__}"
    ws = wb.active
    ws.title = "summary"
    _summary_sheet(ws, cs, field, plan_info, before, run)
    tables = [_scenarios_sheet(wb, cs), _blocks_sheet(wb, cs, before),
              _feeders_sheet(wb, first, field, fc), _intervals_sheet(wb, cs),
              _windows_sheet(wb, cs), _exports_sheet(wb, cs),
              _substations_sheet(wb, cs)]
    sched = _schedule_sheet(wb, cs)
    if sched is not None:
        tables.append(sched)
    from .fieldsheets import field_sheets

    field_sheets(wb, field)
    save(wb, path, tables)
    return path
