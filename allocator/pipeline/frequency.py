"""The ``frequency`` job: ``an allocation's check → the frequency indication at the intervals
the check flags, on every scenario``, and the frequency folder written from it.

The indication is a single-bus model (:mod:`allocator.frequency_indication`) run with the
armed load found at each examined interval; it is indicative only: the system operator's
dynamic studies govern.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from ..check import ScenarioChecks, as_set
from ..report import DEFAULT_FORMATS
from .check import CheckRequest, CheckResult, check_loaded
from .inputs import Progress, load_inputs, no_progress


@dataclass(frozen=True)
class FrequencyRequest:
    """An allocation to examine (as for ``check``) and extra local times ``at`` (ISO-like
    ``'2025-04-20 13:00'``) examined in the scenarios on the study's calendar year."""

    check: CheckRequest
    at: tuple[str, ...] = ()


@dataclass(frozen=True)
class FrequencyRuns:
    """The indication on every scenario of one check: ``runs`` the ``(scenario,
    FrequencyStudy)`` pairs, ``table`` frequency.csv, ``summary`` frequency.json."""

    runs: tuple
    table: pd.DataFrame
    summary: dict


@dataclass(frozen=True)
class FrequencyResult:
    """The allocation's check and its frequency indication."""

    checked: CheckResult
    frequency: FrequencyRuns
    run: dict = field(default_factory=dict)


def frequency_runs(checks: ScenarioChecks, at=()) -> FrequencyRuns:
    """The indication on every scenario of ``checks`` (``at`` applies to the scenarios whose
    year is the study's calendar year); frequency.csv gets a ``scenario`` column first and
    each examined interval of frequency.json names its scenario."""
    from ..frequency_indication import frequency_summary, frequency_table, run_frequency_study

    cs = as_set(checks)
    year = cs.study.settings.year
    runs, tables, summary = [], [], None
    for c in cs.checks:
        fs = run_frequency_study(c, list(at) if at and c.year.calendar_year == year else None)
        runs.append((c.scenario, fs))
        t = frequency_table(fs)
        t.insert(0, "scenario", c.scenario)
        tables.append(t)
        one = frequency_summary(fs)
        for r in one["intervals"]:
            r["scenario"] = c.scenario
        if summary is None:
            summary = one
        else:
            summary["intervals"] += one["intervals"]
    return FrequencyRuns(tuple(runs), pd.concat(tables, ignore_index=True), summary)


def frequency_study(req: FrequencyRequest, progress: Progress = no_progress
                    ) -> FrequencyResult:
    """Read the inputs, check the allocation and run the indication on every scenario."""
    c = req.check
    study, years = load_inputs(c.sources, progress)
    checked = check_loaded(study, years, c.assignment, c.argv, c.sources.metered)
    with progress("frequency indication"):
        fr = frequency_runs(checked.checks, req.at)
    return FrequencyResult(checked, fr, checked.run)


def write_frequency_into(fr: FrequencyRuns, folder: Path, formats=DEFAULT_FORMATS) -> None:
    """frequency.csv, frequency.json and (png or html in ``formats``) figures/."""
    from ..files import write_frequency_files

    write_frequency_files(fr.table, fr.summary, folder)
    if {"png", "html"} & set(formats):
        from ..report.frequency_figures import write_frequency_figures

        write_frequency_figures(fr.runs, folder / "figures")


def write_frequency_folder(res: FrequencyResult, out: str | Path,
                           formats=DEFAULT_FORMATS) -> Path:
    """Write the whole frequency folder ``out`` atomically, run.json last."""
    from ..files import write_run
    from ..safeio import atomic_dir

    out = Path(out)
    with atomic_dir(out) as tmp:
        write_frequency_into(res.frequency, tmp, formats)
        write_run(tmp, res.run)
    return out


__all__ = ["FrequencyRequest", "FrequencyResult", "FrequencyRuns", "frequency_runs",
           "frequency_study", "write_frequency_folder", "write_frequency_into"]
