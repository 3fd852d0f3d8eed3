"""``review``: every study of a folder checked on a Dask cluster, then the fleet summary."""

from __future__ import annotations

from pathlib import Path

from . import options
from .progress import spinner


def register(sub, common) -> None:
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
    options.add_format(rv, "each study's reports, as for check (default all; 'none' for "
                           "CSV/JSON only)")
    rv.set_defaults(func=run)


def run(args, console) -> int:
    """Exit 0 when every study was checked, 1 when any was not (listed with its message)."""
    from ..console.review import review_summary
    from ..pipeline.review import (ReviewRequest, review_folder, validate_review,
                                   write_review_folder)
    from ..safeio import atomic_dir, check_out_dir

    out = Path(args.out) if args.out else Path("outputs") / Path(args.folder).name / "review"
    req = ReviewRequest(args.folder, args.format, args.scheduler, args.workers, out,
                        args.argv)
    studies = validate_review(req)
    check_out_dir(out, [Path(p) for s in studies for p in (s.workbook, s.metered) if p])
    with atomic_dir(out) as tmp:
        with spinner(console, args.quiet)(f"checking {len(studies)} studies on the cluster"):
            fr = review_folder(req, tmp)
        write_review_folder(fr, tmp, args.argv)
    review_summary(console, fr)
    console.print(f"Wrote {out}/")
    return 0 if fr.all_checked else 1
