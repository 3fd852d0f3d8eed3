"""Console rendering (rich).  No number is ever cut: every table goes through
:func:`print_table`, which fixes each column at least as wide as its longest value, lets
headers wrap into the width left, and switches to one block of "header: value" lines per row
when even that does not fit (80 columns and piped output included)."""

from __future__ import annotations

from rich import box
from rich.console import Console
from rich.markup import escape
from rich.table import Table
from rich.text import Text

from . import vocab
from .domain import Study


def make_console(quiet: bool = False) -> Console:
    return Console(quiet=quiet, highlight=False, soft_wrap=False)


def _cell_len(markup: str) -> int:
    return max((Text.from_markup(line).cell_len for line in markup.split("\n")), default=0)


def _word_len(markup: str) -> int:
    return max((len(w) for w in Text.from_markup(markup).plain.split()), default=0)


def _widths(width: int, heads, rows, right) -> list[int] | None:
    """Column widths for ``width`` console columns, or None when even the narrowest
    layout does not fit.  Numbers (``right``) keep their full width; text may wrap at
    spaces; what is left goes first to whole headers, then to whole text cells."""
    n = len(heads)
    full = [max([_cell_len(r[j]) for r in rows] + [0]) for j in range(n)]
    least = [max([_word_len(h)] + ([full[j]] if j in right else
                                   [_word_len(r[j]) for r in rows]))
             for j, h in enumerate(heads)]
    spare = width - (sum(least) + 3 * n - 3)  # separators and inner padding, no edges
    if spare < 0:
        return None
    w = list(least)
    for want in ([max(len(h), full[j]) for j, h in enumerate(heads)],
                 [max(w[j], full[j]) for j in range(n)]):
        for j in sorted(range(n), key=lambda j: want[j] - w[j]):
            grow = min(spare, max(0, want[j] - w[j]))
            w[j] += grow
            spare -= grow
    return w


def print_table(console: Console, title: str, heads: list[str], rows: list[tuple[str, ...]],
                right: set[int] = frozenset(), caption: str | None = None) -> None:
    """A table that never cuts a value (cells are rich markup).  Columns in ``right`` are
    right-aligned numbers and never wrap; text wraps at spaces.  Below the width the table
    needs, each row becomes a block of lines: the first cell, then "header: value"."""
    w = _widths(console.width, heads, rows, right)
    if w is None:
        console.print(title)
        for r in rows:
            console.print(r[0].replace("\n", " "))
            for h, v in zip(heads[1:], r[1:]):
                console.print(f"  {escape(h)}: {v.replace(chr(10), ' ')}")
        if caption:
            console.print(caption)
        return
    t = Table(title=title, title_justify="left", box=box.SIMPLE_HEAD, padding=(0, 1),
              caption=caption, caption_justify="left", show_edge=False, pad_edge=False)
    for j, h in enumerate(heads):
        # numbers never wrap: their column is as wide as the widest (see _widths)
        t.add_column(escape(h), justify="right" if j in right else "left", width=w[j])
    for r in rows:
        t.add_row(*r)
    console.print(t)


def print_pairs(console: Console, title: str | None, pairs: list[tuple[str, str]]) -> None:
    """Labelled values (rich markup), two columns: the labels as wide as the longest, the
    values wrapping at spaces into the width left; "label: value" lines when even that does
    not fit.  Nothing is cut."""
    rows = [(escape(k), v) for k, v in pairs]
    w = _widths(console.width, ["", ""], rows, set())
    if title:
        console.print(title)
    if w is None:
        for k, v in rows:
            console.print(f"{k}: {v}")
        return
    t = Table(show_header=False, box=None, padding=(0, 1), pad_edge=False, show_edge=False)
    t.add_column(style="bold", width=w[0], overflow="fold")
    t.add_column(width=w[1], overflow="fold")
    for k, v in rows:
        t.add_row(k, v)
    console.print(t)


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


def _side_words(v) -> str:
    """The block's status word (allocator.vocab), coloured."""
    colour = "green" if v.compliant else "red"
    return f"[{colour}]{v.status}[/{colour}]"


def _verdict_words(ok: bool, headline: bool = False) -> str:
    word = vocab.headline(ok) if headline else vocab.compliance_word(ok)
    return f"[green]{word}[/green]" if ok else f"[red]{word}[/red]"


def verdict_table(console: Console, checks, title: str = "Armed load per block") -> None:
    """Per block the worst case over every scenario (lowest and highest share, the scenario
    it happens in, the room left to the band's edges), then one line per scenario, then the
    overall verdict."""
    from .export import as_set

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
                       _side_words(v)))
    heads = ["block", "Hz", "band %", "lowest % in", "highest % in"]
    if pct:  # the two statistics the rule judges, P and 100 - P
        p = s.compliance_percentile
        heads += [f"P{p:g} %", f"P{100 - p:g} %"]
    heads += ["room to min pp", "room to max pp", "status"]
    n = len(heads)
    print_table(console, f"{title} — rule {cs.rule}, worst over every scenario", heads, rows,
                right={1, 2, n - 3, n - 2} | ({5, 6} if pct else set()))
    scenario_table(console, cs)
    v = _verdict_words(cs.compliant, headline=True)
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
                     _verdict_words(c.compliant)
                     + (f": {escape(', '.join(bad))}" if bad else "")))
    print_table(console, "Scenarios judged", ["scenario", "PV", "year",
                                              "all blocks in band % of intervals",
                                              "worst pp", "verdict"], rows, right={2, 3, 4})


def statement_table(console: Console, checks) -> None:
    """The annual statement (:func:`allocator.statement.statement_table`)."""
    from .export import as_set
    from .statement import statement_basis
    from .statement import statement_table as table

    cs = as_set(checks)
    tab = table(cs)
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
                right=set(range(1, 9)), caption=escape(statement_basis(cs)))


def worst_windows(console: Console, check, n: int = 5) -> None:
    from .export import as_set

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
