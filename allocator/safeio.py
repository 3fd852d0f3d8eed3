"""Safe output: atomic output folders, formula-injection-proof CSV, stable JSON.

Every command writes into a temporary folder beside its target and renames it into place
only when everything is written, so an interrupted run leaves the previous outputs intact
and no partial files.  Outputs never overwrite an input file.  The temporary folder is
private (0700) while it is written; before the rename it gets the permissions a plain
``mkdir`` gives there (the user's umask, or the folder's default ACL), so colleagues who may
read the parent folder may read the outputs.  Files and subfolders inside are created the
ordinary way and follow the umask already.
"""

from __future__ import annotations

import contextlib
import json
import math
import os
import re
import shutil
import tempfile
from pathlib import Path
from typing import Iterator

import numpy as np
import pandas as pd

#: characters that make a spreadsheet treat a cell as a formula (OWASP "CSV Injection")
FORMULA_PREFIXES = ("=", "+", "-", "@", "\t", "\r")


def neutralise_text(value: object) -> object:
    """Prefix a text cell that a spreadsheet would run as a formula with a single quote,
    as OWASP's CSV-injection guidance recommends.  Numbers are left alone."""
    if isinstance(value, str) and value.startswith(FORMULA_PREFIXES):
        return "'" + value
    return value


def safe_filename(name: str, max_len: int = 80) -> str:
    """A file-name-safe form of an identifier (feeder ids, block names): no path
    separators, no leading dots, only ``[A-Za-z0-9._-]``."""
    s = re.sub(r"[^A-Za-z0-9._-]+", "_", str(name)).strip("._") or "item"
    return s[:max_len]


def write_csv(df: pd.DataFrame, path: Path, float_format: str = "%.6f") -> None:
    """CSV with text cells neutralised against formula injection; floats fixed-format so
    two runs give byte-identical files; boolean columns as ``yes`` / ``no`` (the one way
    booleans are written for people, :mod:`allocator.vocab`)."""
    from .vocab import yes_no_array

    out = df.copy()
    for c in out.columns:
        if pd.api.types.is_bool_dtype(out[c].dtype):
            out[c] = yes_no_array(out[c].to_numpy())
        elif out[c].dtype == object or pd.api.types.is_string_dtype(out[c].dtype):
            out[c] = out[c].map(neutralise_text)
    out.columns = [neutralise_text(str(c)) for c in out.columns]
    out.to_csv(path, index=False, float_format=float_format, lineterminator="\n")


def _jsonable(o: object) -> object:
    if isinstance(o, dict):
        return {str(k): _jsonable(v) for k, v in o.items()}
    if isinstance(o, (list, tuple)):
        return [_jsonable(v) for v in o]
    if isinstance(o, (np.integer,)):
        return int(o)
    if isinstance(o, (np.floating, float)):
        f = float(o)
        return None if not math.isfinite(f) else round(f, 9)
    if isinstance(o, np.bool_):
        return bool(o)
    if isinstance(o, np.ndarray):
        return _jsonable(o.tolist())
    return o


def write_json(obj: object, path: Path) -> None:
    path.write_text(json.dumps(_jsonable(obj), indent=2, ensure_ascii=False) + "\n",
                    encoding="utf-8")


class OutputClashError(ValueError):
    """The requested output folder would overwrite an input file."""


def check_out_dir(out: Path, inputs: list[Path]) -> None:
    """Refuse an ``--out`` that is an input file or contains one."""
    out_r = out.resolve()
    for p in inputs:
        if p is None:
            continue
        pr = Path(p).resolve()
        if pr == out_r:
            raise OutputClashError(f"--out {out} is an input file; choose another folder")
        if out_r in pr.parents:
            raise OutputClashError(f"--out {out} contains the input file {p}; outputs replace "
                                   "the whole folder, so choose a folder without inputs")
    if out.exists() and not out.is_dir():
        raise OutputClashError(f"--out {out} exists and is not a folder")


def _plain_mkdir_mode(folder: Path) -> int:
    """Permission bits of a folder made by a plain ``mkdir`` inside ``folder`` (umask and
    default ACL applied by the system), found by making and removing one."""
    probe = folder / ".mode-probe"
    probe.mkdir()
    try:
        return probe.stat().st_mode & 0o7777
    finally:
        probe.rmdir()


@contextlib.contextmanager
def atomic_dir(target: Path) -> Iterator[Path]:
    """Yield a fresh temporary folder beside ``target``; on success replace ``target``
    with it in one rename (the old folder is moved aside first and deleted after), on
    any failure delete the temporary folder and leave ``target`` untouched."""
    target = Path(target)
    target.parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=f".{target.name}.tmp-", dir=target.parent))
    try:
        yield tmp
        try:
            os.chmod(tmp, _plain_mkdir_mode(tmp))
        except OSError:  # a file system without modes (some network shares): keep its own
            pass
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    old = None
    if target.exists():
        old = target.parent / f".{target.name}.old-{os.getpid()}"
        if old.exists():
            shutil.rmtree(old, ignore_errors=True)
        os.replace(target, old)
    try:
        os.replace(tmp, target)
    except BaseException:
        if old is not None:
            os.replace(old, target)
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    if old is not None:
        shutil.rmtree(old, ignore_errors=True)
