"""The years a plan is judged on: ``Study (+ metered) → tuple[Year, ...]``.

Each scenario of the workbook's ``scenarios`` sheet (or the defaults ``clear_sky`` and
``no_pv`` of the study year, see :func:`allocator.domain.default_scenarios`) becomes a full
:class:`~allocator.year.Year` on its own calendar, with the same ``[feeder, interval]``
layout; metered data, when given, is one more year named ``metered``, or one year per
calendar year of the data named ``metered YYYY`` when it spans several (or comes from
several files, :mod:`allocator.metered.years`).  The check judges an
allocation on every one of them and the verdict is the worst; the planner holds every
interval of every one.

Why more than one year: clear-sky PV gives the lowest netted load on PV-rich feeders, so it
is the hard case for a block's *minimum*; an overcast year (no PV output) raises netted
demand and the share of blocks with little PV, so it is the hard case for a block's
*maximum*.  Neither year is "conservative" for both edges of a band.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from .domain import Scenario, Study
from .year import Year, build_year

if TYPE_CHECKING:  # pragma: no cover
    from .metered import MeteredData


def selected_scenarios(study: Study, names: list[str] | None = None) -> tuple[Scenario, ...]:
    """The study's scenarios, or those named in ``names`` (``--scenarios``; the name
    ``metered`` is every metered year, ``metered YYYY`` one of them; handled by
    :func:`build_years`)."""
    all_sc = study.scenarios
    if not names:
        return all_sc
    from .errors import InputError, Problem

    known = {s.name.lower(): s for s in all_sc}
    bad = [n for n in names if n.lower() not in known and not _is_metered_name(n)]
    if bad:
        raise InputError([Problem("--scenarios", f"unknown scenario '{n}'; the study has "
                                  f"{', '.join(s.name for s in all_sc)} (and 'metered' with "
                                  "--metered)") for n in bad])
    return tuple(known[n.lower()] for n in names if n.lower() in known)


def _is_metered_name(name: str) -> bool:
    n = name.strip().lower()
    return n == "metered" or (n.startswith("metered ") and n[8:].strip().isdigit())


def _metered_wanted(m: "MeteredData", names: list[str] | None) -> bool:
    if not names:
        return True
    wanted = {" ".join(n.lower().split()) for n in names}
    return "metered" in wanted or (m.year is not None and f"metered {m.year}" in wanted)


def build_years(study: Study, metered=None,
                names: list[str] | None = None) -> tuple[Year, ...]:
    """Every scenario's year (in the order of the sheet), then the metered year(s) if given
    (one MeteredData or a tuple of them, one per calendar year, oldest first).
    ``names`` restricts the set (see :func:`selected_scenarios`)."""
    years = [build_year(study, scenario=sc) for sc in selected_scenarios(study, names)]
    mets = () if metered is None else (metered,) if not isinstance(metered, (tuple, list)) \
        else tuple(metered)
    years += _metered_years(study, [m for m in mets if _metered_wanted(m, names)])
    if not years:
        from .errors import InputError, Problem

        raise InputError([Problem("--scenarios", "no scenario selected")])
    return tuple(years)


def _metered_years(study: Study, mets: list) -> list[Year]:
    """Each metered year built; the problems of every year (gap_fill = error) in one list."""
    from .errors import InputError

    out, probs = [], []
    for m in mets:
        try:
            out.append(build_year(study, m))
        except InputError as e:
            probs += e.problems
    if probs:
        raise InputError(probs)
    return out


def scenario_rows(years: tuple[Year, ...]) -> list[dict]:
    """One row per scenario for reports: name, PV kind, scales, calendar year, source."""
    return [{"scenario": y.scenario, "pv": y.scenario_info.get("pv", ""),
             "pv_scale": y.scenario_info.get("pv_scale", 1.0),
             "load_scale": y.scenario_info.get("load_scale", 1.0),
             "year": y.calendar_year, "intervals": y.n_intervals, "source": y.source}
            for y in years]


__all__ = ["build_years", "selected_scenarios", "scenario_rows"]
