"""Seeded synthetic distribution networks for the planner benchmark (invented demo data).

Builds :class:`allocator.domain.Study` and :class:`allocator.year.Year` objects directly, no
workbook: an hourly year (8,760 intervals, study time zone Europe/Berlin) of per-feeder net
load for N feeders of five classes with their own daily, weekly and seasonal shapes, rooftop
PV with a clear-sky-like bell that is wider and higher in summer, and per-feeder noise.

Everything here is made up: the shapes, the sizes, the rule fractions.  Nothing describes a
real network.

* classes: residential (evening peak, higher in winter), commercial (daytime on workdays,
  cooling in summer), industrial (flat, a little lower at weekends), rural (morning and
  evening peaks, a summer farm load), mixed (a blend of residential and commercial);
* rooftop PV on part of the residential, rural and mixed feeders, heavy enough on some that
  they export at sunny middays;
* hard rules: about 3 % priority feeders, 15 % direction-blocked relays, 3 % without relay,
  3 % with ``allowed_blocks`` restrictions, about 4 % of feeders in trip groups of 2–3;
* schemes: 4 blocks with target 10 % ± 2.5 pp (40 % in all) or 6 blocks with target 8 %
  ± 2.5 pp (48 % in all).
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pandas as pd

from allocator.domain import DAY_TYPES, UNARMED, Block, Feeder, Profiles, Settings, Study
from allocator.timegrid import day_type_index, study_intervals
from allocator.year import Year

CLASSES = ("residential", "commercial", "industrial", "rural", "mixed")
CLASS_P = (0.35, 0.20, 0.10, 0.20, 0.15)
PEAK_MW = {"residential": (2.0, 5.0), "commercial": (2.5, 7.0), "industrial": (4.0, 10.0),
           "rural": (1.2, 3.5), "mixed": (2.5, 6.0)}
PV_SHARE = {"residential": 0.5, "commercial": 0.2, "industrial": 0.1, "rural": 0.5,
            "mixed": 0.4}  # part of the class's feeders with rooftop PV
SEASONS = ("winter", "spring", "summer", "autumn")
MONTH_SEASON = np.array([0, 0, 1, 1, 1, 2, 2, 2, 3, 3, 3, 0])  # Dec-Feb winter, ...
YEAR = 2025
TZ = "Europe/Berlin"


def _bump(h, mu, sigma):
    d = (h - mu + 12.0) % 24.0 - 12.0
    return np.exp(-0.5 * (d / sigma) ** 2)


def class_shape(cls: str, hour: np.ndarray, doy: np.ndarray, day_type: np.ndarray
                ) -> np.ndarray:
    """Per-unit gross load shape ``[interval]`` for a feeder class (peak ≈ 1)."""
    h = hour + 0.5
    winter = 0.5 * (1 + np.cos(2 * np.pi * (doy - 15) / 365.0))  # 1 mid-Jan, 0 mid-Jul
    summer = 1.0 - winter
    wd = day_type == 0
    sat = day_type == 1
    if cls == "residential":
        v = (0.35 + 0.25 * _bump(h, 7.5, 1.5) * np.where(wd, 1.0, 0.6)
             + 0.25 * _bump(h, 11.0, 3.0) * np.where(wd, 0.2, 0.8)
             + 0.60 * _bump(h, 19.0, 2.2))
        v *= 0.72 + 0.28 * winter
    elif cls == "commercial":
        day = 1.0 / (1 + np.exp(-(h - 7.5) / 0.7)) / (1 + np.exp(-(18.5 - h) / 0.7))
        v = 0.25 + 0.75 * day * np.where(wd, 1.0, np.where(sat, 0.45, 0.12))
        v *= 0.85 + 0.15 * summer + 0.05 * winter
    elif cls == "industrial":
        v = 0.82 + 0.08 * _bump(h, 11.0, 4.0)
        v *= np.where(wd, 1.0, np.where(sat, 0.8, 0.7))
        v *= 0.95 + 0.05 * winter
    elif cls == "rural":
        v = 0.35 + 0.3 * _bump(h, 6.5, 1.5) + 0.45 * _bump(h, 19.5, 2.0)
        v += 0.25 * summer * _bump(h, 14.0, 3.5)  # farm load in summer
        v *= 0.8 + 0.2 * winter
    elif cls == "mixed":
        return 0.55 * class_shape("residential", hour, doy, day_type) + \
            0.45 * class_shape("commercial", hour, doy, day_type)
    else:  # pragma: no cover
        raise ValueError(cls)
    return v / 1.1


def pv_shape(hour: np.ndarray, doy: np.ndarray, daily_clear: np.ndarray) -> np.ndarray:
    """Clear-sky-like PV per unit ``[interval]``: a bell between sunrise and sunset (solar
    noon 13:00 local in summer time, 12:00 in winter) whose width and height follow the
    season; times a per-day clearness factor."""
    season = np.cos(2 * np.pi * (doy - 172) / 365.0)  # 1 at midsummer
    day_len = 12.0 + 4.0 * season
    noon = 12.5 + 0.5 * (season > 0)
    x = (hour + 0.5 - noon) / (day_len / 2.0)
    bell = np.cos(0.5 * np.pi * np.clip(x, -1.0, 1.0)) ** 1.5
    amp = 0.55 + 0.40 * (season + 1) / 2
    return amp * bell * daily_clear


def scheme(n_blocks: int) -> tuple[Block, ...]:
    target = {4: 10.0, 6: 8.0}[n_blocks]
    return tuple(Block(name=f"B{i + 1}", order=i + 1, pickup_hz=49.0 - 0.2 * i, delay_s=0.15,
                       rocof_hz_per_s=None, target_pct=target, min_pct=target - 2.5,
                       max_pct=target + 2.5) for i in range(n_blocks))


def settings(priority_policy: str = "last_block", interval_minutes: int = 60) -> Settings:
    return Settings(utility="Synthetic Netz", year=YEAR, timezone=TZ, nominal_hz=50.0,
                    interval_minutes=interval_minutes, latitude_deg=50.0, longitude_deg=10.0,
                    holiday_country=None, holiday_subdivision=None, demand_basis="feeders",
                    pv_derate=1.0, priority_policy=priority_policy,
                    compliance_rule="every_interval", compliance_percentile=None,
                    max_changes=None, solver_time_limit_s=60.0, mip_gap=1e-4)


#: the synthetic scenarios: (load scale, PV scale, clearness) — clearness "clear" = 1 every
#: day, "none" = no PV output, "random" = the seeded per-day clearness of the base network
SCENARIOS = {"clear_sky": (1.0, 1.0, "clear"), "no_pv": (1.0, 0.0, "none"),
             "weather": (1.0, 1.0, "random"), "growth": (1.05, 1.5, "clear")}


def make_network(n_feeders: int, n_blocks: int, seed: int = 0,
                 scenarios: tuple[str, ...] | None = None, interval_minutes: int = 60):
    """A synthetic (Study, Year) with every feeder unarmed in ``current_block``; with
    ``scenarios`` (names of :data:`SCENARIOS`) a (Study, tuple of Years), one per scenario,
    of the same feeders.  ``interval_minutes`` 60 (default), 30, 15, 10 or 5."""
    rng = np.random.default_rng(seed * 1_000_003 + n_feeders * 7 + n_blocks)
    iv = interval_minutes
    ts = study_intervals(YEAR, TZ, iv)
    local = ts.tz_convert(TZ)
    # shapes take the hour with +0.5 for the middle of an hourly interval; shift so that
    # hour + 0.5 is the middle of each interval of any length
    hour = (local.hour + local.minute / 60.0).to_numpy() + iv / 120.0 - 0.5
    doy = local.dayofyear.to_numpy().astype(float)
    dtype = day_type_index(local, set())
    season_idx = MONTH_SEASON[local.month.to_numpy() - 1]
    n_t = len(ts)
    days = (doy - 1).astype(int)
    clear = np.clip(rng.beta(5.0, 1.6, size=366), 0.15, 1.0)[days]
    pv_pu = pv_shape(hour, doy, clear)
    shapes = {c: class_shape(c, hour, doy, dtype) for c in CLASSES}

    cls = rng.choice(len(CLASSES), size=n_feeders, p=CLASS_P)
    blocks = scheme(n_blocks)
    names = [b.name for b in blocks]
    net = np.empty((n_feeders, n_t))
    gross_all = np.empty((n_feeders, n_t)) if scenarios else None
    pv_all = np.zeros(n_feeders)
    feeders = []
    # trip groups: about 4 % of feeders in groups of 2-3 consecutive feeders
    group_of = [None] * n_feeders
    i, g = 0, 0
    while i < n_feeders - 3:
        if rng.random() < 0.015:
            size = int(rng.integers(2, 4))
            for k in range(size):
                group_of[i + k] = f"TG{g:04d}"
            g += 1
            i += size
        else:
            i += 1
    for f in range(n_feeders):
        c = CLASSES[cls[f]]
        lo, hi = PEAK_MW[c]
        peak = float(np.exp(rng.uniform(np.log(lo), np.log(hi))))
        pv = 0.0
        if rng.random() < PV_SHARE[c]:
            # most PV is modest; about 1 in 4 PV feeders is export-size
            pv = peak * (rng.uniform(0.9, 1.8) if rng.random() < 0.25 else rng.uniform(0.1, 0.6))
        # per-feeder noise: slow (daily level) and fast (hourly) multiplicative parts
        daily = 1.0 + 0.06 * rng.standard_normal(366)[days]
        hourly = 1.0 + 0.04 * rng.standard_normal(n_t)
        shift = int(rng.integers(-1, 2)) * (60 // iv)  # up to an hour apart in timing
        gross = peak * np.roll(shapes[c], shift) * daily * hourly
        net[f] = gross - pv * pv_pu
        if gross_all is not None:
            gross_all[f] = gross
            pv_all[f] = pv
        u = rng.random()
        relay = "none" if u < 0.03 else ("direction_blocked" if u < 0.18 else "standard")
        priority = "hospital" if rng.random() < 0.03 else None
        allowed = None
        if rng.random() < 0.03:
            k = int(rng.integers(1, n_blocks))
            allowed = tuple(sorted(rng.choice(names, size=k, replace=False).tolist(),
                                   key=names.index))
        feeders.append(Feeder(feeder_id=f"F{f:05d}", substation=f"SUB{f // 25:03d}",
                              zone=None, profile=c, peak_mw=round(peak, 4),
                              pv_mw=round(pv, 4), relay=relay, priority=priority,
                              allowed_blocks=allowed, trip_group=group_of[f],
                              current_block=None, customers=int(peak * 200), row=f + 2))
    # a group shares a relay: give all members the first member's relay
    for f in range(1, n_feeders):
        if group_of[f] is not None and group_of[f] == group_of[f - 1]:
            feeders[f] = replace(feeders[f], relay=feeders[f - 1].relay)
    prof = Profiles(names=CLASSES, seasons=SEASONS,
                    values_pu=np.zeros((len(CLASSES), len(SEASONS), len(DAY_TYPES), 1440)),
                    month_season=MONTH_SEASON.copy())
    study = Study(path=f"synthetic-{n_feeders}x{n_blocks}-seed{seed}",
                  settings=settings(interval_minutes=iv),
                  blocks=blocks, feeders=tuple(feeders), profiles=prof)
    if scenarios:
        del net
        years = []
        for name in scenarios:
            load_s, pv_s, kind = SCENARIOS[name]
            shape = {"clear": pv_shape(hour, doy, np.ones(n_t)), "none": np.zeros(n_t),
                     "random": pv_pu}[kind]
            y_net = gross_all * load_s
            y_net -= (pv_all * pv_s)[:, None] * shape[None, :]
            dem = y_net.sum(axis=0)
            y_net.setflags(write=False)
            years.append(Year(ts, TZ, iv, study.feeder_ids, y_net, dem, shape, season_idx,
                              dtype.astype(np.int8), source="profiles", scenario=name,
                              scenario_info={"pv": kind, "pv_scale": pv_s,
                                             "load_scale": load_s, "year": YEAR}))
        return study, tuple(years)
    demand = net.sum(axis=0)
    net.setflags(write=False)
    demand.setflags(write=False)
    year = Year(ts, TZ, iv, study.feeder_ids, net, demand, pv_pu, season_idx,
                dtype.astype(np.int8), source="profiles",
                notes=("synthetic benchmark network (invented data)",))
    return study, year


def with_current(study: Study, block_idx: np.ndarray) -> Study:
    """The same study with ``current_block`` set from ``block_idx`` (UNARMED = none)."""
    names = study.block_names
    feeders = tuple(replace(f, current_block=names[int(b)] if b != UNARMED else None)
                    for f, b in zip(study.feeders, block_idx))
    return replace(study, feeders=feeders)


def spreadsheet_practice(study: Study, year: Year) -> np.ndarray:
    """The usual spreadsheet allocation: feeders (trip groups as one) sorted by annual mean
    load, largest first; each goes to the allowed block furthest below its target by annual
    mean share; stop when every block has reached its target.  Hard rules respected (relay
    none and excluded priority feeders stay unarmed, last_block priority feeders only in the
    last block, allowed_blocks, trip groups together)."""
    from allocator.armed import contribution_mw

    nb = len(study.blocks)
    target = np.array([b.target_pct for b in study.blocks])
    allowed_f = study.allowed_matrix()
    contrib = contribution_mw(year.net_mw, study.relay_code)
    mean_pct = 100.0 * contrib.mean(axis=1) / year.demand_mw.mean()
    groups = study.trip_groups()
    units: list[list[int]] = [sorted(m) for m in groups.values()]
    grouped = {i for m in units for i in m}
    units += [[i] for i in range(len(study.feeders)) if i not in grouped]
    u_mean = np.array([mean_pct[m].sum() for m in units])
    u_allowed = np.array([allowed_f[m].all(axis=0) for m in units])
    order = np.argsort(-u_mean, kind="stable")
    level = np.zeros(nb)
    out = np.full(len(study.feeders), UNARMED, dtype=np.intp)
    for u in order:
        if np.all(level >= target):
            break
        if u_mean[u] <= 0:
            continue
        gap = np.where(u_allowed[u], target - level, -np.inf)
        b = int(np.argmax(gap))
        if gap[b] <= 0:
            continue
        out[units[u]] = b
        level[b] += u_mean[u]
    return out


__all__ = ["make_network", "with_current", "spreadsheet_practice", "scheme"]
