"""``demo``: the whole job on the invented demo network."""

from __future__ import annotations

from pathlib import Path

from . import options
from .progress import numbered


def register(sub, common) -> None:
    d = sub.add_parser("demo", parents=[common], help="run the whole job on the demo network",
                       description="Run the whole job on the invented demo network.")
    d.add_argument("--out", default="outputs/demo", help="output folder (default outputs/demo)")
    options.add_format(d, "comma list among xlsx,html,png (default all)")
    d.add_argument("--time-limit", type=float, help="planner seconds (default: the demo "
                                                     "workbook's solver_time_limit_s)")
    d.add_argument("--seed", type=int, default=0, help="planner seed")
    d.set_defaults(func=run)


def show(console, res) -> None:
    """Everything the demo found, in the order of its steps."""
    from ..console import study_overview, verdict_table, warnings, worst_windows
    from ..console.demo import before_after, year_lines
    from ..console.field import field_summary
    from ..console.plan import fixed_vs_switched, plan_summary

    p = res.plan
    console.rule(f"demo: {res.workbook_name}")
    study_overview(console, p.study)
    warnings(console, p.study.warnings, limit=5)
    year_lines(console, p.study, p.years)
    verdict_table(console, p.before, "Current allocation")
    worst_windows(console, p.before, n=3)
    plan_summary(console, p)
    field_summary(console, p.field)
    fixed_vs_switched(console, p)
    before_after(console, p.before, p.checks, res.frequency_current.summary,
                 res.frequency_plan.summary)


def run(args, console) -> int:
    from ..pipeline.demo import DEMO_STEPS, DemoRequest, run_demo, write_demo_folder

    out, fmts = Path(args.out), options.formats(args)
    steps = numbered(console, list(DEMO_STEPS) + ["reports"], args.quiet)
    res = run_demo(DemoRequest(args.time_limit, args.seed, args.argv), steps)
    with steps("reports"):
        write_demo_folder(res, out, fmts)
    show(console, res)
    for name in ("report.html", "report.xlsx"):
        if (out / name).exists():
            console.print(f"  {name}: {(out / name).resolve()}")
    console.print(f"Wrote {out}/")
    return 0
