"""The console's plan output: the planned allocation's verdict, the plan's facts (the plan
record, labelled as every report labels it), why it looks as it does, the planner's notes,
and the demo's fixed and switched plans side by side."""

from __future__ import annotations

from rich.console import Console
from rich.markup import escape

from ..report.content import plan_text
from .check import verdict_table, worst_windows
from .tables import print_pairs, print_table


def plan_summary(console: Console, res) -> None:
    """A :class:`~allocator.pipeline.plan.PlanResult`: verdict table, worst windows, facts."""
    verdict_table(console, res.checks, "Planned allocation")
    worst_windows(console, res.checks)
    pt = plan_text(res.record)
    colour = "green" if res.record["status"] == "in_band" else "red"
    print_pairs(console, "Plan", [(f.label, f"[{colour}]{escape(f.text())}[/{colour}]"
                                   if f.label == "result" else escape(f.text()))
                                  for f in pt.key])
    for line in pt.explanation:
        console.print(f"  [bold]why:[/bold] {escape(line)}")
    for line in pt.notes:
        console.print(f"  [dim]note:[/dim] {escape(line)}")


def fixed_vs_switched(console: Console, res) -> None:
    """The fixed and the switched plan side by side (80 columns), from the plan record."""
    sw = res.record["switching"]
    fixed = sw["fixed_plan"]
    rows = [(escape(v.block), f"{v.min_pct:g}–{v.max_pct:g}",
             f"{fixed['lowest_share_pct'][v.block]:.1f}", f"{v.min_share_pct:.1f}",
             f"{fixed['highest_share_pct'][v.block]:.1f}", f"{v.max_share_pct:.1f}")
            for v in res.checks.verdicts]
    print_table(console, "Fixed plan and switched plan (worst over every scenario)",
                ["block", "band %", "fixed lowest %", "switched lowest %",
                 "fixed highest %", "switched highest %"], rows, right={1, 2, 3, 4, 5})
    fail = sw["if_switching_fails"]["worst"]
    facts = [("smallest headroom, pp", f"{fixed['smallest_headroom_pp']:.2f}",
              f"{sw['smallest_headroom_pp']:.2f}"),
             ("relays changed in the field", str(fixed["relays_changed"]),
              str(sw["field_relays_changed"])),
             ("switching operations per year", "0", str(sw["switch_operations_per_year"])),
             ("feeders switched by schedule", "0", str(sw["switched_feeders"])),
             ("solve time, s", f"{fixed['solve_seconds']:.1f}",
              f"{res.record['solve_seconds']:.1f}"),
             ("headroom if switching fails, pp", "", f"{fail['smallest_headroom_pp']:.2f} "
              f"(stuck in {escape(fail['stuck_in_period'])})")]
    print_table(console, "Fixed and switched: the numbers", ["", "fixed", "switched"],
                facts, right={1, 2})


__all__ = ["plan_summary", "fixed_vs_switched"]
