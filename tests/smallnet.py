"""A small invented study for the output tests (console layout, vocabulary, time format,
output layout, run record): quick to check, plan and run the frequency indication on.

36 feeders: twenty without PV (1 to 2.9 MW) and sixteen small ones whose PV (0.7 MW)
exceeds their peak load (0.6 MW), so ``validate`` has sixteen warnings, more than the console lists;
the current allocation puts PV-rich feeders in S1, which leaves S1 below its band on sunny
middays (``clear_sky``), so there are windows outside the band.  Invented test data.
"""

from __future__ import annotations

from pathlib import Path

from wbfactory import BASE_SETTINGS, flat_profiles, write_workbook


def _shape(p, s, d, m):
    """Invented daily shapes per unit of peak: 'res' peaks in the evening, 'com' by day."""
    h = m / 60
    if p == "res":
        return 0.45 + (0.45 if 17 <= h < 22 else 0.0)
    return 0.35 + (0.55 if 8 <= h < 18 and d == "workday" else 0.1)


def feeders() -> list[dict]:
    rows = []
    for i in range(36):
        big = i < 20
        rows.append({"feeder_id": f"F{i:02d}", "substation": f"SUB{i % 3}", "zone": "Z",
                     "profile": "res" if i % 2 else "com",
                     "peak_mw": round(1.0 + 0.1 * i, 1) if big else 0.6,
                     "pv_mw": 0.0 if big else 0.7,
                     "relay": "standard", "priority": None, "allowed_blocks": None,
                     "trip_group": None, "current_block": None, "customers": 100 + i})
    for i in (0, 2, 20, 22, 24):  # 'com' with PV feeders that export at sunny middays
        rows[i]["current_block"] = "S1"
    for i in (3, 5):  # 'res'
        rows[i]["current_block"] = "S2"
    return rows


def write_small_study(folder: Path, name: str = "small.xlsx", settings: dict | None = None,
                      **kw) -> Path:
    s = dict(BASE_SETTINGS)
    s.update(settings or {})
    return write_workbook(Path(folder) / name, settings=s, feeders=kw.pop("feeders", None)
                          or feeders(), profiles=flat_profiles(value=_shape), **kw)
