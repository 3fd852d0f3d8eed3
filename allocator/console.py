"""Console rendering (rich).  Tables are sized to stay readable at 100 columns."""

from __future__ import annotations

from rich.console import Console
from rich.markup import escape
from rich.table import Table

from .check import Check, annual_statement
from .domain import Study


def make_console(quiet: bool = False) -> Console:
    return Console(quiet=quiet, highlight=False, soft_wrap=False)


def study_overview(console: Console, study: Study) -> None:
    allowed = study.allowed_matrix()
    armable = allowed.any(axis=1)
    s = study.settings
    t = Table(title=escape(f"{s.utility} — study year {s.year}"), show_header=False, box=None)
    t.add_column("what", style="bold")
    t.add_column("value")
    t.add_row("feeders", f"{len(study.feeders)} ({int(armable.sum())} armable, "
              f"{int(study.is_priority.sum())} priority, "
              f"{int((study.relay_code == 0).sum())} without a UFLS relay)")
    t.add_row("substations", str(len({f.substation for f in study.feeders})))
    t.add_row("blocks", escape(", ".join(f"{b.name} {b.pickup_hz:g} Hz {b.target_pct:g} %"
                                         for b in study.blocks)))
    t.add_row("total peak", f"{study.peak_mw.sum():.1f} MW")
    t.add_row("total PV", f"{study.pv_mw.sum():.1f} MW (derate {s.pv_derate:g})")
    t.add_row("calendar", f"{s.timezone}, {s.interval_minutes}-minute intervals, holidays "
              f"{s.holiday_country or 'none'}{'-' + s.holiday_subdivision if s.holiday_subdivision else ''}")
    t.add_row("rule", f"{s.rule_text}; priority sites: {s.priority_policy}")
    console.print(t)


def warnings(console: Console, items: list[str] | tuple[str, ...], limit: int = 15) -> None:
    if not items:
        return
    console.print(f"[yellow]{len(items)} warning(s):[/yellow]")
    for w in list(items)[:limit]:
        console.print(f"  [yellow]![/yellow] {escape(str(w))}")
    if len(items) > limit:
        console.print(f"  … and {len(items) - limit} more")


def verdict_table(console: Console, checks, title: str = "Armed load per block") -> None:
    """Per block the worst case over every scenario (lowest and highest share, where, the
    headroom to the band's edges), then one line per scenario, then the overall verdict."""
    from .export import as_set

    cs = as_set(checks)
    t = Table(title=f"{title} — rule {cs.rule}", title_justify="left", padding=(0, 1))
    for c, j in (("block", "left"), ("Hz", "right"), ("band %", "right"),
                 ("lowest %", "right"), ("in", "left"), ("highest %", "right"),
                 ("in", "left"), ("room to min/max pp", "right"), ("verdict", "left")):
        t.add_column(c, justify=j, no_wrap=j == "right")
    for v in cs.verdicts:
        t.add_row(escape(v.block), f"{v.pickup_hz:.2f}", f"{v.min_pct:g}–{v.max_pct:g}",
                  f"{v.min_share_pct:.1f}", escape(v.min_share_scenario),
                  f"{v.max_share_pct:.1f}", escape(v.max_share_scenario),
                  f"{v.headroom_to_min_pp:+.2f}/{v.headroom_to_max_pp:+.2f}",
                  "[green]in band[/green]" if v.compliant else
                  f"[red]out of band[/red] ({escape(', '.join(v.failing_scenarios))})")
    console.print(t)
    scenario_table(console, cs)
    v = "[green]COMPLIANT[/green]" if cs.compliant else "[red]NOT COMPLIANT[/red]"
    bad = cs.failing_scenarios
    console.print(f"Overall: {v} in {len(cs.checks) - len(bad)} of {len(cs.checks)} "
                  f"scenario(s); worst violation {cs.worst_violation_pp:.2f} pp"
                  + (f" (not compliant in {escape(', '.join(bad))})" if bad else ""))


def scenario_table(console: Console, cs) -> None:
    """One row per scenario: how it was made, its verdict and where it fails."""
    t = Table(title="Scenarios judged", title_justify="left", padding=(0, 1))
    for c, j in (("scenario", "left"), ("PV", "left"), ("year", "right"),
                 ("in band %", "right"), ("worst pp", "right"), ("verdict", "left")):
        t.add_column(c, justify=j, no_wrap=j == "right")
    for c in cs.checks:
        i = c.year.scenario_info
        pv = str(i.get("pv", c.year.source))
        if i.get("pv_scale", 1.0) != 1.0:
            pv += f" ×{i['pv_scale']:g}"
        if i.get("load_scale", 1.0) != 1.0:
            pv += f", load ×{i['load_scale']:g}"
        bad = [s.block for s in c.stats if not s.compliant]
        t.add_row(escape(c.scenario), escape(pv), str(c.year.calendar_year),
                  f"{100 * c.all_in_band_fraction:.1f}", f"{c.worst_violation_pp:.2f}",
                  "[green]compliant[/green]" if c.compliant else
                  f"[red]not compliant[/red] ({escape(', '.join(bad))})")
    console.print(t)


def statement_table(console: Console, checks) -> None:
    from .check import statement_check
    from .export import as_set

    check = statement_check(as_set(checks))
    t = Table(title="Annual statement: frequency setting and % of netted demand disconnected "
              "(Regulation (EU) 2017/2196 Art. 50(1))", title_justify="left",
              caption=f"scenario {escape(check.scenario)}", caption_justify="left")
    for c in ("block", "pickup Hz", "delay s", "mean %", "min %", "cum. mean %", "cum. min %"):
        t.add_column(c, justify="right" if c != "block" else "left", no_wrap=True)
    for r in annual_statement(check):
        t.add_row(escape(r["block"]), f"{r['pickup_hz']:.2f}", f"{r['delay_s']:.2f}",
                  f"{r['netted_demand_disconnected_mean_pct']:.1f}",
                  f"{r['netted_demand_disconnected_min_pct']:.1f}",
                  f"{r['cumulative_mean_pct']:.1f}", f"{r['cumulative_min_pct']:.1f}")
    console.print(t)


def worst_windows(console: Console, check, n: int = 5) -> None:
    from .export import as_set

    w = as_set(check).windows()
    if w.empty:
        console.print("No interval outside any block's band in any scenario.")
        return
    t = Table(title=f"Worst windows outside the band (of {len(w)})", title_justify="left")
    for c in ("#", "scenario", "block", "kind", "start", "end", "hours", "worst %", "MWh"):
        t.add_column(c, no_wrap=c in ("#", "start", "end", "hours", "worst %", "MWh"))
    for r in w.head(n).itertuples():
        t.add_row(str(r.rank), escape(r.scenario), escape(r.block),
                  "below band" if r.kind == "below_min" else "above band",
                  r.start_local, r.end_local, f"{r.duration_h:g}", f"{r.worst_share_pct:.1f}",
                  f"{r.energy_mwh:.1f}")
    console.print(t)
