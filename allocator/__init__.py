"""ufls-allocator: allocate distribution feeders to under-frequency load shedding blocks and
check, interval by interval, the netted demand each block really holds.

Data flows one way: workbook → year of net load → plan → check → report.  Each job is one
function of :mod:`allocator.pipeline`, importable from here for notebook and batch use::

    from allocator import PlanRequest, Sources, plan_study, write_plan_folder
    res = plan_study(PlanRequest(Sources("inputs_demo/lindmark.xlsx")))
    print(res.record["status"], res.field.counts)
    write_plan_folder(res, "outputs/lindmark/plan")

The stages underneath are importable too (``read_study``, ``build_year``, ``run_check``).
"""

from .version import __version__  # noqa: E402

from .errors import InputError, Problem  # noqa: E402

_PIPELINE = ("Sources", "CheckRequest", "CheckResult", "check_study", "write_check_folder",
             "PlanOptions", "PlanRequest", "PlanResult", "plan_study", "write_plan_folder",
             "FrequencyRequest", "FrequencyResult", "frequency_study",
             "write_frequency_folder", "ReviewRequest", "review_folder",
             "write_review_folder", "DemoRequest", "DemoResult", "run_demo",
             "write_demo_folder")

__all__ = ["InputError", "Problem", "read_study", "build_year", "run_check", "__version__",
           *_PIPELINE]


def __getattr__(name):  # lazy imports keep `ufls-allocator --help` fast
    if name in _PIPELINE:
        from . import pipeline
        return getattr(pipeline, name)
    if name == "read_study":
        from .workbook import read_study
        return read_study
    if name == "build_year":
        from .year import build_year
        return build_year
    if name == "run_check":
        from .check import run_check
        return run_check
    raise AttributeError(name)
