"""The ``demo`` job: the whole job on the invented demo network, ``workbook → years →
the allocation in service now, checked → plan → the plan checked → frequency indication →
reports``, in the layout of ``plan`` plus frequency/, current/frequency/, year_summary.csv
and the demo workbook under input/.

The workbook is ``inputs_demo/*.xlsx`` when present, else rebuilt from
:mod:`allocator.demo_network` into a temporary folder; either way its bytes go into the
result, so :func:`write_demo_folder` can put it beside the outputs it made.
"""

from __future__ import annotations

import tempfile
from dataclasses import dataclass
from pathlib import Path

import pandas as pd

from ..report import DEFAULT_FORMATS
from .frequency import FrequencyRuns, frequency_runs
from .inputs import Progress, Sources, no_progress
from .plan import CURRENT, PlanOptions, PlanRequest, PlanResult, plan_loaded

#: the demo's frequency files go under FREQUENCY (and CURRENT/FREQUENCY)
FREQUENCY = "frequency"
#: the steps of the demo, in order (the command line numbers them)
DEMO_STEPS = ("validate the workbook", "build the scenarios' years of net load",
              "check the current allocation", "plan a new allocation", "check the plan",
              "frequency indication")


@dataclass(frozen=True)
class DemoRequest:
    """The demo's options: planner seconds (None: the workbook's solver_time_limit_s), seed,
    and the command line for run.json."""

    time_limit_s: float | None = None
    seed: int = 0
    argv: list[str] | None = None


@dataclass(frozen=True)
class DemoResult:
    """Everything the demo computed: the workbook (name and bytes), year_summary.csv, the
    plan (with the allocation in service now checked) and both frequency indications."""

    workbook_name: str
    workbook_bytes: bytes
    year_summary: pd.DataFrame
    plan: PlanResult
    frequency_current: FrequencyRuns
    frequency_plan: FrequencyRuns


def year_summaries(study, years) -> pd.DataFrame:
    """year_summary.csv: one row per feeder and scenario, the scenario column first."""
    from ..year import year_summary

    frames = []
    for y in years:
        f = year_summary(study, y)
        f.insert(0, "scenario", y.scenario)
        frames.append(f)
    return pd.concat(frames, ignore_index=True)


def _steps(progress: Progress):
    """The plan's own step words → the demo's step names."""
    names = {"checking the current allocation": DEMO_STEPS[2], "planning": DEMO_STEPS[3],
             "checking the plan": DEMO_STEPS[4]}
    return lambda words: progress(names.get(words, words))


def run_demo(req: DemoRequest = DemoRequest(), progress: Progress = no_progress) -> DemoResult:
    """Run the whole job on the demo network (see the module docstring)."""
    from ..demo import demo_workbook_path
    from ..scenarios import build_years
    from ..workbook import read_study

    with tempfile.TemporaryDirectory(prefix="ufls-demo-") as tmp:
        wb = demo_workbook_path(Path(tmp))
        with progress(DEMO_STEPS[0]):
            study = read_study(wb)
        with progress(DEMO_STEPS[1]):
            years = tuple(build_years(study))
            summary = year_summaries(study, years)
        plan_req = PlanRequest(Sources(wb), PlanOptions(time_limit_s=req.time_limit_s,
                                                        seed=req.seed), req.argv)
        plan = plan_loaded(study, years, plan_req, _steps(progress))
        data = Path(wb).read_bytes()
    with progress(DEMO_STEPS[5]):
        f_now, f_plan = frequency_runs(plan.before), frequency_runs(plan.checks)
    return DemoResult(Path(wb).name, data, summary, plan, f_now, f_plan)


def _report_frequency(res: DemoResult, formats) -> dict:
    """The frequency sections of the plan's and the current allocation's HTML reports."""
    from ..report.frequency_figures import critical_trace_png

    png = (lambda fr: critical_trace_png(fr.runs) if "html" in formats else None)  # noqa: E731
    return {"plan": {"after": res.frequency_plan.summary,
                     "before": res.frequency_current.summary,
                     "figure_png": png(res.frequency_plan)},
            "current": {"after": res.frequency_current.summary, "before": None,
                        "figure_png": png(res.frequency_current)}}


def write_demo_folder(res: DemoResult, out: str | Path, formats=DEFAULT_FORMATS) -> Path:
    """Write the demo's whole folder ``out`` atomically."""
    from ..files import write_run, write_table
    from ..safeio import atomic_dir
    from .frequency import write_frequency_into
    from .plan import write_plan_into

    out, formats = Path(out), set(formats)
    with atomic_dir(out) as tmp:
        (tmp / "input").mkdir()
        (tmp / "input" / res.workbook_name).write_bytes(res.workbook_bytes)
        write_table(res.year_summary, tmp / "year_summary.csv")
        write_frequency_into(res.frequency_plan, tmp / FREQUENCY, formats)
        write_frequency_into(res.frequency_current, tmp / CURRENT / FREQUENCY, formats)
        for folder in (tmp / FREQUENCY, tmp / CURRENT / FREQUENCY):
            write_run(folder, res.plan.run)
        write_plan_into(res.plan, tmp, formats, _report_frequency(res, formats))
    return out


__all__ = ["DemoRequest", "DemoResult", "run_demo", "write_demo_folder", "year_summaries",
           "DEMO_STEPS", "FREQUENCY"]
