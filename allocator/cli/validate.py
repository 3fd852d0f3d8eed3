"""``validate``: read a study workbook, list every problem or say what it holds."""

from __future__ import annotations

from . import options

EXIT_OK = 0


def register(sub, common) -> None:
    v = sub.add_parser("validate", parents=[common], help="read and validate a study workbook",
                       description="Read a study workbook, list every problem (exit 2) or "
                                   "print what it holds and any warnings (exit 0).")
    options.add_workbook(v)
    v.set_defaults(func=run)


def run(args, console) -> int:
    from ..console import study_overview, warnings
    from ..workbook import read_study

    study = read_study(args.workbook)
    study_overview(console, study)
    warnings(console, study.warnings)
    console.print(f"[green]OK[/green]: {args.workbook} is a valid study workbook.")
    return EXIT_OK
