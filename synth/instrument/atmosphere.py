"""System temperature through a plane-parallel atmosphere.

An antenna looking through an isothermal atmosphere of zenith opacity tau0 at elevation el
(airmass A = 1 / sin el, the plane-parallel approximation, good above ~15 deg) receives the
atmosphere's emission T_atm (1 - exp(-tau0 A)) on top of its receiver noise T_rx, while the
source is attenuated by exp(-tau0 A). Referred to above the atmosphere:

    T_sys = [T_rx + T_atm (1 - exp(-tau0 A))] exp(tau0 A)

(Thompson, Moran & Swenson 2017, 3rd ed., sec. 13.1; Wilson, Rohlfs & Hüttemeister 2013,
sec. 8.2 -- section numbers from memory). T_atm is the atmosphere's effective temperature,
about 0.95 of the ground temperature; 270 K is a common choice (common practice).
"""

import numpy as np

from ..errors import InstrumentError

__all__ = ["airmass", "system_temperature", "track_system_temperature",
           "ATMOSPHERE_TEMPERATURE_K", "DISH_HOUR_ANGLE_STEP_RAD"]

#: default effective temperature of the atmosphere (common practice)
ATMOSPHERE_TEMPERATURE_K = 270.0
#: a dish's track is sampled every minute of hour angle (2 pi / 1440 rad)
DISH_HOUR_ANGLE_STEP_RAD = 2.0 * np.pi / 1440.0


def airmass(elevation_rad):
    """Plane-parallel airmass 1 / sin(el)."""
    el = np.asarray(elevation_rad, dtype=np.float64)
    if np.any(el <= 0):
        raise InstrumentError("elevation: the source must be above the horizon")
    return 1.0 / np.sin(el)


def system_temperature(t_rx_k, zenith_opacity, elevation_rad, t_atm_k=ATMOSPHERE_TEMPERATURE_K):
    """T_sys (K) above the atmosphere at ``elevation_rad`` (see the module docstring)."""
    tau = float(zenith_opacity) * airmass(elevation_rad)
    return (float(t_rx_k) + float(t_atm_k) * (1.0 - np.exp(-tau))) * np.exp(tau)


def track_system_temperature(tsys_of_elevation, latitude_rad, declination_rad, hour_angles_rad,
                             elevation_limit_rad):
    """The constant T_sys (K) with the same radiometer noise as a track over the hour angles
    ``hour_angles_rad`` = (start, stop), equal time per sample, sampled every minute of hour
    angle (midpoints), samples below ``elevation_limit_rad`` left out. Samples combined with
    inverse-variance weights (sigma^2 proportional to T_sys^2) give
    T_eff = [mean T_sys^-2]^(-1/2), as for an array's visibilities.
    Returns (T_eff, the fraction of the track above the limit)."""
    from .uv import elevation
    h0, h1 = (float(h) for h in hour_angles_rad)
    n = max(1, int(np.ceil((h1 - h0) / DISH_HOUR_ANGLE_STEP_RAD)))
    h = h0 + (np.arange(n) + 0.5) * (h1 - h0) / n
    el = elevation(h, declination_rad, latitude_rad)
    up = el >= elevation_limit_rad
    if not up.any():
        raise InstrumentError(
            f"declination {np.degrees(declination_rad):.4g} deg: the source stays below the "
            f"elevation limit {np.degrees(elevation_limit_rad):.4g} deg at latitude "
            f"{np.degrees(latitude_rad):.4g} deg over hour angles "
            f"{np.degrees(h0) / 15:.4g} to {np.degrees(h1) / 15:.4g} h")
    t = np.asarray(tsys_of_elevation(el[up]), dtype=np.float64)
    return float(np.mean(t ** -2.0) ** -0.5), float(up.mean())
