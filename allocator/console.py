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


def verdict_table(console: Console, check: Check, title: str = "Armed load per block") -> None:
    t = Table(title=f"{title} — rule {check.rule}", title_justify="left", padding=(0, 1))
    for c, j in (("block", "left"), ("Hz", "right"), ("band %", "right"), ("min %", "right"),
                 ("P5 %", "right"), ("mean %", "right"), ("max %", "right"),
                 ("<min", "right"), (">max", "right"), ("MWh short", "right"),
                 ("verdict", "left")):
        t.add_column(c, justify=j, no_wrap=True)
    for s in check.stats:
        t.add_row(escape(s.block), f"{s.pickup_hz:.2f}", f"{s.min_pct:g}–{s.max_pct:g}",
                  f"{s.min_share_pct:.1f}", f"{s.p5_share_pct:.1f}",
                  f"{s.mean_share_pct:.1f}", f"{s.max_share_pct:.1f}",
                  str(s.intervals_below_min), str(s.intervals_above_max),
                  f"{s.shortfall_mwh:.1f}",
                  "[green]in band[/green]" if s.compliant else "[red]OUT[/red]")
    console.print(t)
    v = "[green]COMPLIANT[/green]" if check.compliant else "[red]NOT COMPLIANT[/red]"
    nonpos = int((~check.valid).sum())
    console.print(f"Overall: {v}  (all blocks in band in {100 * check.all_in_band_fraction:.1f} % "
                  f"of {check.year.n_intervals} intervals; worst violation "
                  f"{check.worst_violation_pp:.2f} pp)"
                  + (f"; {nonpos} intervals with demand ≤ 0 left out" if nonpos else ""))


def statement_table(console: Console, check: Check) -> None:
    t = Table(title="Annual statement: frequency setting and % of netted demand disconnected "
              "(Regulation (EU) 2017/2196 Art. 50(1))", title_justify="left")
    for c in ("block", "pickup Hz", "delay s", "mean %", "min %", "cum. mean %", "cum. min %"):
        t.add_column(c, justify="right" if c != "block" else "left", no_wrap=True)
    for r in annual_statement(check):
        t.add_row(escape(r["block"]), f"{r['pickup_hz']:.2f}", f"{r['delay_s']:.2f}",
                  f"{r['netted_demand_disconnected_mean_pct']:.1f}",
                  f"{r['netted_demand_disconnected_min_pct']:.1f}",
                  f"{r['cumulative_mean_pct']:.1f}", f"{r['cumulative_min_pct']:.1f}")
    console.print(t)


def worst_windows(console: Console, check: Check, n: int = 5) -> None:
    w = check.windows()
    if w.empty:
        console.print("No interval outside any block's band.")
        return
    t = Table(title=f"Worst windows outside the band (of {len(w)})", title_justify="left")
    for c in ("#", "block", "kind", "start", "end", "hours", "worst %", "MWh"):
        t.add_column(c, no_wrap=True)
    for r in w.head(n).itertuples():
        t.add_row(str(r.rank), escape(r.block), "below min" if r.kind == "below_min" else "above max",
                  r.start_local, r.end_local, f"{r.duration_h:g}", f"{r.worst_share_pct:.1f}",
                  f"{r.energy_mwh:.1f}")
    console.print(t)
