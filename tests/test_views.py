"""Tests of synth.snapshot.views: axis views and arbitrary rotations."""

import pickle

import numpy as np
import astropy.units as u
import pytest
from scipy.spatial.transform import Rotation

from synth.errors import SnapshotError
from synth.snapshot.core import Snapshot
from synth.snapshot.views import (AXIS_VIEWS, EDGE_MODES, ROTATION_GRIDS, rotation_matrix,
                                  view)

SHAPE = (6, 5, 4)

#: Axis view -> the same view as intrinsic z-y-z Euler angles (deg), from docs/snapshot.md.
EULER_OF_AXIS = {"z": (0, 0, 0), "-z": (0, 180, 0), "x": (0, 90, 90), "-x": (180, 90, 90),
                 "y": (90, 90, 180), "-y": (270, 90, 0)}


def make_snapshot(shape=SHAPE, velocity=(0.0, 0.0, 0.0), density=None, **kw):
    n = np.ones(shape) if density is None else density
    v = np.broadcast_to(np.asarray(velocity, float)[:, None, None, None], (3,) + shape)
    return Snapshot(n_h2=n * u.cm**-3, t_kin=np.full(shape, 20.0) * u.K,
                    velocity=np.array(v) * u.km / u.s, cell_size=0.1 * u.pc, **kw)


def gaussian_blob(shape, width_cells):
    idx = np.indices(shape, dtype=float)
    centre = (np.asarray(shape, float) - 1) / 2
    r2 = sum((idx[a] - centre[a]) ** 2 for a in range(3))
    return 1e3 * np.exp(-0.5 * r2 / width_cells**2)


def row_matrix(rows):
    R = np.zeros((3, 3))
    for a, (axis, sign) in enumerate(rows):
        R[a, axis] = sign
    return R


@pytest.mark.parametrize("los", list(AXIS_VIEWS))
def test_axis_views_are_proper_rotations(los):
    """A view is a rotation, never a mirror image: det R = +1 and R R^T = 1 (definition)."""
    R = row_matrix(AXIS_VIEWS[los])
    assert np.linalg.det(R) == pytest.approx(1.0, abs=1e-12)
    np.testing.assert_allclose(R @ R.T, np.eye(3), atol=1e-12)


@pytest.mark.parametrize("los, expected", [
    ("z", 3.0), ("-z", -3.0), ("x", 1.0), ("-x", -1.0), ("y", 2.0), ("-y", -2.0)])
def test_uniform_flow_radial_velocity(los, expected):
    """v = (1, 2, 3) km/s seen along +-axis: radial velocity = +-component (docs/guide.md sign convention)."""
    v = view(make_snapshot(velocity=(1.0, 2.0, 3.0)), los)
    np.testing.assert_allclose(v.velocity_cms[2] / 1e5, expected, rtol=1e-12)


@pytest.mark.parametrize("los, where", [
    ("z", lambda i, j, k, n: (i, j, k)),
    ("-z", lambda i, j, k, n: (n[0] - 1 - i, j, n[2] - 1 - k)),
    ("x", lambda i, j, k, n: (j, k, i)),
    ("-x", lambda i, j, k, n: (n[1] - 1 - j, k, n[0] - 1 - i)),
    ("y", lambda i, j, k, n: (k, i, j)),
    ("-y", lambda i, j, k, n: (n[2] - 1 - k, i, n[1] - 1 - j)),
])
def test_axis_view_moves_cells_as_documented(los, where):
    """A marked cell lands where the table in docs/snapshot.md says (x', y', z')."""
    dens = np.ones(SHAPE)
    dens[1, 3, 0] = 50.0
    v = view(make_snapshot(density=dens), los)
    found = np.unravel_index(np.argmax(v.n_h2_cm3), v.shape)
    assert found == where(1, 3, 0, SHAPE)


@pytest.mark.parametrize("angles", [(30.0, 40.0, 50.0), (-70.0, 120.0, 10.0)])
def test_rotation_matrix_matches_scipy(angles):
    """Intrinsic z-y'-z'' Euler matrix equals scipy's Rotation.from_euler('ZYZ') (independent)."""
    ref = Rotation.from_euler("ZYZ", angles, degrees=True).as_matrix()
    np.testing.assert_allclose(rotation_matrix(*angles), ref, atol=1e-12)


@pytest.mark.parametrize("los", list(AXIS_VIEWS))
def test_ninety_degree_rotation_equals_axis_view(los):
    """Resampling at multiples of 90 deg hits grid points: same fields as the exact axis view."""
    rng = np.random.default_rng(4)
    dens = rng.uniform(1.0, 10.0, SHAPE)
    snap = make_snapshot(density=dens, velocity=(1.0, -2.0, 0.5),
                         sigma_turb=rng.uniform(0.1, 0.3, SHAPE) * u.km / u.s,
                         abundance={"CO": rng.uniform(1e-5, 2e-4, SHAPE)})
    a, r = view(snap, los), view(snap, {"rotation": EULER_OF_AXIS[los]})
    assert a.shape == r.shape
    np.testing.assert_allclose(r.n_h2_cm3, a.n_h2_cm3, rtol=1e-9)
    np.testing.assert_allclose(r.velocity_cms, a.velocity_cms, rtol=1e-9, atol=1e-6)
    np.testing.assert_allclose(r.sigma_turb_cms, a.sigma_turb_cms, rtol=1e-9)
    np.testing.assert_allclose(r.abundance_for("CO", 0), a.abundance_for("CO", 0), rtol=1e-9)


@pytest.mark.parametrize("grid", ROTATION_GRIDS)
def test_rotation_conserves_mass_of_centred_cloud(grid):
    """Sum of n over a centred Gaussian cloud is kept within 2 % at 30 deg (conservation)."""
    shape = (24, 24, 24)
    snap = make_snapshot(shape=shape, density=gaussian_blob(shape, 3.0))
    r = view(snap, {"rotation": (30.0, 30.0, 0.0), "grid": grid})
    assert r.n_h2_cm3.sum() == pytest.approx(snap.n_h2_cm3.sum(), rel=0.02)


def test_enclosing_grid_contains_rotated_box():
    """A 45 deg turn about z of a 20x20x10 box needs ceil(20 sqrt 2) = 29 cells (geometry)."""
    r = view(make_snapshot(shape=(20, 20, 10)), {"rotation": (45.0, 0.0, 0.0)})
    assert r.shape == (29, 29, 10)


def test_rotated_uniform_flow_is_rotated_vector():
    """Inside the box a uniform flow becomes v' = M^T v (M from scipy, independent oracle)."""
    angles = (30.0, 40.0, 50.0)
    shape = (16, 16, 16)
    r = view(make_snapshot(shape=shape, velocity=(1.0, 2.0, 3.0)), {"rotation": angles,
                                                                   "grid": "same"})
    M = Rotation.from_euler("ZYZ", angles, degrees=True).as_matrix()
    centre = tuple(s // 2 for s in shape)
    np.testing.assert_allclose(r.velocity_cms[(slice(None),) + centre] / 1e5,
                               M.T @ [1.0, 2.0, 3.0], rtol=1e-9)
    # line-of-sight speed is the flow's component along the new +z axis, M[:, 2]
    assert r.velocity_cms[(2,) + centre] / 1e5 == pytest.approx(M[:, 2] @ [1.0, 2.0, 3.0])


def test_cells_outside_box_are_empty_with_nearest_temperature():
    """Corners of the enclosing grid: n = 0, v = 0 and T of the nearest original cell."""
    shape = (10, 10, 10)
    t = np.linspace(10.0, 30.0, 1000).reshape(shape)
    snap = Snapshot(n_h2=np.ones(shape) * u.cm**-3, t_kin=t * u.K,
                    velocity=np.ones((3,) + shape) * u.km / u.s, cell_size=0.1 * u.pc)
    r = view(snap, (45.0, 45.0, 0.0))
    assert r.n_h2_cm3[0, 0, 0] == 0.0
    assert np.all(r.velocity_cms[:, 0, 0, 0] == 0.0)
    assert 10.0 <= r.t_kin_k[0, 0, 0] <= 30.0


def test_view_keeps_input_and_units_and_pickles():
    """Contract: the input is untouched, cell size kept, the view pickles (dask needs it)."""
    snap = make_snapshot(velocity=(1.0, 2.0, 3.0))
    before = snap.velocity_cms.copy()
    v = snap.view({"rotation": (10.0, 20.0, 30.0) * u.deg})
    np.testing.assert_array_equal(snap.velocity_cms, before)
    assert v.cell_size_cm == snap.cell_size_cm
    again = pickle.loads(pickle.dumps(v))
    np.testing.assert_array_equal(again.n_h2_cm3, v.n_h2_cm3)


def test_euler_deg_alias():
    """The config spelling {euler_deg = [a, b, g]} gives the same view as {"rotation": ...}."""
    snap = make_snapshot(velocity=(1.0, 2.0, 3.0))
    a = view(snap, {"euler_deg": [0, 90, 90]})
    np.testing.assert_allclose(a.velocity_cms, view(snap, "x").velocity_cms, atol=1e-6)


def test_angles_in_radians_are_converted():
    """Angle Quantities are converted to degrees: pi/2 rad about y' equals 90 deg."""
    snap = make_snapshot(velocity=(1.0, 2.0, 3.0))
    a = view(snap, {"rotation": (0.0, np.pi / 2, np.pi / 2) * u.rad})
    np.testing.assert_allclose(a.velocity_cms, view(snap, "x").velocity_cms, atol=1e-6)


@pytest.mark.parametrize("los, match", [
    ("w", "line_of_sight 'w' is not known"),
    ("+x", "line_of_sight '\\+x' is not known"),
    ((1.0, 2.0), "three finite Euler angles"),
    ((np.nan, 0.0, 0.0), "three finite Euler angles"),
    ({"rot": (0, 0, 0)}, "expected one of \\('rotation', 'euler_deg'\\)"),
    ({"rotation": (0, 0, 0), "euler_deg": (0, 0, 0)}, "expected one of"),
    ({"rotation": (0, 0, 0), "grid": "huge"}, "rotation grid 'huge' is not known"),
    ({"rotation": (1, 2, 3) * u.m}, "unit 'm'; use degrees"),
    (None, "is not valid"),
    ({"rotation": (0, 0, 0), "edges": "wrap"}, "edges 'wrap' is not known; valid: nearest, "
                                               "periodic"),
])
def test_bad_line_of_sight(los, match):
    with pytest.raises(SnapshotError, match=match):
        view(make_snapshot(), los)


@pytest.mark.parametrize("edges", EDGE_MODES)
@pytest.mark.parametrize("angles", [(30.0, 40.0, 50.0), (17.0, 63.0, 0.0), (45.0, 45.0, 0.0)])
def test_rotation_conserves_mass_of_box_filling_field(edges, angles):
    """Conservation: a lognormal field filling a 32^3 box keeps its total n (mass) within
    0.5 % after a rotation by Euler angles (the rotated box has the original volume; Goldstein
    1980, rotations are volume-preserving). Zeroing the outer half-cell shell lost 10.8 %."""
    shape = (32, 32, 32)
    d = np.exp(np.random.default_rng(1).normal(0.0, 0.5, shape))
    r = view(make_snapshot(shape=shape, density=d), {"rotation": angles}, edges=edges)
    assert r.n_h2_cm3.sum() == pytest.approx(d.sum(), rel=5e-3)


def test_periodic_edges_wrap_and_fill_the_same_grid():
    """edges="periodic" with grid "same": a field periodic along x, n = 2 + cos(2 pi x / 8),
    rotated by (30, 20, 10) deg equals, at every new cell, numpy.interp with period 8 (linear
    interpolation on the periodic samples) at the old x-coordinate M (i - c) + c of the cell
    (M from scipy's Rotation, an independent oracle): no empty corners, the seam between the
    last and the first plane interpolated across. With "nearest" the corners are empty."""
    shape = (8, 8, 8)
    x = np.arange(8.0)
    d = np.broadcast_to((2.0 + np.cos(2 * np.pi * x / 8))[:, None, None], shape).copy()
    angles = (30.0, 20.0, 10.0)
    r = view(make_snapshot(shape=shape, density=d), {"rotation": angles, "grid": "same"},
             edges="periodic")
    M = Rotation.from_euler("ZYZ", angles, degrees=True).as_matrix()
    idx = np.indices(shape, dtype=float).reshape(3, -1) - 3.5
    old_x = (M @ idx)[0] + 3.5
    ref = np.interp(old_x, x, d[:, 0, 0], period=8.0).reshape(shape)
    np.testing.assert_allclose(r.n_h2_cm3, ref, rtol=1e-9)
    assert np.any((old_x > 7.0) | (old_x < 0.0))          # the seam is sampled
    near = view(make_snapshot(shape=shape, density=d), {"rotation": angles, "grid": "same"})
    assert near.n_h2_cm3[0, 0, 0] == 0.0 and r.n_h2_cm3[0, 0, 0] > 1.0


def test_edges_given_twice_refused():
    with pytest.raises(SnapshotError, match="edges given twice"):
        view(make_snapshot(), {"rotation": (1, 2, 3), "edges": "periodic"}, edges="nearest")


@pytest.mark.parametrize("edges, ok", [("periodic", True), ("nearest", True), ("wrap", False)])
def test_config_edges_key(edges, ok):
    """[cloud].edges accepts the documented modes; anything else is one ConfigError line
    naming the key, the value and the valid modes."""
    from synth.config import validate_config
    from synth.errors import ConfigError
    raw = {"cloud": {"edges": edges}, "sky": {"distance_pc": 100.0},
           "channels": {"width_kms": 0.5},
           "tracer": [{"species": "CO", "transition": "1-0", "abundance": 1e-4}]}
    if ok:
        assert validate_config(raw)["cloud"]["edges"] == edges
    else:
        with pytest.raises(ConfigError, match=r"\[cloud\]\.edges is 'wrap'; valid: nearest, "
                                              r"periodic"):
            validate_config(raw)
