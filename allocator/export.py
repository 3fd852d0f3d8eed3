"""Write a check's files into an output folder (the folder itself is made atomic by the
caller; see :func:`allocator.safeio.atomic_dir`)."""

from __future__ import annotations

from pathlib import Path

from .check import (Check, by_substation, exporting_feeders, low_load_view, summary_dict)
from .safeio import write_csv, write_json


def write_check_files(check: Check, out: Path) -> dict[str, Path]:
    """summary.json, armed_load.csv, shortfalls.csv, exporting_feeders.csv,
    by_substation.csv, low_load.csv.  Returns name → path."""
    out.mkdir(parents=True, exist_ok=True)
    paths = {
        "summary": out / "summary.json",
        "armed_load": out / "armed_load.csv",
        "shortfalls": out / "shortfalls.csv",
        "exporting_feeders": out / "exporting_feeders.csv",
        "by_substation": out / "by_substation.csv",
        "low_load": out / "low_load.csv",
    }
    write_json(summary_dict(check), paths["summary"])
    write_csv(check.armed_load_table(), paths["armed_load"])
    w = check.windows().drop(columns=["_start"])
    write_csv(w, paths["shortfalls"])
    write_csv(exporting_feeders(check), paths["exporting_feeders"])
    write_csv(by_substation(check), paths["by_substation"])
    write_csv(low_load_view(check), paths["low_load"])
    return paths
