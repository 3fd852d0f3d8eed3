"""Options shared by several commands, each written once, and their turn into requests."""

from __future__ import annotations

import argparse
from pathlib import Path

from ..pipeline.inputs import Sources, scenario_names


def common_parser() -> argparse.ArgumentParser:
    """--debug and --quiet, on the program and on every command."""
    common = argparse.ArgumentParser(add_help=False)
    common.add_argument("--debug", action="store_true", help="show tracebacks on errors")
    common.add_argument("--quiet", action="store_true", help="print only errors")
    return common


def add_workbook(p, note: str = "") -> None:
    p.add_argument("workbook", help="study workbook (.xlsx)" + note)


def add_metered(p, long: bool = False) -> None:
    p.add_argument("--metered", action="append", help=(
        "metered net load (CSV or Parquet: timestamp,feeder_id,mw); repeat for several "
        "files, each calendar year of the data is a scenario 'metered YYYY'" if long else
        "metered net load (CSV or Parquet; repeatable)"))


def add_scenarios(p, what: str = "to judge") -> None:
    p.add_argument("--scenarios", metavar="NAMES", help=f"comma list of scenarios {what} "
                   "(default: all of the workbook's, plus the metered ones)")


def add_assignment(p) -> None:
    p.add_argument("--assignment", help="CSV feeder_id,block (blank = unarmed); default: the "
                                        "workbook's current_block")


def add_out(p, leaf: str) -> None:
    p.add_argument("--out", help=f"output folder (default outputs/<workbook>/{leaf}/)")


def add_format(p, text: str = "comma list among xlsx,html,png (default all; 'none' for "
                              "CSV/JSON only)") -> None:
    p.add_argument("--format", help=text)


def sources(args) -> Sources:
    """The workbook, --metered files and --scenarios of ``args``."""
    m = getattr(args, "metered", None)
    metered = () if not m else (m,) if isinstance(m, str) else tuple(m)
    return Sources(args.workbook, metered, scenario_names(getattr(args, "scenarios", None)))


def out_dir(args, leaf: str) -> Path:
    """--out, else outputs/<workbook stem>/<leaf>."""
    return Path(args.out) if args.out else Path("outputs") / Path(args.workbook).stem / leaf


def refuse_bad_out(args, leaf: str) -> Path:
    """The output folder, refused before anything is read when it would overwrite an input
    or is not a folder we may replace (:func:`allocator.safeio.check_out_dir`)."""
    from ..safeio import check_out_dir

    out = out_dir(args, leaf)
    src = sources(args)
    extra = [Path(args.assignment)] if getattr(args, "assignment", None) else []
    check_out_dir(out, src.paths + extra)
    return out


def formats(args) -> set[str]:
    """--format → the set of report formats (bad values are bad input)."""
    from ..report import parse_formats

    return parse_formats(getattr(args, "format", None))
