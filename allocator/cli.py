"""Command line: argument parsing, progress display, atomic output folders.

No arithmetic lives here; every command is a thin shell over functions a notebook user can
call directly (``read_study``, ``build_year``, ``run_check``, ...).

Exit codes: 0 success, 2 bad input (every problem listed, nothing written), 1 internal
error (one line; the traceback only with ``--debug``), 130 interrupted.  ``review`` returns 1
also when any study of the folder could not be checked (the others are written).
"""

from __future__ import annotations

import argparse
import sys
import time
import traceback
from pathlib import Path

from . import vocab
from .version import __version__
from .errors import InputError
from .safeio import OutputClashError

EXIT_OK, EXIT_INTERNAL, EXIT_INPUT, EXIT_INTERRUPTED = 0, 1, 2, 130
#: subfolders of the one output layout (outputs/README.md): a plan's folder holds the
#: current allocation's check under CURRENT, the demo's frequency files go under FREQUENCY
CURRENT, FREQUENCY = "current", "frequency"


# --------------------------------------------------------------------------------------------
# shared steps
# --------------------------------------------------------------------------------------------
def _load(workbook: str, metered, console, quiet: bool,
          scenarios: str | None = None):
    """Read the workbook (and the metered file or files: a path or a list) and build every
    scenario's year, with a spinner.  Returns (study, years)."""
    from .scenarios import build_years
    from .workbook import read_study

    with _status(console, "reading workbook", quiet):
        study = read_study(workbook)
    met = None
    if metered:
        from .metered.years import read_metered_years

        with _status(console, "reading metered data", quiet):
            met = read_metered_years(metered, study)
    names = [n.strip() for n in scenarios.split(",") if n.strip()] if scenarios else None
    with _status(console, "building the scenarios' years of net load", quiet):
        years = build_years(study, met, names)
    return study, years


def _year_notes(years) -> list[str]:
    out: list[str] = []
    for y in years:
        out += [f"{y.scenario}: {n}" if len(years) > 1 else n for n in y.notes]
    return out


class _null:
    def __enter__(self):
        return self

    def __exit__(self, *a):
        return False


def _status(console, text: str, quiet: bool):
    """A spinner while ``text`` runs, on a terminal only: piped output (a file, a log, a
    pipe) gets no animation and no control characters."""
    if quiet or not console.is_terminal:
        return _null()
    return console.status(text)


def _default_out(workbook: str, leaf: str) -> Path:
    return Path("outputs") / Path(workbook).stem / leaf


def _metered_paths(args) -> list[str]:
    m = getattr(args, "metered", None)
    return [] if not m else [m] if isinstance(m, str) else list(m)


def _inputs(args) -> list[Path]:
    return [Path(p) for p in (getattr(args, "workbook", None), *_metered_paths(args),
                              getattr(args, "assignment", None)) if p]


# --------------------------------------------------------------------------------------------
# commands
# --------------------------------------------------------------------------------------------
def cmd_validate(args, console) -> int:
    from .console import study_overview, warnings
    from .workbook import read_study

    study = read_study(args.workbook)
    study_overview(console, study)
    warnings(console, study.warnings)
    console.print(f"[green]OK[/green]: {args.workbook} is a valid study workbook.")
    return EXIT_OK


def _checked_allocation(args, console, leaf: str):
    """Shared start of ``check`` and ``frequency``: refuse a bad ``--out`` before reading
    anything, read the inputs, take ``--assignment`` (or the workbook's current_block) and
    run the armed-load check.  Returns (out, study, year, check, warnings)."""
    from .assignment import current_assignment, read_assignment
    from .check import run_checks
    from .safeio import check_out_dir

    out = Path(args.out) if args.out else _default_out(args.workbook, leaf)
    check_out_dir(out, _inputs(args))
    study, years = _load(args.workbook, args.metered, console, args.quiet, args.scenarios)
    if args.assignment:
        block_idx, warns = read_assignment(args.assignment, study)
    else:
        block_idx, warns = current_assignment(study)
    return out, study, years, run_checks(study, years, block_idx, warns), warns


def write_check(args, console):
    """The ``check`` command without its console output (``review`` runs it once per study
    on a Dask worker): read, check, and write the check folder atomically (check files,
    field files when ``--assignment`` moves relays, reports per ``--format``, run.json).
    Returns (out, years, the ScenarioChecks, warnings, the VisitOrder or None)."""
    from .export import write_check_files
    from .safeio import atomic_dir

    out, study, years, chk, warns = _checked_allocation(args, console, "check")
    order = None
    rec = _record(args, study, years)
    with atomic_dir(out) as tmp:
        write_check_files(chk, tmp)
        if args.assignment and (chk.block_idx != study.current_assignment).any():
            order = _field_files(chk, study, _schedule_extra(study, years, chk), tmp)
        _reports(args, chk, tmp,
                 previous_idx=study.current_assignment if args.assignment else None, run=rec)
        _write_run(tmp, rec)
    return out, years, chk, warns, order


def cmd_check(args, console) -> int:
    from .console import statement_table, verdict_table, warnings, worst_windows

    out, years, chk, warns, order = write_check(args, console)
    verdict_table(console, chk)
    worst_windows(console, chk)
    statement_table(console, chk)
    if order is not None:
        from .fieldconsole import visit_order_table

        visit_order_table(console, order)
    warnings(console, list(warns) + _year_notes(years))
    console.print(f"Wrote {out}/")
    return EXIT_OK


def _reports(args, chk, out: Path, previous_idx=None, plan_info=None, before=None,
             run=None) -> None:
    """Report outputs (report.xlsx, figures/, report.html) - see allocator.report."""
    from .report import parse_formats, write_reports

    write_reports(chk, out, previous_idx=previous_idx, plan_info=plan_info, before=before,
                  formats=parse_formats(getattr(args, "format", None)), run=run)


def _record(args, study, years) -> dict:
    """The run record of this command (allocator.runrecord): version, time, command line,
    every input file with its SHA-256."""
    from .runrecord import run_record

    return run_record(study, years, getattr(args, "argv", None),
                      metered=_metered_paths(args),
                      assignment=getattr(args, "assignment", None))


def _write_run(folder: Path, rec: dict) -> None:
    """run.json beside the folder's summary.json (or frequency.json); written last."""
    from .safeio import write_json

    folder.mkdir(parents=True, exist_ok=True)
    write_json(rec, folder / "run.json")


def plan_json(outcome, chk, args_info: dict) -> dict:
    """The ``plan.json`` content: the planner's own account plus the check's numbers
    (``chk`` is the plan checked on every scenario)."""
    from .check import verdict_covers

    return {
        "status": outcome.status,
        "every_interval_in_band": chk.worst_violation_pp <= 1e-9,
        "scenarios": list(outcome.scenarios),
        "verdict_covers": verdict_covers(chk),
        "objective": outcome.objective,
        "band_margin_pp": outcome.margin_pp,
        "relays_changed": outcome.relays_changed,
        "feeders_changed": outcome.feeders_changed,
        "relays_changed_lower_bound": outcome.changes_lower_bound,
        "worst_violation_pp": chk.worst_violation_pp,
        "worst_violation_pct_of_target": 100.0 * chk.worst_relative_violation,
        "worst_violation_proven_optimal": outcome.proven,
        "lower_bound_worst_violation_pct_of_target": (
            None if outcome.lower_bound_worst is None else 100.0 * outcome.lower_bound_worst),
        "mean_abs_deviation_pp": outcome.full_year["mad_pp"],
        "headroom_pp": {v.block: {"to_min": v.headroom_to_min_pp, "to_max": v.headroom_to_max_pp}
                        for v in chk.verdicts},
        "levels": outcome.levels,
        "combination": outcome.combination,
        "rounds": outcome.rounds,
        "intervals_in_model": {"band_rows": outcome.band_intervals,
                               "deviation_sample": outcome.mad_intervals,
                               "all_scenarios": int(sum(c.year.n_intervals
                                                        for c in chk.checks))},
        "exporting_standard_relays_kept_armed": list(outcome.exporting_kept),
        "exporting_standard_relays_not_armed": list(outcome.exporting_avoided),
        "solve_seconds": outcome.seconds,
        "solver": outcome.solver,
        "solver_version": outcome.solver_version,
        "heuristic_start": outcome.heuristic,
        "explanation": outcome.explanation,
        "events": outcome.events,
        "alternatives": outcome.alternatives,
        **args_info,
    }


def _plan_into(args, console, study, years, out_tmp: Path, quiet: bool):
    """Plan, check the plan on every scenario and write plan.csv / plan.json into
    ``out_tmp``.  Returns (outcome, the plan's ScenarioChecks, the plan.json dict)."""
    from rich.progress import Progress, SpinnerColumn, TextColumn, TimeElapsedColumn

    from .assignment import assignment_rows
    from .check import run_checks
    from .plan import plan_allocation
    import pandas as pd
    from .safeio import write_csv, write_json

    tl = args.time_limit if getattr(args, "time_limit", None) else study.settings.solver_time_limit_s
    mc = args.max_changes if getattr(args, "max_changes", None) is not None \
        else study.settings.max_changes
    live = not quiet and console.is_terminal  # no spinner in piped output
    with Progress(SpinnerColumn(), TextColumn("{task.description}"), TimeElapsedColumn(),
                  console=console, disable=not live, transient=True) as prog:
        task = prog.add_task("planning: heuristic start", total=None)

        def cb(level, round, intervals, worst, status):
            w = "" if worst != worst else f", worst {100 * worst:.2f} % of target"
            prog.update(task, description=f"planning: {level} round {round}, "
                        f"{intervals} intervals{w}")
        kw = dict(solver=getattr(args, "solver", "highs"), time_limit_s=tl, max_changes=mc,
                  seed=getattr(args, "seed", 0), progress=cb,
                  objective=getattr(args, "objective", None),
                  margin_pp=getattr(args, "margin", None))
        if switched_applies(study):
            from .plan.switched import plan_switched

            sw = plan_switched(study, years, **kw)
            outcome = sw.plan
        else:
            sw, outcome = None, plan_allocation(study, years, **kw)
    chk = run_checks(study, years, outcome.block_idx if sw is None else sw.schedule)
    rows = assignment_rows(study, outcome.block_idx, previous=study.current_assignment)
    write_csv(pd.DataFrame(rows, columns=["feeder_id", "block", "previous_block", "changed"]),
              out_tmp / "plan.csv")
    info = plan_json(outcome, chk, {"seed": getattr(args, "seed", 0), "time_limit_s": tl,
                                    "max_changes": mc})
    extra = None
    if sw is not None:
        extra = _switched_files(study, years, sw, chk, out_tmp)
        info["switching"] = extra["info"]
    write_json(info, out_tmp / "plan.json")
    return outcome, chk, info, extra


def switched_applies(study) -> bool:
    """The switched plan runs when some feeder is remote_switch yes and the workbook has
    more than one period; otherwise the fixed plan runs unchanged."""
    return bool(study.is_switchable.any()) and len(study.periods) > 1


def _switched_files(study, years, sw, chk, out_tmp: Path) -> dict:
    """schedule.csv and switching.csv; the field check (switchable relays left at their
    current block, the state before the schedule is switched on) and plan.json's
    ``switching`` section with the shares if the switching fails."""
    import pandas as pd

    from .assignment import schedule_rows
    from .plan.switched import _calendar_year
    from .safeio import write_csv
    from .switching import switching_table

    write_csv(pd.DataFrame(schedule_rows(study, sw.schedule),
                           columns=["feeder_id", "period", "block"]), out_tmp / "schedule.csv")
    cal = _calendar_year(study, years)
    write_csv(switching_table(study, cal, sw.schedule), out_tmp / "switching.csv")
    stuck = [_stuck(study, years, sw.schedule[:, k], name)
             for k, name in enumerate(study.period_names)]
    worst = max(stuck, key=lambda d: (d["worst_violation_pp"], -d["smallest_headroom_pp"]))
    info = {"periods": list(study.period_names), "switched_feeders": sw.switched_feeders,
            "switch_operations_per_year": sw.switch_ops_per_year,
            "calendar_year": cal.calendar_year, "field_relays_changed": sw.relays_changed,
            "smallest_headroom_pp": _headroom(chk), "caps_forced_moves": sw.caps_bound,
            "notes": sw.notes, "if_switching_fails": {"worst": worst, "per_period": stuck}}
    return {"info": info, **_schedule_extra(study, years, chk)}


def _headroom(chk) -> float:
    return float(min(min(v.headroom_to_min_pp, v.headroom_to_max_pp) for v in chk.verdicts))


def _stuck(study, years, alloc, period: str) -> dict:
    """The shares if the switching stops in ``period``: every switchable feeder stays in
    that period's block all year."""
    from .check import run_checks

    c = run_checks(study, years, alloc)
    return {"stuck_in_period": period, "compliant": c.compliant,
            "worst_violation_pp": float(c.worst_violation_pp),
            "smallest_headroom_pp": _headroom(c),
            "lowest_share_pct": {v.block: v.min_share_pct for v in c.verdicts},
            "highest_share_pct": {v.block: v.max_share_pct for v in c.verdicts}}


def _print_plan(console, outcome, chk, info) -> None:
    """The planned allocation's verdict table and worst windows, then the plan's facts with
    labels and units (the same facts the reports show), why it looks as it does and the
    planner's notes."""
    from rich.markup import escape

    from .console import print_pairs, verdict_table, worst_windows
    from .report.content import plan_text

    verdict_table(console, chk, "Planned allocation")
    worst_windows(console, chk)
    pt = plan_text(info)
    colour = "green" if outcome.status == "in_band" else "red"
    print_pairs(console, "Plan", [(f.label, f"[{colour}]{escape(f.text())}[/{colour}]"
                                   if f.label == "result" else escape(f.text()))
                                  for f in pt.key])
    for line in pt.explanation:
        console.print(f"  [bold]why:[/bold] {escape(line)}")
    for line in pt.notes:
        console.print(f"  [dim]note:[/dim] {escape(line)}")


def _field_files(chk, study, extra, tmp: Path):
    """work_list.csv / visit_order.csv: field visits from the current allocation; with a
    schedule, the visits leave switchable relays alone and "set remote schedule" rows
    follow."""
    from .export import write_field_files

    if extra is None:
        return write_field_files(chk, study.current_assignment, tmp)
    return write_field_files(extra["field_check"], study.current_assignment, tmp,
                             schedule=extra["schedule"])


def _schedule_extra(study, years, chk) -> dict | None:
    """For a checked schedule: the field check (switchable relays left as they are now) and
    the schedule, as :func:`_field_files` takes them; None for a fixed allocation."""
    import numpy as np

    from .check import run_checks

    sched = chk.schedule
    if sched is None:
        return None
    # a switchable relay is set in the control system, never in the field (the planner's
    # count of field changes, plan.switched.field_changes, counts the same way)
    field = np.where(study.is_switchable, study.current_assignment, sched[:, 0])
    return {"schedule": sched, "field_check": run_checks(study, years, field)}


def cmd_plan(args, console) -> int:
    """plan.csv, plan.json and the planned allocation's check files and reports at the top
    of the folder, the current allocation's under current/ (the layout of outputs/README)."""
    from .safeio import atomic_dir, check_out_dir

    out = Path(args.out) if args.out else _default_out(args.workbook, "plan")
    check_out_dir(out, _inputs(args))
    study, years = _load(args.workbook, args.metered, console, args.quiet, args.scenarios)
    from .assignment import current_assignment
    from .check import run_checks
    from .export import write_check_files

    cur, cur_warns = current_assignment(study)
    before = run_checks(study, years, cur, cur_warns)
    from .fieldconsole import visit_order_table

    rec = _record(args, study, years)
    with atomic_dir(out) as tmp:
        outcome, chk, info, extra = _plan_into(args, console, study, years, tmp, args.quiet)
        write_check_files(chk, tmp)
        order = _field_files(chk, study, extra, tmp)
        _reports(args, chk, tmp, previous_idx=study.current_assignment,
                 plan_info=info, before=before, run=rec)
        write_check_files(before, tmp / CURRENT)
        _reports(args, before, tmp / CURRENT, run=rec)
        _write_run(tmp / CURRENT, rec)
        _write_run(tmp, rec)
    _print_plan(console, outcome, chk, info)
    visit_order_table(console, order)
    console.print(f"Wrote {out}/")
    return EXIT_OK


def _frequency_into(study, checks, out_tmp: Path, at, quiet, console):
    """Run the frequency indication on every scenario of ``checks`` (``--at`` times apply
    to the scenarios in the study's calendar year) and write frequency.csv (a ``scenario``
    column first) and frequency.json (each examined interval names its scenario).
    Returns ([(scenario, FrequencyStudy)], summary)."""
    import pandas as pd

    from .export import as_set
    from .frequency_study import frequency_summary, frequency_table, run_frequency_study
    from .safeio import write_csv, write_json

    cs = as_set(checks)
    studies, tables, summary = [], [], None
    with _status(console, "frequency indication", quiet):
        for c in cs.checks:
            fs = run_frequency_study(c, at if c.year.calendar_year == study.settings.year
                                     else None)
            studies.append((c.scenario, fs))
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
    out_tmp.mkdir(parents=True, exist_ok=True)
    write_csv(pd.concat(tables, ignore_index=True), out_tmp / "frequency.csv")
    write_json(summary, out_tmp / "frequency.json")
    return studies, summary


def _write_frequency_figures(studies, folder: Path) -> None:
    """PNG files of the frequency figures of every scenario, named ``<scenario>_<figure>``
    when there are several (matplotlib Figure objects on the Agg canvas; no pyplot, so no
    display backend is involved)."""
    from .frequency_study import frequency_figures
    from .safeio import safe_filename

    folder.mkdir(parents=True, exist_ok=True)
    for scenario, fs in studies:
        prefix = f"{scenario}_" if len(studies) > 1 else ""
        for name, fig in frequency_figures(fs).items():
            fig.savefig(folder / f"{safe_filename(prefix + name)}.png", dpi=150,
                        metadata={"Software": None})


def _critical_trace_png(studies) -> bytes:
    """Traces at the most critical examined interval over every scenario."""
    import io

    import numpy as np

    from .frequency_study import critical_traces_figure

    def worst(fs):
        lc = fs.largest_covered_pct
        return float(np.min(np.where(np.isfinite(lc), lc, -1.0)))

    fs = min((fs for _, fs in studies), key=worst)
    buf = io.BytesIO()
    critical_traces_figure(fs).savefig(buf, format="png", dpi=100, metadata={"Software": None})
    return buf.getvalue()


def _print_frequency(console, summary: dict) -> None:
    """The frequency indication per examined interval and scenario, cutting no number at any
    width (:func:`allocator.console.print_table`): each row's labels, scenario and ISO 8601
    local time stacked in the first column."""
    from rich.markup import escape

    from .console import print_table

    title = ("Frequency indication: largest generation loss kept within "
             f"{summary['floor_hz']:g}–{summary['ceiling_hz']:g} Hz")
    heads = ["interval, scenario and local time", "demand MW", "armed %",
             "largest loss kept within limits %", "that loss MW"]
    rows = []
    for r in summary["intervals"]:
        lc = r["largest_covered_pct"]
        rows.append((escape("\n".join(r["interval"].split("+")) + "\n"
                            + (r.get("scenario") or "") + "\n" + r["local_time"]),
                     f"{r['demand_mw']:.0f}", f"{r['total_armed_pct']:.1f}",
                     "none" if lc is None else f"{lc:g}",
                     "none" if lc is None else f"{r['largest_covered_mw']:.0f}"))
    print_table(console, title, heads, rows, right={1, 2, 3, 4})
    console.print("[dim]" + escape(summary["cautions"][0]) + "[/dim]")


def cmd_frequency(args, console) -> int:
    from .safeio import atomic_dir

    out, study, years, chk, _ = _checked_allocation(args, console, "frequency")
    with atomic_dir(out) as tmp:
        fs, summary = _frequency_into(study, chk, tmp, args.at, args.quiet, console)
        fmts = _formats(args)
        if "png" in fmts or "html" in fmts:
            _write_frequency_figures(fs, tmp / "figures")
        _write_run(tmp, _record(args, study, years))
    _print_frequency(console, summary)
    console.print(f"Wrote {out}/")
    return EXIT_OK


def _formats(args) -> set[str]:
    from .report import parse_formats

    return parse_formats(getattr(args, "format", None))


def cmd_demo(args, console) -> int:
    """validate → check the current allocation → plan → check the plan → frequency → reports,
    in the layout of ``plan`` plus frequency/, current/frequency/, year_summary.csv and the
    demo workbook under input/."""
    from .safeio import atomic_dir

    out = Path(args.out)
    fmts = _formats(args)
    stages = ["validate the workbook", "build the scenarios' years of net load",
              "check the current allocation", "plan a new allocation", "check the plan",
              "frequency indication", "reports"]
    with atomic_dir(out) as tmp:
        step = _Stages(console, stages, args.quiet)
        study, years, before = _demo_inputs(console, step, tmp)
        rec = _record(args, study, years)
        args.solver = "highs"
        args.max_changes = None
        with step("plan a new allocation"):
            fixed = None
            if switched_applies(study):  # half the time each: the fixed plan, then switched
                tl = args.time_limit or study.settings.solver_time_limit_s
                args.time_limit = max(2.0, tl / 2.0)
                fixed = _fixed_comparison(args, study, years)
            outcome, chk, info, extra = _plan_into(args, console, study, years, tmp, True)
            if fixed is not None:
                from .safeio import write_json

                info["switching"]["fixed_plan"] = {k: v for k, v in fixed.items()
                                                   if k != "_check"}
                write_json(info, tmp / "plan.json")
        with step("check the plan"):
            from .export import write_check_files

            write_check_files(chk, tmp)
            from .fieldconsole import visit_order_table

            order = _field_files(chk, study, extra, tmp)
        _print_plan(console, outcome, chk, info)
        visit_order_table(console, order)
        if fixed is not None:
            _fixed_vs_switched(console, fixed, info, chk)
            if "png" in fmts or "html" in fmts:
                from .report.figures import write_switched_vs_fixed

                write_switched_vs_fixed(chk, fixed["_check"], tmp / "figures")
        with step("frequency indication"):
            fs_b, fsum_b = _frequency_into(study, before, tmp / CURRENT / FREQUENCY, None,
                                           True, console)
            fs_a, fsum_a = _frequency_into(study, chk, tmp / FREQUENCY, None, True, console)
            if "png" in fmts or "html" in fmts:
                _write_frequency_figures(fs_a, tmp / FREQUENCY / "figures")
                _write_frequency_figures(fs_b, tmp / CURRENT / FREQUENCY / "figures")
        with step("reports"):
            from .report import write_reports

            png = (lambda fs: _critical_trace_png(fs) if "html" in fmts else None)  # noqa: E731
            write_reports(chk, tmp, previous_idx=study.current_assignment, plan_info=info,
                          before=before, formats=fmts, run=rec,
                          frequency={"after": fsum_a, "before": fsum_b, "figure_png": png(fs_a)})
            write_reports(before, tmp / CURRENT, previous_idx=None, formats=fmts, run=rec,
                          frequency={"after": fsum_b, "before": None, "figure_png": png(fs_b)})
            for folder in (tmp / FREQUENCY, tmp / CURRENT / FREQUENCY, tmp / CURRENT, tmp):
                _write_run(folder, rec)
    _demo_verdicts(console, before, chk, fsum_b, fsum_a)
    for name in ("report.html", "report.xlsx"):
        if (out / name).exists():
            console.print(f"  {name}: {(out / name).resolve()}")
    console.print(f"Wrote {out}/")
    return EXIT_OK


def cmd_review(args, console) -> int:
    """Every study of FOLDER checked on a Dask cluster into OUT/studies/NAME/, then the
    fleet summary (fleet_summary.csv/.xlsx, fleet.html) and run.json at the top of OUT.
    Exit 0 when every study was checked, 1 when any was not (listed with its message)."""
    from .fleet import find_studies, review
    from .report import parse_formats
    from .safeio import atomic_dir, check_out_dir

    if args.workers < 1:
        from .errors import Problem

        raise InputError([Problem("--workers", f"{args.workers}: give 1 or more")])
    parse_formats(args.format)  # a bad --format is bad input before anything runs
    out = Path(args.out) if args.out else Path("outputs") / Path(args.folder).name / "review"
    studies, _ = find_studies(args.folder)
    check_out_dir(out, [Path(p) for s in studies for p in (s.workbook, s.metered) if p])
    with atomic_dir(out) as tmp:
        with _status(console, f"checking {len(studies)} studies on the cluster", args.quiet):
            fr = review(args.folder, tmp, args.format, args.scheduler, args.workers, out)
        _write_review(fr, tmp, args)
    _print_review(console, fr)
    console.print(f"Wrote {out}/")
    return EXIT_OK if fr.all_checked else EXIT_INTERNAL


def _write_review(fr, folder: Path, args) -> None:
    from .report.fleet import write_fleet_files
    from .runrecord import review_record

    rec = review_record([e for r in fr.results for e in r.inputs], args.argv,
                        cluster=fr.cluster, studies=len(fr.results),
                        studies_not_checked=[r.name for r in fr.results
                                             if r.status != vocab.STUDY_CHECKED],
                        wall_seconds=round(fr.seconds, 3), notes=list(fr.notes))
    write_fleet_files(fr.summary, folder, rec)
    _write_run(folder, rec)


def _print_review(console, fr) -> None:
    """One row per study: status, verdict, blocks outside their band, the lowest share."""
    from rich.markup import escape

    from .console import print_table, warnings

    rows = []
    for r in fr.results:
        out_of_band = [row["block"] for row in r.rows if row["block_status"] != vocab.IN_BAND]
        lowest = min(r.rows, key=lambda row: row["min_share_pct"], default=None)
        rows.append((escape(r.name), escape(r.status),
                     escape(vocab.compliance_word(r.compliant)) if r.rows else "",
                     escape(", ".join(out_of_band) or ("none" if r.rows else "")),
                     "" if lowest is None else f"{lowest['min_share_pct']:.1f}",
                     f"{r.seconds:.1f}" if r.seconds == r.seconds else ""))
    print_table(console, f"Fleet review: {len(fr.results)} studies on {escape(fr.cluster)} "
                f"({fr.seconds:.1f} s)", ["study", "status", "verdict", "blocks out of band",
                                          "lowest share %", "check s"], rows, right={4, 5})
    for r in fr.results:
        if r.status != vocab.STUDY_CHECKED:
            console.print(f"[red]{escape(r.name)}[/red]: {escape(r.message)}")
    warnings(console, list(fr.notes))


def _fixed_comparison(args, study, years) -> dict:
    """The best fixed plan of the same workbook (remote_switch ignored), for the demo's
    side-by-side view: its numbers only (plan.json ``switching.fixed_plan``)."""
    from dataclasses import replace

    from .check import run_checks
    from .plan import plan_allocation

    fixed_study = replace(study, feeders=tuple(replace(f, remote_switch=False)
                                               for f in study.feeders))
    out = plan_allocation(fixed_study, years, time_limit_s=args.time_limit,
                          seed=getattr(args, "seed", 0))
    c = run_checks(study, years, out.block_idx)
    return {"_check": c, "relays_changed": out.relays_changed, "solve_seconds": out.seconds,
            "worst_violation_pp": float(c.worst_violation_pp),
            "smallest_headroom_pp": _headroom(c), "compliant": c.compliant,
            "lowest_share_pct": {v.block: v.min_share_pct for v in c.verdicts},
            "highest_share_pct": {v.block: v.max_share_pct for v in c.verdicts}}


def _fixed_vs_switched(console, fixed: dict, info: dict, chk) -> None:
    """The demo's fixed and switched plans side by side (80 columns)."""
    from rich.markup import escape

    from .console import print_table

    sw = info["switching"]
    rows = [(escape(v.block), f"{v.min_pct:g}–{v.max_pct:g}",
             f"{fixed['lowest_share_pct'][v.block]:.1f}", f"{v.min_share_pct:.1f}",
             f"{fixed['highest_share_pct'][v.block]:.1f}", f"{v.max_share_pct:.1f}")
            for v in chk.verdicts]
    print_table(console, "Fixed plan and switched plan (worst over every scenario)",
                ["block", "band %", "fixed lowest %", "switched lowest %",
                 "fixed highest %", "switched highest %"], rows, right={1, 2, 3, 4, 5})
    fail = sw["if_switching_fails"]["worst"]
    facts = [("smallest headroom, pp", f"{fixed['smallest_headroom_pp']:.2f}",
              f"{sw['smallest_headroom_pp']:.2f}"),
             ("relays changed in the field", str(fixed["relays_changed"]),
              str(sw["field_relays_changed"])),
             ("switching operations per year", "0", str(sw["switch_operations_per_year"])),
             ("feeders switched by schedule", "0", str(sw["switched_feeders"])),
             ("solve time, s", f"{fixed['solve_seconds']:.1f}", f"{info['solve_seconds']:.1f}"),
             ("headroom if switching fails, pp", "", f"{fail['smallest_headroom_pp']:.2f} "
              f"(stuck in {escape(fail['stuck_in_period'])})")]
    print_table(console, "Fixed and switched: the numbers", ["", "fixed", "switched"],
                facts, right={1, 2})


def _demo_inputs(console, step, tmp: Path):
    """The demo's first three stages: the workbook (into tmp/input/ when rebuilt), every
    scenario's year (year_summary.csv) and the current allocation's check (tmp/current/).
    Returns (study, years, the current allocation's ScenarioChecks)."""
    import pandas as pd

    from .assignment import current_assignment
    from .check import run_checks
    from .console import study_overview, verdict_table, warnings, worst_windows
    from .demo import demo_workbook_path
    from .export import write_check_files
    from .safeio import write_csv
    from .scenarios import build_years
    from .workbook import read_study
    from .year import year_summary

    wb = demo_workbook_path(tmp / "input")
    if wb.parent != tmp / "input":  # the workbook the demo used goes with its outputs
        import shutil

        (tmp / "input").mkdir(exist_ok=True)
        shutil.copy2(wb, tmp / "input" / wb.name)
    console.rule(f"demo: {wb.name}")
    with step("validate the workbook"):
        study = read_study(wb)
    study_overview(console, study)
    warnings(console, study.warnings, limit=5)
    with step("build the scenarios' years of net load"):
        years = build_years(study)
        frames = []
        for y in years:  # one row per feeder and scenario, the scenario column first
            f = year_summary(study, y)
            f.insert(0, "scenario", y.scenario)
            frames.append(f)
        write_csv(pd.concat(frames, ignore_index=True), tmp / "year_summary.csv")
    for y in years:
        n_exp = int(((y.net_mw < 0).any(axis=1)).sum())
        console.print(f"Scenario {y.scenario}: {y.n_intervals} intervals × "
                      f"{len(study.feeders)} feeders; demand {y.demand_mw.min():.0f}–"
                      f"{y.demand_mw.max():.0f} MW; {vocab.count(n_exp, 'feeder')} "
                      f"{'exports' if n_exp == 1 else 'export'} at some interval.")
    with step("check the current allocation"):
        cur, cur_warns = current_assignment(study)
        before = run_checks(study, years, cur, cur_warns)
        write_check_files(before, tmp / CURRENT)
    verdict_table(console, before, "Current allocation")
    worst_windows(console, before, n=3)
    return study, years, before


class _Stages:
    """A rich progress line per stage of the demo."""

    def __init__(self, console, names, quiet):
        self.console, self.names, self.quiet = console, names, quiet
        self.n = 0

    def __call__(self, name):
        self.n += 1
        return _Stage(self, name)


class _Stage:
    def __init__(self, parent, name):
        self.p, self.name = parent, name

    def __enter__(self):
        self.t0 = time.perf_counter()
        self.status = _status(self.p.console, f"[{self.p.n}/{len(self.p.names)}] "
                              f"{self.name}", self.p.quiet)
        self.status.__enter__()
        return self

    def __exit__(self, *exc):
        self.status.__exit__(*exc)
        if not self.p.quiet:
            if exc[0] is None:
                self.p.console.print(f"[green]✓[/green] [{self.p.n}/{len(self.p.names)}] "
                                     f"{self.name} ({time.perf_counter() - self.t0:.1f} s)")
        return False


def _demo_verdicts(console, before, after, fb, fa) -> None:
    from rich.markup import escape

    from .console import _side_words, print_table

    rows = [(escape(sb.block), f"{sb.min_pct:g}–{sb.max_pct:g}", f"{sb.min_share_pct:.1f}",
             f"{sa.min_share_pct:.1f}", f"{sb.max_share_pct:.1f}", f"{sa.max_share_pct:.1f}",
             _side_words(sb), _side_words(sa))
            for sb, sa in zip(before.verdicts, after.verdicts)]
    print_table(console, "Before and after (worst over every scenario)",
                ["block", "band %", "current lowest %", "planned lowest %",
                 "current highest %", "planned highest %", "current", "planned"], rows,
                right={1, 2, 3, 4, 5})
    from .console import _verdict_words

    v = lambda c: _verdict_words(c.compliant, headline=True)  # noqa: E731
    console.print(f"Verdict before: {v(before)}   after: {v(after)}   (scenarios "
                  f"{', '.join(after.names)})")
    key = lambda r: (r.get("scenario", ""), r["interval"])  # noqa: E731
    lb = {key(r): r["largest_covered_pct"] for r in fb["intervals"]}
    la = {key(r): r["largest_covered_pct"] for r in fa["intervals"]}
    crit_b = min((k for k in lb if lb[k] is not None), key=lambda k: lb[k], default=None)
    crit_a = [v for v in la.values() if v is not None]
    if crit_b is not None and crit_a:
        console.print(f"Largest loss kept within {fb['floor_hz']:g}–{fb['ceiling_hz']:g} Hz "
                      f"at the worst interval: {lb[crit_b]:g} % of demand before "
                      f"({crit_b[0]} {crit_b[1]}), {min(crit_a):g} % after "
                      "(indicative single-bus model).")


# --------------------------------------------------------------------------------------------
# parser
# --------------------------------------------------------------------------------------------
def build_parser() -> argparse.ArgumentParser:
    common = argparse.ArgumentParser(add_help=False)
    common.add_argument("--debug", action="store_true", help="show tracebacks on errors")
    common.add_argument("--quiet", action="store_true", help="print only errors")
    p = argparse.ArgumentParser(
        prog="ufls-allocator",
        description="Allocate distribution feeders to under-frequency load shedding blocks "
                    "and prove, interval by interval, how much netted demand each block holds.",
        parents=[common])
    p.add_argument("--version", action="version", version=f"%(prog)s {__version__}")
    sub = p.add_subparsers(dest="command", metavar="COMMAND")

    v = sub.add_parser("validate", parents=[common], help="read and validate a study workbook",
                       description="Read a study workbook, list every problem (exit 2) or "
                                   "print what it holds and any warnings (exit 0).")
    v.add_argument("workbook", help="study workbook (.xlsx)")
    v.set_defaults(func=cmd_validate)

    c = sub.add_parser("check", parents=[common], help="armed load per block, every interval",
                       description="Check an allocation: armed MW and % of netted demand per "
                                   "block in every interval, compliance, shortfall windows, "
                                   "exporting feeders and the annual statement.")
    c.add_argument("workbook", help="study workbook (.xlsx)")
    c.add_argument("--assignment", help="CSV feeder_id,block (blank = unarmed); default: the "
                                        "workbook's current_block")
    c.add_argument("--metered", action="append", help="metered net load (CSV or Parquet: "
                   "timestamp,feeder_id,mw); repeat for several files, each calendar year of "
                   "the data is a scenario 'metered YYYY'")
    c.add_argument("--scenarios", metavar="NAMES",
                   help="comma list of scenarios to judge (default: all of the workbook's, "
                        "plus 'metered' with --metered)")
    c.add_argument("--out", help="output folder (default outputs/<workbook>/check/)")
    c.add_argument("--format", help="comma list of outputs among xlsx,html,png (default all; "
                                    "'none' for CSV/JSON only)")
    c.set_defaults(func=cmd_check)

    pl = sub.add_parser("plan", parents=[common], help="plan an allocation that holds every "
                        "block in band in every interval",
                        description="Choose which feeders go in which block so that every "
                                    "block stays within its band in every interval of the year "
                                    "(mixed-integer model, rounds over the worst intervals), "
                                    "then check the plan.")
    pl.add_argument("workbook", help="study workbook (.xlsx)")
    pl.add_argument("--metered", action="append",
                    help="metered net load (CSV or Parquet; repeatable)")
    pl.add_argument("--scenarios", metavar="NAMES",
                    help="comma list of scenarios to hold (default: all)")
    pl.add_argument("--objective", choices=("fewest_changes", "closest_to_target"),
                    help="order after the worst violation (default: the workbook's "
                         "'objective', else fewest_changes)")
    pl.add_argument("--margin", type=float, metavar="PP",
                    help="keep every block this many percentage points inside its band "
                         "(default: the workbook's band_margin_pp, else 0)")
    pl.add_argument("--out", help="output folder (default outputs/<workbook>/plan/)")
    pl.add_argument("--time-limit", type=float, help="seconds for the whole plan (default: "
                                                      "the workbook's solver_time_limit_s)")
    pl.add_argument("--max-changes", type=int, help="at most N feeders may change block")
    pl.add_argument("--solver", choices=("highs", "cbc"), default="highs",
                    help="MILP solver (default highs)")
    pl.add_argument("--seed", type=int, default=0, help="seed for the heuristic and solver")
    pl.add_argument("--format", help="comma list among xlsx,html,png (default all)")
    pl.set_defaults(func=cmd_plan)

    fq = sub.add_parser("frequency", parents=[common],
                        help="indicative frequency after large losses with the real armed load",
                        description="Run a single-bus frequency response model at the "
                                    "intervals the check flags (each block's lowest share, "
                                    "lowest demand, most export, a typical interval) with "
                                    "the armed load found there. Indicative only: the system "
                                    "operator's dynamic studies govern.")
    fq.add_argument("workbook", help="study workbook (.xlsx); optional sheet 'system'")
    fq.add_argument("--assignment", help="CSV feeder_id,block (default: current_block)")
    fq.add_argument("--metered", action="append",
                    help="metered net load (CSV or Parquet; repeatable)")
    fq.add_argument("--scenarios", metavar="NAMES",
                    help="comma list of scenarios (default: all)")
    fq.add_argument("--out", help="output folder (default outputs/<workbook>/frequency/)")
    fq.add_argument("--at", action="append", metavar="LOCAL_TIME",
                    help="also examine this local time, e.g. '2025-04-20 13:00' (repeatable)")
    fq.add_argument("--format", help="'none' to skip pictures (default: pictures)")
    fq.set_defaults(func=cmd_frequency)

    rv = sub.add_parser("review", parents=[common], help="check every study of a folder "
                        "on a Dask cluster",
                        description="Check every study of FOLDER (NAME.xlsx with an optional "
                                    "NAME.metered.csv or NAME.metered.parquet) as independent "
                                    "tasks on Dask, each into OUT/studies/NAME/ as 'check' "
                                    "writes it, then one fleet summary. Exit 0 when every "
                                    "study was checked, 1 when any was not.")
    rv.add_argument("folder", help="folder of study workbooks and their metered files")
    rv.add_argument("--out", help="output folder (default outputs/<folder>/review/)")
    rv.add_argument("--workers", type=int, default=2,
                    help="worker processes of the local cluster (default 2)")
    rv.add_argument("--scheduler", metavar="ADDRESS",
                    help="an existing Dask scheduler, e.g. tcp://host:8786 (workers must see "
                         "the same file paths); default: a local cluster")
    rv.add_argument("--format", help="each study's reports, as for check (default all; "
                                     "'none' for CSV/JSON only)")
    rv.set_defaults(func=cmd_review)

    d = sub.add_parser("demo", parents=[common], help="run the whole job on the demo network",
                       description="Run the whole job on the invented demo network.")
    d.add_argument("--out", default="outputs/demo", help="output folder (default outputs/demo)")
    d.add_argument("--format", help="comma list among xlsx,html,png (default all)")
    d.add_argument("--time-limit", type=float, help="planner seconds (default: the demo "
                                                     "workbook's solver_time_limit_s)")
    d.add_argument("--seed", type=int, default=0, help="planner seed")
    d.set_defaults(func=cmd_demo)
    return p


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    args.argv = list(sys.argv[1:] if argv is None else argv)  # for the run record
    if not getattr(args, "func", None):
        parser.print_help()
        return EXIT_OK
    from .console import make_console

    console = make_console(quiet=args.quiet)
    from rich.console import Console
    from rich.markup import escape

    err = Console(stderr=True, highlight=False, soft_wrap=True)
    t0 = time.perf_counter()
    try:
        rc = args.func(args, console)
    except InputError as exc:
        err.print(f"[red]error:[/red] {escape(exc.render())}", markup=True, highlight=False)
        err.print("Nothing was written.")
        return EXIT_INPUT
    except OutputClashError as exc:
        err.print(f"[red]error:[/red] {escape(str(exc))}. Nothing was written.")
        return EXIT_INPUT
    except KeyboardInterrupt:
        err.print("interrupted; previous outputs left as they were")
        return EXIT_INTERRUPTED
    except Exception as exc:  # noqa: BLE001 - the one place that turns bugs into exit 1
        if args.debug:
            traceback.print_exc()
        msg = str(exc).splitlines()[0] if str(exc) else ""
        err.print(f"[red]internal error:[/red] {type(exc).__name__}: {escape(msg)} "
                  "(run with --debug for the traceback)")
        return EXIT_INTERNAL
    if not args.quiet and args.command != "validate":
        console.print(f"[dim]done in {time.perf_counter() - t0:.1f} s[/dim]")
    return rc


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
