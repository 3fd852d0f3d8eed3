"""Per-unit clear-sky PV output for the study site (pvlib): the ``clear_sky`` scenario.

A clear sky on every day gives the most PV and so the lowest netted load on PV-rich feeders
at every daylight interval: the hard case for a block's *minimum*.  It is not the hard case
for a block's *maximum* — clouds raise netted demand, and blocks with little PV then gain
share — which is why plans are also judged on a year without PV output and on weather years
(:mod:`allocator.scenarios`).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

#: standard test condition irradiance, W/m² (IEC 61215 STC; common practice)
STC_IRRADIANCE_W_PER_M2 = 1000.0
#: sub-sample spacing used to average irradiance over one interval, minutes
SUBSAMPLE_MINUTES = 5


def solar_position_deg(times_utc: pd.DatetimeIndex, latitude_deg: float, longitude_deg: float,
                       altitude_m: float | None = None, pressure_pa: float | None = None,
                       temperature_c: float = 12.0, delta_t_s: float | None = None
                       ) -> pd.DataFrame:
    """Topocentric solar position at the given instants, degrees: NREL SPA (Reda & Andreas,
    Solar Energy 76, 2004) as pvlib's ``nrel_numpy``.

    Columns ``apparent_zenith`` and ``apparent_elevation`` (refraction from ``pressure_pa``
    and ``temperature_c``), ``zenith``, ``elevation``, ``azimuth`` (east of north) and
    ``equation_of_time`` (minutes).  ``None`` keeps pvlib's defaults: sea level at 101325 Pa,
    and its default ΔT (TT − UT).  The PV model uses these defaults.
    """
    import pvlib

    kw = {} if delta_t_s is None else {"delta_t": delta_t_s}
    return pvlib.solarposition.get_solarposition(times_utc, latitude_deg, longitude_deg,
                                                 altitude=altitude_m, pressure=pressure_pa,
                                                 method="nrel_numpy",
                                                 temperature=temperature_c, **kw)


def clearsky_ghi_w_per_m2(times_utc: pd.DatetimeIndex, latitude_deg: float,
                          longitude_deg: float) -> np.ndarray:
    """Clear-sky global horizontal irradiance, W/m², at the given instants.

    Solar position from pvlib's NREL SPA (Reda & Andreas, Solar Energy 76, 2004) and the
    Haurwitz clear-sky model (Haurwitz, J. Meteorology 2, 1945; as implemented in
    :func:`pvlib.clearsky.haurwitz`), which needs only the apparent zenith angle and so no
    downloaded climatology.  Refraction is included through the apparent zenith.  Zero while
    the sun is below the horizon.
    """
    import pvlib

    pos = solar_position_deg(times_utc, latitude_deg, longitude_deg)
    ghi = pvlib.clearsky.haurwitz(pos["apparent_zenith"])["ghi"].to_numpy(dtype=float)
    return np.where(pos["apparent_elevation"].to_numpy() > 0.0, np.nan_to_num(ghi), 0.0)


def clearsky_pv_pu(interval_start_utc: pd.DatetimeIndex, interval_minutes: int,
                   latitude_deg: float, longitude_deg: float) -> np.ndarray:
    """Mean per-unit PV output over each interval, ``[interval]``.

    Per unit of installed capacity: horizontal clear-sky GHI / 1000 W/m², averaged over
    sub-samples every :data:`SUBSAMPLE_MINUTES` minutes (at sub-interval mid-points).  Using
    the horizontal plane is a deliberate aggregate for many roofs of mixed tilt and
    orientation; the study's ``pv_derate`` then scales it to inverter output.
    """
    n_sub = max(1, interval_minutes // SUBSAMPLE_MINUTES)
    step_ns = int(interval_minutes * 60e9 / n_sub)
    offsets_ns = ((np.arange(n_sub) + 0.5) * step_ns).astype("int64")
    start = interval_start_utc.tz_convert("UTC")
    start_ns = start.as_unit("ns").asi8
    times = pd.DatetimeIndex((start_ns[:, None] + offsets_ns[None, :]).ravel(), tz="UTC")
    ghi = clearsky_ghi_w_per_m2(times, latitude_deg, longitude_deg)
    return ghi.reshape(len(start), n_sub).mean(axis=1) / STC_IRRADIANCE_W_PER_M2
