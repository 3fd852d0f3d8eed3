"""ufls-allocator: allocate distribution feeders to under-frequency load shedding blocks and
check, interval by interval, the netted demand each block really holds.

Data flows one way: workbook → year of net load → plan → check → report.  The main entry
points are importable for notebook use::

    from allocator import read_study, build_year, run_check
    study = read_study("inputs_demo/....xlsx")
    year = build_year(study)
    check = run_check(study, year, study.current_assignment)
"""

from .version import __version__  # noqa: E402

from .errors import InputError, Problem  # noqa: E402

__all__ = ["InputError", "Problem", "read_study", "build_year", "run_check", "__version__"]


def __getattr__(name):  # lazy imports keep `ufls-allocator --help` fast
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
