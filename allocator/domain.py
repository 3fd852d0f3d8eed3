"""The study as read from the workbook: plain, frozen dataclasses.

Nothing here reads files; :mod:`allocator.workbook` builds these objects and validates them.
Per-feeder values are also exposed as numpy arrays (``Study.peak_mw`` etc.) in feeder order,
the order of the ``feeders`` sheet, which is the row order of every ``[feeder, interval]`` array.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import cached_property

import numpy as np

DAY_TYPES: tuple[str, ...] = ("workday", "saturday", "sunday")
RELAY_KINDS: tuple[str, ...] = ("none", "standard", "direction_blocked")
#: integer codes used in arrays: index into RELAY_KINDS
RELAY_NONE, RELAY_STANDARD, RELAY_DIRECTION_BLOCKED = 0, 1, 2
UNARMED = -1
MINUTES_PER_DAY = 1440


@dataclass(frozen=True)
class FeederFlag:
    """A data-quality note on one feeder's series (metered path)."""

    feeder_id: str
    flag: str  # e.g. "gaps_filled", "flat_lined", "all_zero", "out_of_range", "no_metered_data"
    detail: str


@dataclass(frozen=True)
class Settings:
    """The ``settings`` sheet, typed.  Percentages are percent of demand."""

    utility: str
    year: int
    timezone: str
    nominal_hz: float
    interval_minutes: int
    latitude_deg: float
    longitude_deg: float
    holiday_country: str | None
    holiday_subdivision: str | None
    demand_basis: str  # "feeders" | "metered_total"
    pv_derate: float
    priority_policy: str  # "exclude" | "last_block"
    compliance_rule: str  # "every_interval" | "percentile" | "mean"
    compliance_percentile: float | None  # P for "percentile:P"
    max_changes: int | None
    solver_time_limit_s: float
    mip_gap: float
    gap_fill: str = "profile"  # "profile" | "interpolate" | "error"
    max_substation_share_pct: float | None = None
    #: level 3 of the planner may let the mean deviation from target rise by this % of
    #: level 2's value to save relay changes (0 = strictly lexicographic)
    deviation_tolerance_pct: float = 10.0
    #: the planner keeps every block within [min + margin, max − margin] (pp of demand)
    band_margin_pp: float = 0.0
    #: planner objective order: "fewest_changes" | "closest_to_target"
    objective: str = "fewest_changes"
    #: "allow" | "avoid": may a new plan arm exporting feeders on standard relays
    exporting_standard_relays: str = "allow"
    #: fixed plane of the weather-year PV (degrees; azimuth None = equator-facing)
    pv_tilt_deg: float = 0.0
    pv_azimuth_deg: float | None = None
    #: hard caps on the switched plan (None = no cap): feeders given more than one block
    #: over the periods, and switching operations per calendar year
    max_switched_feeders: int | None = None
    max_switch_operations_per_year: int | None = None
    #: "report" (the shares if the switching stops are reported) or "required" (a schedule
    #: that leaves a block out of band if the switching stops in some period is not used)
    fail_safe: str = "report"
    #: a weather file's site farther than this from the study site (km), or keeping another
    #: standard time, is a warning; with weather_strict an error
    weather_max_distance_km: float = 100.0
    weather_strict: bool = False

    @property
    def rule_text(self) -> str:
        if self.compliance_rule == "percentile":
            return f"percentile:{self.compliance_percentile:g}"
        return self.compliance_rule


PV_KINDS: tuple[str, ...] = ("clear_sky", "none", "weather")


@dataclass(frozen=True)
class Scenario:
    """One year to judge a plan on (the ``scenarios`` sheet, or the defaults).

    ``pv``: ``clear_sky`` (clear sky every day), ``none`` (no PV output: an overcast year) or
    ``weather`` (the irradiance year in ``weather_file``).  ``pv_scale`` multiplies every
    feeder's ``pv_mw``, ``load_scale`` every ``peak_mw`` (growth until the next review);
    ``year`` is the calendar year built (its own weekdays, holidays and DST days).
    """

    name: str
    pv: str
    year: int
    pv_scale: float = 1.0
    load_scale: float = 1.0
    weather_file: str | None = None
    row: int | None = None  # row in the scenarios sheet (None: a default scenario)

    @property
    def pv_text(self) -> str:
        return f"weather:{self.weather_file}" if self.pv == "weather" else self.pv


def default_scenarios(year: int) -> tuple[Scenario, ...]:
    """Without a ``scenarios`` sheet: clear-sky PV and no PV output, both in the study year.
    Clear sky gives the lowest netted load on PV-rich feeders (the low edge of a band);
    no PV the highest on the others, so the two bracket the weather in between."""
    return (Scenario("clear_sky", "clear_sky", year), Scenario("no_pv", "none", year))


@dataclass(frozen=True)
class Block:
    """One UFLS block (stage).  ``order`` 1 trips first (highest pickup frequency)."""

    name: str
    order: int
    pickup_hz: float
    delay_s: float
    rocof_hz_per_s: float | None
    target_pct: float
    min_pct: float
    max_pct: float
    rocof_arm_hz: float | None = None


@dataclass(frozen=True)
class Feeder:
    """One feeder breaker.  ``allowed_blocks``: None = any block; () = none."""

    feeder_id: str
    substation: str
    zone: str | None
    profile: str
    peak_mw: float
    pv_mw: float
    relay: str  # one of RELAY_KINDS
    priority: str | None
    allowed_blocks: tuple[str, ...] | None
    trip_group: str | None
    current_block: str | None
    customers: int | None
    row: int = 0  # row in the feeders sheet (header = 1)
    #: the control room can change this feeder's block by schedule (``remote_switch`` yes)
    remote_switch: bool = False


@dataclass(frozen=True)
class Period:
    """One row of the ``periods`` sheet: the months, day types (indices into DAY_TYPES)
    and local wall-clock minutes ``[from_min, to_min)`` it covers; ``to_min <= from_min``
    wraps past midnight (equal: the whole day)."""

    name: str
    months: tuple[int, ...]
    day_types: tuple[int, ...]
    from_min: int
    to_min: int
    row: int | None = None  # row in the periods sheet (None: the implicit single period)


#: without a ``periods`` sheet: one period covering the whole year
WHOLE_YEAR = Period("all_year", tuple(range(1, 13)), (0, 1, 2), 0, 0)


@dataclass(frozen=True)
class Profiles:
    """Per-unit load shapes at one-minute resolution.

    ``values_pu[profile, season, day_type, minute]`` is the per-unit value (of the feeder's
    ``peak_mw``) in force at that minute of the local day; the workbook's own resolution is
    expanded by holding each value for its interval, so averaging back to any interval length
    that divides a day reproduces "hold if coarser, average if finer".
    """

    names: tuple[str, ...]
    seasons: tuple[str, ...]
    values_pu: np.ndarray  # [profile, season, day_type, minute]
    month_season: np.ndarray  # [12] index into seasons, month 1 at position 0
    resolution_minutes: dict[str, int] = field(default_factory=dict)

    def index(self, name: str) -> int:
        return self.names.index(name)


@dataclass(frozen=True)
class Study:
    """Everything one workbook says."""

    path: str
    settings: Settings
    blocks: tuple[Block, ...]  # sorted by order
    feeders: tuple[Feeder, ...]
    profiles: Profiles
    system: dict[str, object] = field(default_factory=dict)  # {"values": {...}, "rows": {...}}
    warnings: tuple[str, ...] = ()
    #: the years a plan is judged on; empty = :func:`default_scenarios` of the study year
    scenario_list: tuple[Scenario, ...] = ()
    #: the ``periods`` sheet; empty = one period, the whole year
    period_list: tuple[Period, ...] = ()

    @cached_property
    def periods(self) -> tuple[Period, ...]:
        return self.period_list or (WHOLE_YEAR,)

    @cached_property
    def period_names(self) -> tuple[str, ...]:
        return tuple(p.name for p in self.periods)

    @cached_property
    def is_switchable(self) -> np.ndarray:
        """``[feeder]`` bool: ``remote_switch`` yes and a relay that can be armed."""
        return np.array([f.remote_switch and f.relay != "none" for f in self.feeders],
                        dtype=bool)

    @cached_property
    def scenarios(self) -> tuple[Scenario, ...]:
        return self.scenario_list or default_scenarios(self.settings.year)

    # ---- per-feeder arrays, feeder order -------------------------------------------------
    @cached_property
    def feeder_ids(self) -> tuple[str, ...]:
        return tuple(f.feeder_id for f in self.feeders)

    @cached_property
    def block_names(self) -> tuple[str, ...]:
        return tuple(b.name for b in self.blocks)

    @cached_property
    def peak_mw(self) -> np.ndarray:
        return np.array([f.peak_mw for f in self.feeders], dtype=float)

    @cached_property
    def pv_mw(self) -> np.ndarray:
        return np.array([f.pv_mw for f in self.feeders], dtype=float)

    @cached_property
    def relay_code(self) -> np.ndarray:
        return np.array([RELAY_KINDS.index(f.relay) for f in self.feeders], dtype=np.int8)

    @cached_property
    def profile_index(self) -> np.ndarray:
        return np.array([self.profiles.index(f.profile) for f in self.feeders], dtype=np.intp)

    @cached_property
    def current_assignment(self) -> np.ndarray:
        """Block index per feeder from ``current_block`` (UNARMED = -1)."""
        idx = {b: i for i, b in enumerate(self.block_names)}
        return np.array([idx[f.current_block] if f.current_block else UNARMED
                         for f in self.feeders], dtype=np.intp)

    @cached_property
    def is_priority(self) -> np.ndarray:
        return np.array([bool(f.priority) for f in self.feeders])

    def allowed_matrix(self) -> np.ndarray:
        """``[feeder, block]`` bool: may feeder f sit in block b under every hard rule.

        Combines relay (``none`` → nowhere), ``allowed_blocks`` and the priority policy
        (``exclude`` → nowhere, ``last_block`` → only the highest-order block).
        Trip groups are a joint rule and are not part of this matrix.
        """
        nb = len(self.blocks)
        allowed = np.ones((len(self.feeders), nb), dtype=bool)
        last = nb - 1
        for i, f in enumerate(self.feeders):
            if f.relay == "none":
                allowed[i, :] = False
                continue
            if f.allowed_blocks is not None:
                allowed[i, :] = [b.name in f.allowed_blocks for b in self.blocks]
            if f.priority:
                if self.settings.priority_policy == "exclude":
                    allowed[i, :] = False
                else:
                    keep = allowed[i, last]
                    allowed[i, :] = False
                    allowed[i, last] = keep
        return allowed

    @cached_property
    def relay_index(self) -> np.ndarray:
        """``[feeder]`` index of the relay that trips it: the members of a trip group share
        one relay (one setting, one site visit), every other feeder has its own."""
        out = np.arange(len(self.feeders), dtype=np.intp)
        for members in self.trip_groups().values():
            out[members] = members[0]
        _, dense = np.unique(out, return_inverse=True)
        return dense.astype(np.intp)

    @cached_property
    def is_remote_settable(self) -> np.ndarray:
        """``[feeder]`` bool: the feeder's relay is set from the control room, because every
        feeder the relay trips is switchable (:attr:`is_switchable`).  Such a relay is never
        visited in the field: its block follows a remote schedule."""
        rel = self.relay_index
        if rel.size == 0:
            return np.zeros(0, dtype=bool)
        every = np.ones(int(rel.max()) + 1, dtype=bool)
        np.logical_and.at(every, rel, self.is_switchable)
        return every[rel]

    def field_allocation(self, schedule: np.ndarray, now: np.ndarray | None = None
                         ) -> np.ndarray:
        """``[feeder]`` block each relay is set to in the field for a ``schedule[feeder,
        period]``: a remote-settable relay (:attr:`is_remote_settable`) keeps the block it
        has ``now`` (default: the current allocation), since the control room, not a field
        crew, applies its schedule; every other relay takes its planned block (one block in
        every period).

        This is the one place of the rule "a remote-settable relay is set from the control
        room, never visited": the planner's count of field changes, the work list and the
        visit order all go through it."""
        schedule = np.asarray(schedule, dtype=np.intp)
        now = self.current_assignment if now is None else np.asarray(now, dtype=np.intp)
        planned = schedule[:, 0] if schedule.ndim == 2 else schedule
        return np.where(self.is_remote_settable, now, planned)

    def relays_changed(self, new: np.ndarray, old: np.ndarray | None = None) -> int:
        """How many relays get a new block setting going from ``old`` (default: the current
        allocation) to ``new`` (block index per feeder); a trip group counts once."""
        old = self.current_assignment if old is None else np.asarray(old)
        diff = np.asarray(new) != old
        return int(np.unique(self.relay_index[diff]).size)

    def trip_groups(self) -> dict[str, list[int]]:
        """Trip-group id → feeder indices (only groups named in the workbook)."""
        groups: dict[str, list[int]] = {}
        for i, f in enumerate(self.feeders):
            if f.trip_group:
                groups.setdefault(f.trip_group, []).append(i)
        return groups
