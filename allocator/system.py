"""The ``system`` sheet: aggregate constants of the frequency model (``SystemParams``).

Plain parameters with their checks; the model that uses them is :mod:`allocator.frequency`.
The workbook reader builds them from the sheet (:func:`system_params_from_mapping`), so the
reader does not depend on the model.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from .errors import InputError, Problem

#: illustrative frequency limits (floor, ceiling) in Hz by nominal frequency; the 50 Hz pair
#: matches common European generator ride-through limits (from memory), the 60 Hz pair is a
#: planning choice (common practice, no source).  Other nominals scale by the 50 Hz ratios.
DEFAULT_LIMITS_HZ: dict[float, tuple[float, float]] = {50.0: (48.0, 51.5), 60.0: (57.5, 61.8)}

def default_limits_hz(nominal_hz: float) -> tuple[float, float]:
    """Illustrative (floor_hz, ceiling_hz) for a nominal frequency (see DEFAULT_LIMITS_HZ)."""
    for nom, pair in DEFAULT_LIMITS_HZ.items():
        if abs(nominal_hz - nom) < 1e-9:
            return pair
    lo, hi = DEFAULT_LIMITS_HZ[50.0]
    return nominal_hz * lo / 50.0, nominal_hz * hi / 50.0


# --------------------------------------------------------------------------------------------
# parameters
# --------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class SystemParams:
    """Aggregate system constants for the SFR model (illustrative defaults).

    inertia_h_s      H, s, on the demand base (typical thermal system 3..6 s, from memory)
    damping_d_pu     D, pu power per pu frequency (load damping, 1..2 typical, from memory)
    droop_r_pu       R, governor droop, pu frequency per pu power (0.05 = 5 %)
    reheat_tr_s      TR, reheat time constant, s
    hp_fraction_fh   FH, fraction of power from the high-pressure turbine, 0..1
    mech_gain_km     Km, mechanical power gain (spinning reserve and de-rating), pu
    breaker_time_s   time from relay operation to breaker opening, s
    floor_hz         lowest acceptable frequency (default from :func:`default_limits_hz`)
    ceiling_hz       highest acceptable frequency (default from :func:`default_limits_hz`)
    disturbances_pct generation losses swept, % of demand
    rocof_window_s   measuring window of the RoCoF elements, s
    nominal_hz       f0

    The H, D, R, TR, FH and Km defaults are of the size of the example values used by
    Anderson & Mirheydar 1990 (from memory); they are illustrative, not a system study.
    """

    inertia_h_s: float = 4.0
    damping_d_pu: float = 1.0
    droop_r_pu: float = 0.05
    reheat_tr_s: float = 8.0
    hp_fraction_fh: float = 0.3
    mech_gain_km: float = 0.95
    breaker_time_s: float = 0.1
    floor_hz: float | None = None
    ceiling_hz: float | None = None
    disturbances_pct: tuple[float, ...] = (5.0, 10.0, 15.0, 20.0, 25.0, 30.0, 35.0, 40.0)
    rocof_window_s: float = 0.5
    nominal_hz: float = 50.0

    def __post_init__(self) -> None:
        floor, ceiling = default_limits_hz(float(self.nominal_hz))
        if self.floor_hz is None:
            object.__setattr__(self, "floor_hz", floor)
        if self.ceiling_hz is None:
            object.__setattr__(self, "ceiling_hz", ceiling)
        d = self.disturbances_pct
        d = (d,) if isinstance(d, (int, float)) else d
        object.__setattr__(self, "disturbances_pct", tuple(float(x) for x in d))
        if not (isinstance(self.nominal_hz, (int, float)) and math.isfinite(self.nominal_hz)
                and self.nominal_hz > 0):
            raise ValueError(f"nominal_hz must be a positive number, got {self.nominal_hz!r}")
        msgs = [m for key in SYSTEM_KEYS
                if (m := _check_value(key, getattr(self, key), float(self.nominal_hz)))]
        if msgs:
            raise ValueError("; ".join(msgs))


#: keys of the optional ``system`` sheet, in the order they are documented
SYSTEM_KEYS: tuple[str, ...] = (
    "inertia_h_s", "damping_d_pu", "droop_r_pu", "reheat_tr_s", "hp_fraction_fh",
    "mech_gain_km", "breaker_time_s", "floor_hz", "ceiling_hz", "disturbances_pct",
    "rocof_window_s",
)


def _check_value(key: str, value, nominal_hz: float) -> str | None:
    """Message if a parsed value is out of range, else None."""
    if key == "disturbances_pct":
        if len(value) == 0:
            return "disturbances_pct needs at least one value"
        bad = [v for v in value if not (math.isfinite(v) and 0.0 < v <= 100.0)]
        if bad:
            return f"disturbances_pct values must lie in (0, 100] % of demand, got {bad[0]:g}"
        return None
    if not math.isfinite(value):
        return f"{key} must be a finite number, got {value!r}"
    rules = {
        "inertia_h_s": (value > 0, "must be > 0 s"),
        "damping_d_pu": (value >= 0, "must be >= 0 pu"),
        "droop_r_pu": (value > 0, "must be > 0 pu"),
        "reheat_tr_s": (value > 0, "must be > 0 s"),
        "hp_fraction_fh": (0.0 <= value <= 1.0, "must lie between 0 and 1"),
        "mech_gain_km": (value > 0, "must be > 0 pu"),
        "breaker_time_s": (value >= 0, "must be >= 0 s"),
        "floor_hz": (0 < value < nominal_hz, f"must lie below the nominal {nominal_hz:g} Hz"),
        "ceiling_hz": (value > nominal_hz, f"must lie above the nominal {nominal_hz:g} Hz"),
        "rocof_window_s": (value > 0, "must be > 0 s"),
    }
    ok, msg = rules[key]
    return None if ok else f"{key} {msg}, got {value:g}"


def _parse_number(raw) -> float:
    if isinstance(raw, bool):
        raise ValueError
    if isinstance(raw, (int, float, np.integer, np.floating)):
        return float(raw)
    return float(str(raw).strip())


def system_params_from_mapping(mapping: Mapping[str, object], nominal_hz: float, file: str,
                               rows: Mapping[str, int] | None = None) -> SystemParams:
    """Build :class:`SystemParams` from the ``system`` sheet (key → value), defaults elsewhere.

    Keys are matched case-insensitively; a blank value (None or empty text) keeps the default.
    ``disturbances_pct`` takes a comma-separated list (or a single number).  Every bad key or
    value is collected and raised at once as :class:`~allocator.errors.InputError`, each
    problem naming ``sheet="system"``, ``column="value"`` and the row from ``rows`` if given.
    """
    rows = {str(k).strip().lower(): v for k, v in (rows or {}).items()}
    problems: list[Problem] = []
    values: dict[str, object] = {}

    def bad(key: str, message: str) -> None:
        problems.append(Problem(file, message, sheet="system", row=rows.get(key),
                                column="value"))

    for raw_key, raw in mapping.items():
        key = str(raw_key).strip().lower()
        if key not in SYSTEM_KEYS:
            bad(key, f"unknown key '{raw_key}'; known keys: {', '.join(SYSTEM_KEYS)}")
            continue
        if raw is None or (isinstance(raw, str) and not raw.strip()):
            continue
        try:
            if key == "disturbances_pct":
                if isinstance(raw, (list, tuple)):
                    parts = list(raw)
                elif isinstance(raw, str):
                    parts = [p for p in raw.split(",") if p.strip()]
                else:
                    parts = [raw]
                value: object = tuple(_parse_number(p) for p in parts)
            else:
                value = _parse_number(raw)
        except (TypeError, ValueError):
            what = "a comma-separated list of numbers" if key == "disturbances_pct" else "a number"
            bad(key, f"{key} must be {what}, got {raw!r}")
            continue
        msg = _check_value(key, value, float(nominal_hz))
        if msg:
            bad(key, msg)
            continue
        values[key] = value
    if problems:
        raise InputError(problems)
    return SystemParams(**values, nominal_hz=float(nominal_hz))
