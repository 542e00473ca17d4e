"""Tests of synth.snapshot.readers: npz, HDF5 and FITS snapshots."""

import os

import h5py
import numpy as np
import astropy.units as u
import astropy.constants as const
import pytest
from astropy.io import fits

from synth.errors import ConfigError, SnapshotError
from synth.snapshot.core import Snapshot
from synth.snapshot.readers import AXIS_ORDERS, FIELD_NAMES, FORMATS, read_snapshot, write_npz

SHAPE = (5, 4, 3)
PC_CM = 3.0856775814913673e18  # IAU 2015 Resolution B2 (pc = 648000/pi au)


@pytest.fixture(scope="module")
def snap():
    rng = np.random.default_rng(3)
    return Snapshot(n_h2=rng.uniform(10, 1e4, SHAPE) * u.cm**-3,
                    t_kin=rng.uniform(10, 50, SHAPE) * u.K,
                    velocity=rng.normal(0, 1, (3,) + SHAPE) * u.km / u.s,
                    cell_size=0.05 * u.pc, sigma_turb=0.2 * u.km / u.s,
                    abundance={"CO": rng.uniform(1e-5, 1e-4, SHAPE)})


def write_h5(path, snap, density_g=False, root_cell=True):
    with h5py.File(path, "w") as f:
        g = f.create_group("gas")
        if density_g:
            ds = g.create_dataset("rho", data=snap.n_h2_cm3 * 2.8 * const.m_p.cgs.value)
            ds.attrs["units"] = "g/cm3"
        else:
            g.create_dataset("nH2", data=snap.n_h2_cm3).attrs["units"] = "cm-3"
        g.create_dataset("T", data=snap.t_kin_k).attrs["unit"] = b"K"
        for k, name in enumerate("xyz"):
            g.create_dataset("v" + name, data=snap.velocity_cms[k] / 1e5).attrs["units"] = "km/s"
        if root_cell:
            f.attrs["cell_size"] = 0.05
            f.attrs["cell_size_unit"] = "pc"


H5_FIELDS = {"n_h2": "/gas/nH2", "t_kin": "/gas/T", "vx": "/gas/vx", "vy": "/gas/vy",
             "vz": "gas/vz"}


def fits_image(arr, name, unit):
    """FITS axis 1 = x: astropy stores numpy axes reversed, so write arr.T."""
    hdu = fits.ImageHDU(np.ascontiguousarray(arr.T), name=name)
    hdu.header["BUNIT"] = unit
    hdu.header["CDELT1"] = -0.05
    hdu.header["CUNIT1"] = "pc"
    return hdu


def fits_fields(snap):
    v = snap.velocity_cms
    return [(snap.n_h2_cm3, "N_H2", "cm-3"), (snap.t_kin_k, "T_KIN", "K"),
            (v[0], "VX", "cm/s"), (v[1], "VY", "cm/s"), (v[2], "VZ", "cm/s")]


def assert_same(a, b, rtol=1e-12):
    np.testing.assert_allclose(a.n_h2_cm3, b.n_h2_cm3, rtol=rtol)
    np.testing.assert_allclose(a.t_kin_k, b.t_kin_k, rtol=rtol)
    np.testing.assert_allclose(a.velocity_cms, b.velocity_cms, rtol=rtol)
    assert a.cell_size_cm == pytest.approx(b.cell_size_cm, rel=1e-12)


def test_npz_round_trip(snap, tmp_path):
    """write_npz then read_snapshot gives back every field exactly, abundance included."""
    path = tmp_path / "cloud.npz"
    write_npz(snap, path)
    back = read_snapshot(path)
    assert_same(back, snap, rtol=0)
    assert back.sigma_turb_cms == snap.sigma_turb_cms
    np.testing.assert_array_equal(back.abundance_for("CO", 0), snap.abundance_for("CO", 0))
    assert os.listdir(tmp_path) == ["cloud.npz"]  # no temporary file left behind


def test_npz_components_and_units(snap, tmp_path):
    """vx/vy/vz keys in m/s and cell size from the argument: converted to the same snapshot."""
    path = tmp_path / "parts.npz"
    v = snap.velocity_cms / 100.0
    np.savez(path, n_h2=snap.n_h2_cm3 * 1e6, n_h2_unit="m-3", t_kin=snap.t_kin_k,
             t_kin_unit="K", vx=v[0], vy=v[1], vz=v[2], vx_unit="m/s", vy_unit="m/s",
             vz_unit="m/s")
    back = read_snapshot(path, cell_size=0.05 * u.pc)
    assert_same(back, snap, rtol=1e-12)


def test_npz_units_from_argument(snap, tmp_path):
    """Fields stored without units take them from units=... ."""
    path = tmp_path / "bare.npz"
    np.savez(path, n_h2=snap.n_h2_cm3, t_kin=snap.t_kin_k, velocity=snap.velocity_cms / 1e5,
             cell_size=0.05)
    back = read_snapshot(path, units={"n_h2": "cm-3", "t_kin": "K", "velocity": "km/s"},
                         cell_size=0.05 * u.pc)
    assert_same(back, snap, rtol=1e-12)


def test_hdf5_mapping(snap, tmp_path):
    """HDF5 datasets mapped by the fields dict; units from 'units'/'unit' attributes."""
    path = tmp_path / "cloud.h5"
    write_h5(path, snap)
    assert_same(read_snapshot(path, fields=H5_FIELDS), snap, rtol=1e-12)


def test_hdf5_mass_density(snap, tmp_path):
    """A mass density in g/cm3 becomes n(H2) = rho / (2.8 m_H) (Kauffmann et al. 2008, app. A)."""
    path = tmp_path / "rho.hdf5"
    write_h5(path, snap, density_g=True)
    fields = dict(H5_FIELDS, density="/gas/rho")
    del fields["n_h2"]
    assert_same(read_snapshot(path, fields=fields), snap, rtol=1e-12)


def test_mass_density_in_msun_per_pc3(tmp_path):
    """1 Msun/pc^3 = 6.77e-23 g/cm^3 -> 14.5 H2 per cm^3 at 2.8 m_H (astropy constants)."""
    path = tmp_path / "msun.npz"
    np.savez(path, density=np.ones(SHAPE), density_unit="solMass / pc3", t_kin=np.full(SHAPE, 10.),
             t_kin_unit="K", velocity=np.zeros((3,) + SHAPE), velocity_unit="km/s")
    s = read_snapshot(path, cell_size=0.1 * u.pc)
    expected = (1 * u.Msun / u.pc**3 / (2.8 * const.m_p)).to_value(u.cm**-3)
    np.testing.assert_allclose(s.n_h2_cm3, expected, rtol=1e-12)
    assert expected == pytest.approx(14.5, rel=0.01)


def test_unit_in_mapping_overrides_stored(snap, tmp_path):
    """fields={'vx': {'name':..., 'unit':...}} wins over the stored attribute."""
    path = tmp_path / "cloud.h5"
    write_h5(path, snap)
    fields = dict(H5_FIELDS, vz={"name": "/gas/vz", "unit": "m/s"})
    back = read_snapshot(path, fields=fields)
    np.testing.assert_allclose(back.velocity_cms[2], snap.velocity_cms[2] / 1e3, rtol=1e-12)


def test_fits_extensions(snap, tmp_path):
    """One FITS file, one EXTNAME per field, BUNIT units, CDELT1/CUNIT1 cell size, axis 1 = x."""
    path = tmp_path / "cloud.fits"
    hdus = [fits.PrimaryHDU()] + [fits_image(a, n, un) for a, n, un in fits_fields(snap)]
    fits.HDUList(hdus).writeto(path)
    assert_same(read_snapshot(path), snap, rtol=1e-12)


def test_fits_one_file_per_field(snap, tmp_path):
    """A dict {field: file} of FITS files, each with its own BUNIT."""
    paths = {}
    for (arr, name, unit), key in zip(fits_fields(snap), ("n_h2", "t_kin", "vx", "vy", "vz")):
        paths[key] = tmp_path / f"{name}.fits"
        hdu = fits_image(arr, name, unit)
        fits.PrimaryHDU(hdu.data, hdu.header).writeto(paths[key])
    assert_same(read_snapshot(paths), snap, rtol=1e-12)


def test_axis_order_zyx(snap, tmp_path):
    """Arrays stored [z, y, x] read back as [x, y, z]; velocity components unchanged."""
    path = tmp_path / "zyx.npz"
    np.savez(path, n_h2=snap.n_h2_cm3.T, n_h2_unit="cm-3", t_kin=snap.t_kin_k.T,
             t_kin_unit="K", velocity=np.transpose(snap.velocity_cms, (0, 3, 2, 1)),
             velocity_unit="cm/s", cell_size=0.05, cell_size_unit="pc")
    assert_same(read_snapshot(path, axis_order="zyx"), snap, rtol=0)


def test_constants_exported():
    assert FORMATS == ("npz", "hdf5", "fits", "zarr") and "zyx" in AXIS_ORDERS and "n_h2" in FIELD_NAMES


def _npz(tmp_path, name="bad.npz", **arrays):
    path = tmp_path / name
    base = dict(n_h2=np.ones(SHAPE), n_h2_unit="cm-3", t_kin=np.full(SHAPE, 10.0), t_kin_unit="K",
                velocity=np.zeros((3,) + SHAPE), velocity_unit="km/s", cell_size=0.1,
                cell_size_unit="pc")
    base.update(arrays)
    np.savez(path, **{k: v for k, v in base.items() if v is not None})
    return path


@pytest.mark.parametrize("arrays, kw, exc, match", [
    ({"n_h2": None}, {}, SnapshotError, "no density: looked for 'n_h2' or 'density'.*t_kin"),
    ({"t_kin": None}, {}, SnapshotError, "field 't_kin' not found.*holds: cell_size"),
    ({"velocity": None}, {}, SnapshotError, "no velocity: looked for 'velocity'"),
    ({"t_kin_unit": None}, {}, SnapshotError, "field 't_kin' \\('t_kin'\\) has no unit"),
    ({"cell_size": None}, {}, SnapshotError, "no cell size stored"),
    ({"n_h2_unit": "furlong"}, {}, SnapshotError, "unit 'furlong', which astropy cannot parse"),
    ({"n_h2_unit": "K"}, {}, SnapshotError, "neither a number density"),
    ({"density": np.ones(SHAPE), "density_unit": "g/cm3"}, {}, SnapshotError,
     "both 'n_h2' and 'density'"),
    ({"velocity": np.zeros((2,) + SHAPE)}, {}, SnapshotError, "expected \\(3, nx, ny, nz\\)"),
    ({"t_kin": np.zeros(SHAPE)}, {}, SnapshotError, "bad.npz': t_kin has .* <= 0"),
    ({}, {"fields": {"temperature": "t"}}, ConfigError, "field 'temperature' is not known"),
    ({}, {"fields": {"t_kin": {"path": "t"}}}, ConfigError, "use a name or"),
    ({}, {"format": "vtk"}, ConfigError, "format 'vtk' is not known"),
    ({}, {"axis_order": "xzy"}, ConfigError, "axis_order 'xzy' is not known"),
])
def test_bad_npz(tmp_path, arrays, kw, exc, match):
    with pytest.raises(exc, match=match):
        read_snapshot(_npz(tmp_path, **arrays), **kw)


def test_bad_paths(tmp_path):
    with pytest.raises(SnapshotError, match="'.*missing.npz' does not exist"):
        read_snapshot(tmp_path / "missing.npz")
    with pytest.raises(ConfigError, match="cannot tell the format of .* suffix '.dat'"):
        read_snapshot(tmp_path / "cloud.dat")
    (tmp_path / "junk.h5").write_bytes(b"not hdf5")
    with pytest.raises(SnapshotError, match="not a readable HDF5 file"):
        read_snapshot(tmp_path / "junk.h5")
    with pytest.raises(ConfigError, match="dict of files is read as FITS only"):
        read_snapshot({"n_h2": "a.fits"}, format="npz")


def test_hdf5_missing_dataset_lists_what_exists(snap, tmp_path):
    """The message names the file, the missing dataset and the datasets present."""
    path = tmp_path / "cloud.h5"
    write_h5(path, snap)
    with pytest.raises(SnapshotError, match="cloud.h5': field 't_kin' not found \\(looked for "
                                            "'/gas/Temp'\\); the file holds: /gas/T, /gas/nH2"):
        read_snapshot(path, fields=dict(H5_FIELDS, t_kin="/gas/Temp"))
