"""The armed-load check: what share of netted demand each block would really disconnect,
interval by interval, and where it falls outside its band.  ``Year + assignment → Check``.

Contribution of feeder f at interval t (MW):

* relay ``standard``: its net load (negative while the feeder exports: tripping it then
  *raises* the system's net load);
* relay ``direction_blocked``: ``max(net, 0)`` (the relay does not trip a feeder in reverse
  power flow);
* relay ``none`` or unarmed: 0.

``armed_mw[b, t]`` sums the contributions of the feeders in block b, and
``share_pct[b, t] = 100 · armed_mw[b, t] / demand_mw[t]``.  Intervals with demand ≤ 0 are
counted and reported but never divided by: their shares are NaN and they are left out of
the statistics and the compliance test.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass
from functools import cached_property

import numpy as np
import pandas as pd

from . import vocab
from .armed import armed_mw, armed_mw_scheduled, contribution_mw, share_pct
from .domain import RELAY_STANDARD, UNARMED, Block, Study
from .timefmt import iso_local, iso_utc
from .year import Year, on_study_calendar, year_period_index


# --------------------------------------------------------------------------------------------
# arithmetic (pure, vectorized)
# --------------------------------------------------------------------------------------------
def runs(mask: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Start and end (exclusive) indices of the runs of True in a 1-D bool array."""
    d = np.diff(np.concatenate(([0], mask.astype(np.int8), [0])))
    return np.flatnonzero(d == 1), np.flatnonzero(d == -1)


# --------------------------------------------------------------------------------------------
# result
# --------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class BlockStats:
    block: str
    order: int
    pickup_hz: float
    delay_s: float
    rocof_hz_per_s: float | None
    target_pct: float
    min_pct: float
    max_pct: float
    min_share_pct: float
    p1_share_pct: float
    p5_share_pct: float
    mean_share_pct: float
    p95_share_pct: float
    max_share_pct: float
    intervals_below_min: int
    intervals_above_max: int
    shortfall_mwh: float
    excess_mwh: float
    worst_violation_pp: float  # max over intervals of the distance outside the band, pp
    min_share_local_time: str
    compliant: bool
    #: smallest (share − min_pct) and (max_pct − share) over the valid intervals, pp;
    #: negative where the band is left
    headroom_to_min_pp: float = float("nan")
    headroom_to_max_pp: float = float("nan")
    max_share_local_time: str = ""
    p99_share_pct: float = float("nan")
    #: the two statistics the compliance rule holds against the band's minimum and maximum
    #: (lowest/highest share for every_interval, the P-th/(100-P)-th percentile for
    #: percentile:P, the mean twice for mean)
    rule_low_share_pct: float = float("nan")
    rule_high_share_pct: float = float("nan")
    #: the rule finds the block below its band's minimum / above its maximum
    below_band: bool = False
    above_band: bool = False

    @property
    def status(self) -> str:
        """in band / below band / above band / below and above band (allocator.vocab)."""
        return vocab.band_status(self.below_band, self.above_band, self.compliant)


@dataclass(frozen=True)
class Check:
    """Result of the armed-load check.  Arrays ``[block, interval]`` in block order."""

    study: Study
    year: Year
    block_idx: np.ndarray  # [feeder]
    armed_mw: np.ndarray
    share_pct: np.ndarray
    cum_share_pct: np.ndarray
    valid: np.ndarray  # [interval] demand > 0
    stats: tuple[BlockStats, ...]
    compliant: bool
    rule: str
    warnings: tuple[str, ...] = ()
    #: ``[feeder, period]`` block in force per period when the allocation switches
    #: (None: one block per feeder all year; then ``block_idx`` is the allocation, else
    #: ``block_idx`` is the first period's column)
    schedule: np.ndarray | None = None

    @property
    def blocks(self) -> tuple[Block, ...]:
        return self.study.blocks

    @property
    def scenario(self) -> str:
        return self.year.scenario

    @cached_property
    def worst_violation_pp(self) -> float:
        """Worst distance outside any block's band over all valid intervals, in pp of demand."""
        return max((s.worst_violation_pp for s in self.stats), default=0.0)

    @cached_property
    def worst_relative_violation(self) -> float:
        """Worst band violation relative to the block's target (the planner's objective 1)."""
        return float(np.nanmax(band_violation_relative(self.share_pct[:, self.valid],
                                                       self.study.blocks), initial=0.0))

    @cached_property
    def all_in_band_fraction(self) -> float:
        lo = np.array([b.min_pct for b in self.blocks])[:, None]
        hi = np.array([b.max_pct for b in self.blocks])[:, None]
        s = self.share_pct[:, self.valid]
        if s.shape[1] == 0:
            return 0.0
        return float(np.mean(np.all((s >= lo) & (s <= hi), axis=0)))

    # ---- tables -------------------------------------------------------------------------
    def windows(self) -> pd.DataFrame:
        """Shortfall (below min) and excess (above max) windows, ranked by energy."""
        return shortfall_windows(self)

    def armed_load_table(self) -> pd.DataFrame:
        y = self.year
        cols: dict[str, object] = {
            "timestamp_utc": iso_utc(y.timestamps_utc),
            "local_time": iso_local(y.local_times),
            "demand_mw": y.demand_mw,
        }
        for j, b in enumerate(self.blocks):
            cols[f"{b.name}_mw"] = self.armed_mw[j]
            cols[f"{b.name}_pct"] = self.share_pct[j]
            cols[f"{b.name}_cum_pct"] = self.cum_share_pct[j]
        df = pd.DataFrame(cols)
        if y.judged_span is not None:  # a partial metered year: its data span only
            df = df.iloc[slice(*y.judged_span)].reset_index(drop=True)
        return df


def band_violation_relative(share: np.ndarray, blocks: tuple[Block, ...]) -> np.ndarray:
    """Distance outside ``[min_pct, max_pct]`` divided by ``target_pct`` ``[block, interval]``;
    0 inside the band.  A block with target 0 is measured in pp."""
    lo = np.array([b.min_pct for b in blocks])[:, None]
    hi = np.array([b.max_pct for b in blocks])[:, None]
    tgt = np.array([b.target_pct if b.target_pct > 0 else 1.0 for b in blocks])[:, None]
    return np.maximum(np.maximum(lo - share, share - hi), 0.0) / tgt


def _percentile(x: np.ndarray, q: float) -> float:
    return float(np.percentile(x, q)) if x.size else float("nan")


def rule_statistics(rule: str, p: float | None, s: np.ndarray) -> tuple[float, float]:
    """The (low, high) statistics of the shares ``s`` that ``rule`` holds against the band:
    ``every_interval`` the lowest and highest share, ``percentile`` the P-th and (100−P)-th
    percentile, ``mean`` the mean twice.  NaN when ``s`` is empty."""
    if s.size == 0:
        return float("nan"), float("nan")
    if rule == "every_interval":
        return float(s.min()), float(s.max())
    if rule == "percentile":
        return float(np.percentile(s, p)), float(np.percentile(s, 100 - p))
    if rule == "mean":
        m = float(s.mean())
        return m, m
    raise ValueError(f"unknown compliance rule {rule}")


def run_check(study: Study, year: Year, block_idx: np.ndarray,
              warnings: tuple[str, ...] | list[str] = ()) -> Check:
    """Run the armed-load check of assignment ``block_idx[feeder]`` on ``year``; a 2-D
    ``block_idx[feeder, period]`` is a schedule (the block in force in each period)."""
    block_idx = np.asarray(block_idx, dtype=np.intp)
    nb = len(study.blocks)
    schedule = None
    if block_idx.ndim == 2:
        schedule, block_idx = block_idx, block_idx[:, 0]
        armed = armed_mw_scheduled(year.net_mw, study.relay_code, schedule,
                                   year_period_index(study, year), nb)
    else:
        armed = armed_mw(year.net_mw, study.relay_code, block_idx, nb)
    share = share_pct(armed, year.demand_mw)
    cum = np.cumsum(share, axis=0)
    valid = (year.demand_mw > 0) & year.judged  # judged: see Year.judged_span
    h = year.interval_h
    s_rule = study.settings
    local = year.local_times
    stats = []
    for j, b in enumerate(study.blocks):
        s = share[j, valid]
        dem = year.demand_mw[valid]
        a = armed[j, valid]
        below = s < b.min_pct
        above = s > b.max_pct
        short = np.maximum(b.min_pct / 100.0 * dem - a, 0.0)
        excess = np.maximum(a - b.max_pct / 100.0 * dem, 0.0)
        viol = np.maximum(np.maximum(b.min_pct - s, s - b.max_pct), 0.0)
        i_min = int(np.flatnonzero(valid)[np.argmin(s)]) if s.size else 0
        i_max = int(np.flatnonzero(valid)[np.argmax(s)]) if s.size else 0
        low, high = rule_statistics(s_rule.compliance_rule, s_rule.compliance_percentile, s)
        is_below, is_above = bool(low < b.min_pct), bool(high > b.max_pct)  # False for NaN
        stats.append(BlockStats(
            block=b.name, order=b.order, pickup_hz=b.pickup_hz, delay_s=b.delay_s,
            rocof_hz_per_s=b.rocof_hz_per_s, target_pct=b.target_pct, min_pct=b.min_pct,
            max_pct=b.max_pct,
            min_share_pct=float(s.min()) if s.size else float("nan"),
            p1_share_pct=_percentile(s, 1), p5_share_pct=_percentile(s, 5),
            mean_share_pct=float(s.mean()) if s.size else float("nan"),
            p95_share_pct=_percentile(s, 95),
            max_share_pct=float(s.max()) if s.size else float("nan"),
            intervals_below_min=int(below.sum()), intervals_above_max=int(above.sum()),
            shortfall_mwh=float(short.sum() * h), excess_mwh=float(excess.sum() * h),
            worst_violation_pp=float(viol.max()) if s.size else float("nan"),
            min_share_local_time=iso_local(local[i_min]) if s.size else "",
            compliant=bool(s.size) and not is_below and not is_above,
            headroom_to_min_pp=float((s - b.min_pct).min()) if s.size else float("nan"),
            headroom_to_max_pp=float((b.max_pct - s).min()) if s.size else float("nan"),
            max_share_local_time=iso_local(local[i_max]) if s.size else "",
            p99_share_pct=_percentile(s, 99), rule_low_share_pct=low,
            rule_high_share_pct=high, below_band=is_below, above_band=is_above,
        ))
    return Check(study, year, block_idx, armed, share, cum, valid, tuple(stats),
                 all(st.compliant for st in stats), s_rule.rule_text, tuple(warnings),
                 schedule)


# --------------------------------------------------------------------------------------------
# windows and views
# --------------------------------------------------------------------------------------------
#: ``kind`` is the machine word (below_min / above_max), ``status`` the word people read
#: (below band / above band, :mod:`allocator.vocab`)
WINDOW_COLUMNS = ["rank", "block", "kind", "status", "start_local", "end_local", "duration_h",
                  "intervals", "worst_share_pct", "band_pct", "energy_mwh"]


def shortfall_windows(check: Check) -> pd.DataFrame:
    """Contiguous runs of intervals below min (``kind`` = below_min) or above max
    (above_max) per block, with start, end (local; end = end of the last interval),
    duration, worst share and the energy outside the band (MWh); ranked by energy then
    duration.  Intervals with demand ≤ 0 break a run."""
    y = check.year
    h = y.interval_h
    local = y.local_times
    step = pd.Timedelta(minutes=y.interval_minutes)
    frames = []
    for j, b in enumerate(check.blocks):
        s = check.share_pct[j]
        dem = y.demand_mw
        a = check.armed_mw[j]
        for kind, mask, gap, band in (
                ("below_min", check.valid & (s < b.min_pct),
                 np.maximum(b.min_pct / 100.0 * dem - a, 0.0), b.min_pct),
                ("above_max", check.valid & (s > b.max_pct),
                 np.maximum(a - b.max_pct / 100.0 * dem, 0.0), b.max_pct)):
            st, en = runs(mask)
            if st.size == 0:
                continue
            s_f = np.where(mask, s, np.nan)
            worst = (np.fmin.reduceat(s_f, st) if kind == "below_min"
                     else np.fmax.reduceat(s_f, st))
            energy = np.add.reduceat(np.where(mask, gap, 0.0), st) * h
            frames.append(pd.DataFrame({
                "block": b.name, "kind": kind, "status": vocab.window_status(kind),
                "start_local": iso_local(local[st]),
                "end_local": iso_local(local[en - 1] + step),
                "duration_h": (en - st) * h, "intervals": en - st,
                "worst_share_pct": worst, "band_pct": band, "energy_mwh": energy,
                "_start": st,
            }))
    if not frames:
        return pd.DataFrame(columns=WINDOW_COLUMNS + ["_start"])
    df = pd.concat(frames, ignore_index=True)
    df = df.sort_values(["energy_mwh", "duration_h", "block", "_start"],
                        ascending=[False, False, True, True], kind="stable")
    df.insert(0, "rank", np.arange(1, len(df) + 1))
    return df.reset_index(drop=True)


def low_load_view(check: Check, fraction: float = 0.01) -> pd.DataFrame:
    """The ``fraction`` of valid intervals with the lowest demand and each block's share."""
    y = check.year
    idx = np.flatnonzero(check.valid)
    n = max(1, int(round(fraction * idx.size)))
    pick = idx[np.argsort(y.demand_mw[idx], kind="stable")[:n]]
    cols: dict[str, object] = {"local_time": iso_local(y.local_times[pick]),
                               "demand_mw": y.demand_mw[pick]}
    for j, b in enumerate(check.blocks):
        cols[f"{b.name}_pct"] = check.share_pct[j, pick]
    return pd.DataFrame(cols)


EXPORT_COLUMNS = ["feeder_id", "substation", "block", "relay", "exporting_intervals",
                  "exporting_hours", "most_export_mw", "most_export_local_time",
                  "negative_contribution_mwh"]
#: feeders per chunk in the per-feeder views (bounds the temporaries)
_VIEW_CHUNK = 256


def _export_stats(net: np.ndarray, std: np.ndarray, h: float):
    """Per feeder row of ``net``: exporting intervals, the interval of most export, the
    largest export MW and (standard relays) the energy exported, MWh."""
    neg = np.minimum(net, 0.0)
    n_exp = (net < 0).sum(axis=1)
    i_min = np.argmin(net, axis=1)
    most = -net[np.arange(net.shape[0]), i_min]
    neg_mwh = np.where(std, -neg.sum(axis=1) * h, 0.0)
    return n_exp, i_min, most, neg_mwh


def exporting_feeders(check: Check) -> pd.DataFrame:
    """Armed feeders that export at some interval: how often, how much, when worst.

    For ``standard`` relays the export is a negative contribution to the block; for
    ``direction_blocked`` relays the feeder is simply not tripped while exporting (its
    contribution is 0), reported with ``negative_contribution_mwh`` = 0.  Computed in
    chunks of feeders (no copy of the whole armed net load)."""
    st = check.study
    y = check.year
    armed = np.flatnonzero(check.block_idx >= 0)
    parts = []
    for a in range(0, armed.size, _VIEW_CHUNK):
        rows = armed[a:a + _VIEW_CHUNK]
        net = y.net_mw[rows]
        stats = _export_stats(net, st.relay_code[rows] == RELAY_STANDARD, y.interval_h)
        keep = stats[0] > 0
        parts.append((rows[keep],) + tuple(v[keep] for v in stats))
    rows = np.concatenate([p[0] for p in parts]) if parts else np.array([], dtype=np.intp)
    if rows.size == 0:
        return pd.DataFrame(columns=EXPORT_COLUMNS)
    n_exp, i_min, most, neg_mwh = (np.concatenate([p[k] for p in parts]) for k in range(1, 5))
    df = pd.DataFrame({
        "feeder_id": [st.feeder_ids[i] for i in rows],
        "substation": [st.feeders[i].substation for i in rows],
        "block": [st.block_names[check.block_idx[i]] for i in rows],
        "relay": [st.feeders[i].relay for i in rows],
        "exporting_intervals": n_exp,
        "exporting_hours": n_exp * y.interval_h,
        "most_export_mw": most,
        "most_export_local_time": iso_local(y.local_times[i_min]),
        "negative_contribution_mwh": neg_mwh,
    })
    return df.sort_values(["negative_contribution_mwh", "feeder_id"],
                          ascending=[False, True]).reset_index(drop=True)


def by_substation(check: Check) -> pd.DataFrame:
    """Armed MW per substation, zone and block: mean over the year and at the interval of
    the block's lowest share; feeder and customer counts."""
    st = check.study
    y = check.year
    contrib_rows = []
    armed = np.flatnonzero(check.block_idx >= 0)
    if armed.size == 0:
        return pd.DataFrame(columns=["substation", "zone", "block", "feeders", "customers",
                                     "mean_armed_mw", "armed_mw_at_block_min"])
    t_min = np.array([int(np.argmin(np.where(check.valid, check.share_pct[j], np.inf)))
                      for j in range(len(st.blocks))])
    mean_c = np.zeros(armed.size)
    at_min = np.empty(armed.size)
    for a in range(0, armed.size, _VIEW_CHUNK):  # chunks of feeders: bounded temporaries
        rows = armed[a:a + _VIEW_CHUNK]
        c = contribution_mw(y.net_mw[rows], st.relay_code[rows])
        if check.valid.any():
            mean_c[a:a + rows.size] = c[:, check.valid].mean(axis=1)
        at_min[a:a + rows.size] = c[np.arange(rows.size), t_min[check.block_idx[rows]]]
    for k, i in enumerate(armed):
        f = st.feeders[i]
        contrib_rows.append((f.substation, f.zone or "", st.block_names[check.block_idx[i]],
                             f.customers or 0, mean_c[k], at_min[k]))
    df = pd.DataFrame(contrib_rows, columns=["substation", "zone", "block", "customers",
                                             "mean_armed_mw", "armed_mw_at_block_min"])
    df["feeders"] = 1
    out = (df.groupby(["substation", "zone", "block"], as_index=False)
           .agg(feeders=("feeders", "sum"), customers=("customers", "sum"),
                mean_armed_mw=("mean_armed_mw", "sum"),
                armed_mw_at_block_min=("armed_mw_at_block_min", "sum")))
    return out.sort_values(["substation", "zone", "block"]).reset_index(drop=True)


def customers_per_block(check: Check) -> dict[str, int]:
    st = check.study
    out = {b: 0 for b in st.block_names}
    for i, f in enumerate(st.feeders):
        b = int(check.block_idx[i])
        if b != UNARMED:
            out[st.block_names[b]] += f.customers or 0
    return out


def annual_statement(check: Check) -> list[dict]:
    """Per block: the frequency setting and the % of netted demand disconnected at it, as
    mean and minimum over the year, with the cumulative figures.

    This is the content a distribution system operator reports each year to the
    transmission system operator under Regulation (EU) 2017/2196 (network code on
    emergency and restoration), Art. 50(1): the frequency settings at which netted demand
    disconnection is initiated and the percentage of netted demand disconnected at each.
    """
    out = []
    for j, (b, s) in enumerate(zip(check.blocks, check.stats)):
        cum = check.cum_share_pct[j, check.valid]
        out.append({
            "block": b.name, "order": b.order, "pickup_hz": b.pickup_hz, "delay_s": b.delay_s,
            "rocof_hz_per_s": b.rocof_hz_per_s,
            "netted_demand_disconnected_mean_pct": s.mean_share_pct,
            "netted_demand_disconnected_min_pct": s.min_share_pct,
            "cumulative_mean_pct": float(cum.mean()) if cum.size else float("nan"),
            "cumulative_min_pct": float(cum.min()) if cum.size else float("nan"),
        })
    return out


def summary_dict(check: Check) -> dict:
    """The ``summary.json`` content."""
    y = check.year
    keep = ("block", "order", "pickup_hz", "delay_s", "target_pct", "min_pct", "max_pct",
            "min_share_pct", "p1_share_pct", "p5_share_pct", "mean_share_pct",
            "p95_share_pct", "max_share_pct", "intervals_below_min", "intervals_above_max",
            "shortfall_mwh", "excess_mwh", "worst_violation_pp", "min_share_local_time",
            "compliant", "p99_share_pct", "rule_low_share_pct", "rule_high_share_pct",
            "below_band", "above_band")
    blocks = [{**{k: v for k, v in asdict(s).items() if k in keep}, "status": s.status}
              for s in check.stats]
    return {
        "utility": check.study.settings.utility,
        "year": check.study.settings.year,
        "rule": check.rule,
        "compliant": check.compliant,
        "blocks": blocks,
        "intervals": int(y.n_intervals),
        "interval_minutes": y.interval_minutes,
        "demand_nonpositive_intervals": int(((y.demand_mw <= 0) & y.judged).sum()),
        "worst_violation_pp": check.worst_violation_pp,
        "all_blocks_in_band_pct": 100.0 * check.all_in_band_fraction,
        "data_source": y.source,
        "annual_statement": annual_statement(check),
        "customers_per_block": customers_per_block(check),
        "warnings": list(check.warnings),
    }


# --------------------------------------------------------------------------------------------
# several scenarios: the verdict is the worst
# --------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class BlockVerdict:
    """One block judged on every scenario: the worst case and where it happens.

    ``headroom_to_min_pp`` is the smallest (share − min_pct) over every valid interval of
    every scenario, ``headroom_to_max_pp`` the smallest (max_pct − share); negative where
    the band is left.  Counts and MWh are those of the worst scenario for that figure."""

    block: str
    order: int
    pickup_hz: float
    delay_s: float
    target_pct: float
    min_pct: float
    max_pct: float
    compliant: bool
    failing_scenarios: tuple[str, ...]
    min_share_pct: float
    min_share_scenario: str
    min_share_local_time: str
    max_share_pct: float
    max_share_scenario: str
    max_share_local_time: str
    headroom_to_min_pp: float
    headroom_to_max_pp: float
    intervals_below_min: int
    intervals_above_max: int
    shortfall_mwh: float
    excess_mwh: float
    worst_violation_pp: float
    #: the rule's statistics (see BlockStats): the lowest low and the highest high over
    #: every scenario
    rule_low_share_pct: float = float("nan")
    rule_high_share_pct: float = float("nan")
    below_band: bool = False
    above_band: bool = False

    @property
    def status(self) -> str:
        """in band / below band / above band / below and above band, over every scenario."""
        return vocab.band_status(self.below_band, self.above_band, self.compliant)


def _block_verdict(j: int, b: Block, checks: tuple[Check, ...]) -> BlockVerdict:
    st = [c.stats[j] for c in checks]
    names = [c.scenario for c in checks]

    def arg(vals, fn):
        v = np.array([np.nan if x is None else x for x in vals], dtype=float)
        return int(fn(np.where(np.isfinite(v), v, np.inf if fn is np.argmin else -np.inf)))

    lo = arg([s.min_share_pct for s in st], np.argmin)
    hi = arg([s.max_share_pct for s in st], np.argmax)
    return BlockVerdict(
        block=b.name, order=b.order, pickup_hz=b.pickup_hz, delay_s=b.delay_s,
        target_pct=b.target_pct, min_pct=b.min_pct, max_pct=b.max_pct,
        compliant=all(s.compliant for s in st),
        failing_scenarios=tuple(n for n, s in zip(names, st) if not s.compliant),
        min_share_pct=st[lo].min_share_pct, min_share_scenario=names[lo],
        min_share_local_time=st[lo].min_share_local_time,
        max_share_pct=st[hi].max_share_pct, max_share_scenario=names[hi],
        max_share_local_time=st[hi].max_share_local_time,
        headroom_to_min_pp=float(np.nanmin([s.headroom_to_min_pp for s in st])),
        headroom_to_max_pp=float(np.nanmin([s.headroom_to_max_pp for s in st])),
        intervals_below_min=max(s.intervals_below_min for s in st),
        intervals_above_max=max(s.intervals_above_max for s in st),
        shortfall_mwh=max(s.shortfall_mwh for s in st),
        excess_mwh=max(s.excess_mwh for s in st),
        worst_violation_pp=float(np.nanmax([s.worst_violation_pp for s in st])),
        rule_low_share_pct=float(np.nanmin([s.rule_low_share_pct for s in st])),
        rule_high_share_pct=float(np.nanmax([s.rule_high_share_pct for s in st])),
        below_band=any(s.below_band for s in st), above_band=any(s.above_band for s in st),
    )


@dataclass(frozen=True)
class ScenarioChecks:
    """One allocation checked on every scenario's year (``checks`` in scenario order).
    The allocation is compliant only if it is compliant in every scenario."""

    study: Study
    checks: tuple[Check, ...]
    warnings: tuple[str, ...] = ()

    @property
    def names(self) -> tuple[str, ...]:
        return tuple(c.scenario for c in self.checks)

    @property
    def block_idx(self) -> np.ndarray:
        return self.checks[0].block_idx

    @property
    def schedule(self) -> np.ndarray | None:
        """``[feeder, period]`` when the allocation switches by schedule, else None."""
        return self.checks[0].schedule

    @property
    def blocks(self) -> tuple[Block, ...]:
        return self.study.blocks

    @property
    def rule(self) -> str:
        return self.checks[0].rule

    @property
    def compliant(self) -> bool:
        return all(c.compliant for c in self.checks)

    @cached_property
    def verdicts(self) -> tuple[BlockVerdict, ...]:
        return tuple(_block_verdict(j, b, self.checks) for j, b in enumerate(self.blocks))

    @cached_property
    def worst_violation_pp(self) -> float:
        return max(c.worst_violation_pp for c in self.checks)

    @cached_property
    def worst_relative_violation(self) -> float:
        return max(c.worst_relative_violation for c in self.checks)

    @property
    def failing_scenarios(self) -> tuple[str, ...]:
        return tuple(c.scenario for c in self.checks if not c.compliant)

    def check(self, name: str) -> Check:
        for c in self.checks:
            if c.scenario == name:
                return c
        raise KeyError(name)

    def windows(self) -> pd.DataFrame:
        """Every scenario's windows outside a band, with a ``scenario`` column, ranked
        together by energy then duration."""
        frames = []
        for c in self.checks:
            w = c.windows()
            if not w.empty:
                w = w.drop(columns=["rank"])
                w.insert(0, "scenario", c.scenario)
                frames.append(w)
        if not frames:
            return pd.DataFrame(columns=["rank", "scenario"] + WINDOW_COLUMNS[1:] + ["_start"])
        df = pd.concat(frames, ignore_index=True)
        df = df.sort_values(["energy_mwh", "duration_h", "block", "scenario", "_start"],
                            ascending=[False, False, True, True, True], kind="stable")
        df.insert(0, "rank", np.arange(1, len(df) + 1))
        return df.reset_index(drop=True)


def smallest_headroom_pp(checks) -> float:
    """The least room to a band edge over every block and scenario (pp; negative: out)."""
    return float(min(min(v.headroom_to_min_pp, v.headroom_to_max_pp) for v in checks.verdicts))


def as_set(checks: "Check | ScenarioChecks") -> ScenarioChecks:
    """A single-scenario :class:`Check` as a one-element :class:`ScenarioChecks`."""
    if isinstance(checks, ScenarioChecks):
        return checks
    return ScenarioChecks(checks.study, (checks,), checks.warnings)


def statement_checks(checks: ScenarioChecks) -> tuple[Check, ...]:
    """The scenarios the annual statement is made from: the metered year(s) when there are
    any (what the scheme really held; one statement per calendar year of metered data),
    otherwise the first scenario."""
    met = tuple(c for c in checks.checks if c.year.source == "metered")
    return met or (checks.checks[0],)


def statement_check(checks: ScenarioChecks) -> Check:
    """The one statement scenario (work list): the metered year of the study year, else the
    latest metered year, else the first scenario."""
    cs = statement_checks(checks)
    same = [c for c in cs if on_study_calendar(checks.study, c.year)]
    return same[0] if same else cs[-1]


def run_checks(study: Study, years, block_idx: np.ndarray,
               warnings: tuple[str, ...] | list[str] = ()) -> ScenarioChecks:
    """Check assignment ``block_idx[feeder]`` on every year (scenario) of ``years``."""
    years = (years,) if isinstance(years, Year) else tuple(years)
    return ScenarioChecks(study, tuple(run_check(study, y, block_idx, warnings)
                                       for y in years), tuple(warnings))


def verdict_covers(checks: ScenarioChecks) -> str:
    """Which years the verdict speaks for, in one sentence."""
    parts = []
    for c in checks.checks:
        i = c.year.scenario_info
        pv = i.get("pv", c.year.source)
        extra = [f"PV ×{i['pv_scale']:g}"] if i.get("pv_scale", 1.0) != 1.0 else []
        if i.get("load_scale", 1.0) != 1.0:
            extra.append(f"load ×{i['load_scale']:g}")
        if i.get("partial"):
            extra.append(f"partial: {i['coverage_pct']:.1f} % of the year judged, "
                         f"{i['judged_from']} to {i['judged_to']}")
        parts.append(f"{c.scenario} ({pv}, {c.year.calendar_year}"
                     + (", " + ", ".join(extra) if extra else "") + ")")
    return ("The verdict covers these scenarios and no other year: " + "; ".join(parts)
            + ".")


def all_warnings(checks: "Check | ScenarioChecks") -> list[str]:
    """Every warning a person should see with a check, once each, in this order: the
    workbook's validation warnings, the assignment's, then each scenario year's notes and
    data-quality flags (the list report.xlsx, report.html and summary.json carry)."""
    cs = checks.checks if isinstance(checks, ScenarioChecks) else (checks,)
    out = list(checks.study.warnings) + list(checks.warnings)
    for c in cs:
        out += list(c.year.notes)
        out += [f"feeder {fl.feeder_id}: {fl.flag} ({fl.detail})" for fl in c.year.flags]
    return list(dict.fromkeys(out))


def summary_set_dict(checks: ScenarioChecks) -> dict:
    """The ``summary.json`` content for an allocation checked on several scenarios:
    the overall verdict (worst over scenarios), per block the worst case and the scenario it
    occurs in, and each scenario's own summary under ``scenarios``."""
    first = checks.checks[0]
    per = []
    for c in checks.checks:
        d = summary_dict(c)
        d.pop("utility", None)
        d.pop("warnings", None)
        d = {"scenario": c.scenario, **c.year.scenario_info, "calendar_year":
             c.year.calendar_year, **d, "notes": list(c.year.notes),
             "flags": [{"feeder_id": fl.feeder_id, "flag": fl.flag, "detail": fl.detail}
                       for fl in c.year.flags]}
        per.append(d)
    return {
        "utility": checks.study.settings.utility,
        "year": checks.study.settings.year,
        "rule": checks.rule,
        "compliant": checks.compliant,
        "scenarios_judged": list(checks.names),
        "failing_scenarios": list(checks.failing_scenarios),
        "verdict_covers": verdict_covers(checks),
        "worst_violation_pp": checks.worst_violation_pp,
        "blocks": [{**asdict(v), "status": v.status} for v in checks.verdicts],
        "intervals": int(first.year.n_intervals),
        "interval_minutes": first.year.interval_minutes,
        "customers_per_block": customers_per_block(first),
        "scenarios": per,
        # every warning report.xlsx lists, then the same split by origin
        "warnings": all_warnings(checks),
        "study_warnings": list(checks.study.warnings),
        "assignment_warnings": list(checks.warnings),
    }
