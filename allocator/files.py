"""Every CSV and JSON file of the output layout, written from the results they show (the
folder itself is made atomic by the caller, :func:`allocator.safeio.atomic_dir`).

Nothing here computes a result: the check files render a ``ScenarioChecks``, the field files
a :class:`~allocator.field.plan.FieldPlan`, plan.json the plan record
(:func:`allocator.plan.record.plan_record`), the frequency files a frequency summary.

With several scenarios every table gets a ``scenario`` column (first) and holds the rows of
every scenario, one after the other; ``summary.json`` carries the overall verdict (the worst
over scenarios) and each scenario's own summary.
"""

from __future__ import annotations

from pathlib import Path

import pandas as pd

from .assignment import schedule_rows
from .check import (Check, ScenarioChecks, as_set, by_substation, exporting_feeders,
                    low_load_view, summary_set_dict)
from .field.plan import FieldPlan, field_plan, plan_table
from .safeio import write_csv, write_json

CHECK_FILES = ("summary.json", "armed_load.csv", "shortfalls.csv", "exporting_feeders.csv",
               "by_substation.csv", "low_load.csv", "statement.csv")
#: written beside a check when its allocation differs from the one in service now
FIELD_FILES = ("work_list.csv", "visit_order.csv")
#: a plan's own files (schedule.csv and switching.csv only for a schedule)
PLAN_FILES = ("plan.csv", "plan.json", "schedule.csv", "switching.csv")
FREQUENCY_FILES = ("frequency.csv", "frequency.json")


def stacked(checks: ScenarioChecks, table) -> pd.DataFrame:
    """``table(check)`` for every scenario, stacked, with a ``scenario`` column first."""
    frames = []
    for c in checks.checks:
        df = table(c)
        df.insert(0, "scenario", c.scenario)
        frames.append(df)
    frames = [f for f in frames if not f.empty] or frames[:1]
    return pd.concat(frames, ignore_index=True)


def write_check_files(checks: Check | ScenarioChecks, out: Path,
                      field: FieldPlan | None = None) -> dict[str, Path]:
    """summary.json, armed_load.csv, shortfalls.csv, exporting_feeders.csv,
    by_substation.csv, low_load.csv, statement.csv (the statement of ``field``, made here
    when not given).  Returns name → path."""
    cs = as_set(checks)
    field = field_plan(cs) if field is None else field
    out.mkdir(parents=True, exist_ok=True)
    paths = {name.split(".")[0]: out / name for name in CHECK_FILES}
    write_json(summary_set_dict(cs), paths["summary"])
    write_csv(stacked(cs, lambda c: c.armed_load_table()), paths["armed_load"])
    write_csv(cs.windows().drop(columns=["_start"]), paths["shortfalls"])
    write_csv(stacked(cs, exporting_feeders), paths["exporting_feeders"])
    write_csv(stacked(cs, by_substation), paths["by_substation"])
    write_csv(stacked(cs, low_load_view), paths["low_load"])
    write_csv(field.statement, paths["statement"])
    return paths


def write_field_files(fp: FieldPlan, out: Path) -> dict[str, Path]:
    """work_list.csv and visit_order.csv of a field plan."""
    out.mkdir(parents=True, exist_ok=True)
    paths = {name.split(".")[0]: out / name for name in FIELD_FILES}
    write_csv(fp.work_list, paths["work_list"])
    write_csv(fp.visits, paths["visit_order"])
    return paths


def write_plan_files(fp: FieldPlan, record: dict, out: Path) -> dict[str, Path]:
    """plan.csv and plan.json, and for a schedule schedule.csv and switching.csv."""
    out.mkdir(parents=True, exist_ok=True)
    plan_csv, plan_json, schedule_csv, switching_csv = (out / n for n in PLAN_FILES)
    paths = {"plan": plan_csv, "plan_json": plan_json}
    write_csv(plan_table(fp), paths["plan"])
    write_json(record, paths["plan_json"])
    if fp.schedule is not None:
        paths["schedule"] = schedule_csv
        paths["switching"] = switching_csv
        write_csv(pd.DataFrame(schedule_rows(fp.study, fp.schedule),
                               columns=["feeder_id", "period", "block"]), paths["schedule"])
        write_csv(fp.switching, paths["switching"])
    return paths


def write_frequency_files(table: pd.DataFrame, summary: dict, out: Path) -> dict[str, Path]:
    """frequency.csv (a ``scenario`` column first) and frequency.json."""
    out.mkdir(parents=True, exist_ok=True)
    paths = dict(zip(("frequency", "frequency_json"), (out / n for n in FREQUENCY_FILES)))
    write_csv(table, paths["frequency"])
    write_json(summary, paths["frequency_json"])
    return paths


def write_table(df: pd.DataFrame, path: Path) -> Path:
    """Any other table of the layout (year_summary.csv, fleet_summary.csv)."""
    write_csv(df, path)
    return path


def write_run(folder: Path, record: dict) -> Path:
    """run.json beside the folder's summary.json (or frequency.json); written last."""
    folder.mkdir(parents=True, exist_ok=True)
    write_json(record, folder / "run.json")
    return folder / "run.json"


__all__ = ["write_check_files", "write_field_files", "write_plan_files",
           "write_frequency_files", "write_table", "write_run", "stacked", "CHECK_FILES",
           "FIELD_FILES", "PLAN_FILES", "FREQUENCY_FILES"]
