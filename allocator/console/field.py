"""Console output of the field results: the visit order after a plan or a checked
assignment (one short table through :func:`allocator.console.print_table`, which never cuts
a number), and what the order achieves, or which visit breaks the band and by how much."""

from __future__ import annotations

from rich.console import Console
from rich.markup import escape

from ..field.visits import VisitOrder, order_words
from .tables import print_table


#: visits shown on the console (the first breaking one is always added); all are in the files
SHOWN = 12


def _shown(order: VisitOrder) -> list:
    steps = list(order.steps[:SHOWN + 1])
    brk = order.first_break
    if brk is not None and brk not in steps:
        steps.append(brk)
    return steps


def visit_order_table(console: Console, order: VisitOrder) -> None:
    """The visit order (visit_order.csv), the first SHOWN visits and the first that breaks
    the band, and what the order achieves."""
    if not order.visits:
        console.print("No relay setting changes, so no visits.")
        return
    rows = []
    steps = _shown(order)
    for s in steps:
        status = order.status(s)
        colour = ("red" if status == "breaks the band" else
                  "green" if status == "in band" else "yellow")
        rows.append((str(s.visit), escape(s.substation or "(now)"), str(s.relays),
                     f"{s.worst_violation_pp:.2f}",
                     escape(f"{s.scenario} {s.block}") + "\n" + s.local_time,
                     f"[{colour}]{escape(status)}[/{colour}]"
                     + (f" by {order.excess_pp(s):.2f} pp" if status == "breaks the band"
                        else "")))
    more = len(order.steps) - len(steps)
    print_table(console, "Visit order (relay changes by substation)",
                ["visit", "substation", "relays", "worst pp", "where", "after the visit"],
                rows, right={0, 2, 3},
                caption=(f"{len(order.visits)} visits in all, {more} not shown; every one is "
                         "in visit_order.csv" if more else None))
    colour = "green" if order.keeps_band else "red"
    console.print(f"[{colour}]{escape(order_words(order))}[/{colour}]")


def field_summary(console: Console, fp) -> None:
    """A :class:`~allocator.field.plan.FieldPlan`: the visit order and the relays the
    control room sets by schedule (counts from the field plan, as every output has them)."""
    if fp.order is None:
        return
    visit_order_table(console, fp.order)
    c = fp.counts
    if c.remote_relays:
        console.print(f"{c.remote_relays} relay{'s' if c.remote_relays != 1 else ''} set by "
                      "remote schedule from the control room (no visit; the 'set remote "
                      "schedule' rows of work_list.csv).")
    console.print(f"Feeders whose block changes (field or schedule): {c.feeders_changed}.")


__all__ = ["visit_order_table", "field_summary", "SHOWN"]
