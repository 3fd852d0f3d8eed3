"""The ``plan`` job, as a chain of named steps: ``inputs → the allocation in service now,
checked → the best fixed plan, and a schedule when relays are remotely switchable and the
workbook has periods (never worse than the fixed plan) → each checked on every scenario,
with its field plan → the choice between them (arming) → the plan record``, and the plan
folder written from that one result.

Arming ``auto`` (the default) puts a schedule in service only where it is strictly better
than the best fixed plan by the objective order; ``fixed`` and ``switched`` ask for one.
Both plans count a remote-settable relay the same way: set from the control room, not in the
field.  With both planned, each gets half the time limit.

Every output of the plan folder renders the :class:`PlanResult`: plan.csv and the work list
from its :class:`~allocator.field.plan.FieldPlan`, plan.json from its record
(:func:`allocator.plan.record.plan_record`), the reports and the console from both.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Callable

from ..check import ScenarioChecks, run_checks
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
    #: "auto" (a schedule only where it is strictly better than the best fixed plan by the
    #: objective order), "fixed" or "switched"; without switchable feeders and periods: fixed
    arming: str = "auto"


ARMING = ("auto", "fixed", "switched")


@dataclass(frozen=True)
class PlanRequest:
    """What to plan.  ``on_round(level, round, intervals, worst, status)`` is told of each
    planner round."""

    sources: Sources
    options: PlanOptions = PlanOptions()
    argv: list[str] | None = None
    on_round: Callable | None = None


@dataclass(frozen=True)
class Candidate:
    """One plan, checked on every scenario, with its field plan: ``arming`` "fixed" (one
    block all year) or "switched" (a schedule; ``switched`` its SwitchedOutcome)."""

    arming: str
    outcome: object  # allocator.plan.solve.PlanOutcome
    switched: object | None
    checks: ScenarioChecks
    field: FieldPlan
    #: a schedule's shares if the switching stops (allocator.plan.failsafe)
    if_fails: dict | None = None


@dataclass(frozen=True)
class PlanResult:
    """A plan: the study and years, the chosen plan's outcome (``switched``: the schedule,
    when a schedule was chosen), the plan checked on every scenario, its field plan, the
    plan record (plan.json), the allocation in service now checked (``before``), every plan
    made (``candidates``: the fixed plan, and the switched one when planned) and the run
    record."""

    study: Study
    years: tuple
    outcome: object  # allocator.plan.solve.PlanOutcome
    switched: object | None  # allocator.plan.switched.SwitchedOutcome
    checks: ScenarioChecks
    field: FieldPlan
    record: dict
    before: ScenarioChecks
    candidates: tuple[Candidate, ...] = ()
    run: dict = field(default_factory=dict)

    def candidate(self, arming: str) -> Candidate | None:
        """The fixed or the switched plan, when it was planned."""
        return next((c for c in self.candidates if c.arming == arming), None)


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


def _candidate(study: Study, years, arming: str, outcome, sw) -> Candidate:
    from ..plan.failsafe import if_switching_fails

    checks = run_checks(study, years, outcome.block_idx if sw is None else sw.schedule)
    fails = None if sw is None else if_switching_fails(study, years, sw.schedule)
    return Candidate(arming, outcome, sw, checks, field_plan(checks, study.current_assignment),
                     fails)


def fixed_candidate(study: Study, years, opt: PlanOptions, on_round=None) -> Candidate:
    """The best fixed plan, checked, with its field plan."""
    from ..plan import plan_allocation

    out = plan_allocation(study, years, **_planner_kw(opt, on_round))
    return _candidate(study, years, "fixed", out, None)


def switched_candidate(study: Study, years, opt: PlanOptions, on_round=None,
                       fixed: Candidate | None = None) -> Candidate:
    """The switched plan, never worse than ``fixed`` by the objective order: a fixed plan is
    a schedule (one block in every period), so when the switched search ends worse, the
    fixed plan is the switched plan."""
    from ..plan.switched import as_switched, plan_switched

    sw = plan_switched(study, years, **_planner_kw(opt, on_round))
    cand = _candidate(study, years, "switched", sw.plan, sw)
    if fixed is not None and arming_key(fixed) < arming_key(cand):
        sw = as_switched(study, years, fixed.outcome, sw.plan.seconds,
                         "the switched search ended worse than the best fixed plan by the "
                         "objective order, so the fixed plan is the schedule (the same block "
                         "in every period)")
        cand = _candidate(study, years, "switched", sw.plan, sw)
    return cand


def arming_key(c: Candidate) -> tuple:
    """The objective order as a key (smaller is better): the worst violation, then the relays
    changed in the field and the switching operations per year, then the deviation from
    target (with closest_to_target the deviation comes second); rounded so that solver
    noise does not decide."""
    worst = round(float(c.checks.worst_relative_violation), 9)
    ops = 0 if c.switched is None else int(c.switched.switch_ops_per_year)
    mad = round(float(c.outcome.full_year["mad_pp"]), 6)
    changes = (c.field.counts.field_relays, ops)
    if c.outcome.objective == "closest_to_target":
        return (worst, mad, *changes)
    return (worst, *changes, mad)


def _choose(study: Study, cands: list[Candidate], mode: str) -> tuple[Candidate, str]:
    """The plan to put in service, and why (plan.json ``arming.reason``)."""
    from ..plan.failsafe import fails_safe

    fixed = next(c for c in cands if c.arming == "fixed")
    sw = next((c for c in cands if c.arming == "switched"), None)
    if sw is None:
        return fixed, ("fixed arming asked for" if mode == "fixed" else
                       "no relay is remotely switchable, or the workbook has one period")
    if study.settings.fail_safe == "required" and not fails_safe(sw.if_fails):
        return fixed, ("fail_safe required: the switched plan leaves a block out of band if "
                       "the switching stops in some period")
    if mode == "switched":
        return sw, "switched arming asked for"
    if arming_key(sw) < arming_key(fixed):
        return sw, "the switched plan is better by the objective order"
    return fixed, ("the switched plan is no better than the fixed plan by the objective "
                   "order, and a fixed plan needs no switching and cannot fail by it")


def _plan_all(study: Study, years, opt: PlanOptions, on_round, progress) -> list[Candidate]:
    """The fixed plan and, where switching applies and is not ruled out, the switched plan
    (each in half the time)."""
    if opt.arming == "fixed" or not switched_applies(study):
        with progress("planning"):
            return [fixed_candidate(study, years, opt, on_round)]
    half = replace(opt, time_limit_s=max(2.0, opt.time_limit_s / 2.0))
    with progress("planning the best fixed allocation"):
        fixed = fixed_candidate(study, years, half, on_round)
    with progress("planning"):
        return [fixed, switched_candidate(study, years, half, on_round, fixed)]


def _record(study: Study, years, chosen: Candidate, cands: list[Candidate],
            opt: PlanOptions, reason: str) -> dict:
    from ..plan.record import arming_record, plan_record, plan_summary, switching_record

    rec = plan_record(chosen.outcome, chosen.checks, chosen.field.counts,
                      {"seed": opt.seed, "time_limit_s": opt.time_limit_s,
                       "max_changes": opt.max_changes})
    plans = {c.arming: plan_summary(c.outcome, c.switched, c.checks, c.field.counts,
                                    c.if_fails) for c in cands}
    rec["arming"] = arming_record(plans, chosen.arming, opt.arming, reason)
    if chosen.switched is not None:
        rec["switching"] = switching_record(study, years, chosen.switched, chosen.checks,
                                            chosen.field.counts, chosen.if_fails)
        if "fixed" in plans:
            rec["switching"]["fixed_plan"] = plans["fixed"]
    return rec


def plan_loaded(study: Study, years, req: PlanRequest,
                progress: Progress = no_progress) -> PlanResult:
    """The plan of an already read study (see the module docstring for the steps)."""
    from ..assignment import current_assignment

    years = tuple(years)
    opt = resolved(study, req.options)
    with progress("checking the current allocation"):
        before = run_checks(study, years, *current_assignment(study))
    cands = _plan_all(study, years, opt, req.on_round, progress)
    with progress("checking the plan"):
        chosen, reason = _choose(study, cands, opt.arming)
    return PlanResult(study, years, chosen.outcome, chosen.switched, chosen.checks,
                      chosen.field, _record(study, years, chosen, cands, opt, reason), before,
                      tuple(cands), run_record_of(study, years, req.argv, req.sources.metered))


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
    fixed, sw = res.candidate("fixed"), res.candidate("switched")
    if fixed is not None and sw is not None and {"png", "html"} & set(formats):
        from ..report.figures import write_switched_vs_fixed

        write_switched_vs_fixed(sw.checks, fixed.checks, folder / "figures")
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


__all__ = ["PlanOptions", "PlanRequest", "PlanResult", "Candidate", "plan_study",
           "plan_loaded", "write_plan_folder", "write_plan_into", "switched_applies",
           "arming_key", "fixed_candidate", "switched_candidate", "ARMING", "CURRENT"]
