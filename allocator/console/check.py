"""The console's check output: the study overview, warnings, the verdict per block and per
scenario, the annual statement and the worst windows (every table through
:func:`allocator.console.tables.print_table`)."""

from __future__ import annotations

from rich.console import Console
from rich.markup import escape
from rich.table import Table

from .. import vocab
from ..check import as_set
from ..domain import Study
from .tables import print_pairs, print_table


def study_overview(console: Console, study: Study) -> None:
    allowed = study.allowed_matrix()
    armable = allowed.any(axis=1)
    s = study.settings
    hol = (s.holiday_country or "none") + (f"-{s.holiday_subdivision}"
                                           if s.holiday_subdivision else "")
    print_pairs(console, escape(f"{s.utility} — study year {s.year}"), [
        ("feeders", f"{len(study.feeders)} ({int(armable.sum())} armable, "
                    f"{int(study.is_priority.sum())} priority, "
                    f"{int((study.relay_code == 0).sum())} without a UFLS relay)"),
        ("substations", str(len({f.substation for f in study.feeders}))),
        ("blocks", escape(", ".join(f"{b.name} {b.pickup_hz:g} Hz {b.target_pct:g} %"
                                    for b in study.blocks))),
        ("total peak", f"{study.peak_mw.sum():.1f} MW"),
        ("total PV", f"{study.pv_mw.sum():.1f} MW (derate {s.pv_derate:g})"),
        ("calendar", f"{s.timezone}, {s.interval_minutes}-minute intervals, holidays {hol}"),
        ("scenarios", escape(", ".join(sc.name for sc in study.scenarios))),
        ("rule", f"{s.rule_text}; priority sites: {s.priority_policy}"),
    ] + ([("switched arming", escape(
        f"{int(study.is_switchable.sum())} feeder(s) remote_switch; periods "
        f"{', '.join(study.period_names)}"))] if study.period_list or
        study.is_switchable.any() else []))


def warnings(console: Console, items: list[str] | tuple[str, ...], limit: int = 15) -> None:
    """The first ``limit`` warnings, each wrapped under its "!" (words never cut)."""
    if not items:
        return
    console.print(f"[yellow]{vocab.count(len(items), 'warning')}:[/yellow]")
    t = Table.grid(padding=(0, 1))
    t.add_column(width=3, justify="right", style="yellow")
    t.add_column(overflow="fold", max_width=max(console.width - 4, 10))
    for w in list(items)[:limit]:
        t.add_row("!", escape(str(w)))
    console.print(t)
    if len(items) > limit:
        console.print(f"  and {vocab.count(len(items) - limit, 'more warning')}")


def side_words(v) -> str:
    """The block's status word (allocator.vocab), coloured."""
    colour = "green" if v.compliant else "red"
    return f"[{colour}]{v.status}[/{colour}]"


def verdict_words(ok: bool, headline: bool = False) -> str:
    word = vocab.headline(ok) if headline else vocab.compliance_word(ok)
    return f"[green]{word}[/green]" if ok else f"[red]{word}[/red]"


def verdict_table(console: Console, checks, title: str = "Armed load per block") -> None:
    """Per block the worst case over every scenario (lowest and highest share, the scenario
    it happens in, the room left to the band's edges), then one line per scenario, then the
    overall verdict."""
    cs = as_set(checks)
    s = cs.study.settings
    pct = s.compliance_rule == "percentile"
    rows = []
    for v in cs.verdicts:
        rows.append((escape(v.block), f"{v.pickup_hz:.2f}", f"{v.min_pct:g}–{v.max_pct:g}",
                     f"{v.min_share_pct:.1f}\n{escape(v.min_share_scenario)}",
                     f"{v.max_share_pct:.1f}\n{escape(v.max_share_scenario)}")
                    + ((f"{v.rule_low_share_pct:.1f}", f"{v.rule_high_share_pct:.1f}")
                       if pct else ())
                    + (f"{v.headroom_to_min_pp:+.2f}", f"{v.headroom_to_max_pp:+.2f}",
                       side_words(v)))
    heads = ["block", "Hz", "band %", "lowest % in", "highest % in"]
    if pct:  # the two statistics the rule judges, P and 100 - P
        p = s.compliance_percentile
        heads += [f"P{p:g} %", f"P{100 - p:g} %"]
    heads += ["room to min pp", "room to max pp", "status"]
    n = len(heads)
    print_table(console, f"{title} — rule {cs.rule}, worst over every scenario", heads, rows,
                right={1, 2, n - 3, n - 2} | ({5, 6} if pct else set()))
    scenario_table(console, cs)
    v = verdict_words(cs.compliant, headline=True)
    bad = cs.failing_scenarios
    console.print(f"Overall: {v} (compliant in {len(cs.checks) - len(bad)} of "
                  f"{vocab.count(len(cs.checks), 'scenario')}); worst violation "
                  f"{cs.worst_violation_pp:.2f} pp"
                  + (f" (not compliant in {escape(', '.join(bad))})" if bad else ""))


def scenario_table(console: Console, cs) -> None:
    """One row per scenario: how it was made, its verdict and which blocks fail."""
    rows = []
    for c in cs.checks:
        i = c.year.scenario_info
        pv = str(i.get("pv", c.year.source))
        if i.get("pv_scale", 1.0) != 1.0:
            pv += f" ×{i['pv_scale']:g}"
        if i.get("load_scale", 1.0) != 1.0:
            pv += f", load ×{i['load_scale']:g}"
        bad = [s.block for s in c.stats if not s.compliant]
        rows.append((escape(c.scenario), escape(pv), str(c.year.calendar_year),
                     f"{100 * c.all_in_band_fraction:.1f}", f"{c.worst_violation_pp:.2f}",
                     verdict_words(c.compliant)
                     + (f": {escape(', '.join(bad))}" if bad else "")))
    print_table(console, "Scenarios judged", ["scenario", "PV", "year",
                                              "all blocks in band % of intervals",
                                              "worst pp", "verdict"], rows, right={2, 3, 4})


def statement_table(console: Console, field) -> None:
    """The annual statement of a :class:`~allocator.field.plan.FieldPlan` (statement.csv)."""
    tab = field.statement
    several = tab["scenario"].nunique() > 1  # several metered years: name each row's year
    rows = [(escape(r.block) + (f"\n{escape(r.scenario)}" if several else ""),
             f"{r.pickup_hz:.2f}", f"{r.delay_s:.2f}",
             f"{r.armed_mean_pct:.1f}", f"{r.armed_min_pct:.1f}", f"{r.armed_p5_pct:.1f}",
             f"{r.armed_p95_pct:.1f}", f"{r.cumulative_mean_pct:.1f}",
             f"{r.lowest_cumulative_pct:.1f}")
            for r in tab.itertuples()]
    print_table(console, "Annual statement to the system operator: pickup frequency and % of "
                "netted demand armed (Regulation (EU) 2017/2196 Art. 50(1))",
                ["block", "pickup Hz", "delay s", "mean %", "lowest %", "P5 %", "P95 %",
                 "cumulative mean %", "lowest cumulative share over the year %"], rows,
                right=set(range(1, 9)), caption=escape(field.statement_basis))


def worst_windows(console: Console, check, n: int = 5) -> None:
    w = as_set(check).windows()
    if w.empty:
        console.print("No interval outside any block's band in any scenario.")
        return
    rows = [(str(r.rank), f"{escape(r.block)}\n{escape(r.scenario)}", r.status, r.start_local,
             f"{r.duration_h:g}", f"{r.worst_share_pct:.1f}", f"{r.energy_mwh:.1f}")
            for r in w.head(n).itertuples()]
    print_table(console, f"Worst windows outside the band ({min(n, len(w))} of "
                f"{vocab.count(len(w), 'window')})",
                ["#", "block in scenario", "status", "start (local)", "hours", "worst %",
                 "MWh outside"], rows, right={0, 4, 5, 6})


__all__ = ["study_overview", "warnings", "side_words", "verdict_words", "verdict_table",
           "scenario_table", "statement_table", "worst_windows"]
