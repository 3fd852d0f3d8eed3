"""Frequency with the real armed load at the intervals that matter: ``Check → FrequencyStudy``.

Which intervals are examined (each labelled in the outputs):

* for every block, the interval of its lowest share of demand (``lowest_<block>``);
* the lowest-demand interval (``lowest_demand``);
* the interval with the most export from armed feeders (``most_export``), when any exports;
* a typical interval: the one whose demand is the median (``typical``);
* any local times the user names (``user_<n>``).

At each, every block sheds its share of demand *as the check found it there* (exporting
armed feeders make a share smaller, even negative) and the single-bus frequency model of
:mod:`allocator.frequency` is run for a sweep of disturbance sizes.  The "largest loss kept
within limits" (:func:`allocator.frequency.largest_covered_pct`: that loss and every smaller
one examined keep frequency between the floor and the ceiling) is taken over a fine sweep
(1 % of demand steps) together with the ``system`` sheet's sizes, so that differences between
intervals show and no size drawn in a figure contradicts it; traces use the sheet's sizes.
The figures, the CSV/JSON files and the console show this one value.

Local times are ISO 8601 with the UTC offset (:func:`allocator.timefmt.iso_local`).

This is an indication to discuss with the system operator, not a dynamic study.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from .check import Check
from .errors import InputError, Problem
from .frequency import FrequencyResult, largest_covered_pct, simulate
from .system import SystemParams, system_params_from_mapping
from .timefmt import iso_local

FINE_SWEEP_PCT = np.arange(1.0, 61.0, 1.0)
COVERED_MEANING = (
    "largest_covered_pct: the largest generation loss (% of demand at the interval) such that "
    "it and every smaller loss examined (1 % steps from 1 to 60 % and the system sheet's "
    "sizes) keep frequency between floor_hz and ceiling_hz; null if even the smallest does "
    "not")
CAUTIONS = (
    "Indicative single-bus model (aggregate inertia, one equivalent reheat governor, no "
    "network, no voltage dependence of load, no other protection); the system operator's "
    "dynamic studies govern.",
    "Shares are those the armed-load check computed at each interval from the study's load "
    "and clear-sky PV assumptions; system constants are illustrative unless the workbook's "
    "'system' sheet gives the operator's values.",
    "Under-frequency load shedding disconnects customers: verify any conclusion with the "
    "system operator and under licensed engineering practice before acting on it.",
)


@dataclass(frozen=True)
class FrequencyStudy:
    params: SystemParams
    labels: tuple[str, ...]
    interval_index: np.ndarray  # [case] index into the year
    local_times: tuple[str, ...]  # ISO 8601 local time with offset
    demand_mw: np.ndarray  # [case]
    armed_pct: np.ndarray  # [case, block]
    sweep: FrequencyResult  # the system sheet's disturbance sizes, traces kept
    fine: FrequencyResult  # FINE_SWEEP_PCT, for largest_covered_pct

    @property
    def largest_covered_pct(self) -> np.ndarray:
        """[case] largest loss kept within limits, % of demand, over the fine sweep and the
        system sheet's sizes together (NaN if even the smallest leaves the limits)."""
        dist = np.concatenate([self.fine.disturbances_pct, self.sweep.disturbances_pct])
        within = np.concatenate([self.fine.within_limits, self.sweep.within_limits], axis=1)
        return largest_covered_pct(dist, within)


def system_params(check: Check) -> SystemParams:
    st = check.study
    sysd = st.system or {}
    values = dict(sysd.get("values", {})) if isinstance(sysd, dict) else {}
    rows = dict(sysd.get("rows", {})) if isinstance(sysd, dict) else {}
    return system_params_from_mapping(values, st.settings.nominal_hz, st.path, rows=rows)


def pick_intervals(check: Check, user_local: list[str] | None = None
                   ) -> tuple[list[str], np.ndarray]:
    """Labels and year indices of the examined intervals (duplicates kept once, first
    label wins)."""
    y = check.year
    st = check.study
    valid = np.flatnonzero(check.valid)
    labels: list[str] = []
    idx: list[int] = []

    def add(label, t):
        if int(t) in idx:
            labels[idx.index(int(t))] += f"+{label}"
            return
        labels.append(label)
        idx.append(int(t))

    for j, b in enumerate(st.blocks):
        sj = check.share_pct[j, valid]
        add(f"lowest_{b.name}", valid[int(np.argmin(sj))])
    dem = y.demand_mw[valid]
    add("lowest_demand", valid[int(np.argmin(dem))])
    armed = check.block_idx >= 0
    if armed.any():
        exp = np.minimum(y.net_mw[armed], 0.0).sum(axis=0)
        if exp.min() < 0:
            add("most_export", int(np.argmin(exp)))
    order = np.argsort(dem, kind="stable")
    add("typical", valid[order[len(order) // 2]])
    problems = []
    for n, text in enumerate(user_local or [], start=1):
        try:
            ts = pd.Timestamp(text)
            if ts.tzinfo is None:
                ts = ts.tz_localize(y.timezone, ambiguous=True, nonexistent="raise")
        except Exception:
            problems.append(Problem("--at", f"'{text}' is not a local time such as "
                                    "'2025-04-20 13:00' in the study time zone"))
            continue
        tu = ts.tz_convert("UTC")
        pos = y.timestamps_utc.searchsorted(tu, side="right") - 1
        end = y.timestamps_utc[-1] + pd.Timedelta(minutes=y.interval_minutes)
        if pos < 0 or tu >= end or not check.valid[pos]:
            problems.append(Problem("--at", f"'{text}' is outside the study year or at an "
                                    "interval with demand ≤ 0"))
            continue
        add(f"user_{n}", pos)
    if problems:
        raise InputError(problems)
    return labels, np.array(idx, dtype=np.intp)


def run_frequency_study(check: Check, user_local: list[str] | None = None,
                        params: SystemParams | None = None) -> FrequencyStudy:
    params = params or system_params(check)
    labels, idx = pick_intervals(check, user_local)
    armed = check.share_pct[:, idx].T  # [case, block]
    blocks = list(check.study.blocks)
    sweep = simulate(params, blocks, armed, np.asarray(params.disturbances_pct, dtype=float),
                     keep_traces=True, error_check=True)
    fine = simulate(params, blocks, armed, FINE_SWEEP_PCT, keep_traces=False,
                    error_check=False)
    lt = tuple(iso_local(check.year.local_times[idx]))
    return FrequencyStudy(params, tuple(labels), idx, lt, check.year.demand_mw[idx], armed,
                          sweep, fine)


def frequency_table(fs: FrequencyStudy) -> pd.DataFrame:
    r = fs.sweep
    rows = []
    for c, label in enumerate(fs.labels):
        for d, size in enumerate(r.disturbances_pct):
            tripped = [b for b, t in zip(r.block_names, r.tripped[c, d]) if t]
            rows.append({
                "interval": label, "local_time": fs.local_times[c],
                "demand_mw": fs.demand_mw[c], "disturbance_pct": float(size),
                "disturbance_mw": float(size) / 100.0 * fs.demand_mw[c],
                "nadir_hz": r.nadir_hz[c, d], "t_nadir_s": r.t_nadir_s[c, d],
                "zenith_hz": r.zenith_hz[c, d], "final_hz": r.final_hz[c, d],
                "shed_pct": r.shed_pct[c, d], "blocks_tripped": " ".join(tripped),
                "within_limits": bool(r.within_limits[c, d]),
            })
    return pd.DataFrame(rows)


def frequency_summary(fs: FrequencyStudy) -> dict:
    p = fs.params
    out = {
        "model": "low-order system frequency response (Anderson & Mirheydar, IEEE Trans. "
                 "Power Systems 5(3), 1990) with reheat governor and UFLS blocks",
        "parameters": {k: getattr(p, k) for k in p.__dataclass_fields__},
        "floor_hz": fs.sweep.floor_hz, "ceiling_hz": fs.sweep.ceiling_hz,
        "fine_sweep_pct": [float(FINE_SWEEP_PCT[0]), float(FINE_SWEEP_PCT[-1]),
                           float(FINE_SWEEP_PCT[1] - FINE_SWEEP_PCT[0])],
        "largest_covered_meaning": COVERED_MEANING,
        "integration_error_estimate_hz": float(np.nanmax(fs.sweep.error_estimate_hz)),
        "intervals": [],
        "cautions": list(CAUTIONS),
    }
    for c, label in enumerate(fs.labels):
        lc = fs.largest_covered_pct[c]
        out["intervals"].append({
            "interval": label, "local_time": fs.local_times[c],
            "demand_mw": float(fs.demand_mw[c]),
            "armed_pct": {b: float(v) for b, v in zip(fs.sweep.block_names, fs.armed_pct[c])},
            "total_armed_pct": float(fs.armed_pct[c].sum()),
            "largest_covered_pct": None if not np.isfinite(lc) else float(lc),
            "largest_covered_mw": None if not np.isfinite(lc) else
            float(lc) / 100.0 * float(fs.demand_mw[c]),
        })
    return out
