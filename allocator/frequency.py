"""Aggregate system frequency after a generation loss, with UFLS blocks shedding load.

Pure functions on numpy arrays; nothing here reads files.  Everything is per unit on one base,
the system demand at the examined instant: a disturbance of ``p_step_pu = 0.1`` is a sudden
generation deficit of 10 % of demand, an armed share of 6 % is ``0.06`` pu, and the inertia
constant ``H`` is referred to that same base.

Model
-----
The low-order system frequency response (SFR) model with a reheat steam governor,
Anderson & Mirheydar, "A low-order system frequency response model", IEEE Trans. Power
Systems 5(3), 1990 (their Fig. 2), extended here by a shed-load input ``s(t)``::

    swing       2 H dΔω/dt = ΔPm − P_step + s(t) − D · (1 − s(t)) · Δω
    governor    ΔPm(p)     = −Km (1 + FH·TR·p) / (R (1 + TR·p)) · Δω(p)     (p: Laplace variable)

The governor transfer function is split as ``FH + (1 − FH)/(1 + TR·p)``, so with one lag
state ``y`` the model is the linear ODE::

    TR dy/dt   = Δω − y
    ΔPm        = −(Km / R) · (FH·Δω + (1 − FH)·y)
    2H dΔω/dt  = ΔPm − P_step + s − D·(1 − s)·Δω

with ``Δω(0) = y(0) = 0`` and frequency ``f = f0 (1 + Δω)``.  ``s(t)`` is the sum of the shares
of the blocks tripped so far (a negative share, an exporting feeder, raises net load); the
damping term scales with the load still connected.  H is the generators' inertia and does
not change when load is shed (load inertia is neglected, as in the SFR model).

UFLS relays
-----------
Each block has an under-frequency element and optionally a rate-of-change element, both
definite-time with the block's ``delay_s``:

* under-frequency: picks up when ``f`` first falls below ``pickup_hz`` (instant found by
  linear interpolation between the two computed points around the crossing: grid points,
  and trip instants inside a step);
* RoCoF: picks up when ``f`` is below ``rocof_arm_hz`` (nominal if not given) and falling
  faster than ``rocof_hz_per_s``, measured as ``(f(t − W) − f(t)) / W`` over the window
  ``W = rocof_window_s`` (frequency before the disturbance is nominal).

The element operates ``delay_s`` after pickup and the breaker opens ``breaker_time_s`` later;
the block's share is then shed as a step.  With ``relay_reset=True`` (a definite-time timer)
an element whose condition ends before ``delay_s`` has run out resets; with
``relay_reset=False`` the trip follows the first pickup unconditionally.  Each block trips
at most once, at the earlier of its two elements.

Integrator
----------
Classical fixed-step Runge-Kutta 4 on all (case × disturbance) rows at once (a loop over
time steps only).  Between trips the ODE has constant coefficients, so the RK4 step is the
same affine map at every step; it is built once per row from the RK4 stages and rebuilt when
a row's shed share changes (:func:`_rk4_propagator`).  Breaker
openings are known in advance (pickup + delay + breaker time), so a step containing one is
split at that instant for the rows concerned: RK4 to the trip instant, change ``s``, RK4 on
to the end of the step.  The discontinuity therefore never lies inside an RK4 stage and the
trip time is exact up to the pickup interpolation (error about ``|f''| dt² / (8 |f'|)``).  This
holds when ``breaker_time_s ≥ dt_s``; a trip falling inside the very step in which its pickup
is detected (delay + breaker shorter than one step) is applied at the end of that step and
the lateness is reported.  Error check: step doubling over each pair of steps without a
trip, ``|x_fine − x_coarse| / 15`` (Richardson, order 4), summed over the run.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from .domain import Block
from .system import SystemParams

# --------------------------------------------------------------------------------------------
# closed form (no shedding)
# --------------------------------------------------------------------------------------------
def sfr_constants(params: SystemParams) -> dict[str, float]:
    """Natural frequency, damping ratio, amplitude and phase of the SFR step response.

    Anderson & Mirheydar 1990, eqs. for the reduced model::

        ωn² = (D·R + Km) / (2·H·R·TR)
        ζ   = ωn · (2·H·R + (D·R + Km·FH)·TR) / (2·(D·R + Km))
        ωr  = ωn · sqrt(1 − ζ²)
        α   = sqrt((1 − 2·TR·ζ·ωn + TR²·ωn²) / (1 − ζ²))
        φ   = atan2(ωr·TR, 1 − ζ·ωn·TR) − atan2(sqrt(1 − ζ²), −ζ)

    When the response is not underdamped (ζ ≥ 1) the sinusoidal form does not exist: ωr, α
    and φ are then NaN and the closed-form functions below raise ValueError.
    """
    h, d, r = params.inertia_h_s, params.damping_d_pu, params.droop_r_pu
    tr, fh, km = params.reheat_tr_s, params.hp_fraction_fh, params.mech_gain_km
    wn = math.sqrt((d * r + km) / (2.0 * h * r * tr))
    zeta = wn * (2.0 * h * r + (d * r + km * fh) * tr) / (2.0 * (d * r + km))
    steady = r / (d * r + km)
    if zeta >= 1.0:
        return {"wn_rad_per_s": wn, "zeta": zeta, "wr_rad_per_s": math.nan, "alpha": math.nan,
                "phi_rad": math.nan, "steady_state_pu_per_pu": steady}
    root = math.sqrt(1.0 - zeta * zeta)
    wr = wn * root
    alpha = math.sqrt((1.0 - 2.0 * tr * zeta * wn + tr * tr * wn * wn) / (1.0 - zeta * zeta))
    phi = math.atan2(wr * tr, 1.0 - zeta * wn * tr) - math.atan2(root, -zeta)
    return {"wn_rad_per_s": wn, "zeta": zeta, "wr_rad_per_s": wr, "alpha": alpha, "phi_rad": phi,
            "steady_state_pu_per_pu": steady}


def _underdamped_constants(params: SystemParams) -> dict[str, float]:
    c = sfr_constants(params)
    if c["zeta"] >= 1.0:
        raise ValueError(f"SFR response is not underdamped (zeta = {c['zeta']:.3f}); "
                         "the closed form does not apply")
    return c


def closed_form_response(params: SystemParams, p_step_pu, t_s) -> np.ndarray:
    """Δω(t) in pu after a generation loss ``p_step_pu`` (> 0) with no load shed.

    Anderson & Mirheydar 1990::

        Δω(t) = −R·P / (D·R + Km) · (1 + α·exp(−ζ·ωn·t)·sin(ωr·t + φ))

    (constants in :func:`sfr_constants`; the sign is for a loss of generation).  Broadcasts
    ``p_step_pu`` against ``t_s``.
    """
    c = _underdamped_constants(params)
    t = np.asarray(t_s, dtype=float)
    p = np.asarray(p_step_pu, dtype=float)
    shape = c["alpha"] * np.exp(-c["zeta"] * c["wn_rad_per_s"] * t) * np.sin(
        c["wr_rad_per_s"] * t + c["phi_rad"])
    return -c["steady_state_pu_per_pu"] * p * (1.0 + shape)


def closed_form_nadir_no_shedding(params: SystemParams, p_step_pu: float) -> tuple[float, float]:
    """(nadir_hz, t_nadir_s) of the SFR step response without shedding.

    The nadir is the first zero of dΔω/dt, where ``tan(ωr·t + φ) = ωr / (ζ·ωn)``; Anderson &
    Mirheydar 1990 write it ``t_z = (1/ωr)·atan(ωr·TR / (ζ·ωn·TR − 1))`` (taken on the branch
    that gives the first positive time).
    """
    c = _underdamped_constants(params)
    wr, sigma, phi = c["wr_rad_per_s"], c["zeta"] * c["wn_rad_per_s"], c["phi_rad"]
    half_period_s = math.pi / wr
    t = (math.atan2(wr, sigma) - phi) / wr
    t -= math.floor(t / half_period_s) * half_period_s  # first branch with t >= 0
    if t <= 0.0:
        t += half_period_s
    dw = float(closed_form_response(params, p_step_pu, t))
    return params.nominal_hz * (1.0 + dw), t


# --------------------------------------------------------------------------------------------
# simulation
# --------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class FrequencyResult:
    """Outcome of :func:`simulate`.  Arrays are ``[case, disturbance]`` unless noted.

    time_s              [time] grid
    disturbances_pct    [disturbance] generation losses, % of demand, in the order given
    block_names         block names, the order of the block axis
    frequency_hz        [case, disturbance, time] traces on the grid, or None
    nadir_hz, t_nadir_s lowest frequency (grid points and trip instants) and its time
    zenith_hz, t_zenith_s highest frequency at or after the nadir
    max_hz              highest frequency over the whole run
    trip_time_s         [case, disturbance, block] breaker opening time, NaN if not tripped
    tripped             [case, disturbance, block] bool
    shed_pct            total share shed at the end, % of demand
    final_hz            frequency at the end of the run
    within_limits       floor_hz ≤ f ≤ ceiling_hz over the whole run
    largest_covered_pct [case] :func:`largest_covered_pct` of this sweep: the largest loss
                        such that it and every smaller one stay within limits; NaN if even
                        the smallest does not
    error_estimate_hz   step-doubling estimate of the integration error (sum over the run)
    max_late_trip_s     largest lateness of a trip applied at a step end (0 when exact)
    floor_hz, ceiling_hz, nominal_hz  limits used
    """

    time_s: np.ndarray
    disturbances_pct: np.ndarray
    block_names: tuple[str, ...]
    frequency_hz: np.ndarray | None
    nadir_hz: np.ndarray
    t_nadir_s: np.ndarray
    zenith_hz: np.ndarray
    t_zenith_s: np.ndarray
    max_hz: np.ndarray
    trip_time_s: np.ndarray
    tripped: np.ndarray
    shed_pct: np.ndarray
    final_hz: np.ndarray
    within_limits: np.ndarray
    largest_covered_pct: np.ndarray
    error_estimate_hz: np.ndarray
    max_late_trip_s: float
    floor_hz: float
    ceiling_hz: float
    nominal_hz: float


def _rk4(w, y, h, a_ww, a_wy, b_w, i_tr):
    """One classical RK4 step of the linear SFR ODE (rows vectorized; ``h`` may be an array).

    dΔω/dt = a_ww·Δω + a_wy·y + b_w ;  dy/dt = (Δω − y)/TR
    """
    k1w = a_ww * w + a_wy * y + b_w
    k1y = (w - y) * i_tr
    hh = 0.5 * h
    w2 = w + hh * k1w
    y2 = y + hh * k1y
    k2w = a_ww * w2 + a_wy * y2 + b_w
    k2y = (w2 - y2) * i_tr
    w3 = w + hh * k2w
    y3 = y + hh * k2y
    k3w = a_ww * w3 + a_wy * y3 + b_w
    k3y = (w3 - y3) * i_tr
    w4 = w + h * k3w
    y4 = y + h * k3y
    k4w = a_ww * w4 + a_wy * y4 + b_w
    k4y = (w4 - y4) * i_tr
    h6 = h / 6.0
    return (w + h6 * (k1w + 2.0 * (k2w + k3w) + k4w),
            y + h6 * (k1y + 2.0 * (k2y + k3y) + k4y))


def _rk4_propagator(h, a_ww, a_wy, b_w, i_tr):
    """The RK4 step as an affine map: ``(Δω, y) → M·(Δω, y) + g`` for each row.

    Between trips the ODE is linear with constant coefficients, so one RK4 step of length
    ``h`` is exactly an affine map (the RK4 stability polynomial of ``h·A`` applied to the
    state, plus the matching forcing term).  Its columns are found by applying :func:`_rk4`
    to the unit states with no forcing, and ``g`` by applying it to the zero state; the map
    then costs 8 array operations per step instead of about 35.
    """
    zero = np.zeros_like(a_ww)
    one = np.ones_like(a_ww)
    m00, m10 = _rk4(one, zero, h, a_ww, a_wy, zero, i_tr)
    m01, m11 = _rk4(zero, one, h, a_ww, a_wy, zero, i_tr)
    g0, g1 = _rk4(zero, zero, h, a_ww, a_wy, b_w, i_tr)
    return [m00, m01, m10, m11, g0, g1]


def _apply(prop, w, y):
    m00, m01, m10, m11, g0, g1 = prop
    return m00 * w + m01 * y + g0, m10 * w + m11 * y + g1


def _cross_frac(a, b, level):
    """Fraction of the step at which a linear segment from a to b meets ``level``."""
    with np.errstate(divide="ignore", invalid="ignore"):
        fr = (a - level) / (a - b)
    return np.clip(np.nan_to_num(fr, nan=1.0), 0.0, 1.0)


def largest_covered_pct(disturbances_pct, within_limits) -> np.ndarray:
    """[case] largest loss such that it and every smaller loss of the sweep stay within limits.

    ``disturbances_pct``: [disturbance] in any order (a size listed twice counts as within
    limits only if every run of it is); ``within_limits``: [case, disturbance] bool.  NaN for
    a case in which even the smallest loss leaves the limits.  The one definition of the
    "largest loss kept within limits" used by the results, tables and figures.
    """
    dist = np.asarray(disturbances_pct, dtype=float).ravel()
    within = np.asarray(within_limits, dtype=bool).reshape(-1, dist.size)
    sizes, where = np.unique(dist, return_inverse=True)
    n_bad = np.zeros((sizes.size, within.shape[0]))
    np.add.at(n_bad, where.ravel(), (~within).T)
    ok_sorted = np.logical_and.accumulate(n_bad.T == 0, axis=1)  # [case, sorted size]
    covered = np.full(within.shape[0], np.nan)
    any_ok = ok_sorted[:, 0]
    last = ok_sorted.sum(axis=1) - 1
    covered[any_ok] = sizes[last[any_ok]]
    return covered


def simulate(params: SystemParams, blocks: Sequence[Block], armed_pct,
             disturbances_pct=None, duration_s: float = 60.0, dt_s: float = 0.01, *,
             keep_traces: bool = False, relay_reset: bool = True,
             error_check: bool = True) -> FrequencyResult:
    """Frequency after each generation loss, for each case of armed shares.

    Parameters
    ----------
    params : SystemParams
    blocks : UFLS blocks (``pickup_hz``, ``delay_s``, ``rocof_hz_per_s``, ``rocof_arm_hz``);
        ``rocof_hz_per_s`` is the magnitude of the falling rate (its sign is ignored).  The
        workbook requires ``rocof_arm_hz`` with every RoCoF setting; called directly, a
        missing one arms the element at nominal frequency.
    armed_pct : ``[case, block]`` (or ``[block]`` for one case) armed share of each block,
        % of demand; negative values (exporting feeders) are allowed.
    disturbances_pct : generation losses, % of demand; default ``params.disturbances_pct``.
    duration_s, dt_s : run length and fixed step; ``duration_s`` must be a multiple of dt_s.
    keep_traces : keep ``frequency_hz[case, disturbance, time]``.
    relay_reset : definite-time timers reset when the condition ends before the delay.
    error_check : compute the step-doubling error estimate (about 1.5× the work).

    The model, relay logic and integrator are described in the module docstring
    (Anderson & Mirheydar 1990 SFR model with a shed-load input).  The steps of one time
    step are the methods of :class:`_Run`.
    """
    blocks = tuple(blocks)
    armed, dist, n_steps = _checked_inputs(params, blocks, armed_pct, disturbances_pct,
                                           duration_s, dt_s)
    run = _Run(params, blocks, armed, dist, n_steps, dt_s, keep_traces=keep_traces,
               relay_reset=relay_reset, error_check=error_check)
    for k in range(n_steps):
        run.step(k)
    return run.result()


def _checked_inputs(params, blocks, armed_pct, disturbances_pct, duration_s, dt_s):
    """(armed [case, block] %, disturbances [disturbance] %, number of steps); ValueError
    for inputs :func:`simulate` cannot run."""
    nb = len(blocks)
    armed = np.asarray(armed_pct, dtype=float)
    if armed.ndim == 1:
        armed = armed[None, :]
    if armed.ndim != 2 or armed.shape[1] != nb:
        raise ValueError(f"armed_pct must have shape [case, {nb}], got {armed.shape}")
    if not np.all(np.isfinite(armed)):
        raise ValueError("armed_pct must be finite")
    dist = np.asarray(params.disturbances_pct if disturbances_pct is None else disturbances_pct,
                      dtype=float).ravel()
    if dist.size == 0 or not np.all(np.isfinite(dist)):
        raise ValueError("disturbances_pct must be a non-empty list of finite numbers")
    if not (dt_s > 0 and duration_s > 0):
        raise ValueError("duration_s and dt_s must be > 0")
    n_steps = int(round(duration_s / dt_s))
    if n_steps < 1 or abs(n_steps * dt_s - duration_s) > 1e-9 * max(1.0, duration_s):
        raise ValueError("duration_s must be a whole number of steps dt_s")
    return armed, dist, n_steps


@dataclass(frozen=True)
class _Relays:
    """Relay settings as arrays: ``[block]``, and ``[rate element]`` for the ``rc_*`` ones
    (``rc_blocks`` maps a rate element to its block)."""

    pickup: np.ndarray
    delay: np.ndarray
    total_delay: np.ndarray  # delay + breaker time
    rc_blocks: np.ndarray
    rc_set: np.ndarray  # falling rate, Hz/s (magnitude)
    rc_arm: np.ndarray  # arming frequency, Hz
    rc_total: np.ndarray
    rc_delay: np.ndarray


def _relay_settings(params: SystemParams, blocks: tuple[Block, ...]) -> _Relays:
    f0 = float(params.nominal_hz)
    pickup = np.array([b.pickup_hz for b in blocks], dtype=float)
    delay = np.array([b.delay_s for b in blocks], dtype=float)
    if np.any(delay < 0) or not np.all(np.isfinite(pickup)):
        raise ValueError("block delays must be >= 0 and pickups finite")
    total_delay = delay + params.breaker_time_s
    rc_blocks = np.array([i for i, b in enumerate(blocks) if b.rocof_hz_per_s is not None],
                         dtype=np.intp)
    rc_set = np.array([abs(blocks[i].rocof_hz_per_s) for i in rc_blocks], dtype=float)
    rc_arm = np.array([f0 if blocks[i].rocof_arm_hz is None else blocks[i].rocof_arm_hz
                       for i in rc_blocks], dtype=float)
    return _Relays(pickup, delay, total_delay, rc_blocks, rc_set, rc_arm,
                   total_delay[rc_blocks], delay[rc_blocks])


class _Run:
    """The state of one :func:`simulate` call; a row is one (case, disturbance) pair.

    :meth:`step` advances every row by one grid step: breaker openings inside the step
    (:meth:`_breaker_openings`), extremes, under-frequency and rate-of-change elements, trips
    due before the end of the step (:meth:`_late_trips`) and the step-doubling estimate.
    """

    def __init__(self, params: SystemParams, blocks: tuple[Block, ...], armed, dist,
                 n_steps: int, dt_s: float, *, keep_traces: bool, relay_reset: bool,
                 error_check: bool):
        self.params, self.dist = params, dist
        self.block_names = tuple(b.name for b in blocks)
        self.keep_traces, self.relay_reset, self.error_check = (keep_traces, relay_reset,
                                                                error_check)
        self.nb = len(blocks)
        self.n_case, self.n_dist = armed.shape[0], dist.size
        self.n = self.n_case * self.n_dist
        self.share = np.repeat(armed / 100.0, self.n_dist, axis=0)  # [row, block] pu
        self.p_pu = np.tile(dist / 100.0, self.n_case)  # [row]
        self.time_s = np.arange(n_steps + 1) * dt_s
        self.dt = float(dt_s)
        self.f0 = float(params.nominal_hz)
        # the linear ODE: dΔω/dt = a_ww·Δω + a_wy·y + b_w (module docstring)
        self.inv2h = 1.0 / (2.0 * params.inertia_h_s)
        km_r = params.mech_gain_km / params.droop_r_pu
        self.a_wy = -km_r * (1.0 - params.hp_fraction_fh) * self.inv2h
        self.a_w0 = km_r * params.hp_fraction_fh
        self.damp = params.damping_d_pu
        self.i_tr = 1.0 / params.reheat_tr_s
        self.rel = _relay_settings(params, blocks)
        self.nr = self.rel.rc_blocks.size
        self._init_state(n_steps)

    def coeffs(self, s, p):
        """(a_ww, b_w) for shed share ``s`` and loss ``p`` (pu); damping scales with 1 − s."""
        return -(self.a_w0 + self.damp * (1.0 - s)) * self.inv2h, (s - p) * self.inv2h

    def _init_state(self, n_steps: int) -> None:
        n, nb, f0 = self.n, self.nb, self.f0
        self.w, self.y, self.s = np.zeros(n), np.zeros(n), np.zeros(n)
        self.a_ww, self.b_w = self.coeffs(self.s, self.p_pu)
        self.f_prev = np.full(n, f0)
        self.below_prev = np.broadcast_to(f0 < self.rel.pickup, (n, nb)).copy()
        # pickup above nominal: timing from t = 0
        self.uf_start = np.where(self.below_prev, 0.0, np.nan)
        self.rc_start = np.full((n, self.nr), np.nan)
        self.tripped = np.zeros((n, nb), dtype=bool)
        self.trip_time = np.full((n, nb), np.nan)
        self.late_max = 0.0
        self.pending = self.next_event(np.arange(n))
        self.nadir, self.t_nadir = np.full(n, f0), np.zeros(n)
        self.zen, self.t_zen = np.full(n, f0), np.zeros(n)
        self.fmax = np.full(n, f0)
        self.traces = np.empty((n_steps + 1, n)) if self.keep_traces else None
        if self.keep_traces:
            self.traces[0] = f0
        if self.nr:
            self.lag = self.params.rocof_window_s / self.dt
            self.ring_len = int(math.ceil(self.lag)) + 2
            self.ring = np.full((self.ring_len, n), f0)
            self.rate_prev = np.zeros(n)
            self.cond_prev = np.zeros((n, self.nr), dtype=bool)
        self.err_sum = np.zeros(n)
        self.dirty = np.zeros(n, dtype=bool)
        self.w_pair = self.y_pair = None
        args = (self.a_wy, self.b_w, self.i_tr)
        self.prop = _rk4_propagator(self.dt, self.a_ww, *args)
        self.prop2 = (_rk4_propagator(2.0 * self.dt, self.a_ww, *args) if self.error_check
                      else None)

    # ---- relay bookkeeping --------------------------------------------------------------
    def schedule(self, rows):
        """Pending breaker-opening times [len(rows), nb] (inf where none)."""
        t = self.uf_start[rows] + self.rel.total_delay
        if self.nr:
            t_rc = np.full_like(t, np.nan)
            t_rc[:, self.rel.rc_blocks] = self.rc_start[rows] + self.rel.rc_total
            t = np.fmin(t, t_rc)
        return np.where(self.tripped[rows] | np.isnan(t), np.inf, t)

    def next_event(self, rows):
        t = self.schedule(rows)
        return t.min(axis=1) if self.nb else np.full(len(rows), np.inf)

    def track(self, rows, f, t):
        """Nadir and zenith at trip instants inside a step."""
        nadir, zen = self.nadir, self.zen
        lower = f < nadir[rows]
        higher = f > zen[rows]
        nadir[rows] = np.where(lower, f, nadir[rows])
        self.t_nadir[rows] = np.where(lower, t, self.t_nadir[rows])
        zen[rows] = np.where(lower | higher, f, zen[rows])
        self.t_zen[rows] = np.where(lower | higher, t, self.t_zen[rows])
        self.fmax[rows] = np.maximum(self.fmax[rows], f)

    def uf_segment(self, rows, ta, fa, tb, fb):
        """Under-frequency pickups and resets on the segment (ta, fa) → (tb, fb) of ``rows``.

        The crossing instant is interpolated linearly on the segment.  Updates ``uf_start``
        and ``below_prev``; returns ``rows``.
        """
        pickup = self.rel.pickup
        bl = fb[:, None] < pickup
        c = bl != self.below_prev[rows]
        tp = self.tripped[rows]
        ta = np.asarray(ta, dtype=float)[..., None] if np.ndim(ta) else ta
        tb = np.asarray(tb, dtype=float)[..., None] if np.ndim(tb) else tb
        tc = ta + (tb - ta) * _cross_frac(fa[:, None], fb[:, None], pickup)
        start = self.uf_start[rows]
        start = np.where(c & bl & ~tp & np.isnan(start), tc, start)
        if self.relay_reset:
            start = np.where(c & ~bl & ~tp & (tc < start + self.rel.delay), np.nan, start)
        self.uf_start[rows] = start
        self.below_prev[rows] = bl
        return rows

    def refresh(self, rows):
        """Coefficients and step maps of rows whose shed share changed."""
        self.a_ww[rows], self.b_w[rows] = self.coeffs(self.s[rows], self.p_pu[rows])
        for target, h in ((self.prop, self.dt), (self.prop2, 2.0 * self.dt)):
            if target is not None:
                for arr, new in zip(target, _rk4_propagator(h, self.a_ww[rows], self.a_wy,
                                                            self.b_w[rows], self.i_tr)):
                    arr[rows] = new

    # ---- one grid step ------------------------------------------------------------------
    def step(self, k: int) -> None:
        t0, t1 = self.time_s[k], self.time_s[k + 1]
        if self.error_check and k % 2 == 0:
            self.w_pair, self.y_pair = self.w, self.y
            self.dirty[:] = False
        w1, y1 = _apply(self.prop, self.w, self.y)
        changed: list[np.ndarray] = []
        seg_t0, f_seg = self._breaker_openings(t0, t1, w1, y1, changed)
        self.w, self.y = w1, y1
        f_new = self.f0 * (1.0 + self.w)
        self._extremes(k, t1, f_new)
        if self.nb:
            self._uf_elements(t1, seg_t0, f_seg, f_new, changed)
        if self.nr:
            self._rocof_elements(k, t0, t1, f_new, changed)
        if changed:
            self._late_trips(t1, changed)
        self.f_prev = f_new
        if self.error_check and k % 2 == 1:  # step doubling over each pair of steps
            wc, _ = _apply(self.prop2, self.w_pair, self.y_pair)
            self.err_sum += np.where(self.dirty, 0.0, np.abs(self.w - wc) / 15.0)

    def _breaker_openings(self, t0, t1, w1, y1, changed):
        """Rows with a breaker opening inside (t0, t1]: split the step at each one (RK4 to
        the instant, shed the block, RK4 on), writing the end state into ``w1``, ``y1``.

        Returns (start time, frequency) of the last segment of the step per row, for the
        under-frequency elements; scalars ``t0`` and ``f_prev`` when no row has an opening.
        """
        ev = self.pending <= t1
        if not ev.any():
            return t0, self.f_prev
        idx = np.flatnonzero(ev)
        a_wy, i_tr = self.a_wy, self.i_tr
        wr_, yr_ = self.w[idx], self.y[idx]
        sr, pr = self.s[idx], self.p_pu[idx]
        tr_ = self.schedule(idx)
        tcur = np.full(idx.size, t0)
        fcur = self.f_prev[idx]
        while True:
            tn = tr_.min(axis=1)
            due = tn <= t1
            if not due.any():
                break
            tn = np.where(due, tn, tcur)
            aw, bw = self.coeffs(sr, pr)
            wr_, yr_ = _rk4(wr_, yr_, tn - tcur, aw, a_wy, bw, i_tr)
            f_at = self.f0 * (1.0 + wr_)
            rows_due = idx[due]
            if self.nb:  # pickups between the previous point and this trip instant
                changed.append(self.uf_segment(rows_due, tcur[due], fcur[due], tn[due],
                                               f_at[due]))
            tcur, fcur = tn, f_at
            hit = (tr_ <= tcur[:, None]) & due[:, None]
            sr = sr + np.where(hit, self.share[idx], 0.0).sum(axis=1)
            ri, bi = np.nonzero(hit)
            self.tripped[idx[ri], bi] = True
            self.trip_time[idx[ri], bi] = tr_[ri, bi]
            tr_[hit] = np.inf
            self.track(rows_due, f_at[due], tcur[due])
        aw, bw = self.coeffs(sr, pr)
        wr_, yr_ = _rk4(wr_, yr_, t1 - tcur, aw, a_wy, bw, i_tr)
        w1[idx], y1[idx] = wr_, yr_
        self.s[idx] = sr
        self.refresh(idx)
        self.pending[idx] = self.next_event(idx)
        self.dirty[idx] = True
        seg_t0 = np.full(self.n, t0)
        seg_t0[idx] = tcur
        f_seg = self.f_prev.copy()
        f_seg[idx] = fcur
        return seg_t0, f_seg

    def _extremes(self, k, t1, f_new) -> None:
        """Nadir, zenith after it, highest frequency and the trace at the grid point."""
        nadir, zen = self.nadir, self.zen
        lower = f_new < nadir
        if lower.any():
            np.copyto(nadir, f_new, where=lower)
            self.t_nadir[lower] = t1
            np.copyto(zen, f_new, where=lower)
            self.t_zen[lower] = t1
        higher = f_new > zen
        if higher.any():
            np.copyto(zen, f_new, where=higher)
            self.t_zen[higher] = t1
        np.maximum(self.fmax, f_new, out=self.fmax)
        if self.keep_traces:
            self.traces[k + 1] = f_new

    def _uf_elements(self, t1, seg_t0, f_seg, f_new, changed) -> None:
        """Under-frequency pickups and resets on the last segment of the step."""
        below = f_new[:, None] < self.rel.pickup
        chg = below != self.below_prev
        if chg.any():
            rows = np.flatnonzero(chg.any(axis=1))
            ta = seg_t0 if np.isscalar(seg_t0) else seg_t0[rows]
            changed.append(self.uf_segment(rows, ta, f_seg[rows], t1, f_new[rows]))

    def _rocof_elements(self, k, t0, t1, f_new, changed) -> None:
        """Rate-of-change elements: the rate over the window from a ring of past values;
        the element is on while f < rc_arm and the rate > rc_set (instants interpolated)."""
        rel, dt = self.rel, self.dt
        self.ring[(k + 1) % self.ring_len] = f_new
        pos = (k + 1) - self.lag
        m0 = math.floor(pos)
        fr = pos - m0
        f_lag = (self.ring[m0 % self.ring_len] * (1.0 - fr)
                 + self.ring[(m0 + 1) % self.ring_len] * fr)
        rate = (f_lag - f_new) / self.params.rocof_window_s
        cond = (f_new[:, None] < rel.rc_arm) & (rate[:, None] > rel.rc_set)
        chg = cond != self.cond_prev
        if chg.any():
            rows = np.flatnonzero(chg.any(axis=1))
            c, cn, tp = chg[rows], cond[rows], self.tripped[rows][:, rel.rc_blocks]
            fa, fb = self.f_prev[rows, None], f_new[rows, None]
            ra, rb = self.rate_prev[rows, None], rate[rows, None]
            fa_ok, fb_ok = fa < rel.rc_arm, fb < rel.rc_arm
            ra_ok, rb_ok = ra > rel.rc_set, rb > rel.rc_set
            t_f = t0 + dt * _cross_frac(fa, fb, rel.rc_arm)
            t_r = t0 + dt * _cross_frac(ra, rb, rel.rc_set)
            t_on = np.maximum(np.where(fa_ok, t0, t_f), np.where(ra_ok, t0, t_r))
            t_off = np.minimum(np.where(fb_ok, t1, t_f), np.where(rb_ok, t1, t_r))
            start = self.rc_start[rows]
            on = c & cn & ~tp & np.isnan(start)
            start = np.where(on, t_on, start)
            if self.relay_reset:
                cancel = c & ~cn & ~tp & (t_off < start + rel.rc_delay)
                start = np.where(cancel, np.nan, start)
            self.rc_start[rows] = start
            changed.append(rows)
        self.cond_prev = cond
        self.rate_prev = rate

    def _late_trips(self, t1, changed) -> None:
        """New pickups whose trip falls before t1 (delay + breaker shorter than the rest of
        the step): applied at t1, lateness recorded."""
        changed_rows = np.unique(np.concatenate(changed))
        self.pending[changed_rows] = self.next_event(changed_rows)
        late = self.pending[changed_rows] <= t1
        if not late.any():
            return
        lr = changed_rows[late]
        tl = self.schedule(lr)
        hit = tl <= t1
        self.late_max = max(self.late_max, float(np.max(t1 - tl[hit])))
        ri, bi = np.nonzero(hit)
        self.tripped[lr[ri], bi] = True
        self.trip_time[lr[ri], bi] = t1
        self.s[lr] += np.where(hit, self.share[lr], 0.0).sum(axis=1)
        self.refresh(lr)
        self.pending[lr] = self.next_event(lr)
        self.dirty[lr] = True

    def result(self) -> FrequencyResult:
        shape = (self.n_case, self.n_dist)
        floor, ceiling = float(self.params.floor_hz), float(self.params.ceiling_hz)
        within = ((self.nadir >= floor) & (self.fmax <= ceiling)).reshape(shape)
        nb = self.nb
        return FrequencyResult(
            time_s=self.time_s,
            disturbances_pct=self.dist.copy(),
            block_names=self.block_names,
            frequency_hz=None if self.traces is None else
            self.traces.T.reshape(self.n_case, self.n_dist, -1).copy(),
            nadir_hz=self.nadir.reshape(shape),
            t_nadir_s=self.t_nadir.reshape(shape),
            zenith_hz=self.zen.reshape(shape),
            t_zenith_s=self.t_zen.reshape(shape),
            max_hz=self.fmax.reshape(shape),
            trip_time_s=self.trip_time.reshape(self.n_case, self.n_dist, nb),
            tripped=self.tripped.reshape(self.n_case, self.n_dist, nb),
            shed_pct=(self.s * 100.0).reshape(shape),
            final_hz=(self.f0 * (1.0 + self.w)).reshape(shape),
            within_limits=within,
            largest_covered_pct=largest_covered_pct(self.dist, within),
            error_estimate_hz=(self.f0 * self.err_sum).reshape(shape),
            max_late_trip_s=self.late_max,
            floor_hz=floor,
            ceiling_hz=ceiling,
            nominal_hz=self.f0,
        )
