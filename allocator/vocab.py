"""The words every output uses for a status, a boolean or a count: one source, so the
console, report.xlsx, report.html and the CSV files say the same thing.

* A block's status against its band: ``in band``, ``below band``, ``above band``,
  ``below and above band`` (:func:`band_status`).  Which side counts is decided by the
  compliance rule (:mod:`allocator.check`: the lowest/highest share for ``every_interval``,
  the P-th/(100−P)-th percentile for ``percentile:P``, the mean for ``mean``).
* A scenario's or block's verdict in a sentence or a table: ``compliant`` / ``not compliant``;
  the overall verdict as a headline only: ``COMPLIANT`` / ``NOT COMPLIANT``.
* A window outside a band (``shortfalls.csv`` ``status``): ``below band`` / ``above band``;
  the CSV keeps the machine column ``kind`` (``below_min`` / ``above_max``) beside it.
* Booleans a person reads (CSV cells, xlsx cells, console, HTML): ``yes`` / ``no``; JSON
  keeps ``true`` / ``false``.
* Counts in sentences: "no windows", "1 window", "3 windows" (:func:`count`).
"""

from __future__ import annotations

import numpy as np

IN_BAND = "in band"
BELOW_BAND = "below band"
ABOVE_BAND = "above band"
BELOW_AND_ABOVE = "below and above band"
#: a block with no interval of positive demand cannot be judged
NOT_JUDGED = "not judged (no interval with demand above 0)"
STATUS_WORDS = (IN_BAND, BELOW_BAND, ABOVE_BAND, BELOW_AND_ABOVE, NOT_JUDGED)

COMPLIANT = "compliant"
NOT_COMPLIANT = "not compliant"

#: windows: machine ``kind`` → the status word
WINDOW_KINDS = {"below_min": BELOW_BAND, "above_max": ABOVE_BAND}

YES, NO = "yes", "no"

#: a study of a fleet review (``review``, fleet_summary.csv ``status``): checked, refused
#: for bad input (its messages follow), or failed (an exception, or its worker was lost)
STUDY_CHECKED, STUDY_BAD_INPUT, STUDY_FAILED = "checked", "bad input", "failed"


def band_status(below: bool, above: bool, compliant: bool | None = None) -> str:
    """``in band`` / ``below band`` / ``above band`` / ``below and above band``.  With
    ``compliant`` False and neither side (nothing to judge): :data:`NOT_JUDGED`."""
    if below and above:
        return BELOW_AND_ABOVE
    if below:
        return BELOW_BAND
    if above:
        return ABOVE_BAND
    if compliant is False:
        return NOT_JUDGED
    return IN_BAND


def compliance_word(ok: bool) -> str:
    """``compliant`` / ``not compliant`` (tables and sentences)."""
    return COMPLIANT if ok else NOT_COMPLIANT


def headline(ok: bool) -> str:
    """``COMPLIANT`` / ``NOT COMPLIANT``: the overall verdict, as a headline only."""
    return compliance_word(ok).upper()


def window_status(kind: str) -> str:
    """``below band`` / ``above band`` for a window's machine kind."""
    return WINDOW_KINDS.get(kind, kind)


def yes_no(value: object) -> str:
    """``yes`` / ``no`` for a boolean; ``""`` for None or NaN."""
    if value is None or (isinstance(value, float) and value != value):
        return ""
    return YES if bool(value) else NO


def yes_no_array(values) -> np.ndarray:
    """:func:`yes_no` over an array of booleans (vectorized)."""
    return np.where(np.asarray(values, dtype=bool), YES, NO).astype(object)


def count(n: int, singular: str, plural: str | None = None, zero: str = "no") -> str:
    """``no windows`` / ``1 window`` / ``3 windows`` (``plural`` defaults to singular + s)."""
    n = int(n)
    word = singular if n == 1 else (plural or singular + "s")
    return f"{zero} {word}" if n == 0 else f"{n} {word}"


__all__ = ["IN_BAND", "BELOW_BAND", "ABOVE_BAND", "BELOW_AND_ABOVE", "NOT_JUDGED",
           "STATUS_WORDS", "COMPLIANT", "NOT_COMPLIANT", "WINDOW_KINDS", "band_status",
           "compliance_word", "headline", "window_status", "yes_no", "yes_no_array", "count"]
