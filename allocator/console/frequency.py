"""The console's frequency output: the indication per examined interval and scenario."""

from __future__ import annotations

from rich.console import Console
from rich.markup import escape

from .tables import print_table


def frequency_summary(console: Console, summary: dict) -> None:
    """frequency.json per examined interval and scenario, cutting no number at any width:
    each row's labels, scenario and ISO 8601 local time stacked in the first column."""
    title = ("Frequency indication: largest generation loss kept within "
             f"{summary['floor_hz']:g}–{summary['ceiling_hz']:g} Hz")
    heads = ["interval, scenario and local time", "demand MW", "armed %",
             "largest loss kept within limits %", "that loss MW"]
    rows = []
    for r in summary["intervals"]:
        lc = r["largest_covered_pct"]
        rows.append((escape("\n".join(r["interval"].split("+")) + "\n"
                            + (r.get("scenario") or "") + "\n" + r["local_time"]),
                     f"{r['demand_mw']:.0f}", f"{r['total_armed_pct']:.1f}",
                     "none" if lc is None else f"{lc:g}",
                     "none" if lc is None else f"{r['largest_covered_mw']:.0f}"))
    print_table(console, title, heads, rows, right={1, 2, 3, 4})
    console.print("[dim]" + escape(summary["cautions"][0]) + "[/dim]")


__all__ = ["frequency_summary"]
