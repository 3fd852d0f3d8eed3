"""The annual statement to the system operator: ``ScenarioChecks → DataFrame``.

Under Commission Regulation (EU) 2017/2196 (network code on electricity emergency and
restoration), Art. 50(1), a distribution system operator brings up to date once a year what
it told the transmission system operator under Art. 12(6)(b) about its low-frequency demand
disconnection: at which frequencies netted demand disconnection starts and what share of
netted demand each setting disconnects.  (Article numbers from memory; check them against
the published text before a statement is sent.)

One function, :func:`statement_table`, builds the table; ``statement.csv``, the ``statement``
sheet of report.xlsx, the HTML section and the console all show it.  The statement is made
from the metered year when there is one (what the scheme really held; with several metered
years one statement per calendar year, :func:`allocator.check.statement_checks`), otherwise
the first scenario judged; every output says which.

Per block: pickup frequency, time delay, RoCoF setting and its arming frequency, and the
share of netted demand armed over the valid intervals (demand > 0) of that year: mean,
minimum with its ISO 8601 local time, 5th and 95th percentiles (numpy's default, Hyndman &
Fan 1996 definition 7, as the check's statistics), then the cumulative share (this block and
every block that trips before it): its mean and its lowest value over the year with the
time.  The lowest cumulative share is the smallest total of one interval; it is never below
the sum of the blocks' minima and is usually above it, since the blocks' minima seldom fall
in the same interval.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from ..check import Check, ScenarioChecks, annual_statement, as_set, statement_checks
from ..timefmt import iso_local

CITATION = ("Commission Regulation (EU) 2017/2196, Art. 50(1): the yearly update of the "
            "communication under Art. 12(6)(b)")
TITLE = "Annual statement to the system operator: UFLS settings and netted demand armed"
EXPLANATION = (
    "Once a year the distribution system operator brings the transmission system operator "
    "up to date on its low-frequency demand disconnection. For each block this statement "
    "gives the frequency at which its relays start to trip, the time delay, and the share of "
    "netted demand (demand net of embedded generation) the block held armed over the year, "
    "interval by interval: the mean, the lowest with its local time, and the 5th and 95th "
    "percentiles. The cumulative share adds every block that trips before it. The lowest "
    "cumulative share over the year is the smallest total of any one interval; it is not the "
    "sum of the blocks' minima, which seldom fall in the same interval.")
CAUTION = ("Check the figures, the scenario they are made from and the article numbers with "
           "the system operator's own requirements before the statement is sent.")

#: statement.csv columns, in order, and the labels the sheet and the HTML page show
COLUMNS: tuple[tuple[str, str], ...] = (
    ("scenario", "scenario"),
    ("made_from", "why this scenario"),
    ("block", "block"),
    ("order", "order"),
    ("pickup_hz", "pickup frequency Hz"),
    ("delay_s", "time delay s"),
    ("rocof_hz_per_s", "RoCoF setting Hz/s"),
    ("rocof_arm_hz", "RoCoF arming frequency Hz"),
    ("armed_mean_pct", "share of netted demand armed: mean %"),
    ("armed_min_pct", "share armed: lowest %"),
    ("armed_min_local_time", "time of the lowest share (local)"),
    ("armed_p5_pct", "share armed: P5 %"),
    ("armed_p95_pct", "share armed: P95 %"),
    ("cumulative_mean_pct", "cumulative share: mean %"),
    ("lowest_cumulative_pct", "lowest cumulative share over the year %"),
    ("lowest_cumulative_local_time", "time of the lowest cumulative share (local)"),
)
LABELS = dict(COLUMNS)


def statement_basis(checks: ScenarioChecks) -> str:
    """Which scenario the statement is made from and why, in one sentence."""
    cs = statement_checks(checks)
    c = cs[0]
    if len(cs) > 1:
        return ("Made from the metered years, one statement per calendar year (scenarios "
                + ", ".join(f"'{k.scenario}'" + _partial(k) for k in cs)
                + "): what the scheme really held.")
    if c.year.source == "metered":
        return (f"Made from the metered year (scenario '{c.scenario}', "
                f"{c.year.calendar_year}): what the scheme really held.")
    return (f"Made from scenario '{c.scenario}' ({c.year.calendar_year}), the first scenario "
            "judged: no metered year was given.")


def _partial(c: Check) -> str:
    i = c.year.scenario_info
    return f" (partial, {i['coverage_pct']:.1f} % of the year)" if i.get("partial") else ""


def _lowest_cumulative_times(check: Check) -> list[str]:
    """Local time of each block's lowest cumulative share (first such interval)."""
    idx = np.flatnonzero(check.valid)
    if idx.size == 0:
        return [""] * len(check.blocks)
    t = idx[np.argmin(check.cum_share_pct[:, idx], axis=1)]
    return list(iso_local(check.year.local_times[t]))


def statement_table(checks: Check | ScenarioChecks) -> pd.DataFrame:
    """One row per block of the statement scenario, columns :data:`COLUMNS` (the scenario
    and why it was taken in the first two).

    The shares and the minimum's time are the check's block statistics (the values
    summary.json holds for that scenario); the cumulative mean and lowest are
    :func:`allocator.check.annual_statement`'s."""
    rows = []
    for c in statement_checks(as_set(checks)):
        why = ("metered year" if c.year.source == "metered" else
               "first scenario judged (no metered year)")
        cum = annual_statement(c)
        for b, s, a, t in zip(c.blocks, c.stats, cum, _lowest_cumulative_times(c)):
            rows.append((c.scenario, why, b.name, b.order, b.pickup_hz, b.delay_s,
                         np.nan if b.rocof_hz_per_s is None else b.rocof_hz_per_s,
                         np.nan if b.rocof_arm_hz is None else b.rocof_arm_hz,
                         s.mean_share_pct, s.min_share_pct, s.min_share_local_time,
                         s.p5_share_pct, s.p95_share_pct, a["cumulative_mean_pct"],
                         a["cumulative_min_pct"], t))
    return pd.DataFrame(rows, columns=[k for k, _ in COLUMNS])


__all__ = ["statement_table", "statement_basis", "CITATION", "TITLE", "EXPLANATION",
           "COLUMNS", "LABELS"]
