"""``frequency``: the indicative frequency after large losses with the real armed load."""

from __future__ import annotations

from . import options
from .progress import spinner


def register(sub, common) -> None:
    fq = sub.add_parser("frequency", parents=[common],
                        help="indicative frequency after large losses with the real armed load",
                        description="Run a single-bus frequency response model at the "
                                    "intervals the check flags (each block's lowest share, "
                                    "lowest demand, most export, a typical interval) with "
                                    "the armed load found there. Indicative only: the system "
                                    "operator's dynamic studies govern.")
    options.add_workbook(fq, "; optional sheet 'system'")
    options.add_assignment(fq)
    options.add_metered(fq)
    options.add_scenarios(fq, "to examine")
    options.add_out(fq, "frequency")
    fq.add_argument("--at", action="append", metavar="LOCAL_TIME",
                    help="also examine this local time, e.g. '2025-04-20 13:00' (repeatable)")
    options.add_format(fq, "'none' to skip pictures (default: pictures)")
    fq.set_defaults(func=run)


def run(args, console) -> int:
    from ..console.frequency import frequency_summary
    from ..pipeline.check import CheckRequest
    from ..pipeline.frequency import FrequencyRequest, frequency_study, write_frequency_folder

    out = options.refuse_bad_out(args, "frequency")
    fmts = options.formats(args)
    req = FrequencyRequest(CheckRequest(options.sources(args), args.assignment, args.argv),
                           tuple(args.at or ()))
    res = frequency_study(req, spinner(console, args.quiet))
    write_frequency_folder(res, out, fmts)
    frequency_summary(console, res.frequency.summary)
    console.print(f"Wrote {out}/")
    return 0
