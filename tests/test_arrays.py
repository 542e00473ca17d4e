"""Antenna layouts: built-in invented layouts, the CSV format, the Array constructor."""

import pickle

import numpy as np
import pytest
import astropy.units as u

from synth.errors import InstrumentError
from synth.instrument.arrays import (BUILTIN_DIAMETER_M, BUILTIN_LAYOUTS, builtin_layout, random_layout,
                                     read_layout_csv, write_layout_csv)
from synth.instrument.interferometer import Array


@pytest.mark.parametrize("name", sorted(BUILTIN_LAYOUTS))
def test_builtin_csv_matches_its_seeded_generator(name):
    """The shipped CSV is the generator's output rounded to 1 mm (write_layout_csv, %.3f)."""
    gen, kw = BUILTIN_LAYOUTS[name]
    lay = builtin_layout(name)
    np.testing.assert_allclose(lay.enu_m, gen(**kw), rtol=0, atol=5e-4)
    assert (lay.diameter_m == BUILTIN_DIAMETER_M).all()


@pytest.mark.parametrize("name", sorted(BUILTIN_LAYOUTS))
def test_builtin_layouts_leave_room_for_12m_dishes(name):
    """No two pads closer than 12 m (dishes cannot overlap; common practice)."""
    e = builtin_layout(name).enu_m[:, :2]
    d = np.hypot(*(e[:, None, :] - e[None, :, :]).transpose(2, 0, 1))
    assert d[np.triu_indices(len(e), 1)].min() > 12.0


def test_builtin_layouts_span_compact_to_extended():
    """Longest baselines grow from compact-16 to wide-48 (over 30x)."""
    def bmax(name):
        e = builtin_layout(name).enu_m
        return np.max(np.linalg.norm(e[:, None] - e[None], axis=-1))
    assert bmax("wide-48") > 30 * bmax("compact-16")


def test_random_layout_min_separation_and_seed():
    a = random_layout(20, 100.0, 15.0, seed=3)
    b = random_layout(20, 100.0, 15.0, seed=3)
    np.testing.assert_array_equal(a, b)
    d = np.linalg.norm(a[:, None, :2] - a[None, :, :2], axis=-1)
    assert d[np.triu_indices(20, 1)].min() >= 15.0
    with pytest.raises(InstrumentError, match="could not place"):
        random_layout(200, 20.0, 15.0, max_tries=2000)


def test_csv_roundtrip_with_diameters(tmp_path):
    enu = np.array([[0.0, 0.0, 0.0], [25.5, -3.25, 0.5], [-40.0, 12.0, 1.0]])
    path = tmp_path / "three.csv"
    write_layout_csv(path, enu, names=["p", "q", "r"], diameter_m=np.array([12.0, 7.0, np.nan]))
    lay = read_layout_csv(path)
    assert lay.names == ("p", "q", "r")
    np.testing.assert_allclose(lay.enu_m, enu, atol=1e-9)
    arr = Array(path, diameter=10 * u.m, tsys=90 * u.K)
    np.testing.assert_array_equal(arr.diameters_m, [12.0, 7.0, 10.0])


HEADER = "name,east_m,north_m,up_m,diameter_m\n"


@pytest.mark.parametrize("body, match", [
    (HEADER + "a,0,0,0,12\nb,1,2\n", "line 3: expected 5 columns"),
    (HEADER + "a,0,0,0,12\n# note\nb,x,2,0,12\n", "line 4: east_m='x' is not a number"),
    (HEADER + "a,0,0,0,12\nb,1,2,0,-3\n", "line 3: diameter_m='-3' must be finite and > 0"),
    (HEADER + "a,0,0,0,12\na,1,2,0,12\n", "line 3: duplicate antenna name 'a'"),
    ("name,x,y,z,d\na,0,0,0,12\n", "line 1: header must be"),
    (HEADER + "a,0,0,0,12\n", "at least 2 antennas"),
    (HEADER + "a,0,0,0,12\nb,1,nan,0,12\n", "line 3: north_m='nan' must be finite"),
])
def test_bad_csv_rows_name_the_line(tmp_path, body, match):
    path = tmp_path / "bad.csv"
    path.write_text(body)
    with pytest.raises(InstrumentError, match=match):
        read_layout_csv(path)


@pytest.mark.parametrize("kw, match", [
    (dict(antennas="no-such-layout"), "no such file"),
    (dict(antennas=np.zeros((4, 2))), r"shape \(4, 2\)"),
    (dict(antennas=np.zeros((1, 3))), "n >= 2"),
    (dict(antennas=[[0, 0, 0], [1, 1, 1]] * u.s), "cannot read"),
    (dict(diameter=12), "diameter=12 must be a Quantity"),
    (dict(diameter=-1 * u.m), "must be finite and > 0"),
    (dict(latitude=100 * u.deg), r"within \[-90, 90\]"),
    (dict(elevation_limit=95 * u.deg), r"in \[0, 90\)"),
    (dict(aperture_efficiency=1.5), r"aperture_efficiency=1.5 must be a number in \(0, 1\]"),
    (dict(system_efficiency=0.0), r"system_efficiency=0.0 must be a number in \(0, 1\]"),
    (dict(fwhm_factor=3.0), r"fwhm_factor=3.0; valid: a number in \[1.0, 1.5\]"),
    (dict(antennas=[[0, 0, 0], [9, 0, 0]]), "diameter: the layout leaves antenna diameters empty"),
    (dict(tsys=-5 * u.K), "tsys"),
    (dict(primary_beam_shape="square"), "primary_beam_shape='square' is not known"),
])
def test_bad_interferometer_input(kw, match):
    with pytest.raises(InstrumentError, match=match):
        Array(**{"antennas": "ring-24", **kw})


def test_interferometer_from_quantity_pickles_and_is_read_only():
    """Quantity positions are converted to metres; the product pickles and cannot be changed."""
    enu = np.array([[0, 0, 0], [0.1, 0, 0], [0, 0.2, 0]]) * u.km
    arr = Array(enu, diameter=7 * u.m, name="tiny", tsys=90 * u.K)
    np.testing.assert_allclose(arr.positions_m[1], [100.0, 0, 0])
    assert arr.name == "tiny" and arr.n_antennas == 3
    assert arr.total_efficiency == pytest.approx(0.9 * 0.7)   # system x aperture defaults
    with pytest.raises(ValueError):
        arr.positions_m[0, 0] = 5.0
    back = pickle.loads(pickle.dumps(arr))
    np.testing.assert_array_equal(back.positions_m, arr.positions_m)
    assert back.diameter == 7 * u.m
