"""Fleet review: every study of a folder checked as an independent task on Dask.

A *study* of the folder (not its subfolders) is a workbook ``NAME.xlsx`` with at most one
metered file beside it, ``NAME.metered.csv`` or ``NAME.metered.parquet`` (README, "Fleet
review").  Each study is one task, :func:`check_one`, which runs the ``check`` job
(:func:`allocator.pipeline.check.check_study`, then ``write_check_folder``) into
``OUT/studies/NAME/`` and hands back only the per-block figures of the fleet summary: the
scenario arrays stay on the worker.

:func:`review_folder` runs the tasks into a folder the caller owns (the workers write each
study's folder there); :func:`write_review_folder` adds the fleet summary and run.json.

Why Dask (``dask.distributed``): the same code runs on a local cluster of worker processes
or on a scheduler a system operator already runs, with no change; a study that raises does
not stop the others, and a worker that dies is reported as a failed study.  Workers must see
the study files and the output folder under the same paths (a shared file system).
"""

from __future__ import annotations

import contextlib
import time
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from .. import vocab
from ..errors import InputError, Problem
from .check import CheckRequest, check_study, write_check_folder
from .inputs import Sources

#: the suffixes of a study's metered file, after ``NAME``
METERED_SUFFIXES = (".metered.csv", ".metered.parquet")
#: fleet_summary.csv columns, in order
SUMMARY_COLUMNS = ["study", "status", "study_verdict", "block", "block_status", "min_pct",
                   "max_pct", "min_share_pct", "min_share_scenario", "min_share_local_time",
                   "shortfall_mwh", "seconds", "message"]


@dataclass(frozen=True)
class StudyFiles:
    """One study of the folder: its name, workbook and metered file (or None).
    ``problem`` is set when the files do not follow the naming rule (two metered files)."""

    name: str
    workbook: str
    metered: str | None = None
    problem: str | None = None


@dataclass(frozen=True)
class StudyResult:
    """What a task hands back: status (vocab.STUDY_*), message, the per-block rows of the
    fleet summary, the study's inputs (run.json entries) and the seconds it took."""

    name: str
    status: str
    message: str = ""
    rows: tuple[dict, ...] = ()
    inputs: tuple[dict, ...] = ()
    seconds: float = float("nan")
    compliant: bool | None = None


@dataclass(frozen=True)
class FleetReview:
    """A whole review: every study's result in name order, the summary table, the wall
    seconds of the checks and where they ran."""

    results: tuple[StudyResult, ...]
    summary: pd.DataFrame
    seconds: float
    cluster: str
    notes: tuple[str, ...] = field(default=())

    @property
    def all_checked(self) -> bool:
        return all(r.status == vocab.STUDY_CHECKED for r in self.results)


# --------------------------------------------------------------------------------------------
# the folder
# --------------------------------------------------------------------------------------------
def _metered_of(folder: Path, name: str) -> list[Path]:
    return sorted(p for suf in METERED_SUFFIXES for p in [folder / f"{name}{suf}"]
                  if p.is_file())


def find_studies(folder: str | Path) -> tuple[list[StudyFiles], list[str]]:
    """The studies of ``folder`` by the naming rule, in name order, and notes on files that
    belong to no study (a metered file without its workbook).  A missing folder or one
    without any workbook is bad input (InputError, exit 2)."""
    d = Path(folder)
    if not d.is_dir():
        raise InputError([Problem(str(d), "is not a folder; give the folder of the studies")])
    books = sorted(p for p in d.glob("*.xlsx") if p.is_file() and not
                   p.name.startswith(("~$", ".")) and ".metered" not in p.stem)
    if not books:
        raise InputError([Problem(str(d), "holds no study workbook (NAME.xlsx); see README, "
                                  "'Fleet review', for the naming rule")])
    studies = []
    for b in books:
        m = _metered_of(d, b.stem)
        problem = (f"two metered files for one study ({', '.join(p.name for p in m)}); keep "
                   "one") if len(m) > 1 else None
        studies.append(StudyFiles(b.stem, str(b.resolve()), str(m[0].resolve()) if m else None,
                                  problem))
    names = {b.stem for b in books}
    notes = [f"{p.name}: no workbook {p.name.split('.metered')[0]}.xlsx beside it; not read"
             for suf in METERED_SUFFIXES for p in sorted(d.glob(f"*{suf}"))
             if p.name[: -len(suf)] not in names]
    return studies, notes


# --------------------------------------------------------------------------------------------
# one task (runs on a worker)
# --------------------------------------------------------------------------------------------
def check_request(study: StudyFiles, shown_out: Path, fmt: str | None) -> CheckRequest:
    """The ``check`` job of one study; its ``argv`` is the equivalent command line, kept in
    the study's run.json, naming ``shown_out``, the folder's final place."""
    argv = ["check", study.workbook] + (["--metered", study.metered] if study.metered else [])
    argv += ["--out", str(shown_out)] + (["--format", fmt] if fmt is not None else [])
    metered = (study.metered,) if study.metered else ()
    return CheckRequest(Sources(study.workbook, metered), argv=argv)


def block_rows(name: str, chk, seconds: float) -> tuple[dict, ...]:
    """The fleet summary rows of a checked study, one per block (the worst over every
    scenario, as summary.json's ``blocks``)."""
    verdict = vocab.compliance_word(chk.compliant)
    return tuple({"study": name, "status": vocab.STUDY_CHECKED, "study_verdict": verdict,
                  "block": v.block, "block_status": v.status, "min_pct": v.min_pct,
                  "max_pct": v.max_pct, "min_share_pct": v.min_share_pct,
                  "min_share_scenario": v.min_share_scenario,
                  "min_share_local_time": v.min_share_local_time,
                  "shortfall_mwh": v.shortfall_mwh, "seconds": seconds, "message": ""}
                 for v in chk.verdicts)


def _inputs_of(study: StudyFiles) -> tuple[dict, ...]:
    """run.json entries of a study's files, for a study whose check wrote none."""
    from ..runrecord import file_entry

    out = []
    for role, p in (("workbook", study.workbook), ("metered data", study.metered)):
        with contextlib.suppress(OSError, TypeError):
            out.append({**file_entry(role, p), "study": study.name})
    return tuple(out)


def check_one(study: StudyFiles, out_root: str, fmt: str | None,
              shown_root: str | None = None) -> StudyResult:
    """Check one study into ``out_root/NAME/`` with the ``check`` job (run.json
    names ``shown_root/NAME``).  Bad input and exceptions become a StudyResult with their
    message; nothing is raised."""
    from ..report import parse_formats

    t0 = time.perf_counter()
    failed = lambda status, msg: StudyResult(  # noqa: E731
        study.name, status, msg, inputs=_inputs_of(study), seconds=time.perf_counter() - t0)
    if study.problem:
        return failed(vocab.STUDY_BAD_INPUT, study.problem)
    out = Path(out_root) / study.name
    try:
        shown = Path(shown_root) / study.name if shown_root else out
        res = check_study(check_request(study, shown, fmt))
        write_check_folder(res, out, parse_formats(fmt))
    except InputError as exc:
        return failed(vocab.STUDY_BAD_INPUT, exc.render())
    except Exception as exc:  # noqa: BLE001 - one study's failure must not stop the others
        return failed(vocab.STUDY_FAILED, f"{type(exc).__name__}: {exc}".splitlines()[0])
    sec = time.perf_counter() - t0
    chk = res.checks
    return StudyResult(study.name, vocab.STUDY_CHECKED, rows=block_rows(study.name, chk, sec),
                       inputs=tuple({**e, "study": study.name} for e in res.run["inputs"]),
                       seconds=sec, compliant=bool(chk.compliant))


# --------------------------------------------------------------------------------------------
# the cluster
# --------------------------------------------------------------------------------------------
def _connect(scheduler: str, timeout_s: int = 30):
    """A Client to a running scheduler; an address that does not answer is bad input."""
    from dask.distributed import Client

    try:
        return Client(scheduler, timeout=f"{timeout_s}s")
    except (OSError, ValueError, TypeError) as exc:
        raise InputError([Problem("--scheduler", f"{scheduler}: no Dask scheduler answered "
                                  f"within {timeout_s} s ({type(exc).__name__}); give its "
                                  "address as tcp://host:8786")]) from exc


@contextlib.contextmanager
def fleet_client(scheduler: str | None = None, workers: int = 2):
    """A dask.distributed Client: to the scheduler at ``scheduler`` (e.g.
    ``tcp://host:8786``), else to a new LocalCluster of ``workers`` processes with one
    thread each (the checks are numpy-bound; processes keep them from sharing the GIL)."""
    from dask.distributed import Client, LocalCluster

    if scheduler:
        with _connect(scheduler) as client:
            yield client
        return
    with LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                      dashboard_address=None) as cluster, Client(cluster) as client:
        yield client


def _lost(study: StudyFiles, exc: BaseException) -> StudyResult:
    """A task whose worker died or could not run it (out of memory, lost connection)."""
    return StudyResult(study.name, vocab.STUDY_FAILED, f"worker lost or task not run: "
                       f"{type(exc).__name__}: {exc}".splitlines()[0],
                       inputs=_inputs_of(study))


def run_review(client, studies: list[StudyFiles], out_root: Path, fmt: str | None,
               shown_root: Path | None = None) -> tuple[StudyResult, ...]:
    """One task per study on ``client``; results in the order of ``studies``."""
    shown = str(Path(shown_root).resolve()) if shown_root else None
    futures = client.map(check_one, studies, out_root=str(Path(out_root).resolve()), fmt=fmt,
                         shown_root=shown, pure=False,
                         key=[f"check-{s.name}-{i}" for i, s in enumerate(studies)])
    out = []
    for s, f in zip(studies, futures):
        try:
            out.append(f.result())
        except Exception as exc:  # noqa: BLE001 - reported as a failed study
            out.append(_lost(s, exc))
    return tuple(out)


def run_serial(studies: list[StudyFiles], out_root: Path,
               fmt: str | None) -> tuple[StudyResult, ...]:
    """The same tasks one after another in this process (bench/bench_review.py)."""
    return tuple(check_one(s, str(Path(out_root).resolve()), fmt) for s in studies)


# --------------------------------------------------------------------------------------------
# the summary
# --------------------------------------------------------------------------------------------
def failed_row(r: StudyResult) -> dict:
    return {**dict.fromkeys(SUMMARY_COLUMNS), "study": r.name, "status": r.status,
            "seconds": r.seconds, "message": r.message}


def summary_frame(results) -> pd.DataFrame:
    """fleet_summary.csv: one row per study and block, one row for a study not checked."""
    rows = [row for r in results for row in (r.rows or (failed_row(r),))]
    return pd.DataFrame(rows, columns=SUMMARY_COLUMNS)


def review(folder: str | Path, out: Path, fmt: str | None = None, scheduler: str | None = None,
           workers: int = 2, final_out: Path | None = None) -> FleetReview:
    """Find the studies of ``folder`` and check each into ``out/studies/NAME/`` (the
    caller makes ``out`` atomic; ``final_out`` is where it will be, for the run records)."""
    studies, notes = find_studies(folder)
    t0 = time.perf_counter()
    with fleet_client(scheduler, workers) as client:
        where = scheduler or f"local cluster, {workers} worker processes"
        results = run_review(client, studies, out / "studies", fmt,
                             final_out / "studies" if final_out else None)
    return FleetReview(results, summary_frame(results), time.perf_counter() - t0, where,
                       tuple(notes))


@dataclass(frozen=True)
class ReviewRequest:
    """A fleet review: the ``folder`` of studies, each study's report ``formats`` (the
    ``--format`` text; None: all), a Dask ``scheduler`` address (None: a local cluster of
    ``workers`` processes), ``final_out`` (where the folder will be, for the run records)
    and the command line ``argv`` for run.json."""

    folder: str | Path
    formats: str | None = None
    scheduler: str | None = None
    workers: int = 2
    final_out: Path | None = None
    argv: list[str] | None = None


def validate_review(req: ReviewRequest) -> list[StudyFiles]:
    """Bad options and a folder without studies are bad input before anything runs.
    Returns the studies found."""
    from ..report import parse_formats

    try:
        import dask.distributed  # noqa: F401
    except ImportError:
        raise InputError([Problem("review", "needs the optional Dask extra, which is not "
                                  "installed: run pip install '.[fleet]' in the tool's folder "
                                  "(as the tool itself was installed)")]) from None
    if req.workers < 1:
        raise InputError([Problem("--workers", f"{req.workers}: give 1 or more")])
    parse_formats(req.formats)
    return find_studies(req.folder)[0]


def review_folder(req: ReviewRequest, into: Path) -> FleetReview:
    """Check every study of ``req.folder`` into ``into/studies/NAME/`` (``into``: a folder
    the caller owns, e.g. :func:`allocator.safeio.atomic_dir`'s)."""
    validate_review(req)
    return review(req.folder, Path(into), req.formats, req.scheduler, req.workers,
                  req.final_out)


def write_review_folder(fr: FleetReview, folder: Path, argv: list[str] | None = None) -> None:
    """fleet_summary.csv/.xlsx, fleet.html and run.json (every study's inputs) into
    ``folder`` beside its studies/."""
    from ..files import write_run
    from ..report.fleet import write_fleet_files
    from ..runrecord import review_record

    rec = review_record([e for r in fr.results for e in r.inputs], argv,
                        cluster=fr.cluster, studies=len(fr.results),
                        studies_not_checked=[r.name for r in fr.results
                                             if r.status != vocab.STUDY_CHECKED],
                        wall_seconds=round(fr.seconds, 3), notes=list(fr.notes))
    write_fleet_files(fr.summary, folder, rec)
    write_run(folder, rec)
