"""The console's demo output: the scenarios' years, and the current and planned allocations
side by side with the frequency indication at the worst interval."""

from __future__ import annotations

from rich.console import Console
from rich.markup import escape

from .. import vocab
from .check import side_words, verdict_words
from .tables import print_table


def year_lines(console: Console, study, years) -> None:
    """One line per scenario: intervals, feeders, demand range, feeders that export."""
    for y in years:
        n_exp = int(((y.net_mw < 0).any(axis=1)).sum())
        exports = ("no feeder exports at any interval" if n_exp == 0 else
                   f"{vocab.count(n_exp, 'feeder')} {'exports' if n_exp == 1 else 'export'} "
                   "at some interval")
        console.print(f"Scenario {y.scenario}: {y.n_intervals} intervals × "
                      f"{len(study.feeders)} feeders; demand {y.demand_mw.min():.0f}–"
                      f"{y.demand_mw.max():.0f} MW; {exports}.")


def _largest_losses(fb: dict, fa: dict, console: Console) -> None:
    key = lambda r: (r.get("scenario", ""), r["interval"])  # noqa: E731
    lb = {key(r): r["largest_covered_pct"] for r in fb["intervals"]}
    la = [r["largest_covered_pct"] for r in fa["intervals"]]
    crit_b = min((k for k in lb if lb[k] is not None), key=lambda k: lb[k], default=None)
    crit_a = [v for v in la if v is not None]
    if crit_b is not None and crit_a:
        console.print(f"Largest loss kept within {fb['floor_hz']:g}–{fb['ceiling_hz']:g} Hz "
                      f"at the worst interval: {lb[crit_b]:g} % of demand before "
                      f"({crit_b[0]} {crit_b[1]}), {min(crit_a):g} % after "
                      "(indicative single-bus model).")


def before_after(console: Console, before, after, fb: dict, fa: dict) -> None:
    """The lowest and highest share per block before and after, both verdicts, and the
    largest loss kept within the limits at the worst interval before and after."""
    rows = [(escape(sb.block), f"{sb.min_pct:g}–{sb.max_pct:g}", f"{sb.min_share_pct:.1f}",
             f"{sa.min_share_pct:.1f}", f"{sb.max_share_pct:.1f}", f"{sa.max_share_pct:.1f}",
             side_words(sb), side_words(sa))
            for sb, sa in zip(before.verdicts, after.verdicts)]
    print_table(console, "Before and after (worst over every scenario)",
                ["block", "band %", "current lowest %", "planned lowest %",
                 "current highest %", "planned highest %", "current", "planned"], rows,
                right={1, 2, 3, 4, 5})
    v = lambda c: verdict_words(c.compliant, headline=True)  # noqa: E731
    console.print(f"Verdict before: {v(before)}   after: {v(after)}   (scenarios "
                  f"{', '.join(after.names)})")
    _largest_losses(fb, fa, console)


__all__ = ["year_lines", "before_after"]
