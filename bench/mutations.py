"""Named one-line mutations of the package, each run against its guarding tests (not a test).

Run:  python bench/mutations.py              # every mutation
      python bench/mutations.py M3 M7        # some, by name

Each mutation replaces one line (an exact text, which must occur in the file) in a copy of
``allocator/`` in a temporary folder, then runs its guarding test files there with the copy
first on ``PYTHONPATH``.  A mutation is *caught* when some guarding test fails, *survived*
when they all pass, *stale* when its text is no longer in the file (the code moved: update
the entry).  The table is printed at the end; the exit code is 1 when any survived or is
stale.  One mutation at a time (the machine has two cores).
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
import tempfile
import time
from dataclasses import dataclass
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


@dataclass(frozen=True)
class Mutation:
    name: str
    what: str
    file: str  # under allocator/
    old: str
    new: str
    tests: tuple[str, ...]  # test files or node ids under tests/


MUTATIONS = (
    # round 2 (the mutations the earlier outside-checks work ran)
    Mutation("R2-citation", "the statement cites Art. 35(1)", "field/statement.py",
             "Commission Regulation (EU) 2017/2196, Art. 50(1)",
             "Commission Regulation (EU) 2017/2196, Art. 35(1)", ("test_field.py",)),
    Mutation("R2-400ms", "the 400 ms operating-time rule off", "workbook.py",
             "MAX_OPERATING_TIME_S = 0.4", "MAX_OPERATING_TIME_S = 99.0",
             ("test_workbook.py",)),
    Mutation("R2-subdivision", "the holiday subdivision dropped", "timegrid.py",
             "subdiv=settings.holiday_subdivision,", "subdiv=None,", ("test_year.py",)),
    Mutation("R2-spa-temperature", "SPA ignores the site temperature", "solar.py",
             "temperature=temperature_c, **kw)", "temperature=12.0, **kw)",
             ("test_year.py",)),
    Mutation("R2-one-round", "the planner stops after one round", "plan/solve.py",
             "MAX_ROUNDS = 40", "MAX_ROUNDS = 1", ("test_plan_rounds.py",)),
    Mutation("R2-direction-blocked", "a direction-blocked relay trips on export", "armed.py",
             "        out[db] = np.maximum(net_mw[db], 0.0)", "        out[db] = net_mw[db]",
             ("test_plan_rounds.py", "test_check.py")),
    Mutation("R2-breaker", "the breaker time dropped", "frequency.py",
             "total_delay = delay + params.breaker_time_s", "total_delay = delay",
             ("test_frequency.py",)),
    # switched arming, honest
    Mutation("S-no-ops-level", "the switching-operations level removed", "plan/switched.py",
             "    res = fewest_operations(st.ex",
             "    return {'level': 'switching operations', 'claim': ''}, False\n"
             "    res = fewest_operations(st.ex", ("test_arming.py",)),
    Mutation("S-switching-off", "switchable feeders planned as fixed", "plan/switched.py",
             "    return np.array([bool(rs[m].all()) for m in units.members], dtype=bool)",
             "    return np.zeros(len(units.members), dtype=bool)",
             ("test_arming.py", "test_switched.py")),
    Mutation("S-stuck-period-0", "'if switching fails' with period 0 for every period",
             "plan/failsafe.py", "    c = run_checks(study, years, schedule[:, k])",
             "    c = run_checks(study, years, schedule[:, 0])", ("test_arming.py",)),
    Mutation("S-no-wrap", "the year-end wrap dropped from the switching calendar",
             "field/switching.py", "    prev = np.roll(per, 1)",
             "    prev = np.roll(per, 1); prev[0] = per[0]", ("test_arming.py",)),
    Mutation("S-all-remote-rows", "remote rows for every switchable relay, changed or not",
             "field/changes.py", "    sw = np.flatnonzero(study.is_remote_settable & differs)",
             "    sw = np.flatnonzero(study.is_remote_settable)", ("test_arming.py",)),
    Mutation("S-ops-first", "the objective order: operations before field changes",
             "pipeline/plan.py", "    changes = (c.field.counts.field_relays, ops)",
             "    changes = (ops, c.field.counts.field_relays)", ("test_arming.py",)),
    Mutation("S-remote-in-field", "remote-settable relays counted as field changes",
             "plan/units.py", "    change_cost[remote] = 0.0", "    pass",
             ("test_arming.py", "test_outputs_agree.py")),
    # outside checks, round 3
    Mutation("O3-tilt", "pv_tilt_deg not passed on to the weather scenario", "year.py",
             "tilt_deg=s.pv_tilt_deg,", "tilt_deg=0.0,", ("test_weather.py",)),
    Mutation("O3-albedo", "the ground albedo 0.2 → 0.5", "weather.py",
             "GROUND_ALBEDO = 0.2", "GROUND_ALBEDO = 0.5", ("test_weather.py",)),
    Mutation("O3-sky-model", "the isotropic sky instead of Hay-Davies", "weather.py",
             'albedo=albedo, model="haydavies")', 'albedo=albedo, model="isotropic")',
             ("test_weather.py",)),
    Mutation("O3-span", "the planner judges the whole metered year, not its data span",
             "plan/units.py",
             "valid = [np.flatnonzero((y.demand_mw > 0) & y.judged) for y in years]",
             "valid = [np.flatnonzero(y.demand_mw > 0) for y in years]",
             ("test_spans_and_statement.py",)),
    Mutation("O3-edge-year", "a leading edge year with under a day of readings kept",
             "metered/years.py", "    if len(years) > 1 and b[1] - t0 < MIN_EDGE_YEAR_NS:",
             "    if False:", ("test_spans_and_statement.py", "test_metered_years.py")),
    Mutation("O3-statement-year", "statement_check takes the first metered year",
             "check.py", "    return same[0] if same else cs[-1]", "    return cs[0]",
             ("test_spans_and_statement.py",)),
    Mutation("O3-gross", "shares of gross demand (net + PV) instead of netted", "check.py",
             "    share = share_pct(armed, year.demand_mw)",
             "    share = share_pct(armed, year.demand_mw + (study.pv_mw * "
             "study.settings.pv_derate).sum() * year.pv_pu)",
             ("test_spans_and_statement.py",)),
)


def _apply(tmp: Path, m: Mutation) -> bool:
    path = tmp / "allocator" / m.file
    text = path.read_text(encoding="utf-8")
    if m.old not in text:
        return False
    path.write_text(text.replace(m.old, m.new, 1), encoding="utf-8")
    return True


def run_one(m: Mutation) -> tuple[str, float, str]:
    """(caught | survived | stale, seconds, the first failing test or the summary)."""
    with tempfile.TemporaryDirectory(prefix=f"mut-{m.name}-") as d:
        tmp = Path(d)
        shutil.copytree(ROOT / "allocator", tmp / "allocator")
        shutil.copytree(ROOT / "tests", tmp / "tests")
        if (ROOT / "inputs_demo").is_dir():
            shutil.copytree(ROOT / "inputs_demo", tmp / "inputs_demo")
        if not _apply(tmp, m):
            return "stale", 0.0, f"text not found in allocator/{m.file}"
        env = dict(os.environ, PYTHONPATH=str(tmp), MPLBACKEND="Agg")
        t0 = time.perf_counter()
        r = subprocess.run([sys.executable, "-m", "pytest", "-x", "-q", "-p", "no:cacheprovider",
                            *[f"tests/{t}" for t in m.tests]], cwd=tmp, env=env,
                           capture_output=True, text=True, timeout=1800)
        sec = time.perf_counter() - t0
        lines = r.stdout.strip().splitlines()
        failed = next((ln for ln in lines if ln.startswith("FAILED")), lines[-1] if lines
                      else "")
        return ("caught" if r.returncode != 0 else "survived"), sec, failed[:110]


def main(names: list[str]) -> int:
    chosen = [m for m in MUTATIONS if m.old is not None and (not names or m.name in names)]
    rows = []
    for m in chosen:
        status, sec, detail = run_one(m)
        rows.append((m, status, sec, detail))
        print(f"{m.name}: {status} ({sec:.0f} s) {detail}", flush=True)
    print("\n| mutation | what | file | result | first failing test |")
    print("|---|---|---|---|---|")
    for m, status, sec, detail in rows:
        print(f"| {m.name} | {m.what} | allocator/{m.file} | {status} | {detail} |")
    return 1 if any(s != "caught" for _, s, _, _ in rows) else 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
