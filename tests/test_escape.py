"""Escape probabilities: published forms, limits, stability at small tau, derivatives."""

import numpy as np
import pytest

from synth.errors import ExcitationError
from synth.excitation.escape import (GEOMETRIES, TAU_MIN, escape_probability,
                                     escape_probability_derivative)

mpmath = pytest.importorskip("mpmath")

# Check values (computed from the closed forms of Osterbrock's uniform
# sphere, the expanding-flow (LVG) form of Castor 1970 and the slab of de Jong, Boland &
# Dalgarno 1980).
CHECK = {
    0.1: {"uniform-sphere": 0.96348, "expanding": 0.95163, "plane-slab": 0.86394},
    1.0: {"uniform-sphere": 0.70728, "expanding": 0.63212, "plane-slab": 0.31674},
    10.0: {"uniform-sphere": 0.14700, "expanding": 0.10000, "plane-slab": 0.03333},
}


@pytest.mark.parametrize("tau", sorted(CHECK))
@pytest.mark.parametrize("geometry", GEOMETRIES)
def test_check_values(tau, geometry):
    """Tabulated check values (computed from the closed forms above), 5 digits."""
    assert float(escape_probability(tau, geometry)) == pytest.approx(CHECK[tau][geometry],
                                                                     abs=6e-6)


def _mp_beta(tau, geometry):
    """The published closed forms in 50-digit arithmetic (no cancellation problem)."""
    t = mpmath.mpf(tau)
    if geometry == "expanding":
        return (1 - mpmath.exp(-t)) / t
    if geometry == "plane-slab":
        return (1 - mpmath.exp(-3 * t)) / (3 * t)
    return 1.5 / t * (1 - 2 / t**2 + (2 / t + 2 / t**2) * mpmath.exp(-t))


TAUS = [1e-9, 1e-6, 1e-4, 3e-3, 0.0099, 0.0101, 0.05, 0.0999, 0.1001, 0.3, 2.0, 30.0, 500.0,
        -1e-5, -0.05, -0.5]


@pytest.mark.parametrize("geometry", GEOMETRIES)
def test_stable_against_high_precision(geometry):
    """beta and d beta/d tau against 50-digit evaluations of the closed forms (Osterbrock;
    Castor 1970; de Jong et al. 1980): no cancellation at small tau, including tau < 0."""
    mpmath.mp.dps = 50
    taus = np.array(TAUS)
    ref = np.array([float(_mp_beta(t, geometry)) for t in TAUS])
    dref = np.array([float(mpmath.diff(lambda s: _mp_beta(s, geometry), mpmath.mpf(t)))
                     for t in TAUS])
    np.testing.assert_allclose(escape_probability(taus, geometry), ref, rtol=1e-12)
    np.testing.assert_allclose(escape_probability_derivative(taus, geometry), dref,
                               rtol=1e-9, atol=1e-15)


@pytest.mark.parametrize("geometry, thin, thick", [
    ("expanding", 0.5, 1.0), ("uniform-sphere", 3.0 / 8.0, 1.5), ("plane-slab", 1.5, 1.0 / 3.0)])
def test_limits(geometry, thin, thick):
    """Thin limit 1 - a tau and thick limit b / tau (closed forms: LVG 1 - tau/2, 1/tau;
    sphere 1 - 3 tau/8, 1.5/tau; slab 1 - 3 tau/2, 1/(3 tau))."""
    assert float(escape_probability(0.0, geometry)) == 1.0
    t = 1e-7
    assert (1.0 - float(escape_probability(t, geometry))) / t == pytest.approx(thin, rel=1e-6)
    t = 1e7
    assert float(escape_probability(t, geometry)) * t == pytest.approx(thick, rel=1e-6)
    assert float(escape_probability(np.inf, geometry)) == 0.0


@pytest.mark.parametrize("geometry", GEOMETRIES)
def test_monotone_and_bounded(geometry):
    """beta decreases monotonically from 1 to 0 for tau >= 0 (a probability)."""
    tau = np.logspace(-8, 6, 2000)
    beta = escape_probability(tau, geometry)
    assert np.all(np.diff(beta) < 0)
    assert beta.max() <= 1.0 and beta.min() > 0.0
    assert np.all(escape_probability_derivative(tau, geometry) < 0)


def test_inversion_floor_and_shape():
    """Below TAU_MIN tau is held at TAU_MIN (module docstring); shapes are kept."""
    b = escape_probability(np.array([[TAU_MIN, TAU_MIN - 5.0]]), "expanding")
    assert b.shape == (1, 2)
    assert b[0, 0] == b[0, 1] == pytest.approx(np.expm1(1.0), rel=1e-14)  # (1 - e)/(-1)
    assert escape_probability_derivative(TAU_MIN - 1.0, "plane-slab") == 0.0
    assert np.ndim(escape_probability(0.3)) == 0


@pytest.mark.parametrize("tau, geometry, match", [
    (1.0, "cylinder", "geometry 'cylinder' unknown; valid: expanding, uniform-sphere, plane-slab"),
    (np.nan, "expanding", "tau holds NaN"),
    (1.0, "slab", 'geometry "slab" was renamed to "plane-slab"'),
    (1.0, "sphere", 'geometry "sphere" was renamed to "uniform-sphere"'),
    (1.0, "lvg", 'geometry "lvg" was renamed to "expanding"'),
])
def test_bad_input(tau, geometry, match):
    with pytest.raises(ExcitationError, match=match):
        escape_probability(tau, geometry)
    with pytest.raises(ExcitationError, match=match):
        escape_probability_derivative(tau, geometry)
