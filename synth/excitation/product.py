"""The Excitation product: what radiative transfer needs from any excitation solver.

Per cell: the excitation temperature of the line and its velocity-integrated opacity
coefficient. With the normalised local line profile phi_v(v) (s/cm), the opacity per unit
length at radial velocity v is ``kappa(v) = opacity_integral * phi_v(v)`` (cm^-1), so that a
cell of depth ds has tau(v) = opacity_integral * ds * phi_v(v). For a line u -> l

    opacity_integral = (c^3 / (8 pi nu^3)) A_ul (n_l g_u / g_l - n_u)        [s^-1]

(Mangum & Shirley 2015, PASP 127, 266, eq. 29 written per unit velocity with
phi_nu = phi_v c / nu). The source function is J_nu(T_ex), see :mod:`synth.radiation`.
"""

from dataclasses import dataclass, field

import numpy as np

from ..radiation import C_CGS

__all__ = ["Excitation", "EXCITATION_METHODS", "opacity_integral"]

#: Excitation methods a tracer can ask for.
EXCITATION_METHODS = ("lte", "lvg")


def opacity_integral(nu_hz, a_ul_s, g_u, g_l, n_u_cm3, n_l_cm3):
    """Velocity-integrated line opacity coefficient, s^-1 (see module docstring)."""
    return (C_CGS**3 / (8.0 * np.pi * nu_hz**3)) * a_ul_s * (n_l_cm3 * (g_u / g_l) - n_u_cm3)


@dataclass(frozen=True, eq=False)
class Excitation:
    """Per-cell excitation of one line.

    Attributes
    ----------
    line : synth.Line
    t_ex_k : ndarray, float32, snapshot shape
        Excitation temperature, K.
    opacity_integral : ndarray, float32, snapshot shape
        Velocity-integrated opacity coefficient, s^-1 (module docstring).
    method : str
        One of :data:`EXCITATION_METHODS`.
    info : dict
        Method-specific diagnostics (e.g. achieved table accuracy for LVG).
    """

    line: object
    t_ex_k: np.ndarray
    opacity_integral: np.ndarray
    method: str
    info: dict = field(default_factory=dict)
