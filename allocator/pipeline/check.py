"""The ``check`` job: ``workbook (+ metered, + assignment) → the allocation's check on every
scenario + its field plan``, and the check folder written from that one result.

An allocation is the workbook's ``current_block`` column, or an assignment CSV
(``feeder_id,block``).  When the assignment differs from the allocation in service now, the
field plan (:class:`allocator.field.plan.FieldPlan`) holds the work list and visit order to
get there, and the folder gets work_list.csv and visit_order.csv.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

from ..check import ScenarioChecks, run_checks
from ..domain import Study
from ..field.plan import FieldPlan, field_plan
from ..report import DEFAULT_FORMATS
from .inputs import Progress, Sources, load_inputs, no_progress, run_record_of


@dataclass(frozen=True)
class CheckRequest:
    """What to check: the ``sources`` and an ``assignment`` CSV (None: the workbook's
    current_block); ``argv`` is the command line for the run record (None from Python)."""

    sources: Sources
    assignment: str | Path | None = None
    argv: list[str] | None = None


@dataclass(frozen=True)
class CheckResult:
    """A checked allocation: the study, the years, the check on every scenario, the field
    plan from the allocation in service now, the warnings of the assignment and the run
    record."""

    study: Study
    years: tuple
    checks: ScenarioChecks
    field: FieldPlan
    warnings: tuple[str, ...]
    run: dict = field(default_factory=dict)


def check_loaded(study: Study, years, assignment: str | Path | None = None,
                 argv: list[str] | None = None, metered=()) -> CheckResult:
    """The check of an already read study (``assignment``: a CSV path, or None for the
    workbook's current_block)."""
    from ..assignment import current_assignment, read_assignment

    if assignment:
        block_idx, warns = read_assignment(assignment, study)
    else:
        block_idx, warns = current_assignment(study)
    checks = run_checks(study, years, block_idx, warns)
    fp = field_plan(checks, study.current_assignment if assignment else None)
    return CheckResult(study, tuple(years), checks, fp, tuple(warns),
                       run_record_of(study, years, argv, metered, assignment))


def check_study(req: CheckRequest, progress: Progress = no_progress) -> CheckResult:
    """Read the inputs and check the allocation on every scenario, every interval."""
    study, years = load_inputs(req.sources, progress)
    with progress("checking the allocation"):
        return check_loaded(study, years, req.assignment, req.argv, req.sources.metered)


def write_check_into(res: CheckResult, folder: Path,
                     formats=DEFAULT_FORMATS) -> None:
    """The check folder's files into an existing (temporary) ``folder``: the check files,
    the field files when relays change, the reports in ``formats``, run.json last."""
    from ..files import write_check_files, write_field_files, write_run
    from ..report import write_reports

    write_check_files(res.checks, folder, res.field)
    if res.field.counts.feeders_changed:
        write_field_files(res.field, folder)
    write_reports(res.checks, folder, field=res.field, formats=formats, run=res.run)
    write_run(folder, res.run)


def write_check_folder(res: CheckResult, out: str | Path, formats=DEFAULT_FORMATS) -> Path:
    """Write the whole check folder ``out`` atomically (outputs/README.md, "check")."""
    from ..safeio import atomic_dir

    out = Path(out)
    with atomic_dir(out) as tmp:
        write_check_into(res, tmp, formats)
    return out


__all__ = ["CheckRequest", "CheckResult", "check_study", "check_loaded", "write_check_folder",
           "write_check_into"]
