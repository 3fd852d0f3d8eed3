"""The report's pictures (matplotlib, Agg canvas, PNG at 150 dpi).

* ``share_map_<block>``: per block, share of netted demand by date (x) and local time of day
  (y), coloured on a diverging scale centred on the block's target, with contour lines at
  the band's minimum (solid) and maximum (dashed).
* ``duration_curves``: every block's share sorted from highest to lowest, with min, target
  and max lines (and the current allocation behind, when a plan is reported).
* ``average_day``: mean share by local hour per season (columns) and block (rows), one line
  per day type, with the season's lowest-to-highest range shaded.
* ``feeder_classes``: which feeder classes (profiles) make up each block - mean armed MW
  over the year and at the block's worst interval, exports below zero.
* ``worst_windows``: the worst runs outside a band on the year's timeline.
* ``visit_order`` (when the report compares with the allocation in service now and relays
  change): the worst violation after each substation visit.

Figures are drawn on :class:`matplotlib.figure.Figure` objects attached to the Agg canvas
(``FigureCanvasAgg``) directly.  That is the Agg backend without ``matplotlib.use("Agg")``:
pyplot is never imported, so no GUI backend is ever chosen, and a notebook user's own
backend is not switched under them.  PNGs carry no software/time metadata, so a rerun gives the same bytes.
"""

from __future__ import annotations

import io
import math
from dataclasses import dataclass
from pathlib import Path

import matplotlib as mpl
import matplotlib.dates as mdates
import numpy as np
import pandas as pd
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.colors import TwoSlopeNorm
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch

from .. import vocab
from ..check import Check, ScenarioChecks
from ..domain import DAY_TYPES
from ..safeio import safe_filename
from ..timefmt import iso_local
from . import content, palette

DPI = 150
DAY_WORDS = {"workday": "workday", "saturday": "Saturday", "sunday": "Sunday or holiday"}
#: number of windows drawn on the timeline
TOP_WINDOWS = 15

STYLE = {
    "font.size": 9,
    "axes.titlesize": 10,
    "axes.labelsize": 9,
    "axes.edgecolor": "#555555",
    "axes.linewidth": 0.8,
    "axes.grid": True,
    "grid.color": "#E3E3E3",
    "grid.linewidth": 0.6,
    "xtick.labelsize": 8,
    "ytick.labelsize": 8,
    "legend.fontsize": 8,
    "legend.frameon": False,
    "figure.facecolor": "white",
    "axes.facecolor": "white",
    "savefig.facecolor": "white",
    "path.simplify": True,
    "svg.hashsalt": "ufls",
}


@dataclass(frozen=True)
class FigureFile:
    """One rendered picture: ``name`` (file stem), title and caption for the HTML page,
    ``size_in`` (inches; pixels = inches x DPI), the PNG bytes and where it was saved."""

    name: str
    title: str
    caption: str
    size_in: tuple[float, float]
    png: bytes
    path: Path | None

    @property
    def size_px(self) -> tuple[int, int]:
        return (int(round(self.size_in[0] * DPI)), int(round(self.size_in[1] * DPI)))


def _snap(w: float, h: float) -> tuple[float, float]:
    """Figure size on a half-inch grid: exact in binary, so inches x 150 dpi is a whole
    number of pixels and the PNG is exactly that size."""
    return (round(w * 2) / 2, round(h * 2) / 2)


SHARE_MAP_SIZE = (11.0, 4.5)


def _new(size: tuple[float, float]) -> Figure:
    fig = Figure(figsize=size, dpi=DPI, layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def _png(fig: Figure) -> bytes:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=DPI, metadata={"Software": None})
    return buf.getvalue()


def _month_axis(ax, year: int) -> None:
    ax.xaxis.set_major_locator(mdates.MonthLocator())
    ax.xaxis.set_major_formatter(mdates.DateFormatter("%b"))
    ax.set_xlim(mdates.date2num(pd.Timestamp(year=year, month=1, day=1)),
                mdates.date2num(pd.Timestamp(year=year + 1, month=1, day=1)))


def _block_title(b) -> str:
    return f"{b.name} ({b.pickup_hz:g} Hz)"


# --------------------------------------------------------------------------------------------
# share by date x time of day
# --------------------------------------------------------------------------------------------
def _day_grid(check: Check, j: int) -> tuple[np.ndarray, pd.DatetimeIndex]:
    """``[slot, day]`` share of block j by local date and time-of-day slot (NaN where the
    spring DST gap has no interval; the repeated autumn hour is averaged)."""
    y = check.year
    lt = y.local_times
    iv = y.interval_minutes
    n_slots = 1440 // iv
    dates = lt.tz_localize(None).normalize()
    days = pd.DatetimeIndex(dates.unique())
    day_i = days.get_indexer(dates)
    slot = ((lt.hour * 60 + lt.minute).to_numpy() // iv).astype(np.intp)
    s = np.where(check.valid, check.share_pct[j], np.nan)
    tot = np.zeros((n_slots, len(days)))
    cnt = np.zeros((n_slots, len(days)))
    ok = np.isfinite(s)
    np.add.at(tot, (slot[ok], day_i[ok]), s[ok])
    np.add.at(cnt, (slot[ok], day_i[ok]), 1)
    with np.errstate(invalid="ignore", divide="ignore"):
        grid = np.where(cnt > 0, tot / np.maximum(cnt, 1), np.nan)
    return grid, days


def band_norm(b) -> TwoSlopeNorm:
    """Norm putting min at 0.25, target at 0.5 and max at 0.75 of the colour map."""
    below = max(b.target_pct - b.min_pct, 0.25)
    above = max(b.max_pct - b.target_pct, 0.25)
    return TwoSlopeNorm(vcenter=b.target_pct, vmin=b.target_pct - 2 * below,
                        vmax=b.target_pct + 2 * above)


def share_map(check: Check, j: int) -> tuple[Figure, str, str]:
    b = check.blocks[j]
    st = check.stats[j]
    grid, days = _day_grid(check, j)
    n_slots = grid.shape[0]
    fig = _new(SHARE_MAP_SIZE)
    ax = fig.add_subplot()
    x0 = mdates.date2num(days[0])
    x1 = mdates.date2num(days[-1] + pd.Timedelta(days=1))
    norm = band_norm(b)
    im = ax.imshow(np.ma.masked_invalid(grid), origin="lower", aspect="auto",
                   interpolation="nearest", cmap=palette.band_colormap(), norm=norm,
                   extent=(x0, x1, 0, 24))
    ax.grid(False)
    xc = x0 + 0.5 + np.arange(grid.shape[1])
    yc = (np.arange(n_slots) + 0.5) * 24.0 / n_slots
    g = np.ma.masked_invalid(grid)
    handles = []
    if np.nanmin(grid) < b.min_pct < np.nanmax(grid):
        ax.contour(xc, yc, g, levels=[b.min_pct], colors=[palette.INK], linewidths=1.0,
                   linestyles="solid")
    if np.nanmin(grid) < b.max_pct < np.nanmax(grid):
        ax.contour(xc, yc, g, levels=[b.max_pct], colors=[palette.INK], linewidths=1.0,
                   linestyles="dashed")
    handles.append(Line2D([], [], color=palette.INK, lw=1.0, ls="solid",
                          label=f"edge of min {b.min_pct:g} %"))
    handles.append(Line2D([], [], color=palette.INK, lw=1.0, ls="dashed",
                          label=f"edge of max {b.max_pct:g} %"))
    handles.append(Patch(facecolor=palette.VERMILION, label=vocab.BELOW_BAND))
    handles.append(Patch(facecolor=palette.BLUE, label=vocab.ABOVE_BAND))
    ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(0.0, -0.12), ncols=4,
              frameon=False)
    _month_axis(ax, check.year.calendar_year)
    ax.set_ylim(0, 24)
    ax.set_yticks(range(0, 25, 3))
    ax.set_yticklabels([f"{h:02d}:00" for h in range(0, 25, 3)])
    ax.set_xlabel(f"date ({check.year.calendar_year})")
    ax.set_ylabel(f"local time of day (h, {check.year.timezone})")
    cb = fig.colorbar(im, ax=ax, extend="both", pad=0.01, fraction=0.04)
    cb.set_label("share of netted demand armed (%)")
    ticks = sorted({norm.vmin, b.min_pct, b.target_pct, b.max_pct, norm.vmax})
    cb.set_ticks(ticks)
    cb.set_ticklabels([f"{t:g}" for t in ticks])
    n_out = st.intervals_below_min + st.intervals_above_max
    ax.set_title(f"Block {_block_title(b)}, scenario {check.scenario}: share of netted "
                 f"demand by date and local time of day\nband {b.min_pct:g}-{b.max_pct:g} % "
                 f"(target {b.target_pct:g} %); "
                 f"{vocab.count(n_out, 'interval')} outside the band; lowest {st.min_share_pct:.1f} %, "
                 f"highest {st.max_share_pct:.1f} % (colours stop at {norm.vmin:g} and "
                 f"{norm.vmax:g} %)", loc="left")
    title = f"Block {b.name}: share of demand by date and time of day ({check.scenario})"
    caption = (f"Each cell is one interval: date left to right, local time of day bottom to "
               f"top. Pale cells are inside the band {b.min_pct:g}-{b.max_pct:g} %; strong "
               f"orange cells hold less than the minimum, strong blue cells more than the "
               f"maximum. The solid line encloses the areas below the minimum, the dashed line "
               f"those above the maximum. Grey: no interval (daylight-saving gap) or demand "
               f"of 0 MW or less.")
    return fig, title, caption


# --------------------------------------------------------------------------------------------
# duration curves
# --------------------------------------------------------------------------------------------
def _grid_shape(n: int, max_cols: int = 3) -> tuple[int, int]:
    cols = min(2 if n <= 4 else max_cols, max(n, 1))
    return math.ceil(max(n, 1) / cols), cols


def duration_size(n_blocks: int) -> tuple[float, float]:
    rows, cols = _grid_shape(n_blocks)
    return _snap(11.0, 1.0 + 2.9 * rows)


SCENARIO_STYLES = ("solid", (0, (1, 1)), (0, (5, 1, 1, 1)), (0, (3, 1)), (0, (1, 2, 4, 2)))


def duration_curves(cs: ScenarioChecks, before: ScenarioChecks | None
                    ) -> tuple[Figure, str, str]:
    """Every block's share sorted, one curve per scenario (line style), the current
    allocation's worst scenario behind when a plan is reported."""
    check = cs.checks[0]
    nb = len(check.blocks)
    rows, cols = _grid_shape(nb)
    fig = _new(duration_size(nb))
    axes = fig.subplots(rows, cols, squeeze=False, sharex=True)
    for k in range(rows * cols):
        ax = axes[k // cols][k % cols]
        if k >= nb:
            ax.set_visible(False)
            continue
        b, v = check.blocks[k], cs.verdicts[k]
        ax.axhspan(b.min_pct, b.max_pct, color=palette.BAND_SHADE, alpha=0.5, lw=0)
        shown = []
        if before is not None:
            for c in before.checks:
                sb = np.sort(c.share_pct[k, c.valid])[::-1]
                xb = (np.arange(sb.size) + 0.5) / max(sb.size, 1) * 100.0
                ax.plot(xb, sb, color=palette.BEFORE, lw=1.2, ls=(0, (4, 2)),
                        label="current allocation" if c is before.checks[0] else None)
                shown.append(sb)
        for i, c in enumerate(cs.checks):
            sc = np.sort(c.share_pct[k, c.valid])[::-1]
            x = (np.arange(sc.size) + 0.5) / max(sc.size, 1) * 100.0
            ax.plot(x, sc, color=palette.INK, lw=1.5,
                    ls=SCENARIO_STYLES[i % len(SCENARIO_STYLES)],
                    label=c.scenario + (" (this plan)" if before is not None else ""))
            shown.append(sc)
        ax.axhline(b.min_pct, color=palette.BELOW, lw=1.1, ls="solid", label="band minimum")
        ax.axhline(b.target_pct, color=palette.TARGET, lw=0.9, ls="dotted", label="target")
        ax.axhline(b.max_pct, color=palette.ABOVE, lw=1.1, ls="dashed", label="band maximum")
        verdict = v.status
        ax.set_title(f"{_block_title(b)} - {verdict}\nroom to min {v.headroom_to_min_pp:+.2f} "
                     f"pp, to max {v.headroom_to_max_pp:+.2f} pp", loc="left", fontsize=9,
                     fontweight="normal" if v.compliant else "bold")
        ax.set_xlim(0, 100)
        lo = min([b.min_pct] + [float(np.nanmin(v)) for v in shown if v.size])
        hi = max([b.max_pct] + [float(np.nanmax(v)) for v in shown if v.size])
        pad = 0.08 * (hi - lo if hi > lo else 1.0)
        ax.set_ylim(lo - pad, hi + pad)
        if k % cols == 0:
            ax.set_ylabel("share of netted demand (%)")
        if k // cols == rows - 1 or k + cols >= nb:
            ax.set_xlabel("intervals with at least this share (% of the year)")
            ax.tick_params(labelbottom=True)
    h, lab = axes[0][0].get_legend_handles_labels()
    fig.legend(h, lab, loc="outside lower center", ncols=len(lab))
    fig.suptitle("How much of the year each block holds a given share of netted demand "
                 "(sorted from highest to lowest share)", x=0.01, ha="left", fontsize=11)
    title = "Duration curves of each block's share"
    caption = ("Each block's share of netted demand, sorted from the highest interval to the "
               "lowest, one black curve per scenario (line styles in the legend). Where a "
               "curve drops under the orange min line, the block sheds too little for that "
               "part of the year; above the blue dashed line, too much. The grey band is the "
               "allowed range; 'room' is the smallest distance to its edges over every "
               "scenario.")
    if before is not None:
        caption += " The grey dashed curves are the current allocation, for comparison."
    return fig, title, caption


# --------------------------------------------------------------------------------------------
# average day per season
# --------------------------------------------------------------------------------------------
def average_day_size(n_blocks: int, n_seasons: int) -> tuple[float, float]:
    return _snap(min(2.9 * n_seasons + 1.2, 14.0), 1.0 + 2.0 * n_blocks)


def average_day(check: Check) -> tuple[Figure, str, str]:
    y = check.year
    seasons = check.study.profiles.seasons
    nb, ns = len(check.blocks), len(seasons)
    iv = y.interval_minutes
    n_slots = 1440 // iv
    lt = y.local_times
    slot = ((lt.hour * 60 + lt.minute).to_numpy() // iv).astype(np.intp)
    hours = (np.arange(n_slots) + 0.5) * iv / 60.0
    fig = _new(average_day_size(nb, ns))
    axes = fig.subplots(nb, ns, squeeze=False, sharex=True, sharey="row")
    day_colors = [palette.BLUE, palette.ORANGE, palette.GREEN]
    day_styles = ["solid", "dashed", "dashdot"]
    for j, b in enumerate(check.blocks):
        s_all = np.where(check.valid, check.share_pct[j], np.nan)
        for k, season in enumerate(seasons):
            ax = axes[j][k]
            ax.axhspan(b.min_pct, b.max_pct, color=palette.BAND_SHADE, alpha=0.5, lw=0)
            ax.axhline(b.target_pct, color=palette.TARGET, lw=0.7, ls="dotted")
            ax.axhline(b.min_pct, color=palette.BELOW, lw=0.8, ls="solid")
            ax.axhline(b.max_pct, color=palette.ABOVE, lw=0.8, ls="dashed")
            in_season = y.season_index == k
            if in_season.any():
                sel = in_season & np.isfinite(s_all)
                lo = np.full(n_slots, np.inf)
                hi = np.full(n_slots, -np.inf)
                np.minimum.at(lo, slot[sel], s_all[sel])
                np.maximum.at(hi, slot[sel], s_all[sel])
                lo[~np.isfinite(lo)] = np.nan
                hi[~np.isfinite(hi)] = np.nan
                ax.fill_between(hours, lo, hi, color=palette.SKY, alpha=0.18, lw=0,
                                label="lowest to highest day")
                for d, dname in enumerate(DAY_TYPES):
                    m = sel & (y.day_type_index == d)
                    if not m.any():
                        continue
                    tot = np.bincount(slot[m], weights=s_all[m], minlength=n_slots)
                    cnt = np.bincount(slot[m], minlength=n_slots)
                    with np.errstate(invalid="ignore", divide="ignore"):
                        mean = np.where(cnt > 0, tot / np.maximum(cnt, 1), np.nan)
                    ax.plot(hours, mean, color=day_colors[d], ls=day_styles[d], lw=1.3,
                            label=f"mean {DAY_WORDS.get(dname, dname)}")
            else:
                ax.text(0.5, 0.5, "no days in this season", transform=ax.transAxes,
                        ha="center", va="center", color=palette.MUTED)
            ax.set_xlim(0, 24)
            ax.set_xticks(range(0, 25, 6))
            if j == 0:
                ax.set_title(season, fontsize=10)
            if k == 0:
                ax.set_ylabel(f"{b.name} share (%)\nband {b.min_pct:g}-{b.max_pct:g}")
            if j == nb - 1:
                ax.set_xlabel("local hour (h)")
    h, lab = axes[0][0].get_legend_handles_labels()
    h += [Patch(facecolor=palette.BAND_SHADE, alpha=0.5),
          Line2D([], [], color=palette.BELOW, lw=0.8),
          Line2D([], [], color=palette.ABOVE, lw=0.8, ls="dashed")]
    lab += ["band", "band minimum", "band maximum"]
    fig.legend(h, lab, loc="outside lower center", ncols=len(lab))
    fig.suptitle("Average day: each block's share of netted demand by local hour, per season "
                 "and day type", x=0.01, ha="left", fontsize=11)
    title = f"Average day per season ({check.scenario})"
    caption = ("Rows are blocks, columns seasons. The lines are the mean share at each local "
               "hour for workdays, Saturdays and Sundays (public holidays count as Sundays); "
               "the light blue area spans the lowest to the highest day of the season at that "
               "hour. The grey band is the allowed range.")
    return fig, title, caption


# --------------------------------------------------------------------------------------------
# feeder classes per block
# --------------------------------------------------------------------------------------------
def classes_size(n_blocks: int) -> tuple[float, float]:
    return _snap(max(9.0, min(14.0, 4.0 + 1.4 * n_blocks)), 5.5)


def feeder_classes(check: Check, fc: content.FeederContrib) -> tuple[Figure, str, str]:
    cb = content.class_breakdown(check, fc)
    classes = cb["classes"]
    nb = len(check.blocks)
    fig = _new(classes_size(nb))
    axes = fig.subplots(1, 2, sharey=False)
    x = np.arange(nb)
    names = [b.name for b in check.blocks]
    panels = (("mean_pos", "mean_neg", "Mean over the year"),
              ("at_pos", "at_neg", "At each block's lowest-share interval"))
    for ax, (kp, kn, head) in zip(axes, panels):
        pos, neg = cb[kp], cb[kn]
        up = np.zeros(nb)
        down = np.zeros(nb)
        for c, cname in enumerate(classes):
            color, hatch = palette.category(c)
            ax.bar(x, pos[:, c], bottom=up, color=color, hatch=hatch, edgecolor="white",
                   lw=0.5, label=cname, width=0.65)
            up += pos[:, c]
            if np.any(neg[:, c] < 0):
                ax.bar(x, neg[:, c], bottom=down, color=color, hatch=hatch or "//",
                       edgecolor="white", lw=0.5, width=0.65, alpha=0.75)
                down += neg[:, c]
        net = up + down
        ax.plot(x, net, ls="none", marker="D", color=palette.INK, ms=5, label="net armed MW")
        if kp == "mean_pos":
            need = np.array([b.min_pct / 100.0 * cb["mean_demand"] for b in check.blocks])
        else:
            need = np.array([b.min_pct / 100.0 * cb["demand_at_min"][j]
                             for j, b in enumerate(check.blocks)])
        ax.plot(x, need, ls="none", marker="_", color=palette.BELOW, ms=22, mew=2.2,
                label="band minimum (MW)")
        ax.axhline(0, color=palette.INK, lw=0.8)
        top = max(float(up.max(initial=0.0)), float(np.nanmax(need, initial=0.0)),
                  float(net.max(initial=0.0)), 1e-3)
        bottom = min(float(down.min(initial=0.0)), float(net.min(initial=0.0)), 0.0)
        span = top - bottom
        ax.set_ylim(bottom - 0.06 * span if bottom < 0 else 0.0, top + 0.08 * span)
        ax.set_xticks(x)
        if kp == "at_pos":
            lt = check.year.local_times
            ax.set_xticklabels([f"{nm}\n{iso_local(lt[int(cb['t_min'][j])])}"
                                for j, nm in enumerate(names)], fontsize=7)
            ax.set_xlabel("block and the local time of its lowest share")
        else:
            ax.set_xticklabels(names)
            ax.set_xlabel("block")
        ax.set_ylabel("armed MW (exports below 0)")
        ax.set_title(head, loc="left")
        ax.grid(axis="x", visible=False)
    h, lab = axes[0].get_legend_handles_labels()
    order = list(range(2, len(h))) + [0, 1]  # classes first, then the markers
    h, lab = [h[i] for i in order], [lab[i] for i in order]
    if any(np.any(cb[k] < 0) for k in ("mean_neg", "at_neg")):
        h.append(Patch(facecolor="#BBBBBB", hatch="//", edgecolor="white"))
        lab.append("below 0: exports through standard relays")
    fig.legend(h, lab, loc="outside lower center", ncols=min(len(h), 5))
    fig.suptitle("Which feeder classes (profiles) make up each block's armed load",
                 x=0.01, ha="left", fontsize=11)
    title = f"Feeder classes in each block ({check.scenario})"
    caption = ("Armed MW of each block split by feeder class (the workbook's profile). Left: "
               "mean over the year; right: at the interval where the block's share is lowest "
               "(its date and time under each bar). Parts below zero are feeders exporting "
               "through standard relays, which would raise the system's net load if tripped. "
               "The diamond is the net armed MW, the orange bar the MW the band's minimum "
               "needs.")
    return fig, title, caption


# --------------------------------------------------------------------------------------------
# worst windows on the year's timeline
# --------------------------------------------------------------------------------------------
def windows_size(n: int) -> tuple[float, float]:
    return _snap(11.0, 1.9 + 0.3 * (max(n, 3) + 1.5))


def _window_times(cs: ScenarioChecks, w: pd.DataFrame, year: int
                  ) -> tuple[pd.DatetimeIndex, pd.DatetimeIndex]:
    """Local start and end of each window, moved onto ``year``'s calendar so windows of
    scenarios in other years share one axis (same month, day and time)."""
    by = {c.scenario: c for c in cs.checks}
    t0, t1 = [], []
    for sc, st, n in zip(w["scenario"], w["_start"], w["intervals"]):
        y = by[sc].year
        lt = y.local_times
        a = lt[int(st)].tz_localize(None)
        b = lt[int(st) + int(n) - 1].tz_localize(None) + pd.Timedelta(minutes=y.interval_minutes)
        shift = pd.DateOffset(years=year - a.year)
        t0.append(a + shift)
        t1.append(b + shift)
    return pd.DatetimeIndex(t0), pd.DatetimeIndex(t1)


def worst_windows(cs: ScenarioChecks) -> tuple[Figure, str, str]:
    w = cs.windows()
    top = w.head(TOP_WINDOWS)
    n = len(top)
    fig = _new(windows_size(n))
    ax = fig.add_subplot()
    year = cs.study.settings.year
    _month_axis(ax, year)
    ax.set_xlabel(f"date (months of {year}; windows of other calendar years at the same "
                  "date and time)" if len({c.year.calendar_year for c in cs.checks}) > 1
                  else f"date ({year})")
    if n == 0:
        ax.set_yticks([])
        ax.text(0.5, 0.5, "No interval lies outside any block's band.", transform=ax.transAxes,
                ha="center", va="center", fontsize=11)
        ax.set_title("Worst windows outside the band", loc="left")
    else:
        starts, ends = _window_times(cs, top, year)
        labels = []
        for i, r in enumerate(top.drop(columns=["_start"]).itertuples()):
            t0, t1 = starts[i], ends[i]
            below = r.kind == "below_min"
            color = palette.BELOW if below else palette.ABOVE
            yv = n - 1 - i
            x0, x1 = mdates.date2num(t0), mdates.date2num(t1)
            ax.plot([x0, x1], [yv, yv], color=color, lw=6, solid_capstyle="butt")
            ax.plot([(x0 + x1) / 2], [yv], ls="none", color=color, mec=palette.INK, mew=0.6,
                    marker="v" if below else "^", ms=8)
            # the window's own ISO 8601 local times (its scenario's year, with the offset)
            start, end = r.start_local, r.end_local
            end = end[11:] if end[:10] == start[:10] else end
            labels.append(f"#{r.rank} {r.scenario} {r.block} {r.status}: {start} to "
                          f"{end}, {r.duration_h:g} h, {r.energy_mwh:.1f} MWh")
        # every window, as a rug under the ranked rows
        all_x = mdates.date2num(_window_times(cs, w, year)[0])
        kinds = w["kind"].to_numpy()
        for kname, color in (("below_min", palette.BELOW), ("above_max", palette.ABOVE)):
            m = kinds == kname
            if m.any():
                ax.plot(all_x[m], np.full(m.sum(), -1.3), ls="none", marker="|", ms=12,
                        mew=1.0, color=color, alpha=0.8)
        ax.set_yticks(list(range(n)) + [-1.3])
        rug = ("start of the one window" if len(w) == 1 else
               f"start of each of all {len(w)} windows")
        ax.set_yticklabels(labels[::-1] + [rug],
                           fontsize=7.5)
        ax.set_ylim(-2.0, n - 0.3)
        ax.axhline(-0.65, color="#BBBBBB", lw=0.8)
        ax.grid(axis="y", visible=False)
        handles = [Line2D([], [], ls="none", marker="v", color=palette.BELOW, mec=palette.INK,
                          label=f"{vocab.BELOW_BAND} (too little load shed)"),
                   Line2D([], [], ls="none", marker="^", color=palette.ABOVE, mec=palette.INK,
                          label=f"{vocab.ABOVE_BAND} (too much load shed)")]
        fig.legend(handles=handles, loc="outside lower center", ncols=2)
        ax.set_title("The one window outside a band" if len(w) == 1 else
                     f"The {n} worst windows outside a band (most MWh outside the band first; "
                     f"{len(w)} windows in all)", loc="left")
    title = "Worst windows on the year's timeline"
    caption = _windows_caption(len(w))
    return fig, title, caption


def _windows_caption(n_all: int) -> str:
    """The timeline's caption, right for no window, one window and many."""
    where = ("Each row names the scenario, the block, the local date and time, the duration "
             "and the MWh outside the band; the full list is in the windows table and on the "
             "workbook's windows sheet.")
    if n_all == 0:
        return ("No run of consecutive intervals lies outside any block's band in any "
                "scenario, so the timeline is empty.")
    if n_all == 1:
        head = "The one run of consecutive intervals outside a block's band"
    elif n_all <= TOP_WINDOWS:
        head = f"All {n_all} runs of consecutive intervals outside a block's band"
    else:
        head = (f"The {TOP_WINDOWS} runs of consecutive intervals outside a block's band with "
                f"the most energy outside it (of {n_all} in all)")
    return (head + ", placed on the year (windows of a scenario in another calendar year at "
            "the same date and time). " + where)


# --------------------------------------------------------------------------------------------
# visit order: the worst violation after each substation visit
# --------------------------------------------------------------------------------------------
def visit_order_size(n_visits: int) -> tuple[float, float]:
    return _snap(min(4.0 + 0.6 * n_visits, 11.0), 4.5)


def visit_order_figure(order) -> tuple[Figure, str, str]:
    """Worst band violation over every scenario (pp) now and after each visit of
    ``order`` (an :class:`allocator.field.visits.VisitOrder`), with 0 (every block in band) and
    the level of the allocation in service now marked; visits that break the band in
    vermilion with a cross."""
    steps = order.steps
    x = np.arange(len(steps))
    y = np.array([s.worst_violation_pp for s in steps])
    fig = _new(visit_order_size(len(order.visits)))
    ax = fig.add_subplot()
    ax.axhline(0.0, color=palette.GREEN, lw=1.2, ls="solid", label="0: every block in band")
    ax.axhline(order.limit_pp, color=palette.BEFORE, lw=1.2, ls=(0, (4, 2)),
               label=f"allocation in service now: {order.limit_pp:.2f} pp")
    ax.plot(x, y, color=palette.INK, lw=1.4, marker="o", ms=5, label="after the visit")
    bad = np.array([order.excess_pp(s) > 1e-9 for s in steps])
    if bad.any():
        ax.plot(x[bad], y[bad], ls="none", marker="X", ms=10, color=palette.BELOW,
                mec=palette.INK, mew=0.6, label="breaks the band")
    ax.set_xticks(x)
    ax.set_xticklabels(["now"] + [f"{s.visit}\n{s.substation}" for s in steps[1:]],
                       fontsize=7.5, rotation=0 if len(steps) <= 8 else 45)
    ax.set_xlabel("visit")
    ax.set_ylabel("worst violation over every scenario (pp)")
    top = max(float(y.max()), order.limit_pp, 0.1)
    ax.set_ylim(-0.05 * top, 1.15 * top)
    fig.legend(*ax.get_legend_handles_labels(), loc="outside lower center", ncols=4)
    ax.set_title(f"Worst distance outside a band after each visit ({', '.join(order.scenarios)})",
                 loc="left")
    title = "Visit order: worst violation after each visit"
    caption = ("The worst distance outside any block's band, over every interval of every "
               "scenario judged, with the relay changes of the visits so far done and the "
               "rest as in service now. The green line is 0 (every block in band), the grey "
               "dashed line the allocation in service now; a visit keeps the band when its "
               "point is on or under the higher of the two. A vermilion cross marks a visit "
               "that breaks it.")
    return fig, title, caption


# --------------------------------------------------------------------------------------------
def _weakest(cs: ScenarioChecks, j: int) -> Check:
    """The scenario where block j comes closest to (or goes furthest past) a band edge."""
    return min(cs.checks, key=lambda c: min(c.stats[j].headroom_to_min_pp,
                                            c.stats[j].headroom_to_max_pp))


def render_figures(check: Check | ScenarioChecks, out_dir: Path | None,
                   before: Check | ScenarioChecks | None = None,
                   fc: content.FeederContrib | None = None,
                   field=None) -> list[FigureFile]:
    """Render every figure; save PNGs into ``out_dir`` (created) unless it is None.
    Share maps show each block in its weakest scenario; the duration curves every
    scenario; the average day and feeder classes the first scenario.  ``field`` (the
    :class:`~allocator.field.plan.FieldPlan`) adds the visit-order figure of its visit order
    when relays change in the field."""
    from ..check import as_set

    cs = as_set(check)
    before = as_set(before) if before is not None else None
    first = cs.checks[0]
    fc = content.feeder_contrib(first) if fc is None else fc
    jobs = []
    for j, b in enumerate(first.blocks):
        jobs.append((f"share_map_{b.order:02d}_{safe_filename(b.name, 40)}",
                     lambda j=j: share_map(_weakest(cs, j), j)))
    jobs += [("duration_curves", lambda: duration_curves(cs, before)),
             ("average_day", lambda: average_day(first)),
             ("feeder_classes", lambda: feeder_classes(first, fc)),
             ("worst_windows", lambda: worst_windows(cs))]
    order = field.order if field is not None else None
    if order is not None and order.visits and order.judged:
        jobs.append(("visit_order", lambda: visit_order_figure(order)))
    if out_dir is not None:
        out_dir = Path(out_dir)
        out_dir.mkdir(parents=True, exist_ok=True)
    out = []
    with mpl.rc_context(STYLE):
        for name, make in jobs:
            fig, title, caption = make()
            size = tuple(float(v) for v in fig.get_size_inches())
            data = _png(fig)
            fig.clear()
            path = None
            if out_dir is not None:
                path = out_dir / f"{name}.png"
                path.write_bytes(data)
            out.append(FigureFile(name, title, caption, size, data, path))
    return out


# --------------------------------------------------------------------------------------------
# switched plan against the fixed plan
# --------------------------------------------------------------------------------------------
def _daily_extremes(cs: ScenarioChecks, k: int) -> tuple[pd.DatetimeIndex, np.ndarray,
                                                          np.ndarray]:
    """Per local day: the lowest and highest share of block k over every scenario that
    shares the first scenario's calendar (pp)."""
    first = cs.checks[0]
    same = [c for c in cs.checks if c.year.n_intervals == first.year.n_intervals]
    share = np.fmin.reduce([c.share_pct[k] for c in same])
    high = np.fmax.reduce([c.share_pct[k] for c in same])
    day = first.year.local_times.tz_localize(None).normalize()
    lo = pd.Series(share).groupby(day).min()
    hi = pd.Series(high).groupby(day).max()
    return pd.DatetimeIndex(lo.index), lo.to_numpy(), hi.to_numpy()


def switched_vs_fixed(switched: ScenarioChecks, fixed: ScenarioChecks
                      ) -> tuple[Figure, str, str]:
    """Each block's daily lowest and highest share over the year: the fixed plan (grey)
    and the switched plan (black), the band behind."""
    check = switched.checks[0]
    nb = len(check.blocks)
    fig = _new(_snap(11.0, 1.0 + 1.9 * nb))
    axes = fig.subplots(nb, 1, squeeze=False, sharex=True)
    for k, b in enumerate(check.blocks):
        ax = axes[k][0]
        ax.axhspan(b.min_pct, b.max_pct, color=palette.BAND_SHADE, alpha=0.5, lw=0)
        for cs, colour, ls, name in ((fixed, palette.BEFORE, (0, (4, 2)), "fixed plan"),
                                     (switched, palette.INK, "solid", "switched plan")):
            d, lo, hi = _daily_extremes(cs, k)
            x = mdates.date2num(d)
            ax.plot(x, lo, color=colour, lw=1.0, ls=ls, label=f"{name}: daily lowest")
            ax.plot(x, hi, color=colour, lw=0.7, ls=ls, alpha=0.7,
                    label=f"{name}: daily highest")
        ax.axhline(b.min_pct, color=palette.BELOW, lw=1.0, label="band minimum")
        ax.axhline(b.max_pct, color=palette.ABOVE, lw=1.0, ls="dashed", label="band maximum")
        ax.set_title(_block_title(b), loc="left", fontsize=9)
        ax.set_ylabel("share (%)")
        _month_axis(ax, check.year.calendar_year)
    h, lab = axes[0][0].get_legend_handles_labels()
    fig.legend(h, lab, loc="outside lower center", ncols=3)
    title = "Block shares over the year: fixed plan and switched plan"
    caption = ("For each block, the lowest and highest share of netted demand on each day of "
               "the year (over every scenario on the study calendar): grey dashed for the best "
               "fixed plan, black for the plan whose remotely switchable feeders follow the "
               "schedule. The grey band is the allowed range.")
    return fig, title, caption


def write_switched_vs_fixed(switched: ScenarioChecks, fixed: ScenarioChecks,
                            folder: Path) -> Path:
    """``folder/switched_vs_fixed.png``."""
    fig, _, _ = switched_vs_fixed(switched, fixed)
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / "switched_vs_fixed.png"
    path.write_bytes(_png(fig))
    return path
