"""``plan``: an allocation (or a schedule) that holds every block in band in every interval,
then its check, field plan and reports, into a folder."""

from __future__ import annotations

from . import options
from .progress import planner_rounds, spinner


def register(sub, common) -> None:
    pl = sub.add_parser("plan", parents=[common], help="plan an allocation that holds every "
                        "block in band in every interval",
                        description="Choose which feeders go in which block so that every "
                                    "block stays within its band in every interval of the year "
                                    "(mixed-integer model, rounds over the worst intervals), "
                                    "then check the plan.")
    options.add_workbook(pl)
    options.add_metered(pl)
    options.add_scenarios(pl, "to hold")
    pl.add_argument("--objective", choices=("fewest_changes", "closest_to_target"),
                    help="order after the worst violation (default: the workbook's "
                         "'objective', else fewest_changes)")
    pl.add_argument("--margin", type=float, metavar="PP",
                    help="keep every block this many percentage points inside its band "
                         "(default: the workbook's band_margin_pp, else 0)")
    options.add_out(pl, "plan")
    add_planner(pl)
    options.add_format(pl)
    pl.set_defaults(func=run)


def add_planner(pl) -> None:
    pl.add_argument("--time-limit", type=float, help="seconds for the whole plan (default: "
                                                      "the workbook's solver_time_limit_s)")
    pl.add_argument("--max-changes", type=int, help="at most N relays may change setting in "
                    "the field (a trip group is one relay; remote-settable relays are not "
                    "counted)")
    pl.add_argument("--solver", choices=("highs", "cbc"), default="highs",
                    help="MILP solver (default highs)")
    pl.add_argument("--seed", type=int, default=0, help="seed for the heuristic and solver")
    # the words of pipeline.plan.ARMING, written here so that --help imports no planner
    pl.add_argument("--arming", choices=("auto", "fixed", "switched"), default="auto",
                    help="with remotely switchable feeders and periods: 'auto' (default) "
                         "plans both and puts a schedule in service only where it is "
                         "strictly better than the best fixed plan; 'fixed' or 'switched' "
                         "asks for one")


def plan_options(args):
    from ..pipeline.plan import PlanOptions

    return PlanOptions(objective=args.objective, margin_pp=args.margin,
                       time_limit_s=args.time_limit, max_changes=args.max_changes,
                       solver=args.solver, seed=args.seed, arming=args.arming)


def run(args, console) -> int:
    from dataclasses import replace

    from ..console.field import field_summary
    from ..console.plan import fixed_vs_switched, plan_summary
    from ..pipeline.plan import PlanRequest, plan_study, write_plan_folder

    out = options.refuse_bad_out(args, "plan")
    fmts = options.formats(args)
    req = PlanRequest(options.sources(args), plan_options(args), args.argv)
    with planner_rounds(console, args.quiet) as on_round:
        res = plan_study(replace(req, on_round=on_round), spinner(console, True))
    write_plan_folder(res, out, fmts)
    plan_summary(console, res)
    fixed_vs_switched(console, res)
    field_summary(console, res.field)
    console.print(f"Wrote {out}/")
    return 0
