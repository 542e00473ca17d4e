"""Tests of synth.snapshot.yt_reader on in-memory yt datasets (no downloads)."""

import sys

import numpy as np
import astropy.units as u
import astropy.constants as const
import pytest

from synth.errors import MemoryBudgetError, MissingDependencyError, SnapshotError
from synth.snapshot.core import Snapshot

MU_G = 2.8 * const.m_p.cgs.value  # mass per H2 (Kauffmann et al. 2008, appendix A)
PC_CM = 3.0856775814913673e18  # IAU 2015 Resolution B2


def test_missing_yt_gives_install_hint(monkeypatch):
    """Without yt: MissingDependencyError naming the extra to install (runs without yt)."""
    from synth.snapshot.yt_reader import read_yt
    monkeypatch.setitem(sys.modules, "yt", None)  # makes `import yt` fail
    with pytest.raises(MissingDependencyError, match='pip install "synth\\[yt\\]"'):
        read_yt("anything.h5")


@pytest.fixture(scope="module")
def yt():
    yt = pytest.importorskip("yt")
    yt.set_log_level(40)
    return yt


def fields_for(shape, seed):
    rng = np.random.default_rng(seed)
    rho = rng.uniform(1.0, 3.0, shape) * 1e3 * MU_G
    return {"density": (rho, "g/cm**3"),
            "temperature": (rng.uniform(10.0, 40.0, shape), "K"),
            "velocity_x": (rng.normal(0.0, 1.0, shape), "km/s"),
            "velocity_y": (rng.normal(0.0, 1e5, shape), "cm/s"),
            "velocity_z": (rng.normal(0.0, 1e3, shape), "m/s"),
            "nh2": (rho / MU_G, "cm**-3"),
            "x_co": (rng.uniform(1e-5, 1e-4, shape), "")}


@pytest.fixture(scope="module")
def uniform(yt):
    data = fields_for((8, 6, 4), 1)
    bbox = np.array([[0.0, 2.0], [0.0, 1.5], [0.0, 1.0]])
    return yt.load_uniform_grid(data, (8, 6, 4), length_unit="pc", bbox=bbox), data


@pytest.fixture(scope="module")
def amr(yt):
    """An 8^3 root grid with one refined 8^3 patch over its central 4^3 cells."""
    coarse = dict(left_edge=[0.0] * 3, right_edge=[1.0] * 3, level=0, dimensions=[8] * 3)
    fine = dict(left_edge=[0.25] * 3, right_edge=[0.75] * 3, level=1, dimensions=[8] * 3)
    coarse.update(fields_for((8, 8, 8), 2))
    fine.update(fields_for((8, 8, 8), 3))
    bbox = np.array([[0.0, 1.0]] * 3)
    ds = yt.load_amr_grids([coarse, fine], [8, 8, 8], length_unit="pc", bbox=bbox)
    return ds, coarse, fine


def test_uniform_grid_fields_and_units(uniform):
    """Fields come back in CGS: n = rho / 2.8 m_H, km/s and m/s velocities converted exactly."""
    from synth.snapshot.yt_reader import read_yt
    ds, data = uniform
    s = read_yt(ds)
    assert s.shape == (8, 6, 4)
    np.testing.assert_allclose(s.n_h2_cm3, data["density"][0] / MU_G, rtol=1e-12)
    np.testing.assert_allclose(s.t_kin_k, data["temperature"][0], rtol=1e-12)
    np.testing.assert_allclose(s.velocity_cms[0], data["velocity_x"][0] * 1e5, rtol=1e-12)
    np.testing.assert_allclose(s.velocity_cms[1], data["velocity_y"][0], rtol=1e-12)
    np.testing.assert_allclose(s.velocity_cms[2], data["velocity_z"][0] * 100, rtol=1e-12)
    assert s.cell_size_cm == pytest.approx(0.25 * PC_CM, rel=1e-9)


def test_number_density_and_abundance_mapping(uniform):
    """A number-density field and a per-cell abundance mapped by name (lists as from TOML)."""
    from synth.snapshot.yt_reader import read_yt
    ds, data = uniform
    s = read_yt(ds, fields={"n_h2": ["stream", "nh2"], "abundance": {"CO": ("stream", "x_co")}})
    np.testing.assert_allclose(s.n_h2_cm3, data["nh2"][0], rtol=1e-12)
    np.testing.assert_allclose(s.abundance_for("CO", 0.0), data["x_co"][0], rtol=1e-12)


def test_sub_region(uniform):
    """left_edge and dims cut the same cells as slicing the full grid."""
    from synth.snapshot.yt_reader import read_yt
    ds, data = uniform
    s = read_yt(ds, left_edge=[0.5, 0.25, 0.0] * u.pc, dims=(3, 2, 4))
    np.testing.assert_allclose(s.t_kin_k, data["temperature"][0][2:5, 1:3, :], rtol=1e-12)


def test_amr_covering_grid_matches_patches(amr):
    """Level 1: the refined patch's own cells inside it, coarse cells injected 2x2x2 outside
    (the covering-grid definition; yt docs, 'Examining grid data in a fixed resolution array')."""
    from synth.snapshot.yt_reader import read_yt
    ds, coarse, fine = amr
    s = read_yt(ds, level=1)
    assert s.shape == (16, 16, 16)
    expected = np.repeat(np.repeat(np.repeat(coarse["temperature"][0], 2, 0), 2, 1), 2, 2)
    expected[4:12, 4:12, 4:12] = fine["temperature"][0]
    np.testing.assert_allclose(s.t_kin_k, expected, rtol=1e-12)
    assert s.cell_size_cm == pytest.approx(PC_CM / 16, rel=1e-9)


def test_amr_same_as_covering_grid_fed_as_arrays(amr):
    """read_yt equals a Snapshot built by hand from yt's own covering grid arrays."""
    from synth.snapshot.yt_reader import read_yt
    ds, _, _ = amr
    cg = ds.covering_grid(1, left_edge=ds.domain_left_edge, dims=[16, 16, 16])
    v = np.stack([cg["gas", f"velocity_{c}"].to("km/s").d for c in "xyz"])
    by_hand = Snapshot.from_mass_density(
        cg["gas", "density"].to("g/cm**3").d * u.g / u.cm**3, cg["gas", "temperature"].d * u.K,
        v * u.km / u.s, cell_size=1 / 16 * u.pc)
    s = read_yt(ds, level=1)
    for name in ("n_h2_cm3", "t_kin_k", "velocity_cms"):
        np.testing.assert_allclose(getattr(s, name), getattr(by_hand, name), rtol=1e-10)
    assert s.cell_size_cm == pytest.approx(by_hand.cell_size_cm, rel=1e-9)


def test_overrides(uniform):
    """cell_size and sigma_turb arguments override what the dataset says."""
    from synth.snapshot.yt_reader import read_yt
    ds, _ = uniform
    s = read_yt(ds, cell_size=0.1 * u.pc, sigma_turb=0.3 * u.km / u.s)
    assert s.cell_size_cm == pytest.approx(0.1 * PC_CM)
    assert s.sigma_turb_cms == pytest.approx(0.3e5)


@pytest.mark.parametrize("kw, exc, match", [
    ({"level": 1}, SnapshotError, "level = 1 is not valid; this dataset has levels 0 to 0"),
    ({"level": -1}, SnapshotError, "level = -1 is not valid"),
    ({"fields": {"t_kin": ("gas", "temp")}}, SnapshotError,
     "field \\('gas', 'temp'\\) for 't_kin' is not in this dataset; its stored fields are "
     "stream,density"),
    ({"fields": {"t_kin": ("gas",)}}, SnapshotError, "use a \\(type, name\\) pair"),
    ({"fields": {"temperature": ("gas", "temperature")}}, SnapshotError,
     "field 'temperature' is not known"),
    ({"fields": {"n_h2": ("stream", "nh2"), "density": ("gas", "density")}}, SnapshotError,
     "both 'n_h2' and 'density'"),
    ({"fields": {"abundance": ("stream", "x_co")}}, SnapshotError, "use \\{species"),
    ({"dims": (2, 2)}, SnapshotError, "dims = \\[2, 2\\] is not valid"),
    ({"left_edge": (0, 0, 0)}, SnapshotError, "left_edge .* must be a length Quantity"),
    ({"max_bytes": 1e3}, MemoryBudgetError, "raise max_bytes"),
    ({"fields": {"vx": ("stream", "nh2")}}, SnapshotError, "'vx' has unit '1 / cm3'; a velocity component must be a speed"),
])
def test_bad_input(uniform, kw, exc, match):
    from synth.snapshot.yt_reader import read_yt
    with pytest.raises(exc, match=match):
        read_yt(uniform[0], **kw)


def test_non_cubic_cells_refused(yt):
    """Cells of 0.25 x 0.25 x 0.5 pc cannot be one Snapshot cell size."""
    from synth.snapshot.yt_reader import read_yt
    data = fields_for((4, 4, 4), 5)
    ds = yt.load_uniform_grid(data, (4, 4, 4), length_unit="pc",
                              bbox=np.array([[0.0, 1.0], [0.0, 1.0], [0.0, 2.0]]))
    with pytest.raises(SnapshotError, match="cells are not cubic"):
        read_yt(ds)
