"""``check``: armed load per block in every interval of every scenario, into a folder."""

from __future__ import annotations

from . import options
from .progress import spinner


def register(sub, common) -> None:
    c = sub.add_parser("check", parents=[common], help="armed load per block, every interval",
                       description="Check an allocation: armed MW and % of netted demand per "
                                   "block in every interval, compliance, shortfall windows, "
                                   "exporting feeders and the annual statement.")
    options.add_workbook(c)
    options.add_assignment(c)
    options.add_metered(c, long=True)
    options.add_scenarios(c)
    options.add_out(c, "check")
    options.add_format(c)
    c.set_defaults(func=run)


def run(args, console) -> int:
    from ..console import statement_table, verdict_table, warnings, worst_windows
    from ..console.field import field_summary
    from ..pipeline.check import CheckRequest, check_study, write_check_folder
    from ..pipeline.inputs import year_notes

    out = options.refuse_bad_out(args, "check")
    fmts = options.formats(args)
    req = CheckRequest(options.sources(args), args.assignment, args.argv)
    res = check_study(req, spinner(console, args.quiet))
    write_check_folder(res, out, fmts)
    verdict_table(console, res.checks)
    worst_windows(console, res.checks)
    statement_table(console, res.field)
    if res.field.counts.feeders_changed:
        field_summary(console, res.field)
    warnings(console, list(res.warnings) + year_notes(res.years))
    console.print(f"Wrote {out}/")
    return 0
