"""Build the demo workbook for an invented utility, "Lindmark Regionalnetz".

Everything here is made up for the demo: the utility, the region of Lindmark, its
substations, the load shapes, the feeders and the five-block shedding scheme.  The script is
seeded, so ``python inputs_demo/make_demo.py`` (a wrapper around :func:`write_demo_workbook`)
rebuilds ``inputs_demo/lindmark.xlsx`` with the same content every time.

The ``current_block`` column is filled "the spreadsheet way": every block is topped up to its
target at the winter-workday evening peak, with no look at any other hour.  Block B2 was
filled mostly from the new PV-heavy housing estates and topped up with town-centre shops, so
on clear spring and summer weekend middays it sheds far less than its minimum even though it
looks right at the winter peak.  That is the problem the demo is meant to show.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

SEED = 20250417
SLUG = "lindmark"

UTILITY = "Lindmark Regionalnetz"
HEAVY_FRACTION = 0.5  # part of the estate residential feeders with export-size PV
B2_HEAVY_SHARE = 0.60  # part of B2's winter-peak target filled from those PV-heavy feeders
HOURS = np.arange(24)
T_MID = HOURS + 0.5  # each hourly value describes the interval starting at HH:00

SETTINGS: list[tuple[str, object]] = [
    ("utility", UTILITY),
    ("year", 2025),
    ("timezone", "Europe/Berlin"),
    ("nominal_hz", 50),
    ("interval_minutes", 60),
    ("latitude", 48.62),
    ("longitude", 12.35),
    ("holiday_country", "DE"),
    ("holiday_subdivision", "BY"),
    ("demand_basis", "feeders"),
    ("pv_derate", 0.8),
    ("priority_policy", "exclude"),
    ("compliance_rule", "every_interval"),
    ("max_changes", None),
    ("solver_time_limit_s", 60),
    ("mip_gap", 0.001),
    ("gap_fill", "profile"),
    ("max_substation_share_pct", None),
]

# Invented scheme: five blocks, 48.9 .. 48.1 Hz, about 46 % of demand in total.
# rocof_hz_per_s is a magnitude: the block may also trip early when frequency falls faster,
# once it is below rocof_arm_hz (the workbook requires the one with the other).
BLOCKS = pd.DataFrame(
    [
        # block, order, pickup_hz, delay_s, rocof_hz_per_s, rocof_arm_hz, target, min, max
        ("B1", 1, 48.9, 0.15, 0.7, 49.5, 10.0, 7.5, 12.5),
        ("B2", 2, 48.7, 0.15, None, None, 10.0, 7.5, 12.5),
        ("B3", 3, 48.5, 0.20, None, None, 9.0, 6.5, 11.5),
        ("B4", 4, 48.3, 0.25, None, None, 9.0, 6.5, 11.5),
        ("B5", 5, 48.1, 0.30, None, None, 8.0, 6.0, 10.0),
    ],
    columns=["block", "order", "pickup_hz", "delay_s", "rocof_hz_per_s", "rocof_arm_hz",
             "target_pct", "min_pct", "max_pct"],
)

SEASONS = pd.DataFrame(
    [("winter", "12,1,2"), ("spring", "3,4,5"), ("summer", "6,7,8"), ("autumn", "9,10,11")],
    columns=["season", "months"],
)
SEASON_NAMES = list(SEASONS["season"])
# Switching periods for the remotely switchable feeders: two seasons × day/night (invented).
PERIODS = pd.DataFrame(
    [("summer_day", "4,5,6,7,8,9", "", "07:00", "19:00"),
     ("summer_night", "4,5,6,7,8,9", "", "19:00", "07:00"),
     ("winter_day", "10,11,12,1,2,3", "", "07:00", "19:00"),
     ("winter_night", "10,11,12,1,2,3", "", "19:00", "07:00")],
    columns=["period", "months", "day_types", "from", "to"],
)
#: feeders whose relay the control room can switch by schedule (chosen without the random
#: stream, so the rest of the workbook is unchanged): the PV-richest plain feeders
N_REMOTE = 12
DAY_TYPES = ["workday", "saturday", "sunday"]

# (name, code, zone, character, number of feeders)
SUBSTATIONS = [
    ("Quellhain", "QHN", "Nordmark", "urban", 26),
    ("Ostwiesel", "OWS", "Nordmark", "estate", 24),
    ("Tannbruck", "TNB", "Nordmark", "industrial", 20),
    ("Rabenholm", "RBH", "Nordmark", "rural", 18),
    ("Silberau", "SLA", "Talgrund", "urban", 25),
    ("Kranzfeld", "KRF", "Talgrund", "estate", 23),
    ("Hollermoor", "HLM", "Talgrund", "industrial", 21),
    ("Wendlach", "WDL", "Talgrund", "rural", 19),
    ("Lerchenstieg", "LST", "Hochfeld", "estate", 22),
    ("Steinquell", "SQL", "Hochfeld", "urban", 22),
    ("Mirnau", "MRN", "Hochfeld", "rural", 20),
]

# profile mix per substation character
MIX = {
    "urban": {"residential": 0.40, "commercial": 0.32, "mixed": 0.28},
    "estate": {"residential": 0.70, "mixed": 0.15, "commercial": 0.07, "rural": 0.08},
    "industrial": {"industrial": 0.50, "commercial": 0.20, "mixed": 0.15, "residential": 0.15},
    "rural": {"rural": 0.62, "residential": 0.22, "mixed": 0.10, "industrial": 0.06},
}
PEAK_RANGE = {"residential": (2.2, 5.5), "commercial": (2.5, 7.0), "industrial": (4.0, 11.0),
              "rural": (1.4, 3.8), "mixed": (2.5, 6.0)}
PV_RATIO = {"residential": (0.08, 0.26), "commercial": (0.04, 0.15), "industrial": (0.03, 0.12),
            "rural": (0.10, 0.35), "mixed": (0.06, 0.20)}
CUSTOMERS_PER_MW = {"residential": (330, 450), "commercial": (45, 90), "industrial": (2, 8),
                    "rural": (220, 320), "mixed": (150, 250)}


# ---- load shapes -------------------------------------------------------------------------
def bump(t: np.ndarray, mu: float, sigma: float) -> np.ndarray:
    """Gaussian bump on the 24-hour circle."""
    d = (t - mu + 12.0) % 24.0 - 12.0
    return np.exp(-0.5 * (d / sigma) ** 2)


def plateau(t: np.ndarray, start: float, end: float, k: float) -> np.ndarray:
    """Smooth 'on between start and end' step made of two logistic edges."""
    return 1.0 / (1.0 + np.exp(-(t - start) / k)) / (1.0 + np.exp(-(end - t) / k))


def residential(season: str, day: str) -> np.ndarray:
    level = {"winter": 1.0, "spring": 0.80, "summer": 0.70, "autumn": 0.86}[season]
    late = {"winter": 0.0, "spring": 0.6, "summer": 1.3, "autumn": 0.3}[season]
    t = T_MID
    if day == "workday":
        shape = 0.30 + 0.30 * bump(t, 7.0, 1.1) + 0.12 * bump(t, 12.5, 2.0) \
            + 0.62 * bump(t, 19.0 + late, 1.9)
    elif day == "saturday":
        shape = 0.32 + 0.22 * bump(t, 9.0, 1.6) + 0.25 * bump(t, 12.5, 2.2) \
            + 0.58 * bump(t, 18.8 + late, 2.0)
    else:
        shape = 0.31 + 0.15 * bump(t, 9.5, 1.6) + 0.30 * bump(t, 12.3, 1.8) \
            + 0.55 * bump(t, 18.7 + late, 2.1)
    if season == "winter":
        shape = shape + 0.06 * bump(t, 6.5, 1.4)  # heat pumps warming up before dawn
    return level * shape


def commercial(season: str, day: str) -> np.ndarray:
    level = {"winter": 1.0, "spring": 0.88, "summer": 0.90, "autumn": 0.91}[season]
    t = T_MID
    if day == "workday":
        shape = 0.28 + 0.70 * plateau(t, 7.5, 18.5, 1.2) + 0.05 * bump(t, 13.0, 1.5)
    elif day == "saturday":
        shape = 0.26 + 0.38 * plateau(t, 8.5, 16.5, 1.0)
    else:
        shape = 0.24 + 0.10 * plateau(t, 10.0, 17.0, 1.0)
    if season == "summer":  # cooling in the afternoon
        shape = shape + 0.10 * bump(t, 15.0, 3.0) * (shape - 0.2)
    return level * shape


def industrial(season: str, day: str) -> np.ndarray:
    level = {"winter": 1.0, "spring": 0.96, "summer": 0.93, "autumn": 0.97}[season]
    t = T_MID
    if day == "workday":
        shape = 0.62 + 0.32 * plateau(t, 5.5, 22.0, 1.5) + 0.02 * np.cos(2 * np.pi * t / 8.0)
    elif day == "saturday":
        shape = 0.58 + 0.14 * plateau(t, 6.0, 14.0, 1.0)
    else:
        shape = 0.50 + 0.02 * bump(t, 12.0, 3.0)
    return level * shape


def rural(season: str, day: str) -> np.ndarray:
    level = {"winter": 1.0, "spring": 0.76, "summer": 0.66, "autumn": 0.84}[season]
    t = T_MID
    if day == "workday":
        shape = 0.28 + 0.42 * bump(t, 6.8, 1.3) + 0.12 * bump(t, 12.5, 2.5) \
            + 0.58 * bump(t, 19.3, 2.0)
    elif day == "saturday":
        shape = 0.30 + 0.35 * bump(t, 7.8, 1.6) + 0.18 * bump(t, 12.5, 2.5) \
            + 0.55 * bump(t, 19.0, 2.1)
    else:
        shape = 0.30 + 0.30 * bump(t, 8.3, 1.7) + 0.20 * bump(t, 12.3, 2.3) \
            + 0.55 * bump(t, 18.9, 2.1)
    return level * shape


def _normalised(fn) -> dict[tuple[str, str], np.ndarray]:
    shapes = {(s, d): fn(s, d) for s in SEASON_NAMES for d in DAY_TYPES}
    scale = shapes[("winter", "workday")].max()
    return {k: v / scale for k, v in shapes.items()}


def build_profiles() -> dict[str, dict[tuple[str, str], np.ndarray]]:
    out = {
        "residential": _normalised(residential),
        "commercial": _normalised(commercial),
        "industrial": _normalised(industrial),
        "rural": _normalised(rural),
    }
    blend = {k: 0.55 * out["residential"][k] + 0.45 * out["commercial"][k]
             for k in out["residential"]}
    scale = blend[("winter", "workday")].max()
    out["mixed"] = {k: v / scale for k, v in blend.items()}
    return out


def profiles_sheet(prof) -> pd.DataFrame:
    rows = []
    for name, shapes in prof.items():
        for s in SEASON_NAMES:
            for d in DAY_TYPES:
                for h, v in zip(HOURS, shapes[(s, d)]):
                    rows.append((name, s, d, f"{h:02d}:00", round(float(v), 4)))
    return pd.DataFrame(rows, columns=["profile", "season", "day_type", "time", "value"])


# ---- feeders -----------------------------------------------------------------------------
def _substation_kinds(rng: np.random.Generator, character: str, n: int) -> list[str]:
    """The profiles of a substation's ``n`` feeders in the mix of its ``character``,
    shuffled."""
    classes = list(MIX[character])
    p = np.array([MIX[character][c] for c in classes])
    counts = np.floor(p * n).astype(int)
    while counts.sum() < n:  # hand out the remainder by largest share
        counts[np.argmax(p * n - counts)] += 1
    kinds = [c for c, k in zip(classes, counts) for _ in range(k)]
    return list(rng.permutation(kinds))


def _base_feeders(rng: np.random.Generator, prof) -> pd.DataFrame:
    """Every substation's feeders with peak and PV (MW) and customers, all on standard
    relays; ``_heavy`` marks the estate feeders with export-size PV."""
    # lowest residential value around a spring weekend midday, per unit of peak
    spring_midday = min(prof["residential"][("spring", d)][11:14].min()
                        for d in ("saturday", "sunday"))
    rows = []
    for name, code, zone, character, n in SUBSTATIONS:
        kinds = _substation_kinds(rng, character, n)
        for i, kind in enumerate(kinds, start=1):
            lo, hi = PEAK_RANGE[kind]
            peak = round(float(rng.uniform(lo, hi)), 2)
            heavy = False
            if kind == "residential" and character == "estate" and rng.random() < HEAVY_FRACTION:
                # new estates: rooftop PV large enough to export on clear spring middays
                heavy = True
                pv = peak * spring_midday / 0.8 * rng.uniform(1.3, 1.9)
            else:
                pv = peak * rng.uniform(*PV_RATIO[kind])
            cust = int(round(peak * rng.uniform(*CUSTOMERS_PER_MW[kind])))
            rows.append(dict(
                feeder_id=f"{code}-{i:02d}", substation=name, zone=zone, profile=kind,
                peak_mw=peak, pv_mw=round(float(pv), 2), relay="standard", priority=None,
                allowed_blocks=None, trip_group=None, current_block=None,
                customers=max(cust, 1), _heavy=heavy))
    return pd.DataFrame(rows)


def _mark_priority(rng: np.random.Generator, df: pd.DataFrame) -> None:
    """Priority sites: invented hospitals, a dialysis centre / care homes, waterworks."""
    priority = [("QHN", "hospital", "commercial"), ("SLA", "hospital", "mixed"),
                ("SQL", "life_support", "commercial"), ("KRF", "life_support", "residential"),
                ("TNB", "water", "industrial"), ("MRN", "water", "rural")]
    for code, cat, kind in priority:
        cand = df[df.feeder_id.str.startswith(code) & (df.profile == kind) & df.priority.isna()
                  & ~df._heavy]
        idx = cand.index[0]
        df.loc[idx, "priority"] = cat
        df.loc[idx, "customers"] = int(rng.integers(1, 6))


def _mark_relays(rng: np.random.Generator, df: pd.DataFrame) -> None:
    """Relays that cannot be armed, trip groups, and direction-blocked relays."""
    free = df.priority.isna() & ~df._heavy

    # relays that cannot be armed (old breakers without a UFLS relay)
    none_idx = rng.choice(df.index[free], size=6, replace=False)
    df.loc[none_idx, "relay"] = "none"

    # trip groups: 2-3 feeders at one substation behind one relay
    groups = [("TG1", "QHN", 3), ("TG2", "HLM", 2), ("TG3", "RBH", 2), ("TG4", "SLA", 3)]
    for gid, code, size in groups:
        ok = df.feeder_id.str.startswith(code) & df.priority.isna() & (df.relay == "standard") \
            & df.trip_group.isna() & ~df._heavy
        members = rng.choice(df.index[ok], size=size, replace=False)
        df.loc[members, "trip_group"] = gid

    # direction-blocked relays, about 15 %: mostly where PV is large
    plain = (df.relay == "standard") & df.priority.isna() & df.trip_group.isna()
    pv_ratio = df.pv_mw / df.peak_mw
    weights = np.where(plain, 0.2 + pv_ratio, 0.0)
    n_db = int(round(0.15 * len(df)))
    db_idx = rng.choice(df.index, size=n_db, replace=False, p=weights / weights.sum())
    df.loc[db_idx, "relay"] = "direction_blocked"


def _mark_allowed_blocks(rng: np.random.Generator, df: pd.DataFrame) -> None:
    """allowed_blocks: some large industrial feeders only in the last two blocks, some
    commercial ones not in the first two, one feeder exempt by contract."""
    free = df.priority.isna() & (df.relay != "none") & df.trip_group.isna() & ~df._heavy
    ind = df.index[free & (df.profile == "industrial")]
    df.loc[rng.choice(ind, size=2, replace=False), "allowed_blocks"] = "B4,B5"
    com = df.index[free & (df.profile == "commercial")]
    df.loc[rng.choice(com, size=2, replace=False), "allowed_blocks"] = "B3,B4,B5"
    rest = df.index[free & df.allowed_blocks.isna() & (df.profile == "mixed")]
    df.loc[rng.choice(rest, size=1), "allowed_blocks"] = "none"


def build_feeders(rng: np.random.Generator, prof) -> pd.DataFrame:
    """The demo's feeders sheet (with the helper column ``_heavy``), drawn from ``rng``."""
    df = _base_feeders(rng, prof)
    _mark_priority(rng, df)
    _mark_relays(rng, df)
    _mark_allowed_blocks(rng, df)
    return df


# ---- the spreadsheet-way allocation --------------------------------------------------------
def spreadsheet_allocation(rng: np.random.Generator, df: pd.DataFrame, prof) -> None:
    winter_sum = np.zeros(24)
    for kind, shapes in prof.items():
        winter_sum += df.loc[df.profile == kind, "peak_mw"].sum() * shapes[("winter", "workday")]
    hour = int(np.argmax(winter_sum))  # evening, after sunset: no PV in the sum
    load = np.array([peak * prof[kind][("winter", "workday")][hour]
                     for peak, kind in zip(df.peak_mw, df.profile)])
    demand = load.sum()
    target = {b: t / 100 * demand for b, t in zip(BLOCKS.block, BLOCKS.target_pct)}
    filled = dict.fromkeys(target, 0.0)
    tol = 0.002 * demand

    armable = df.priority.isna() & (df.relay != "none") & (df.allowed_blocks != "none")
    # units: a trip group moves as one
    units: list[list[int]] = []
    for _, g in df[armable & df.trip_group.notna()].groupby("trip_group"):
        units.append(list(g.index))
    units += [[i] for i in df.index[armable & df.trip_group.isna()]]

    def allowed(u: list[int]) -> list[str]:
        a = df.loc[u[0], "allowed_blocks"]
        return list(target) if pd.isna(a) else a.split(",")

    def place(u: list[int], block: str) -> None:
        df.loc[u, "current_block"] = block
        filled[block] += load[u].sum()

    # B2 first, from the PV-heavy estate feeders (largest PV ratio first)
    heavy = sorted((u for u in units if len(u) == 1 and df.loc[u[0], "_heavy"]),
                   key=lambda u: -df.loc[u[0], "pv_mw"] / df.loc[u[0], "peak_mw"])
    for u in heavy:
        if filled["B2"] + load[u].sum() <= B2_HEAVY_SHARE * target["B2"] + tol:
            place(u, "B2")
    # estate feeders that did not fit in B2 are newer connections, not yet armed.
    # B2 is topped up with town-centre commercial feeders (busy on workdays only)
    shops = [u for u in units if len(u) == 1 and df.loc[u[0], "profile"] == "commercial"
             and pd.isna(df.loc[u[0], "allowed_blocks"])]
    for k in rng.permutation(len(shops)):
        u = shops[k]
        if filled["B2"] + load[u].sum() <= target["B2"] + tol:
            place(u, "B2")

    # the rest: restricted feeders first, then a shuffled list, into the emptiest block
    rest = [u for u in units if not df.loc[u[0], "_heavy"]
            and pd.isna(df.loc[u[0], "current_block"])]
    restricted = [u for u in rest if not pd.isna(df.loc[u[0], "allowed_blocks"])]
    others = [u for u in rest if pd.isna(df.loc[u[0], "allowed_blocks"])]
    order = restricted + [others[i] for i in rng.permutation(len(others))]
    for u in order:
        gaps = {b: target[b] - filled[b] for b in allowed(u)}
        b = max(gaps, key=gaps.get)
        if load[u].sum() <= gaps[b] + tol:
            place(u, b)


# Invented, illustrative system constants for the frequency indication: a small system with
# little governor headroom (Km), where the UFLS blocks, not the governors, arrest large losses.
SYSTEM = pd.DataFrame([
    ("inertia_h_s", 3.0), ("damping_d_pu", 1.0), ("droop_r_pu", 0.05), ("reheat_tr_s", 8.0),
    ("hp_fraction_fh", 0.3), ("mech_gain_km", 0.3), ("breaker_time_s", 0.1),
    ("floor_hz", 48.0), ("ceiling_hz", 51.5), ("disturbances_pct", "10,20,30,35,40,45"),
    ("rocof_window_s", 0.5),
], columns=["key", "value"])


def mark_remote_switch(df: pd.DataFrame) -> None:
    """``remote_switch`` yes for the :data:`N_REMOTE` feeders with the largest PV per peak
    among standard relays outside trip groups and priority sites (invented)."""
    ok = (df.relay == "standard") & df.trip_group.isna() & df.priority.isna() \
        & df.allowed_blocks.isna()
    ratio = (df.pv_mw / df.peak_mw).where(ok, -1.0)
    pick = ratio.sort_values(ascending=False, kind="stable").index[:N_REMOTE]
    df["remote_switch"] = None
    df.loc[pick, "remote_switch"] = "yes"


def write_demo_workbook(folder: Path) -> Path:
    """Write ``<folder>/lindmark.xlsx`` and return its path."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    out = folder / f"{SLUG}.xlsx"
    rng = np.random.default_rng(SEED)
    prof = build_profiles()
    feeders = build_feeders(rng, prof)
    spreadsheet_allocation(rng, feeders, prof)
    mark_remote_switch(feeders)
    feeders = feeders.drop(columns="_heavy")

    settings = pd.DataFrame(SETTINGS, columns=["key", "value"])
    with pd.ExcelWriter(out, engine="openpyxl") as xl:
        settings.to_excel(xl, sheet_name="settings", index=False)
        BLOCKS.to_excel(xl, sheet_name="blocks", index=False)
        feeders.to_excel(xl, sheet_name="feeders", index=False)
        profiles_sheet(prof).to_excel(xl, sheet_name="profiles", index=False)
        SEASONS.to_excel(xl, sheet_name="seasons", index=False)
        SYSTEM.to_excel(xl, sheet_name="system", index=False)
        PERIODS.to_excel(xl, sheet_name="periods", index=False)
        # fixed document dates so a rebuild is byte-for-byte the same file
        import datetime as _dt

        fixed = _dt.datetime(2025, 1, 1)
        xl.book.properties.created = fixed
        xl.book.properties.modified = fixed
    return out
