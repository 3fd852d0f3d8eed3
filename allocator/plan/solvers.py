"""Hand a :class:`~allocator.plan.model.MilpArrays` to a MILP solver.

* ``highs`` — HiGHS through highspy, fed the arrays directly (column-wise CSC), with the
  heuristic plan as a starting solution (``Highs.setSolution``);
* ``cbc`` — COIN-OR CBC through PuLP (the model rebuilt as PuLP expressions, one row each,
  from the same arrays; the start passed with ``warmStart``);
* ``scipy`` — :func:`scipy.optimize.milp` (a reference in tests only).

All return a :class:`SolveOutcome`; solver faults become ``status="error"`` with the
message, never an exception that loses the incumbent plan.
"""

from __future__ import annotations

import os
import sys
import time
from dataclasses import dataclass

import numpy as np

from .model import MilpArrays


@dataclass
class SolveOutcome:
    status: str  # "optimal" | "time_limit" | "infeasible" | "error" | "no_solution"
    x: np.ndarray | None
    objective: float | None
    bound: float | None
    gap: float | None
    seconds: float
    solver: str
    message: str = ""


def _new_highs():
    """A ``highspy.Highs`` object without the copyright banner HiGHS writes to the process's
    standard output on construction (it ignores ``output_flag``, which can only be set
    afterwards); the banner would break ``--quiet`` and machine-read output."""
    import highspy

    try:
        sys.stdout.flush()
        saved = os.dup(1)
        with open(os.devnull, "wb") as null:
            os.dup2(null.fileno(), 1)
            try:
                h = highspy.Highs()
            finally:
                os.dup2(saved, 1)
                os.close(saved)
    except OSError:  # no usable file descriptor 1 (embedded use): accept the banner
        h = highspy.Highs()
    h.setOptionValue("output_flag", False)
    return h


def solver_version(name: str) -> str:
    try:
        if name == "highs":
            import highspy

            return f"HiGHS {_new_highs().version()}"
        if name == "cbc":
            import pulp

            return f"CBC via PuLP {pulp.__version__}"
        if name == "scipy":
            import scipy

            return f"scipy.optimize.milp {scipy.__version__}"
    except Exception as exc:  # pragma: no cover
        return f"{name} (version unknown: {exc})"
    return name


def available(name: str) -> bool:
    try:
        if name == "highs":
            import highspy  # noqa: F401
            return True
        if name == "cbc":
            import pulp

            return pulp.PULP_CBC_CMD(msg=False).available()
        if name == "scipy":
            from scipy.optimize import milp  # noqa: F401
            return True
    except Exception:
        return False
    return False


def solve(arrays: MilpArrays, solver: str = "highs", time_limit_s: float = 60.0,
          mip_gap: float = 1e-4, start: np.ndarray | None = None, seed: int = 0,
          threads: int | None = None, node_limit: int | None = None) -> SolveOutcome:
    """Solve; ``node_limit`` (branch-and-bound nodes) is a deterministic work limit, the
    time limit a safety net."""
    t0 = time.perf_counter()
    try:
        if solver == "highs":
            out = _solve_highs(arrays, time_limit_s, mip_gap, start, seed, threads, node_limit)
        elif solver == "cbc":
            out = _solve_cbc(arrays, time_limit_s, mip_gap, start, seed, threads, node_limit)
        elif solver == "scipy":
            out = _solve_scipy(arrays, time_limit_s, mip_gap)
        else:
            raise ValueError(f"unknown solver {solver}")
    except Exception as exc:  # the solver crashed or is missing: report, keep the incumbent
        return SolveOutcome("error", None, None, None, None, time.perf_counter() - t0, solver,
                            f"{type(exc).__name__}: {exc}")
    out.seconds = time.perf_counter() - t0
    if out.x is not None and not np.all(np.isfinite(out.x)):
        out.status, out.x = "error", None
        out.message = "solver returned non-finite values (numerical trouble)"
    return out


def _solve_highs(a: MilpArrays, tl, gap, start, seed, threads, node_limit=None
                 ) -> SolveOutcome:
    import highspy

    h = _new_highs()
    h.setOptionValue("output_flag", bool(os.environ.get("HIGHS_LOG")))
    h.setOptionValue("time_limit", float(tl))
    h.setOptionValue("mip_rel_gap", float(gap))
    h.setOptionValue("random_seed", int(seed))
    if threads:
        h.setOptionValue("threads", int(threads))
    if node_limit is not None:
        h.setOptionValue("mip_max_nodes", int(node_limit))
    # HiGHS presolve on the dense share rows can run far past the time limit without
    # checking it (seen: 17 s against a 5 s limit on the demo); the rows are already tight
    h.setOptionValue("presolve", os.environ.get("UFLS_HIGHS_PRESOLVE", "off"))
    csc = a.A.tocsc()
    lp = highspy.HighsLp()
    lp.num_col_ = int(a.c.size)
    lp.num_row_ = int(a.A.shape[0])
    lp.col_cost_ = a.c.astype(float)
    lp.offset_ = float(a.offset)
    inf = highspy.kHighsInf
    lp.col_lower_ = np.where(np.isinf(a.lb), -inf, a.lb)
    lp.col_upper_ = np.where(np.isinf(a.ub), inf, a.ub)
    lp.row_lower_ = np.where(np.isinf(a.row_lb), -inf, a.row_lb)
    lp.row_upper_ = np.where(np.isinf(a.row_ub), inf, a.row_ub)
    lp.a_matrix_.format_ = highspy.MatrixFormat.kColwise
    lp.a_matrix_.start_ = csc.indptr.astype(np.int32)
    lp.a_matrix_.index_ = csc.indices.astype(np.int32)
    lp.a_matrix_.value_ = csc.data.astype(float)
    lp.integrality_ = [highspy.HighsVarType.kInteger if i else highspy.HighsVarType.kContinuous
                       for i in a.integral]
    h.passModel(lp)
    if start is not None:
        sol = highspy.HighsSolution()
        sol.col_value = list(map(float, start))
        sol.value_valid = True
        h.setSolution(sol)
    h.run()
    ms = h.getModelStatus()
    name = h.modelStatusToString(ms)
    info = h.getInfo()
    has_sol = info.primal_solution_status >= 2 if hasattr(info, "primal_solution_status") else True
    x = np.array(h.getSolution().col_value) if has_sol else None
    if ms == highspy.HighsModelStatus.kOptimal:
        status = "optimal"
    elif ms == highspy.HighsModelStatus.kInfeasible:
        status, x = "infeasible", None
    elif ms in (highspy.HighsModelStatus.kTimeLimit, highspy.HighsModelStatus.kIterationLimit,
                highspy.HighsModelStatus.kInterrupt, highspy.HighsModelStatus.kSolutionLimit):
        status = "time_limit" if x is not None else "no_solution"
        if ms == highspy.HighsModelStatus.kTimeLimit:
            name = "time_limit_hit"
    else:
        status = "error" if x is None else "time_limit"
    obj = float(info.objective_function_value) if x is not None else None
    bound = float(info.mip_dual_bound) if np.isfinite(info.mip_dual_bound) else None
    g = float(info.mip_gap) if np.isfinite(info.mip_gap) else None
    return SolveOutcome(status, x, obj, bound, g, 0.0, "highs", name)


def _solve_cbc(a: MilpArrays, tl, gap, start, seed, threads, node_limit=None
               ) -> SolveOutcome:
    import pulp

    prob = pulp.LpProblem("ufls_allocation", pulp.LpMinimize)
    n = a.c.size
    vs = []
    for j in range(n):
        lb = None if np.isinf(a.lb[j]) else float(a.lb[j])
        ub = None if np.isinf(a.ub[j]) else float(a.ub[j])
        cat = pulp.LpInteger if a.integral[j] else pulp.LpContinuous
        if a.integral[j] and lb == 0.0 and ub == 1.0:
            cat = pulp.LpBinary
        vs.append(pulp.LpVariable(f"v{j}", lowBound=lb, upBound=ub, cat=cat))
    nz = np.flatnonzero(a.c)
    prob += pulp.LpAffineExpression([(vs[j], float(a.c[j])) for j in nz]) + float(a.offset)
    A = a.A.tocsr()
    for i in range(A.shape[0]):
        s, e = A.indptr[i], A.indptr[i + 1]
        expr = pulp.LpAffineExpression([(vs[j], float(v)) for j, v in
                                        zip(A.indices[s:e], A.data[s:e])])
        lo, hi = a.row_lb[i], a.row_ub[i]
        if lo == hi:
            prob += expr == float(lo)
        else:
            if np.isfinite(lo):
                prob += expr >= float(lo)
            if np.isfinite(hi):
                prob += expr <= float(hi)
    if start is not None:
        for j in range(n):
            vs[j].setInitialValue(float(round(start[j])) if a.integral[j] else float(start[j]))
    opts = [f"randomSeed {int(seed) + 1}", f"randomCbcSeed {int(seed) + 1}"]
    if node_limit is not None:
        opts.append(f"maxNodes {int(node_limit)}")
    cmd = pulp.PULP_CBC_CMD(msg=False, timeLimit=float(tl), gapRel=float(gap),
                            warmStart=start is not None, threads=threads, options=opts)
    prob.solve(cmd)
    st = pulp.LpStatus[prob.status]
    x = np.array([v.varValue if v.varValue is not None else np.nan for v in vs])
    # a variable in no row and not in the objective is dropped by PuLP (no value): any value
    # in its bounds is optimal, take the one nearest 0
    unused = (np.diff(a.A.tocsc().indptr) == 0) & (a.c == 0) & np.isnan(x)
    x[unused] = np.clip(0.0, a.lb[unused], a.ub[unused])
    if st == "Optimal":
        status = "optimal"
        if prob.sol_status == pulp.LpSolutionIntegerFeasible:
            status = "time_limit"
    elif st == "Infeasible":
        return SolveOutcome("infeasible", None, None, None, None, 0.0, "cbc", st)
    elif np.all(np.isfinite(x)):
        status = "time_limit"
    else:
        return SolveOutcome("no_solution", None, None, None, None, 0.0, "cbc", st)
    obj = float(pulp.value(prob.objective)) if prob.objective is not None else None
    return SolveOutcome(status, x, obj, None, None, 0.0, "cbc", st)


def _solve_scipy(a: MilpArrays, tl, gap) -> SolveOutcome:
    from scipy.optimize import Bounds, LinearConstraint, milp

    res = milp(a.c, constraints=LinearConstraint(a.A, a.row_lb, a.row_ub),
               integrality=a.integral.astype(int), bounds=Bounds(a.lb, a.ub),
               options={"time_limit": float(tl), "mip_rel_gap": float(gap), "disp": False})
    if res.status == 0:
        return SolveOutcome("optimal", res.x, float(res.fun) + a.offset,
                            getattr(res, "mip_dual_bound", None), getattr(res, "mip_gap", None),
                            0.0, "scipy", res.message)
    if res.x is not None:
        return SolveOutcome("time_limit", res.x, float(res.fun) + a.offset, None, None, 0.0,
                            "scipy", res.message)
    st = "infeasible" if res.status == 2 else "no_solution"
    return SolveOutcome(st, None, None, None, None, 0.0, "scipy", res.message)
