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
    """The fixed and the switched plan side by side (80 columns), from the plan record:
    the lowest and highest share per block, then the same counts for both."""
    from ..report.content import arming_table, arming_words

    names, rows = arming_table(res.record)
    if not names:
        return
    plans = res.record["arming"]["plans"]
    fx, sw = plans["fixed"], plans["switched"]
    blocks = [(escape(v.block), f"{v.min_pct:g}–{v.max_pct:g}",
               f"{fx['lowest_share_pct'][v.block]:.1f}", f"{sw['lowest_share_pct'][v.block]:.1f}",
               f"{fx['highest_share_pct'][v.block]:.1f}",
               f"{sw['highest_share_pct'][v.block]:.1f}") for v in res.checks.verdicts]
    print_table(console, "Fixed plan and switched plan (worst over every scenario)",
                ["block", "band %", "fixed lowest %", "switched lowest %",
                 "fixed highest %", "switched highest %"], blocks, right={1, 2, 3, 4, 5})
    numbers = [(label, facts) for label, facts in rows if facts[0].is_number]
    print_table(console, "Fixed and switched: the numbers (the same counting)",
                [""] + names, [(escape(label), *(escape(f.text()) for f in facts))
                               for label, facts in numbers], right={1, 2})
    for label, facts in rows:
        if not facts[0].is_number:
            for name, f in zip(names, facts):
                console.print(f"{escape(name)}, {escape(label)}: {escape(f.text())}")
    for note in plans["switched"].get("notes", []):
        console.print(f"  [dim]switched plan:[/dim] {escape(note)}")
    console.print(escape(arming_words(res.record)))


__all__ = ["plan_summary", "fixed_vs_switched"]
