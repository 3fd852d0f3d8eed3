"""What the reports say, computed once for the workbook, the figures and the HTML page:
verdict wording, the feeder table, the relay work list, assumptions and cautions.

Nothing here writes files.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from .. import vocab
from ..armed import contribution_mw
from ..check import Check, ScenarioChecks, all_warnings
from ..domain import UNARMED

#: shown in the workbook summary and the HTML page, in this order
CAUTIONS: tuple[str, ...] = (
    "Under-frequency load shedding disconnects customers: when a block's relays operate, "
    "every customer on its feeders loses supply.",
    "Priority sites - hospitals, life-support customers, water and wastewater pumping and any "
    "other site your local rules name - must be protected as those rules require. Check that "
    "none of them is armed against those rules before adopting an allocation.",
    "The results are indicative and for planning support only. They rest on load profiles or "
    "metered data and on the PV scenarios named in this report, not on a dynamic study of "
    "the power system. A verdict holds for the scenarios judged and for no other year.",
    "The system operator's requirements, local codes and licensed engineering practice "
    "govern. This report does not replace them.",
    "Verify every relay setting (pickup frequency, time delay, RoCoF) against the approved "
    "setting sheet before any change in the field, and follow your switching and work-safety "
    "procedures.",
)

#: a window's machine kind → the word people read (one vocabulary: allocator.vocab)
KIND_WORDS = vocab.WINDOW_KINDS
UNARMED_WORD = "unarmed"

#: the summary.json rounding (allocator.safeio.write_json): 9 decimals, non-finite → empty
JSON_DECIMALS = 9


def json_number(x: object) -> float | None:
    """A statistic as summary.json stores it, so the workbook shows the very same value."""
    if x is None:
        return None
    f = float(x)
    return round(f, JSON_DECIMALS) if math.isfinite(f) else None


def rule_words(check: Check) -> str:
    s = check.study.settings
    if s.compliance_rule == "every_interval":
        return "every interval of the year must lie inside the block's band"
    if s.compliance_rule == "percentile":
        p = s.compliance_percentile
        return (f"the {p:g}th percentile of the share must be at least the band's minimum and "
                f"the {100 - p:g}th percentile at most its maximum")
    if s.compliance_rule == "mean":
        return "the mean share over the year must lie inside the block's band"
    return check.rule


def rule_percentiles(settings) -> tuple[str, str] | None:
    """``("P2", "P98")`` for the rule ``percentile:2`` (the two statistics it judges);
    None for the other rules."""
    if settings.compliance_rule != "percentile":
        return None
    p = settings.compliance_percentile
    return f"P{p:g}", f"P{100 - p:g}"


def verdict_words(check: Check) -> str:
    """The overall verdict in one plain sentence."""
    bad = [s for s in check.stats if not s.compliant]
    if not bad:
        return (f"Compliant: every block holds its band of netted demand under the rule "
                f"'{check.rule}' ({rule_words(check)}).")
    parts = []
    for s in bad:
        bits = []
        if s.intervals_below_min:
            bits.append(f"{vocab.count(s.intervals_below_min, 'interval')} below "
                        f"{s.min_pct:g} %")
        if s.intervals_above_max:
            bits.append(f"{vocab.count(s.intervals_above_max, 'interval')} above "
                        f"{s.max_pct:g} %")
        parts.append(f"{s.block} {s.status} ({', '.join(bits) or 'under the rule'})")
    verb = "falls" if len(bad) == 1 else "fall"
    return (f"Not compliant: {len(bad)} of {vocab.count(len(check.stats), 'block')} {verb} "
            f"outside {'its' if len(bad) == 1 else 'their'} band "
            f"under the rule '{check.rule}': {'; '.join(parts)}. "
            f"Worst distance outside a band: {check.worst_violation_pp:.2f} percentage points.")


def verdict_words_set(checks: ScenarioChecks) -> str:
    """The overall verdict over every scenario in one or two plain sentences."""
    if len(checks.checks) == 1:
        return verdict_words(checks.checks[0])
    bad = checks.failing_scenarios
    names = ", ".join(checks.names)
    if not bad:
        return (f"Compliant in every scenario judged ({names}): every block holds its band "
                f"of netted demand under the rule '{checks.rule}' ({rule_words(checks.checks[0])}).")
    parts = []
    for v in checks.verdicts:
        if not v.compliant:
            parts.append(f"{v.block} {v.status} in {', '.join(v.failing_scenarios)}")
    return (f"Not compliant in {len(bad)} of {vocab.count(len(checks.checks), 'scenario')} "
            f"({', '.join(bad)}): {'; '.join(parts)}. Worst distance outside a band: "
            f"{checks.worst_violation_pp:.2f} percentage points.")


def block_verdict(v) -> str:
    """A block's status word (in band / below band / above band / below and above band)
    from a BlockStats or BlockVerdict: the one vocabulary of allocator.vocab."""
    return v.status


def block_name(check: Check, idx: int) -> str:
    return UNARMED_WORD if idx == UNARMED else check.study.block_names[idx]


@dataclass(frozen=True)
class PrioritySummary:
    total: int
    armed: tuple[str, ...]  # "feeder (kind, block)"

    def words(self, policy: str) -> str:
        if self.total == 0:
            return "The workbook marks no feeder as a priority site."
        marked = (f"{vocab.count(self.total, 'feeder')} "
                  f"{'is' if self.total == 1 else 'are'} marked as "
                  f"{'a priority site' if self.total == 1 else 'priority sites'}")
        if not self.armed:
            return (f"{marked}; {'it is not' if self.total == 1 else 'none of them is'} armed "
                    f"in this allocation (priority policy '{policy}').")
        shown = ", ".join(self.armed[:10]) + (" ..." if len(self.armed) > 10 else "")
        n = len(self.armed)
        return (f"{marked}; {n} of them {'is' if n == 1 else 'are'} armed in this "
                f"allocation (priority policy '{policy}'): {shown}. "
                "Confirm this is allowed by your local rules.")


def priority_summary(check: Check) -> PrioritySummary:
    st = check.study
    armed = []
    total = 0
    for i, f in enumerate(st.feeders):
        if not f.priority:
            continue
        total += 1
        b = int(check.block_idx[i])
        if b != UNARMED:
            armed.append(f"{f.feeder_id} ({f.priority}, {st.block_names[b]})")
    return PrioritySummary(total, tuple(armed))


@dataclass(frozen=True)
class FeederContrib:
    """Per-feeder figures of its tripped MW in its block (0 when unarmed), over the intervals
    with demand > 0: mean, mean of the positive part, mean of the negative part (exports of a
    standard relay), and the value at the interval of its block's lowest share."""

    mean: np.ndarray
    mean_pos: np.ndarray
    mean_neg: np.ndarray
    at_block_min: np.ndarray
    t_min: np.ndarray  # [block] interval of each block's lowest share


_CHUNK = 256


def feeder_contrib(check: Check) -> FeederContrib:
    st = check.study
    n_f = len(st.feeders)
    valid = check.valid
    cur = np.asarray(check.block_idx, dtype=np.intp)
    nb = len(st.blocks)
    t_min = np.zeros(nb, dtype=np.intp)
    for j in range(nb):
        if valid.any():
            t_min[j] = int(np.argmin(np.where(valid, check.share_pct[j], np.inf)))
    mean = np.zeros(n_f)
    pos = np.zeros(n_f)
    neg = np.zeros(n_f)
    at = np.zeros(n_f)
    armed = np.flatnonzero(cur >= 0)
    if valid.any():
        for a in range(0, armed.size, _CHUNK):
            rows = armed[a:a + _CHUNK]
            c = contribution_mw(check.year.net_mw[rows], st.relay_code[rows])
            at[rows] = c[np.arange(rows.size), t_min[cur[rows]]]
            c = c[:, valid]
            mean[rows] = c.mean(axis=1)
            pos[rows] = np.maximum(c, 0.0).mean(axis=1)
            neg[rows] = np.minimum(c, 0.0).mean(axis=1)
    return FeederContrib(mean, pos, neg, at, t_min)


def feeder_table(check: Check, field=None, fc: FeederContrib | None = None) -> pd.DataFrame:
    """One row per feeder, in workbook order.  ``field``: the allocation's
    :class:`~allocator.field.plan.FieldPlan` (``previous_block`` is the block in service now
    and ``changed`` its kind of change, as plan.csv has them); None: nothing is compared.

    ``mean_contribution_mw``: the feeder's mean tripped MW over the intervals with demand > 0;
    ``share_of_block_pct``: that divided by its block's mean armed MW over the same intervals,
    in % (the shares of a block's feeders add up to 100)."""
    st = check.study
    y = check.year
    cur = np.asarray(check.block_idx, dtype=np.intp)
    compares = field is not None and field.compares
    prev = np.asarray(field.now_idx, dtype=np.intp) if compares else cur
    changed = (field.feeder_change != "") if compares else np.zeros(cur.size, bool)
    fc = feeder_contrib(check) if fc is None else fc
    valid = check.valid
    mean_c = fc.mean
    block_mean = (check.armed_mw[:, valid].mean(axis=1) if valid.any()
                  else np.zeros(len(st.blocks)))
    share = np.full(len(st.feeders), np.nan)
    for i in range(len(st.feeders)):
        b = cur[i]
        if b != UNARMED and block_mean[b] != 0:
            share[i] = 100.0 * mean_c[i] / block_mean[b]
    blocks = st.blocks

    def setting(attr: str) -> list[float]:
        return [getattr(blocks[b], attr) if b != UNARMED else np.nan for b in cur]

    rocof = [blocks[b].rocof_hz_per_s if b != UNARMED and blocks[b].rocof_hz_per_s is not None
             else np.nan for b in cur]
    return pd.DataFrame({
        "feeder_id": list(st.feeder_ids),
        "substation": [f.substation for f in st.feeders],
        "zone": [f.zone or "" for f in st.feeders],
        "profile": [f.profile for f in st.feeders],
        "relay": [f.relay for f in st.feeders],
        "priority": [f.priority or "" for f in st.feeders],
        "customers": [f.customers if f.customers is not None else np.nan for f in st.feeders],
        "block": [block_name(check, b) for b in cur],
        "pickup_hz": setting("pickup_hz"),
        "delay_s": setting("delay_s"),
        "rocof_hz_per_s": rocof,
        "previous_block": [block_name(check, b) for b in prev],
        "changed": changed,
        "mean_net_mw": y.net_mw.mean(axis=1),
        "min_net_mw": y.net_mw.min(axis=1),
        "max_net_mw": y.net_mw.max(axis=1),
        "mean_contribution_mw": mean_c,
        "share_of_block_pct": share,
    })


def windows_table(check: Check | ScenarioChecks) -> pd.DataFrame:
    """The windows outside a band for the reports (``status`` holds the words)."""
    return check.windows().drop(columns=["_start"], errors="ignore").copy()


def assumptions(check: Check) -> list[tuple[str, str]]:
    """(topic, text) pairs describing how the numbers were made."""
    s = check.study.settings
    y = check.year
    basis = {"feeders": "the sum of every feeder's net load in the workbook (feeders with and "
                        "without a UFLS relay)",
             "metered_total": "the metered TOTAL series of the metered file"}
    source = {"profiles": "per-unit load profiles of the workbook (season x day type x time of "
                          "day) scaled by each feeder's peak MW",
              "metered": "metered feeder data, with gaps filled from the profiles "
                         f"(gap_fill '{s.gap_fill}')"}
    nonpos = int(((check.year.demand_mw <= 0) & check.year.judged).sum())
    return [
        ("PV", f"per scenario (see the scenarios table), multiplied by pv_derate "
               f"{s.pv_derate:g} and the scenario's pv_scale: clear_sky = clear-sky output on "
               "every day at the study's latitude and longitude, which gives the lowest "
               "netted load on PV-rich feeders and so tests a block's minimum; none = no PV "
               "output (an overcast year), which raises netted demand and the share of "
               "blocks with little PV and so tests a block's maximum; weather = a weather "
               "year's irradiance. No single scenario is conservative for both edges of a "
               "band."),
        ("netted demand", f"{basis.get(s.demand_basis, s.demand_basis)}."
                          + (f" {nonpos} intervals with demand of 0 MW or less are left out of "
                             "the shares and the verdict." if nonpos else "")),
        ("compliance rule", f"'{check.rule}': {rule_words(check)}."),
        ("intervals", f"{y.n_intervals} intervals of {y.interval_minutes} minutes, local time "
                      f"{s.timezone} (daylight-saving days have 23 or 25 hours), public "
                      f"holidays of {s.holiday_country or 'no country'}"
                      f"{'-' + s.holiday_subdivision if s.holiday_subdivision else ''} counted "
                      "as Sundays."),
        ("data source", source.get(y.source, y.source) + "."),
        ("relays", "a 'standard' relay trips its feeder's net load, so an exporting feeder "
                   "counts negative; a 'direction_blocked' relay does not trip in reverse power "
                   "flow, so it counts 0 while exporting; feeders with relay 'none' never "
                   "count."),
        ("priority sites", f"priority policy '{s.priority_policy}'."),
    ]


OBJECTIVE_WORDS = {"fewest_changes": "worst violation, then fewest relay changes, then "
                                     "closest to target",
                   "closest_to_target": "worst violation, then closest to target, then "
                                        "fewest relay changes"}
STATUS_WORDS = {"in_band": "every block in band in every interval of every scenario",
                "out_of_band": "not every block can be held in band (see why)"}


@dataclass(frozen=True)
class Fact:
    """One labelled fact for people: a number (shown with ``fmt``, an xlsx number format
    such as ``0.00``, and its ``unit``) or a text.  ``text()`` is how the console and the
    HTML show it; the xlsx writes ``value`` as a number cell with ``fmt`` and the unit
    beside it."""

    label: str
    value: object
    unit: str = ""
    fmt: str | None = None

    @property
    def is_number(self) -> bool:
        return isinstance(self.value, (int, float, np.integer, np.floating)) and not \
            isinstance(self.value, bool)

    def text(self) -> str:
        v = self.value
        if v is None:
            return "none"
        if isinstance(v, (bool, np.bool_)):
            return vocab.yes_no(v)
        if self.is_number:
            dec = len(self.fmt.split(".")[1]) if self.fmt and "." in self.fmt else None
            num = (f"{float(v):.{dec}f}" if dec is not None else
                   str(int(v)) if float(v).is_integer() else f"{float(v):g}")
            return f"{num} {self.unit}".rstrip()
        return str(v)


def _num(p: dict, key: str, scale: float = 1.0):
    v = p.get(key)
    return None if v is None else scale * float(v)


#: the labels of the counts of changes (plan.json keys in allocator.plan.record), one wording
#: everywhere they are shown
FIELD_RELAYS = "relays changed in the field"
REMOTE_RELAYS = "relays set by remote schedule"
FEEDERS_CHANGED = "feeders whose block changes (field or schedule)"
SUBSTATIONS_VISITED = "substations a crew visits"


def change_facts(counts) -> list[Fact]:
    """The counts of a :class:`~allocator.plan.record.ChangeCounts`, labelled as a plan's
    facts label them (the remote count only when some relay is set by schedule)."""
    out = [Fact(FIELD_RELAYS, int(counts.field_relays), "", "0")]
    if counts.remote_relays:
        out.append(Fact(REMOTE_RELAYS, int(counts.remote_relays), "", "0"))
    return out + [Fact(FEEDERS_CHANGED, int(counts.feeders_changed), "", "0"),
                  Fact(SUBSTATIONS_VISITED, int(counts.substations), "", "0")]


def what_is_checked(field, plan_info: dict | None) -> str:
    """Which allocation a report shows: a plan, an allocation compared with the one in
    service now, or the one in service now."""
    if plan_info:
        return "a planned allocation"
    if field is not None and field.compares:
        return "a proposed assignment"
    return "the workbook's current allocation"


def plan_facts(p: dict) -> list[Fact]:
    """The plan's key facts, labelled, with units (the console, the xlsx summary and the
    HTML show these)."""
    out = [Fact("result", STATUS_WORDS.get(p.get("status", ""), str(p.get("status", ""))))]
    if p.get("switching"):  # the schedule's verdict names how it fails if switching stops
        out.append(Fact("if the switching stops (worst period)",
                        fail_words(p["switching"]["if_switching_fails"]["worst"])))
    if p.get("arming"):
        out.append(Fact("arming", f"{ARMING_WORDS.get(p['arming']['chosen'], '')} "
                        f"({p['arming']['mode']}): {p['arming']['reason']}"))
    out += [Fact("scenarios held", ", ".join(p.get("scenarios", []))),
            Fact("objective order", OBJECTIVE_WORDS.get(str(p.get("objective")),
                                                        str(p.get("objective")))),
            Fact("margin kept inside each band", float(p.get("band_margin_pp") or 0.0), "pp",
                 "0.00")]
    counts = [("field_relays_changed", FIELD_RELAYS), ("feeders_changed", FEEDERS_CHANGED),
              ("substations_visited", SUBSTATIONS_VISITED),
              ("relays_changed_lower_bound", "relay changes needed at least (solver bound)")]
    if p.get("switching") or p.get("remote_relays_changed"):
        counts.insert(1, ("remote_relays_changed", REMOTE_RELAYS))
    for key, label in counts:
        if p.get(key) is not None:
            out.append(Fact(label, int(p[key]), "", "0"))
    for i, lv in enumerate(p.get("levels", []), 1):
        out.append(Fact(f"level {i}: {lv.get('level', '')}", str(lv.get("claim", ""))))
    for key, label, unit, scale in (
            ("worst_violation_pp", "worst distance outside a band", "pp", 1.0),
            ("worst_violation_pct_of_target", "worst violation relative to the target",
             "% of target", 1.0),
            ("mean_abs_deviation_pp", "mean deviation from target", "pp", 1.0)):
        if p.get(key) is not None:
            out.append(Fact(label, _num(p, key, scale), unit, "0.00"))
    if p.get("solve_seconds") is not None:
        out.append(Fact("planning time", _num(p, "solve_seconds"), "s", "0.0"))
    if p.get("time_limit_s") is not None:
        out.append(Fact("planning time limit", _num(p, "time_limit_s"), "s", "0"))
    if "max_changes" in p:
        mc = p["max_changes"]
        out.append(Fact("most relay changes allowed", "no limit" if mc is None else int(mc),
                        "", "0"))
    if p.get("solver_version"):
        out.append(Fact("solver", str(p["solver_version"])))
    return out + switching_facts(p.get("switching"))


def switching_facts(sw: dict | None) -> list[Fact]:
    """A switched plan's facts (plan.json ``switching``): operations, feeders, field
    changes and the shares if the switching fails; none for a fixed plan."""
    if not sw:
        return []
    fail = sw["if_switching_fails"]["worst"]
    return [Fact("switching periods", ", ".join(sw["periods"])),
            Fact("feeders switched by schedule", int(sw["switched_feeders"]), "", "0"),
            Fact("switching operations per year", int(sw["switch_operations_per_year"]),
                 "", "0"),
            Fact("smallest headroom to a band", float(sw["smallest_headroom_pp"]), "pp",
                 "0.00"),
            Fact("if the switching fails: worst period to be stuck in",
                 str(fail["stuck_in_period"])),
            Fact("if the switching fails: smallest headroom",
                 float(fail["smallest_headroom_pp"]), "pp", "0.00"),
            Fact("remote switching", "depends on the control system being available; agree "
                 "the schedule and its fallback with the system operator")]


#: the side-by-side rows of the fixed and the switched plan (plan.json ``arming.plans``)
ARMING_ROWS = (("worst distance outside a band", "worst_violation_pp", "pp", "0.00"),
               ("smallest headroom to a band", "smallest_headroom_pp", "pp", "0.00"),
               (FIELD_RELAYS, "field_relays_changed", "", "0"),
               (REMOTE_RELAYS, "remote_relays_changed", "", "0"),
               (FEEDERS_CHANGED, "feeders_changed", "", "0"),
               (SUBSTATIONS_VISITED, "substations_visited", "", "0"),
               ("switching operations per year", "switch_operations_per_year", "", "0"),
               ("feeders switched by schedule", "switched_feeders", "", "0"),
               ("mean deviation from target", "mean_abs_deviation_pp", "pp", "0.00"),
               ("planning time", "solve_seconds", "s", "0.0"))
ARMING_WORDS = {"fixed": "fixed plan", "switched": "switched plan"}


def fail_words(case: dict | None) -> str:
    """One ``if_switching_fails`` case in words: the period it stops in, the weakest block,
    its share and the band edge."""
    if not case:
        return "none (no switching)"
    w = case["weakest"]
    edge = "minimum" if w["side"] == "min" else "maximum"
    state = ("in band" if case["worst_violation_pp"] <= 1e-9 else
             f"{case['worst_violation_pp']:.2f} pp outside its band")
    return (f"stuck in {case['stuck_in_period']}: block {w['block']} at {w['share_pct']:.1f} % "
            f"(band {edge} {w['band_edge_pct']:g} %), {state}")


def arming_table(p: dict | None) -> tuple[list[str], list[tuple[str, list[Fact]]]]:
    """The plans made, side by side: (plan names, [(label, a Fact per plan)]); empty when
    only one plan was made."""
    plans = (p or {}).get("arming", {}).get("plans", {})
    if len(plans) < 2:
        return [], []
    names = [n for n in ("fixed", "switched") if n in plans]
    rows = [(label, [Fact(label, plans[n].get(key), unit, fmt) for n in names])
            for label, key, unit, fmt in ARMING_ROWS]
    rows.append(("if the switching fails", [Fact("if the switching fails",
                                                 fail_words(plans[n].get("if_switching_fails")))
                                            for n in names]))
    return [ARMING_WORDS[n] for n in names], rows


def arming_words(p: dict | None) -> str:
    """Which plan is put in service and why (empty when only a fixed plan could be made)."""
    a = (p or {}).get("arming")
    if not a or len(a.get("plans", {})) < 2 and a.get("chosen") == "fixed" and \
            a.get("mode") == "auto":
        return ""
    return (f"Plan put in service: the {ARMING_WORDS.get(a['chosen'], a['chosen'])} "
            f"(arming {a['mode']}): {a['reason']}.")


def plan_details(p: dict) -> list[Fact]:
    """How the planner got there, labelled: bounds, rounds, model sizes, the heuristic
    start, the result without the cap on relay changes (max_changes), each level's method
    and time, the seed and how the levels combine.  (plan.json keys not shown here are shown elsewhere in the
    report or are the same facts in another form.)"""
    out: list[Fact] = []
    if p.get("lower_bound_worst_violation_pct_of_target") is not None:
        out.append(Fact("lowest possible worst violation (solver bound)",
                        _num(p, "lower_bound_worst_violation_pct_of_target"), "% of target",
                        "0.00"))
    if p.get("rounds") is not None:
        out.append(Fact("MILP rounds over the intervals", int(p["rounds"]), "", "0"))
    im = p.get("intervals_in_model") or {}
    for key, label in (("band_rows", "intervals held as band rows in the last model"),
                       ("deviation_sample", "intervals in the deviation sample"),
                       ("all_scenarios", "intervals of every scenario checked")):
        if im.get(key) is not None:
            out.append(Fact(label, int(im[key]), "", "0"))
    for src, head in (("heuristic_start", "heuristic start"),
                      ("alternatives", "without the cap on relay changes")):
        d = p.get(src) or {}
        if d.get("worst_violation_rel") is not None:
            out.append(Fact(f"{head}: worst violation", 100.0 * float(d["worst_violation_rel"]),
                            "% of target", "0.00"))
        if d.get("changes") is not None:
            out.append(Fact(f"{head}: relays whose setting changes", int(d["changes"]), "",
                            "0"))
        if d.get("mad_pp") is not None:
            out.append(Fact(f"{head}: mean deviation from target", float(d["mad_pp"]), "pp",
                            "0.00"))
    for i, lv in enumerate(p.get("levels", []), 1):
        if lv.get("method"):
            out.append(Fact(f"level {i}: method", str(lv["method"])))
        if lv.get("seconds") is not None:
            out.append(Fact(f"level {i}: time", float(lv["seconds"]), "s", "0.0"))
    for key, label in (("exporting_standard_relays_kept_armed",
                        "exporting feeders on standard relays kept armed"),
                       ("exporting_standard_relays_not_armed",
                        "exporting feeders on standard relays left unarmed")):
        ids = p.get(key) or []
        if ids:
            shown = ", ".join(map(str, ids[:20])) + (" ..." if len(ids) > 20 else "")
            out.append(Fact(label, f"{len(ids)}: {shown}"))
    if p.get("seed") is not None:
        out.append(Fact("random seed", int(p["seed"]), "", "0"))
    if p.get("combination"):
        out.append(Fact("how the levels are combined", str(p["combination"])))
    return out


@dataclass(frozen=True)
class PlanText:
    status: str
    key: list[Fact]
    details: list[Fact]
    explanation: list[str]
    notes: list[str]


def _lines(v: object) -> list[str]:
    if not v:
        return []
    if isinstance(v, str):
        return v.splitlines()
    if isinstance(v, (list, tuple)):
        return [str(x) for x in v]
    return [str(v)]


def plan_text(plan_info: dict | None) -> PlanText:
    """What a plan.json dict says, for people: status, the key facts, the planner's details,
    the explanation lines and the planner's notes (``events``)."""
    if not plan_info:
        return PlanText("", [], [], [], [])
    return PlanText(str(plan_info.get("status", "")), plan_facts(plan_info),
                    plan_details(plan_info), _lines(plan_info.get("explanation")),
                    _lines(plan_info.get("events")))


def class_breakdown(check: Check, fc: FeederContrib) -> dict[str, object]:
    """Armed MW per block and feeder class (profile), split into the positive part and the
    exports (negative part): as a mean over the valid intervals and at the interval of each
    block's lowest share.  Arrays ``[block, class]``."""
    st = check.study
    names = list(st.profiles.names)
    armed = np.flatnonzero(check.block_idx >= 0)
    used = sorted({st.feeders[i].profile for i in armed}, key=names.index)
    nb, nc = len(st.blocks), len(used)
    out = {k: np.zeros((nb, nc)) for k in ("mean_pos", "mean_neg", "at_pos", "at_neg")}
    for i in armed:
        j, k = int(check.block_idx[i]), used.index(st.feeders[i].profile)
        out["mean_pos"][j, k] += fc.mean_pos[i]
        out["mean_neg"][j, k] += fc.mean_neg[i]
        v = fc.at_block_min[i]
        out["at_pos" if v >= 0 else "at_neg"][j, k] += v
    dem = check.year.demand_mw
    valid = check.valid
    return {"classes": used, **out, "t_min": fc.t_min,
            "mean_demand": float(dem[valid].mean()) if valid.any() else float("nan"),
            "demand_at_min": dem[fc.t_min]}


def workbook_name(check: Check) -> str:
    return Path(check.study.path).name if check.study.path else ""
