"""The run record every report carries: which tool made it, when, from which command line and
from which input files (name and SHA-256), with blank "prepared by" / "checked by" fields for
the people who sign it off.

``run_record(...) → dict`` is written as ``run.json`` beside ``summary.json`` and shown on the
xlsx summary sheet and in report.html.  The run time is the computer's local time in ISO 8601
with its UTC offset (:func:`allocator.timefmt.iso_now`).
"""

from __future__ import annotations

import hashlib
import shlex
from pathlib import Path

from .version import __version__
from .timefmt import iso_now

#: the fields left for people to fill in (xlsx cells, a printable box in the HTML)
SIGN_OFF = ("prepared by", "checked by")


def sha256_of(path: Path, chunk: int = 1 << 20) -> str:
    """SHA-256 (FIPS 180-4) of a file's bytes, as 64 hex digits."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(chunk), b""):
            h.update(block)
    return h.hexdigest()


def file_entry(role: str, path: str | Path) -> dict:
    p = Path(path)
    return {"role": role, "name": p.name, "sha256": sha256_of(p)}


def input_files(study, years=(), metered=None,
                assignment: str | None = None) -> list[dict]:
    """Every input the run read: the workbook, the metered file, the assignment CSV and the
    weather file of each scenario judged (``study.scenarios[i].weather_file``)."""
    out = [file_entry("workbook", study.path)]
    for m in [metered] if isinstance(metered, (str, Path)) else (metered or ()):
        out.append(file_entry("metered data", m))
    if assignment:
        out.append(file_entry("assignment", assignment))
    judged = {y.scenario for y in years} or {sc.name for sc in study.scenarios}
    seen: set[str] = set()
    for sc in study.scenarios:
        if sc.pv == "weather" and sc.weather_file and sc.name in judged:
            if sc.weather_file not in seen:
                seen.add(sc.weather_file)
                out.append(file_entry(f"weather year (scenario {sc.name})", sc.weather_file))
    return out


def command_line(argv: list[str] | None) -> str:
    """The command as typed (shell-quoted), or "" when called from Python."""
    if argv is None:
        return ""
    return shlex.join(["ufls-allocator", *argv])


def run_record(study, years=(), argv: list[str] | None = None, metered: str | None = None,
               assignment: str | None = None, run_time: str | None = None) -> dict:
    """The ``run.json`` content."""
    return {
        "tool": "ufls-allocator",
        "version": __version__,
        "run_time": run_time or iso_now(),
        "command_line": command_line(argv),
        "inputs": input_files(study, years, metered, assignment),
        **{k.replace(" ", "_"): "" for k in SIGN_OFF},
    }


def review_record(inputs, argv: list[str] | None = None, run_time: str | None = None,
                  **extra) -> dict:
    """The ``run.json`` of a fleet review: the same fields, ``inputs`` every study's files
    (each entry names its ``study``), plus ``extra`` (where it ran, how long)."""
    return {
        "tool": "ufls-allocator",
        "version": __version__,
        "run_time": run_time or iso_now(),
        "command_line": command_line(argv),
        "inputs": list(inputs),
        **extra,
        **{k.replace(" ", "_"): "" for k in SIGN_OFF},
    }


__all__ = ["run_record", "review_record", "input_files", "sha256_of", "command_line", "SIGN_OFF"]
