"""Contract tests of the public API: names resolve, products pickle, inputs are not mutated."""

import pickle

import numpy as np
import pytest
import astropy.units as u

import synth


@pytest.mark.parametrize("name", synth.__all__)
def test_public_name_resolves(name):
    assert getattr(synth, name) is not None


def test_unknown_attribute():
    with pytest.raises(AttributeError, match="no attribute 'nope'"):
        synth.nope  # noqa: B018


def test_products_pickle_and_inputs_read_only():
    """Snapshot, Line, Excitation and the tile plan pickle (dask needs it); snapshot fields
    are stored read-only, and synthesize does not change a read-only input."""
    snap = synth.demo_cloud(cells=10, seed=2)
    line = synth.Line("CO", "1-0")
    exc = synth.lte_excitation(snap, line, 1e-4)
    for obj in (snap, line, exc):
        back = pickle.loads(pickle.dumps(obj))
        assert type(back) is type(obj)
    back = pickle.loads(pickle.dumps(snap))
    np.testing.assert_array_equal(back.n_h2_cm3, snap.n_h2_cm3)
    assert not snap.n_h2_cm3.flags.writeable
    n = np.full((4, 4, 4), 100.0)
    n.setflags(write=False)
    s = synth.Snapshot(n_h2=n * u.cm**-3, t_kin=np.full((4, 4, 4), 20.0) * u.K,
                       velocity=np.zeros((3, 4, 4, 4)) * u.km / u.s, cell_size=0.1 * u.pc)
    synth.synthesize(s, line, 1e-4, distance=1 * u.kpc, channel_width=0.5 * u.km / u.s)
    assert np.all(n == 100.0)


def test_synthesize_units_survive_options():
    """The cube is in K whatever the options (view, products, budget)."""
    snap = synth.demo_cloud(cells=8, seed=3)
    for kw in ({}, {"line_of_sight": "-y"}, {"memory": "50MB"}):
        cube = synth.synthesize(snap, synth.Line("CS", "2-1"), 1e-9, distance=2 * u.kpc,
                                channel_width=0.5 * u.km / u.s, **kw)
        assert cube.unit == u.K
