"""The first step of every job: ``workbook (+ metered files) → Study + the scenarios' years``,
and what every job's request shares.

A job reports its steps through a :data:`Progress`: a callable taking the step's words and
returning a context manager that is open while the step runs.  The command line passes one
that shows a spinner; from Python the default, :func:`no_progress`, shows nothing.
"""

from __future__ import annotations

import contextlib
from dataclasses import dataclass
from pathlib import Path
from typing import Callable, ContextManager

from ..domain import Study

#: ``progress(words)`` → a context manager open while that step runs
Progress = Callable[[str], ContextManager]


def no_progress(words: str) -> ContextManager:
    """A :data:`Progress` that shows nothing."""
    return contextlib.nullcontext()


@dataclass(frozen=True)
class Sources:
    """The files a job reads: the study workbook, metered net load files (CSV or Parquet;
    each calendar year of the data becomes a scenario ``metered YYYY``) and the scenarios to
    judge (None: all of the workbook's, plus the metered ones)."""

    workbook: str | Path
    metered: tuple[str, ...] = ()
    scenarios: tuple[str, ...] | None = None

    @property
    def paths(self) -> list[Path]:
        """Every input file, for refusing an output folder that would overwrite one."""
        return [Path(p) for p in (self.workbook, *self.metered)]


def scenario_names(text: str | None) -> tuple[str, ...] | None:
    """``"a, b"`` → ``("a", "b")``; None or blank → None (every scenario)."""
    names = tuple(n.strip() for n in (text or "").split(",") if n.strip())
    return names or None


def load_inputs(src: Sources, progress: Progress = no_progress):
    """Read the workbook and the metered files and build every scenario's year of net load.
    Returns ``(study, years)``.  Bad input raises :class:`allocator.errors.InputError` with
    every problem found."""
    from ..scenarios import build_years
    from ..workbook import read_study

    with progress("reading workbook"):
        study = read_study(src.workbook)
    met = None
    if src.metered:
        from ..metered.years import read_metered_years

        with progress("reading metered data"):
            met = read_metered_years(list(src.metered), study)
    names = list(src.scenarios) if src.scenarios else None
    with progress("building the scenarios' years of net load"):
        years = build_years(study, met, names)
    return study, years


def run_record_of(study: Study, years, argv: list[str] | None, metered=(),
                  assignment: str | Path | None = None) -> dict:
    """The run record (run.json) of a job: version, time, the command line (``argv``; none
    from Python), every input file with its SHA-256."""
    from ..runrecord import run_record

    return run_record(study, years, argv, metered=[str(m) for m in metered],
                      assignment=None if assignment is None else str(assignment))


def year_notes(years) -> list[str]:
    """The years' notes, each named by its scenario when there are several."""
    out: list[str] = []
    for y in years:
        out += [f"{y.scenario}: {n}" if len(years) > 1 else n for n in y.notes]
    return out


__all__ = ["Progress", "no_progress", "Sources", "scenario_names", "load_inputs",
           "run_record_of", "year_notes"]
