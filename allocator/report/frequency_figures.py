"""Figures of the frequency indication (matplotlib ``Figure`` objects on the Agg canvas;
no pyplot, so no display backend is involved).

``plot_traces`` and ``plot_nadir_vs_size`` draw one :class:`allocator.frequency.FrequencyResult`;
``frequency_figures`` and ``critical_traces_figure`` draw a
:class:`allocator.frequency_indication.FrequencyStudy`; ``write_frequency_figures`` saves them.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
from matplotlib.figure import Figure

from ..frequency import FrequencyResult
from ..frequency_indication import FrequencyStudy
from ..safeio import safe_filename
from . import palette


def _limit_lines(ax, result: FrequencyResult) -> None:
    ax.axhline(result.nominal_hz, color=palette.NOMINAL_LINE, lw=0.8)
    ax.axhline(result.floor_hz, color=palette.LIMIT_LINE, lw=1.0, ls="--")
    ax.axhline(result.ceiling_hz, color=palette.LIMIT_LINE, lw=1.0, ls="--")
    x = ax.get_xlim()[1]
    for v, label in ((result.floor_hz, "floor"), (result.ceiling_hz, "ceiling")):
        ax.annotate(f"{label} {v:g} Hz", (x, v), xytext=(-4, 3), textcoords="offset points",
                    ha="right", va="bottom", fontsize=8, color=palette.LIMIT_LINE)


def plot_traces(result: FrequencyResult, case: int = 0, disturbances=None,
                title: str | None = None):
    """Frequency traces of one case, one line per disturbance; returns a matplotlib Figure.

    ``disturbances``: indices into ``result.disturbances_pct`` (default all).  Needs a result
    made with ``keep_traces=True``.  Trip instants are marked with small ticks.
    """
    if result.frequency_hz is None:
        raise ValueError("plot_traces needs a result simulated with keep_traces=True")
    which = range(result.disturbances_pct.size) if disturbances is None else disturbances
    fig = Figure(figsize=(7.5, 4.2), layout="constrained")
    ax = fig.add_subplot()
    for j, i in enumerate(which):
        colour = palette.SERIES[j % len(palette.SERIES)]
        style = ("-", "-.", ":")[(j // len(palette.SERIES)) % 3]
        f = result.frequency_hz[case, i]
        ax.plot(result.time_s, f, color=colour, ls=style, lw=1.4,
                label=f"{result.disturbances_pct[i]:g} % loss")
        tt = result.trip_time_s[case, i]
        tt = tt[np.isfinite(tt)]
        if tt.size:
            ax.plot(tt, np.interp(tt, result.time_s, f), ls="none", marker="|", ms=9,
                    color=colour)
    ax.set_xlim(result.time_s[0], result.time_s[-1])
    _limit_lines(ax, result)
    ax.set_xlabel("time after disturbance (s)")
    ax.set_ylabel("frequency (Hz)")
    ax.legend(fontsize=8, frameon=False, ncol=2, loc="best")
    ax.set_title(title or f"Frequency after generation loss, case {case}", fontsize=10)
    ax.grid(alpha=0.3)
    return fig


def plot_nadir_vs_size(result: FrequencyResult, case: int = 0, title: str | None = None,
                       covered_pct: float | None = None):
    """Nadir and zenith against disturbance size for one case; returns a matplotlib Figure.

    The largest loss kept within limits is marked with a vertical dotted line:
    ``covered_pct`` when given (a caller that examined more sizes than ``result`` holds passes
    its own :func:`largest_covered_pct`), else ``result.largest_covered_pct[case]``.
    """
    order = np.argsort(result.disturbances_pct)
    d = result.disturbances_pct[order]
    fig = Figure(figsize=(6.5, 4.0), layout="constrained")
    ax = fig.add_subplot()
    ax.plot(d, result.nadir_hz[case, order], color=palette.SERIES[0], marker="v", lw=1.4,
            label="nadir")
    ax.plot(d, result.zenith_hz[case, order], color=palette.SERIES[1], marker="^", lw=1.4,
            label="zenith (after nadir)")
    bad = ~result.within_limits[case, order]
    if bad.any():
        ax.plot(d[bad], result.nadir_hz[case, order][bad], ls="none", marker="o", ms=10,
                mfc="none", color=palette.SERIES[3], label="outside limits")
    cov = result.largest_covered_pct[case] if covered_pct is None else covered_pct
    if np.isfinite(cov):
        ax.axvline(cov, color=palette.SERIES[2], ls=":", lw=1.4,
                   label=f"largest loss kept within limits: {cov:g} %")
    ax.set_xlim(0.0, max(d[-1], cov if np.isfinite(cov) else 0.0) * 1.05)
    _limit_lines(ax, result)
    ax.set_xlabel("generation loss (% of demand)")
    ax.set_ylabel("frequency (Hz)")
    ax.legend(fontsize=8, frameon=False, loc="best")
    ax.set_title(title or f"Frequency extremes by disturbance size, case {case}", fontsize=10)
    ax.grid(alpha=0.3)
    return fig


def figure_names(labels: tuple[str, ...]) -> list[str]:
    """File-name-safe nadir figure name per examined interval, naming every label of an
    instant that several labels share (``lowest_B1+lowest_B3`` →
    ``frequency_nadir_lowest_B1_and_lowest_B3``); unique even when cut to length."""
    names: list[str] = []
    for c, label in enumerate(labels):
        name = safe_filename("frequency_nadir_" + "_and_".join(label.split("+")))
        if name in names:
            name = safe_filename(f"{name[:70]}_{c + 1}")
        names.append(name)
    return names


def critical_traces_figure(fs: FrequencyStudy):
    """Frequency traces at the examined interval with the smallest largest-covered loss."""
    lc = np.where(np.isfinite(fs.largest_covered_pct), fs.largest_covered_pct, -1.0)
    crit = int(np.argmin(lc))
    return plot_traces(fs.sweep, case=crit, title=f"Frequency after a generation loss — "
                       f"{fs.labels[crit]} ({fs.local_times[crit]})")


def frequency_figures(fs: FrequencyStudy) -> dict[str, object]:
    """name → matplotlib Figure: traces at the most critical interval (lowest largest
    covered disturbance) and nadir/zenith vs size for every examined interval."""
    figs = {"frequency_traces_critical": critical_traces_figure(fs)}
    covered = fs.largest_covered_pct
    for c, (label, name) in enumerate(zip(fs.labels, figure_names(fs.labels))):
        figs[name] = plot_nadir_vs_size(
            fs.sweep, case=c, title=f"Nadir and zenith vs loss size — {label} "
            f"({fs.local_times[c]})", covered_pct=covered[c])
    return figs


def write_frequency_figures(runs, folder: Path) -> list[Path]:
    """PNG files of the frequency figures of every ``(scenario, FrequencyStudy)`` in
    ``runs``, named ``<scenario>_<figure>`` when there are several."""
    folder.mkdir(parents=True, exist_ok=True)
    out = []
    for scenario, fs in runs:
        prefix = f"{scenario}_" if len(runs) > 1 else ""
        for name, fig in frequency_figures(fs).items():
            path = folder / f"{safe_filename(prefix + name)}.png"
            fig.savefig(path, dpi=150, metadata={"Software": None})
            out.append(path)
    return out


def critical_trace_png(runs) -> bytes:
    """The traces at the most critical examined interval over every scenario of ``runs``
    (``(scenario, FrequencyStudy)`` pairs), as PNG bytes for the HTML page."""
    import io

    def worst(fs):
        lc = fs.largest_covered_pct
        return float(np.min(np.where(np.isfinite(lc), lc, -1.0)))

    fs = min((fs for _, fs in runs), key=worst)
    buf = io.BytesIO()
    critical_traces_figure(fs).savefig(buf, format="png", dpi=100, metadata={"Software": None})
    return buf.getvalue()
