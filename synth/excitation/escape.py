"""Escape probabilities beta(tau) for three cloud geometries.

In the escape-probability approximation the mean intensity in a line is

    J = (1 - beta) S + beta B(T_bg)

with S the line source function and beta the probability that a line photon leaves the
region (e.g. Draine 2011, "Physics of the Interstellar and Intergalactic Medium", ch. 19).
The three forms provided:

``"expanding"``
    Sobolev / large-velocity-gradient (LVG) expanding flow (Sobolev 1960; Castor 1970, MNRAS 149, 111;
    Goldreich & Kwan 1974, ApJ 189, 441): ``beta = (1 - exp(-tau)) / tau``.
``"uniform-sphere"``
    Static uniform sphere, tau the optical depth across the diameter (Osterbrock,
    "Astrophysics of Gaseous Nebulae"; Osterbrock & Ferland 2006):
    ``beta = (1.5/tau) [1 - 2/tau^2 + (2/tau + 2/tau^2) exp(-tau)]``.
``"plane-slab"``
    Plane-parallel slab (de Jong, Boland & Dalgarno 1980, A&A 91, 68):
    ``beta = (1 - exp(-3 tau)) / (3 tau)``.

All three tend to 1 as tau -> 0 and are evaluated without cancellation there: the expanding
and plane-slab forms through ``expm1``, the sphere through its Taylor series for |tau| < 0.1,

    beta_sphere = 3 sum_j (-1)^j (j + 2) / (j + 3)! tau^j = 1 - 3 tau/8 + tau^2/10 - ...

(derived from the closed form). A negative tau (population inversion) is evaluated at
``max(tau, TAU_MIN)``: a bounded choice that keeps the iteration stable; strong masers are
outside what an escape probability can describe.

The values were called "lvg", "sphere" and "slab" before; those spellings are refused with a
one-line hint to the new name (:data:`RENAMED_GEOMETRIES`).
"""

import math

import numpy as np

from ..errors import ExcitationError

__all__ = ["GEOMETRIES", "RENAMED_GEOMETRIES", "TAU_MIN", "check_geometry",
           "escape_probability", "escape_probability_derivative"]

#: Escape-probability geometries, see the module docstring.
GEOMETRIES = ("expanding", "uniform-sphere", "plane-slab")

#: Former spellings of the geometry values -> their names now (refused with this hint).
RENAMED_GEOMETRIES = {"lvg": "expanding", "sphere": "uniform-sphere", "slab": "plane-slab"}

#: Lower bound on the optical depth used in beta (inverted lines), see module docstring.
TAU_MIN = -1.0

_SERIES_TAU = 0.1
_SPHERE_SERIES = np.array([3.0 * (-1) ** j * (j + 2) / math.factorial(j + 3) for j in range(10)])


def _beta_lvg(tau):
    """(1 - e^-tau) / tau, exact to rounding for any tau != 0; 1 at tau = 0."""
    out = np.ones_like(tau)
    nz = tau != 0.0
    out[nz] = -np.expm1(-tau[nz]) / tau[nz]
    return out


def _beta_slab(tau):
    """(1 - e^{-3 tau}) / (3 tau) (de Jong, Boland & Dalgarno 1980)."""
    return _beta_lvg(3.0 * tau)


def _beta_sphere(tau):
    """Uniform sphere (Osterbrock): closed form for |tau| >= 0.1, Taylor series below."""
    out = np.empty_like(tau)
    small = np.abs(tau) < _SERIES_TAU
    ts = tau[small]
    out[small] = np.polynomial.polynomial.polyval(ts, _SPHERE_SERIES)
    tl = tau[~small]
    inv = 1.0 / tl
    out[~small] = 1.5 * inv * (1.0 - 2.0 * inv**2 + (2.0 * inv + 2.0 * inv**2) * np.exp(-tl))
    return out


_FORMS = {"expanding": _beta_lvg, "uniform-sphere": _beta_sphere, "plane-slab": _beta_slab}

_LVG_DSERIES = np.array([-1.0 / 2.0, 1.0 / 3.0, -1.0 / 8.0, 1.0 / 30.0, -1.0 / 144.0])
_SPHERE_DSERIES = np.array([j * c for j, c in enumerate(_SPHERE_SERIES)][1:])


def _dbeta_lvg(tau):
    """d/dtau (1 - e^-tau)/tau = (e^-tau - beta)/tau; Taylor series for |tau| < 0.01."""
    out = np.empty_like(tau)
    small = np.abs(tau) < 0.01
    out[small] = np.polynomial.polynomial.polyval(tau[small], _LVG_DSERIES)
    tl = tau[~small]
    out[~small] = (np.exp(-tl) + np.expm1(-tl) / tl) / tl
    return out


def _dbeta_slab(tau):
    return 3.0 * _dbeta_lvg(3.0 * tau)


def _dbeta_sphere(tau):
    """Derivative of the Osterbrock sphere form; Taylor series for |tau| < 0.1."""
    out = np.empty_like(tau)
    small = np.abs(tau) < _SERIES_TAU
    out[small] = np.polynomial.polynomial.polyval(tau[small], _SPHERE_DSERIES)
    tl = tau[~small]
    inv = 1.0 / tl
    out[~small] = 1.5 * (-inv**2 + 6.0 * inv**4
                         - np.exp(-tl) * (2.0 * inv**2 + 6.0 * inv**3 + 6.0 * inv**4))
    return out


_DERIVS = {"expanding": _dbeta_lvg, "uniform-sphere": _dbeta_sphere, "plane-slab": _dbeta_slab}


def check_geometry(geometry, name="geometry"):
    """Refuse anything but one of :data:`GEOMETRIES` in one line (a former spelling gets the
    "renamed to" hint); ``name`` is how the caller spells the option."""
    if isinstance(geometry, str) and geometry in RENAMED_GEOMETRIES:
        raise ExcitationError(f'{name} "{geometry}" was renamed to '
                              f'"{RENAMED_GEOMETRIES[geometry]}"')
    if geometry not in GEOMETRIES:
        raise ExcitationError(f"{name} {geometry!r} unknown; valid: {', '.join(GEOMETRIES)}")


def _prepare(tau, geometry):
    check_geometry(geometry)
    t = np.asarray(tau, dtype=np.float64)
    if np.isnan(t).any():
        raise ExcitationError("tau holds NaN; escape probabilities need finite optical depths")
    return np.atleast_1d(t)


def escape_probability(tau, geometry="expanding"):
    """Photon escape probability beta(tau) for a geometry in :data:`GEOMETRIES`.

    Parameters
    ----------
    tau : float or array_like
        Line-centre optical depth (dimensionless). Values below :data:`TAU_MIN` are raised
        to it (population inversion, see module docstring).
    geometry : {"expanding", "uniform-sphere", "plane-slab"}
        ``"expanding"``: beta = (1 - e^-tau)/tau (Sobolev / LVG flow, Castor 1970);
        ``"uniform-sphere"``: static uniform sphere with tau across the diameter (Osterbrock);
        ``"plane-slab"``: (1 - e^{-3 tau})/(3 tau) (de Jong, Boland & Dalgarno 1980).

    Returns
    -------
    ndarray of float64, same shape as ``tau``.

    Examples
    --------
    >>> float(escape_probability(1.0, "expanding"))  # 1 - 1/e
    0.6321205588285577
    """
    t = np.maximum(_prepare(tau, geometry), TAU_MIN)
    return _FORMS[geometry](t).reshape(np.shape(tau))


def escape_probability_derivative(tau, geometry="expanding"):
    """d beta / d tau for :func:`escape_probability` (0 below :data:`TAU_MIN`, where beta is
    held constant). Used by the Newton solver; closed forms differentiated analytically,
    Taylor series at small tau."""
    t = _prepare(tau, geometry)
    out = _DERIVS[geometry](np.maximum(t, TAU_MIN))
    out[t < TAU_MIN] = 0.0
    return out.reshape(np.shape(tau))
