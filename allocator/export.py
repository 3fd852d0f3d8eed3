"""Write a check's files into an output folder (the folder itself is made atomic by the
caller; see :func:`allocator.safeio.atomic_dir`).

With several scenarios every table gets a ``scenario`` column (first) and holds the rows of
every scenario, one after the other; ``summary.json`` carries the overall verdict (the worst
over scenarios) and each scenario's own summary.
"""

from __future__ import annotations

from pathlib import Path

import pandas as pd

from .check import (Check, ScenarioChecks, by_substation, exporting_feeders, low_load_view,
                    summary_set_dict)
from .safeio import write_csv, write_json
from .statement import statement_table

CHECK_FILES = ("summary.json", "armed_load.csv", "shortfalls.csv", "exporting_feeders.csv",
               "by_substation.csv", "low_load.csv", "statement.csv")
#: written beside a check when its allocation differs from the one in service now
FIELD_FILES = ("work_list.csv", "visit_order.csv")


def as_set(checks: Check | ScenarioChecks) -> ScenarioChecks:
    """A single-scenario :class:`Check` as a one-element :class:`ScenarioChecks`."""
    if isinstance(checks, ScenarioChecks):
        return checks
    return ScenarioChecks(checks.study, (checks,), checks.warnings)


def stacked(checks: ScenarioChecks, table) -> pd.DataFrame:
    """``table(check)`` for every scenario, stacked, with a ``scenario`` column first."""
    frames = []
    for c in checks.checks:
        df = table(c)
        df.insert(0, "scenario", c.scenario)
        frames.append(df)
    frames = [f for f in frames if not f.empty] or frames[:1]
    return pd.concat(frames, ignore_index=True)


def write_check_files(checks: Check | ScenarioChecks, out: Path) -> dict[str, Path]:
    """summary.json, armed_load.csv, shortfalls.csv, exporting_feeders.csv,
    by_substation.csv, low_load.csv, statement.csv.  Returns name → path."""
    cs = as_set(checks)
    out.mkdir(parents=True, exist_ok=True)
    paths = {name.split(".")[0]: out / name for name in CHECK_FILES}
    write_json(summary_set_dict(cs), paths["summary"])
    write_csv(stacked(cs, lambda c: c.armed_load_table()), paths["armed_load"])
    write_csv(cs.windows().drop(columns=["_start"]), paths["shortfalls"])
    write_csv(stacked(cs, exporting_feeders), paths["exporting_feeders"])
    write_csv(stacked(cs, by_substation), paths["by_substation"])
    write_csv(stacked(cs, low_load_view), paths["low_load"])
    write_csv(statement_table(cs), paths["statement"])
    return paths


def write_field_files(checks: Check | ScenarioChecks, previous_idx, out: Path,
                      schedule=None):
    """work_list.csv and visit_order.csv from ``previous_idx`` (in service now) to the
    checked allocation (see :mod:`allocator.worklist`, :mod:`allocator.visits`); with a
    ``schedule[feeder, period]`` the "set remote schedule" rows follow the field visits.
    Returns the :class:`~allocator.visits.VisitOrder`."""
    import pandas as pd

    from .visits import visit_order, visit_order_table
    from .worklist import remote_schedule_rows, work_list_table

    cs = as_set(checks)
    order = visit_order(cs, previous_idx)
    out.mkdir(parents=True, exist_ok=True)
    table = work_list_table(cs, previous_idx, order)
    if schedule is not None:
        extra = remote_schedule_rows(cs.study, schedule)
        if not extra.empty:
            table = pd.concat([table, extra], ignore_index=True) if not table.empty else extra
    write_csv(table, out / FIELD_FILES[0])
    write_csv(visit_order_table(order), out / FIELD_FILES[1])
    return order
