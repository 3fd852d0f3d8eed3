"""The plan's facts, computed once: ``PlanOutcome + the plan's check + ChangeCounts → the
plan record`` (the content of ``plan.json``).

plan.json, the console, the xlsx summary and report.html all render this one record
(:func:`allocator.report.content.plan_facts` turns it into labelled facts); none of them
counts anything of its own.  Counts of changes come from the field plan
(:class:`allocator.field.plan.FieldPlan`) as :class:`ChangeCounts`, each named by what it
counts:

* ``field_relays_changed``: relays whose block setting a crew changes on site (a trip group
  is one relay); ``relays_changed`` is the same number, the planner's objective;
* ``remote_relays_changed``: remote-settable relays whose schedule differs from their block
  now (set from the control room, no visit);
* ``feeders_changed``: feeders whose block differs from now in at least one period, by a
  field change or by a schedule (the ``changed = yes`` rows of plan.csv).
"""

from __future__ import annotations

from dataclasses import dataclass

from ..check import ScenarioChecks, smallest_headroom_pp, verdict_covers
from .solve import PlanOutcome


@dataclass(frozen=True)
class ChangeCounts:
    """What changes going from the allocation in service now to a new one."""

    field_relays: int  # relays set on site
    remote_relays: int  # remote-settable relays given a new schedule
    feeders_changed: int  # feeders whose block differs from now in some period
    field_feeders: int  # feeders on the relays set on site
    substations: int  # substations a crew visits

    @property
    def relays(self) -> int:
        return self.field_relays + self.remote_relays


NO_CHANGES = ChangeCounts(0, 0, 0, 0, 0)


def plan_record(outcome: PlanOutcome, checks: ScenarioChecks, counts: ChangeCounts,
                options: dict) -> dict:
    """The ``plan.json`` content: the planner's own account, the check's numbers (``checks``
    is the plan checked on every scenario), the counts of changes and the ``options`` the
    run was given (seed, time limit, max_changes)."""
    return {
        "status": outcome.status,
        "every_interval_in_band": checks.worst_violation_pp <= 1e-9,
        "scenarios": list(outcome.scenarios),
        "verdict_covers": verdict_covers(checks),
        "objective": outcome.objective,
        "band_margin_pp": outcome.margin_pp,
        "relays_changed": counts.field_relays,
        "field_relays_changed": counts.field_relays,
        "remote_relays_changed": counts.remote_relays,
        "feeders_changed": counts.feeders_changed,
        "substations_visited": counts.substations,
        "relays_changed_lower_bound": outcome.changes_lower_bound,
        "worst_violation_pp": checks.worst_violation_pp,
        "worst_violation_pct_of_target": 100.0 * checks.worst_relative_violation,
        "worst_violation_proven_optimal": outcome.proven,
        "lower_bound_worst_violation_pct_of_target": (
            None if outcome.lower_bound_worst is None else 100.0 * outcome.lower_bound_worst),
        "mean_abs_deviation_pp": outcome.full_year["mad_pp"],
        "smallest_headroom_pp": smallest_headroom_pp(checks),
        "headroom_pp": {v.block: {"to_min": v.headroom_to_min_pp, "to_max": v.headroom_to_max_pp}
                        for v in checks.verdicts},
        "levels": outcome.levels,
        "combination": outcome.combination,
        "rounds": outcome.rounds,
        "intervals_in_model": {"band_rows": outcome.band_intervals,
                               "deviation_sample": outcome.mad_intervals,
                               "all_scenarios": int(sum(c.year.n_intervals
                                                        for c in checks.checks))},
        "exporting_standard_relays_kept_armed": list(outcome.exporting_kept),
        "exporting_standard_relays_not_armed": list(outcome.exporting_avoided),
        "solve_seconds": outcome.seconds,
        "solver": outcome.solver,
        "solver_version": outcome.solver_version,
        "heuristic_start": outcome.heuristic,
        "explanation": outcome.explanation,
        "events": outcome.events,
        "alternatives": outcome.alternatives,
        **options,
    }


def switching_record(study, years, switched, checks: ScenarioChecks, counts: ChangeCounts,
                     if_fails: dict) -> dict:
    """plan.json's ``switching`` section of a schedule: periods, switched feeders and
    operations, the calendar year they are counted on, the field changes, the smallest
    headroom and the shares if the switching fails (``if_fails``:
    :func:`allocator.plan.failsafe.if_switching_fails`)."""
    from ..year import study_calendar_year

    return {"periods": list(study.period_names), "switched_feeders": switched.switched_feeders,
            "switch_operations_per_year": switched.switch_ops_per_year,
            "calendar_year": study_calendar_year(study, years).calendar_year,
            "field_relays_changed": counts.field_relays,
            "smallest_headroom_pp": smallest_headroom_pp(checks),
            "caps_forced_moves": switched.caps_bound, "notes": switched.notes,
            "if_switching_fails": if_fails}


def plan_summary(outcome: PlanOutcome, switched, checks: ScenarioChecks,
                 counts: ChangeCounts, if_fails: dict | None) -> dict:
    """One plan's numbers for the side-by-side view of plan.json ``arming.plans``: the same
    counts for a fixed and a switched plan (a remote-settable relay is set from the control
    room in both)."""
    worst_fail = None if if_fails is None else if_fails["worst"]
    return {"compliant": checks.compliant,
            "worst_violation_pp": float(checks.worst_violation_pp),
            "worst_violation_pct_of_target": 100.0 * float(checks.worst_relative_violation),
            "smallest_headroom_pp": smallest_headroom_pp(checks),
            "mean_abs_deviation_pp": float(outcome.full_year["mad_pp"]),
            "relays_changed": counts.field_relays, "field_relays_changed": counts.field_relays,
            "remote_relays_changed": counts.remote_relays,
            "feeders_changed": counts.feeders_changed,
            "substations_visited": counts.substations,
            "switch_operations_per_year": 0 if switched is None else
            int(switched.switch_ops_per_year),
            "switched_feeders": 0 if switched is None else int(switched.switched_feeders),
            "if_switching_fails": worst_fail, "solve_seconds": float(outcome.seconds),
            "notes": [] if switched is None else list(switched.notes),
            "lowest_share_pct": {v.block: v.min_share_pct for v in checks.verdicts},
            "highest_share_pct": {v.block: v.max_share_pct for v in checks.verdicts}}


def arming_record(plans: dict[str, dict], chosen: str, mode: str, reason: str) -> dict:
    """plan.json ``arming``: what was asked for (``mode``), which plan is put in service
    and why, and every plan made (``plans``: arming → :func:`plan_summary`)."""
    return {"mode": mode, "chosen": chosen, "reason": reason, "plans": plans}


__all__ = ["ChangeCounts", "NO_CHANGES", "plan_record", "switching_record", "plan_summary",
           "arming_record"]
