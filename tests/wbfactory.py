"""Build small study workbooks for tests (openpyxl), overriding any table.

Tables are lists of dicts (one per row) or, for ``settings``, a dict.  ``write_workbook`` writes
exactly what it is given, so a test can drop a column or a sheet to make a bad input.
The data here is invented test data, not a reference.
"""

from __future__ import annotations

from pathlib import Path

import openpyxl

BASE_SETTINGS = {
    "utility": "Test Utility",
    "year": 2025,
    "timezone": "Europe/Berlin",
    "nominal_hz": 50,
    "interval_minutes": 60,
    "latitude": 50.0,
    "longitude": 10.0,
    "holiday_country": "DE",
    "demand_basis": "feeders",
    "pv_derate": 0.8,
    "priority_policy": "exclude",
    "compliance_rule": "every_interval",
    "solver_time_limit_s": 30,
    "mip_gap": 0.0,
}

BASE_BLOCKS = [
    {"block": "S1", "order": 1, "pickup_hz": 49.0, "delay_s": 0.1, "rocof_hz_per_s": None,
     "target_pct": 10, "min_pct": 8, "max_pct": 12},
    {"block": "S2", "order": 2, "pickup_hz": 48.7, "delay_s": 0.1, "rocof_hz_per_s": None,
     "target_pct": 10, "min_pct": 8, "max_pct": 12},
]


def flat_profiles(names=("res", "com"), seasons=("all",), value=1.0, step_minutes=60):
    rows = []
    for p in names:
        for s in seasons:
            for d in ("workday", "saturday", "sunday"):
                for m in range(0, 1440, step_minutes):
                    v = value(p, s, d, m) if callable(value) else value
                    rows.append({"profile": p, "season": s, "day_type": d,
                                 "time": f"{m // 60:02d}:{m % 60:02d}", "value": v})
    return rows


def base_feeders(n=10):
    rows = []
    for i in range(n):
        rows.append({"feeder_id": f"F{i:02d}", "substation": f"SUB{i % 2}", "zone": "Z",
                     "profile": "res" if i % 2 else "com", "peak_mw": 1.0 + i, "pv_mw": 0.0,
                     "relay": "standard", "priority": None, "allowed_blocks": None,
                     "trip_group": None, "current_block": None, "customers": 100})
    return rows


def write_workbook(path: Path, settings=None, blocks=None, feeders=None, profiles=None,
                   seasons=None, extra_sheets=None, drop_sheets=(), sheet_order=None) -> Path:
    settings = dict(BASE_SETTINGS if settings is None else settings)
    tables = {
        "settings": [{"key": k, "value": v} for k, v in settings.items()],
        "blocks": BASE_BLOCKS if blocks is None else blocks,
        "feeders": base_feeders() if feeders is None else feeders,
        "profiles": flat_profiles() if profiles is None else profiles,
        "seasons": [{"season": "all", "months": "1,2,3,4,5,6,7,8,9,10,11,12"}]
        if seasons is None else seasons,
    }
    tables.update(extra_sheets or {})
    wb = openpyxl.Workbook()
    wb.remove(wb.active)
    for name in sheet_order or list(tables):
        if name in drop_sheets:
            continue
        rows = tables[name]
        ws = wb.create_sheet(name)
        cols: list[str] = []
        for r in rows:
            for k in r:
                if k not in cols:
                    cols.append(k)
        ws.append(cols)
        for r in rows:
            ws.append([r.get(c) for c in cols])
    path = Path(path)
    wb.save(path)
    return path
