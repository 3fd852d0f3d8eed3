"""The ``plan`` job, as a chain of named steps: ``inputs → the allocation in service now,
checked → plan (fixed, or a schedule when feeders are remote-switchable and the workbook has
periods) → the plan checked on every scenario → its field plan → the plan record``, and the
plan folder written from that one result.

Every output of the plan folder renders the :class:`PlanResult`: plan.csv and the work list
from its :class:`~allocator.field.plan.FieldPlan`, plan.json from its record
(:func:`allocator.plan.record.plan_record`), the reports and the console from both.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Callable

from ..check import ScenarioChecks, run_checks, smallest_headroom_pp
from ..domain import Study
from ..field.plan import FieldPlan, field_plan
from ..report import DEFAULT_FORMATS
from .inputs import Progress, Sources, load_inputs, no_progress, run_record_of

#: subfolders of the one output layout (outputs/README.md): a plan's folder holds the
#: current allocation's check under CURRENT
CURRENT = "current"


@dataclass(frozen=True)
class PlanOptions:
    """How to plan; None takes the workbook's setting (objective, band_margin_pp,
    solver_time_limit_s, max_changes)."""

    objective: str | None = None
    margin_pp: float | None = None
    time_limit_s: float | None = None
    max_changes: int | None = None
    solver: str = "highs"
    seed: int = 0


@dataclass(frozen=True)
class PlanRequest:
    """What to plan.  ``compare_fixed``: with a schedule, also plan the best fixed allocation
    (remote switching ignored) in half the time each, for a side-by-side view.
    ``on_round(level, round, intervals, worst, status)`` is told of each planner round."""

    sources: Sources
    options: PlanOptions = PlanOptions()
    argv: list[str] | None = None
    compare_fixed: bool = False
    on_round: Callable | None = None


@dataclass(frozen=True)
class FixedComparison:
    """The best fixed plan of the same workbook, checked: plan.json
    ``switching.fixed_plan`` holds ``record``."""

    checks: ScenarioChecks
    record: dict


@dataclass(frozen=True)
class PlanResult:
    """A plan: the study and years, the planner's outcome (``switched``: the schedule, when
    one was planned), the plan checked on every scenario, its field plan, the plan record
    (plan.json), the allocation in service now checked (``before``), the fixed comparison
    and the run record."""

    study: Study
    years: tuple
    outcome: object  # allocator.plan.solve.PlanOutcome
    switched: object | None  # allocator.plan.switched.SwitchedOutcome
    checks: ScenarioChecks
    field: FieldPlan
    record: dict
    before: ScenarioChecks
    fixed: FixedComparison | None = None
    run: dict = field(default_factory=dict)


def switched_applies(study: Study) -> bool:
    """A schedule is planned when some feeder is remote_switch yes and the workbook has more
    than one period; otherwise the fixed plan runs."""
    return bool(study.is_switchable.any()) and len(study.periods) > 1


def resolved(study: Study, opt: PlanOptions) -> PlanOptions:
    """``opt`` with the time limit and max_changes taken from the workbook where not given."""
    s = study.settings
    return replace(opt, time_limit_s=opt.time_limit_s or s.solver_time_limit_s,
                   max_changes=opt.max_changes if opt.max_changes is not None
                   else s.max_changes)


def _planner_kw(opt: PlanOptions, on_round) -> dict:
    return dict(solver=opt.solver, time_limit_s=opt.time_limit_s, max_changes=opt.max_changes,
                seed=opt.seed, progress=on_round, objective=opt.objective,
                margin_pp=opt.margin_pp)


def fixed_comparison(study: Study, years, opt: PlanOptions) -> FixedComparison:
    """The best fixed plan (remote_switch ignored) and its numbers."""
    from ..plan import plan_allocation

    fixed_study = replace(study, feeders=tuple(replace(f, remote_switch=False)
                                               for f in study.feeders))
    out = plan_allocation(fixed_study, years, time_limit_s=opt.time_limit_s, seed=opt.seed)
    c = run_checks(study, years, out.block_idx)
    return FixedComparison(c, {
        "relays_changed": out.relays_changed, "solve_seconds": out.seconds,
        "worst_violation_pp": float(c.worst_violation_pp),
        "smallest_headroom_pp": smallest_headroom_pp(c), "compliant": c.compliant,
        "lowest_share_pct": {v.block: v.min_share_pct for v in c.verdicts},
        "highest_share_pct": {v.block: v.max_share_pct for v in c.verdicts}})


def _plan(study: Study, years, opt: PlanOptions, on_round):
    """The planner's outcome and, for a schedule, the SwitchedOutcome (else None)."""
    from ..plan import plan_allocation

    kw = _planner_kw(opt, on_round)
    if switched_applies(study):
        from ..plan.switched import plan_switched

        sw = plan_switched(study, years, **kw)
        return sw.plan, sw
    return plan_allocation(study, years, **kw), None


def _record(study: Study, years, outcome, sw, checks, fp: FieldPlan, opt: PlanOptions,
            fixed: FixedComparison | None) -> dict:
    from ..plan.record import plan_record, switching_record

    rec = plan_record(outcome, checks, fp.counts, {"seed": opt.seed,
                                                   "time_limit_s": opt.time_limit_s,
                                                   "max_changes": opt.max_changes})
    if sw is not None:
        rec["switching"] = switching_record(study, years, sw, checks, fp.counts)
        if fixed is not None:
            rec["switching"]["fixed_plan"] = fixed.record
    return rec


def plan_loaded(study: Study, years, req: PlanRequest,
                progress: Progress = no_progress) -> PlanResult:
    """The plan of an already read study (see the module docstring for the steps)."""
    from ..assignment import current_assignment

    years = tuple(years)
    opt = resolved(study, req.options)
    with progress("checking the current allocation"):
        before = run_checks(study, years, *current_assignment(study))
    fixed = None
    if req.compare_fixed and switched_applies(study):  # half the time each
        opt = replace(opt, time_limit_s=max(2.0, opt.time_limit_s / 2.0))
        with progress("planning the best fixed allocation"):
            fixed = fixed_comparison(study, years, opt)
    with progress("planning"):
        outcome, sw = _plan(study, years, opt, req.on_round)
    with progress("checking the plan"):
        checks = run_checks(study, years, outcome.block_idx if sw is None else sw.schedule)
        fp = field_plan(checks, study.current_assignment)
    rec = _record(study, years, outcome, sw, checks, fp, opt, fixed)
    return PlanResult(study, years, outcome, sw, checks, fp, rec, before, fixed,
                      run_record_of(study, years, req.argv, req.sources.metered))


def plan_study(req: PlanRequest, progress: Progress = no_progress) -> PlanResult:
    """Read the inputs and plan (see the module docstring)."""
    study, years = load_inputs(req.sources, progress)
    return plan_loaded(study, years, req, progress)


def write_plan_into(res: PlanResult, folder: Path, formats=DEFAULT_FORMATS,
                    frequency: dict | None = None) -> None:
    """The plan folder's files into an existing (temporary) ``folder``: plan files first,
    then the check and field files, the reports, the current allocation under current/,
    run.json last in each folder.  ``frequency``: the HTML reports' frequency sections,
    ``{"plan": ..., "current": ...}`` (each as :func:`allocator.report.write_reports` takes
    it)."""
    from ..files import write_check_files, write_field_files, write_plan_files, write_run
    from ..report import write_reports

    write_plan_files(res.field, res.record, folder)
    write_check_files(res.checks, folder, res.field)
    write_field_files(res.field, folder)
    if res.fixed is not None and {"png", "html"} & set(formats):
        from ..report.figures import write_switched_vs_fixed

        write_switched_vs_fixed(res.checks, res.fixed.checks, folder / "figures")
    write_reports(res.checks, folder, field=res.field, plan_info=res.record,
                  before=res.before, formats=formats, run=res.run,
                  frequency=(frequency or {}).get("plan"))
    cur = folder / CURRENT
    before_field = field_plan(res.before)
    write_check_files(res.before, cur, before_field)
    write_reports(res.before, cur, field=before_field, formats=formats, run=res.run,
                  frequency=(frequency or {}).get("current"))
    write_run(cur, res.run)
    write_run(folder, res.run)


def write_plan_folder(res: PlanResult, out: str | Path, formats=DEFAULT_FORMATS) -> Path:
    """Write the whole plan folder ``out`` atomically (outputs/README.md, "plan")."""
    from ..safeio import atomic_dir

    out = Path(out)
    with atomic_dir(out) as tmp:
        write_plan_into(res, tmp, formats)
    return out


__all__ = ["PlanOptions", "PlanRequest", "PlanResult", "FixedComparison", "plan_study",
           "plan_loaded", "write_plan_folder", "write_plan_into", "switched_applies",
           "fixed_comparison", "CURRENT"]
