"""Report outputs of a check: ``report.xlsx``, ``figures/*.png`` and ``report.html``.

``write_reports(check, out, ...)`` writes the requested formats into the (existing) folder
``out``; ``parse_formats`` turns the ``--format`` option into the set of formats.
"""

from __future__ import annotations

from pathlib import Path

from ..errors import InputError, Problem

FORMATS: tuple[str, ...] = ("xlsx", "html", "png")
DEFAULT_FORMATS = frozenset(FORMATS)

__all__ = ["FORMATS", "parse_formats", "write_reports"]


def parse_formats(text: str | None) -> set[str]:
    """``--format`` value → set of formats.  None → every format; ``none`` → no report
    files (CSV/JSON only); otherwise a comma list of xlsx, html, png (``all`` = every one)."""
    if text is None:
        return set(DEFAULT_FORMATS)
    items = [t.strip().lower() for t in str(text).split(",")]
    items = [t for t in items if t]
    if not items:
        raise InputError([Problem(file="--format", message="no format given; use a comma list "
                                  "of xlsx, html, png, or 'all' or 'none'")])
    if items == ["none"]:
        return set()
    out: set[str] = set()
    bad = []
    for t in items:
        if t == "all":
            out |= DEFAULT_FORMATS
        elif t in FORMATS:
            out.add(t)
        else:
            bad.append(t)
    if bad:
        raise InputError([Problem(file="--format", message=f"unknown format '{b}'; choose "
                                  "from xlsx, html, png (comma list), 'all' or 'none'"
                                  + (" ('none' cannot be combined with others)"
                                     if b == "none" else ""))
                          for b in bad])
    return out


def write_reports(check, out: Path, field=None, plan_info: dict | None = None, before=None,
                  formats: set[str] | frozenset[str] = DEFAULT_FORMATS,
                  frequency: dict | None = None, run: dict | None = None) -> dict[str, Path]:
    """Write the report files of ``check`` into the existing folder ``out``.

    ``check`` is a :class:`~allocator.check.ScenarioChecks` (every scenario) or one
    :class:`~allocator.check.Check`.  ``field``: its
    :class:`~allocator.field.plan.FieldPlan` (relay changes from the allocation in service
    now, work list, visit order, statement); made here, with nothing to compare, when not
    given.  ``plan_info``: the plan record (plan.json), if reporting a plan.
    ``before``: the check of the current allocation, for before/after comparisons.
    ``frequency``: ``{"after": frequency_summary, "before": ... or None, "figure_png": bytes}``
    adds the frequency indication section to the HTML report.
    ``run``: the run record (:func:`allocator.runrecord.run_record`; the command line calls
    it with its own argv and inputs); without one, a record of the workbook and the
    scenarios' weather files is made here.
    Returns ``{"xlsx": path, "html": path, "png:<name>": path, ...}`` for what was written.
    """
    from ..check import as_set
    from ..field.plan import field_plan
    from . import content

    check = as_set(check)
    before = as_set(before) if before is not None else None
    field = field_plan(check) if field is None else field
    out = Path(out)
    formats = set(formats)
    unknown = formats - set(FORMATS)
    if unknown:
        raise ValueError(f"unknown report formats {sorted(unknown)}")
    written: dict[str, Path] = {}
    if not formats:
        return written
    out.mkdir(parents=True, exist_ok=True)
    if run is None:
        from ..runrecord import run_record

        run = run_record(check.study, [c.year for c in check.checks])
    fc = content.feeder_contrib(check.checks[0])
    if "xlsx" in formats:
        from .excel import write_workbook

        written["xlsx"] = write_workbook(check, out / "report.xlsx", field, plan_info,
                                         before, fc, run)
    figs = None
    if "png" in formats or "html" in formats:
        from .figures import render_figures

        fig_dir = out / "figures" if "png" in formats else None
        figs = render_figures(check, fig_dir, before=before, fc=fc, field=field)
        if fig_dir is not None:
            for f in figs:
                written[f"png:{f.name}"] = f.path
    if "html" in formats:
        from .html import write_html

        written["html"] = write_html(check, out / "report.html", figs or [], field=field,
                                     plan_info=plan_info, before=before, frequency=frequency,
                                     run=run)
    return written
