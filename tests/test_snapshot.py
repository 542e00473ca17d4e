"""Tests of the Snapshot product (synth.snapshot.core) and the synth.snapshot package."""

import pickle

import numpy as np
import astropy.units as u
import astropy.constants as const
import pytest

import synth.snapshot as snapshot_pkg
from synth.errors import SnapshotError
from synth.snapshot.core import MEAN_MASS_PER_H2, Snapshot

SHAPE = (4, 3, 2)


def fields(**over):
    base = dict(n_h2=np.full(SHAPE, 1e3) * u.cm**-3, t_kin=np.full(SHAPE, 15.0) * u.K,
                velocity=np.zeros((3,) + SHAPE) * u.km / u.s, cell_size=0.1 * u.pc)
    base.update(over)
    return base


def test_fields_converted_to_cgs():
    """km/s -> cm/s, pc -> cm (IAU 2015 B2 parsec) at the boundary."""
    s = Snapshot(**fields(velocity=np.ones((3,) + SHAPE) * u.km / u.s,
                          sigma_turb=0.2 * u.km / u.s))
    assert s.velocity_cms[0, 0, 0, 0] == pytest.approx(1e5)
    assert s.cell_size_cm == pytest.approx(0.1 * 3.0856775814913673e18)
    assert s.sigma_turb_cms == pytest.approx(2e4)
    assert s.box_size.to_value(u.pc) == pytest.approx([0.4, 0.3, 0.2])


def test_mass_density_uses_2p8_mh():
    """rho = 2.8 m_H n(H2) (Kauffmann et al. 2008, A&A 487, 993, appendix A)."""
    n_cm3 = 2e4
    rho = np.full(SHAPE, n_cm3 * 2.8 * const.m_p.cgs.value) * u.g / u.cm**3
    s = Snapshot.from_mass_density(rho, np.full(SHAPE, 10.0) * u.K,
                                   np.zeros((3,) + SHAPE) * u.km / u.s, 0.1 * u.pc)
    np.testing.assert_allclose(s.n_h2_cm3, n_cm3, rtol=1e-12)
    assert MEAN_MASS_PER_H2.to_value(u.g) == pytest.approx(4.683e-24, rel=1e-3)


def test_fields_read_only_and_inputs_untouched():
    """Contract: stored arrays are read-only; a read-only input is accepted and not changed."""
    n = np.full(SHAPE, 1e3)
    n.setflags(write=False)
    s = Snapshot(**fields(n_h2=n * u.cm**-3))
    with pytest.raises(ValueError):
        s.n_h2_cm3[0, 0, 0] = 1.0
    assert n[0, 0, 0] == 1e3


def test_pickle_round_trip():
    """Products pickle (dask needs it)."""
    s = Snapshot(**fields(abundance={"CO": np.full(SHAPE, 1e-4)}))
    t = pickle.loads(pickle.dumps(s))
    np.testing.assert_array_equal(t.n_h2_cm3, s.n_h2_cm3)
    assert t.abundance_for("CO", 0.0)[0, 0, 0] == 1e-4


def test_abundance_lookup():
    """Per-species field, then the all-species field, then the tracer's default."""
    s = Snapshot(**fields(abundance={"CO": np.full(SHAPE, 1e-4)}))
    assert s.abundance_for("CO", 5e-5)[0, 0, 0] == 1e-4
    assert s.abundance_for("HCN", 5e-9) == 5e-9
    t = Snapshot(**fields(abundance=np.full(SHAPE, 2e-8)))
    assert t.abundance_for("CS", 1.0)[0, 0, 0] == 2e-8


def test_package_reexports():
    assert snapshot_pkg.Snapshot is Snapshot
    assert {"view", "read_snapshot", "write_npz", "demo_cloud", "demo_source"} <= set(
        snapshot_pkg.__all__)


@pytest.mark.parametrize("over, match", [
    ({"n_h2": np.ones(SHAPE)}, "n_h2 has no unit"),
    ({"n_h2": np.ones(SHAPE) * u.K}, "n_h2 has unit 'K'"),
    ({"n_h2": np.ones((4, 3)) * u.cm**-3}, "n_h2 must be a 3-D array"),
    ({"t_kin": np.ones((4, 3, 3)) * u.K}, "t_kin has shape"),
    ({"t_kin": np.zeros(SHAPE) * u.K}, "t_kin has 24 cell\\(s\\) <= 0"),
    ({"velocity": np.zeros(SHAPE) * u.km / u.s}, "velocity has shape"),
    ({"n_h2": np.full(SHAPE, -1.0) * u.cm**-3}, "n_h2 has 24 negative"),
    ({"n_h2": np.full(SHAPE, np.nan) * u.cm**-3}, "n_h2 has 24 non-finite"),
    ({"cell_size": -1 * u.pc}, "cell_size must be one positive length"),
    ({"sigma_turb": np.ones(3) * u.km / u.s}, "sigma_turb must be a scalar or have shape"),
    ({"abundance": {"CO": np.ones(3)}}, "abundance\\['CO'\\] must be a scalar"),
    ({"abundance": 1e-4 * u.K}, "abundance must be dimensionless"),
])
def test_bad_fields(over, match):
    with pytest.raises(SnapshotError, match=match):
        Snapshot(**fields(**over))
