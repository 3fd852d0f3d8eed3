"""The years a plan is judged on: ``Study (+ metered) → tuple[Year, ...]``.

Each scenario of the workbook's ``scenarios`` sheet (or the defaults ``clear_sky`` and
``no_pv`` of the study year, see :func:`allocator.domain.default_scenarios`) becomes a full
:class:`~allocator.year.Year` on its own calendar, with the same ``[feeder, interval]``
layout; metered data, when given, is one more year named ``metered``.  The check judges an
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
    ``metered`` is the metered year and is handled by :func:`build_years`)."""
    all_sc = study.scenarios
    if not names:
        return all_sc
    from .errors import InputError, Problem

    known = {s.name.lower(): s for s in all_sc}
    bad = [n for n in names if n.lower() not in known and n.lower() != "metered"]
    if bad:
        raise InputError([Problem("--scenarios", f"unknown scenario '{n}'; the study has "
                                  f"{', '.join(s.name for s in all_sc)} (and 'metered' with "
                                  "--metered)") for n in bad])
    return tuple(known[n.lower()] for n in names if n.lower() in known)


def build_years(study: Study, metered: "MeteredData | None" = None,
                names: list[str] | None = None) -> tuple[Year, ...]:
    """Every scenario's year (in the order of the sheet), then the metered year if given.
    ``names`` restricts the set (see :func:`selected_scenarios`)."""
    years = [build_year(study, scenario=sc) for sc in selected_scenarios(study, names)]
    if metered is not None and (not names or "metered" in {n.lower() for n in names}):
        years.append(build_year(study, metered))
    if not years:
        from .errors import InputError, Problem

        raise InputError([Problem("--scenarios", "no scenario selected")])
    return tuple(years)


def scenario_rows(years: tuple[Year, ...]) -> list[dict]:
    """One row per scenario for reports: name, PV kind, scales, calendar year, source."""
    return [{"scenario": y.scenario, "pv": y.scenario_info.get("pv", ""),
             "pv_scale": y.scenario_info.get("pv_scale", 1.0),
             "load_scale": y.scenario_info.get("load_scale", 1.0),
             "year": y.calendar_year, "intervals": y.n_intervals, "source": y.source}
            for y in years]


__all__ = ["build_years", "selected_scenarios", "scenario_rows"]
