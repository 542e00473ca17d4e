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

__all__ = ["airmass", "system_temperature", "ATMOSPHERE_TEMPERATURE_K"]

#: default effective temperature of the atmosphere (common practice)
ATMOSPHERE_TEMPERATURE_K = 270.0


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
