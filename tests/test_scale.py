"""Chunked, on-disk and cluster execution give the same cubes as the serial path."""

import os
import threading
import time

import numpy as np
import pytest
import astropy.units as u

import synth
from synth.errors import ConfigError, MemoryBudgetError
from synth.parallel import SerialExecutor, executor_context
from synth.snapshot.lazy import SnapshotFile
from synth.snapshot.readers import write_hdf5 as _write_hdf5, write_npz
from synth.transfer.synthesize import synthesize_products
from synth.transfer.tiles import parse_memory, plan_tiles

LINE = synth.Line("13CO", "1-0")
KW = dict(distance=2 * u.kpc, channel_width=0.3 * u.km / u.s,
          velocity_range=(-12, 12) * u.km / u.s, products=("tau", "column"))


@pytest.fixture(scope="module")
def cloud():
    return synth.demo_cloud(cells=24, seed=7)


@pytest.fixture(scope="module")
def serial(cloud):
    return synthesize_products(cloud, LINE, 2e-6, **KW)


def _same(a, b, rtol=1e-6):
    np.testing.assert_allclose(a.cube.unmasked_data[:].value, b.cube.unmasked_data[:].value,
                               rtol=rtol, atol=1e-6 * float(np.max(b.cube.unmasked_data[:].value)))
    np.testing.assert_allclose(a.tau.unmasked_data[:].value, b.tau.unmasked_data[:].value,
                               rtol=rtol, atol=1e-9)
    np.testing.assert_allclose(a.column.value, b.column.value, rtol=rtol)


def test_small_memory_budget_same_cube(cloud, serial):
    """A budget that forces one-row tiles gives the same cube, tau and column (to 1e-6)."""
    plan = plan_tiles((24, 24, 24), serial.cube.shape[0], n_cubes=2, memory="0.7MB")
    assert plan.tile_rows < 6
    res = synthesize_products(cloud, LINE, 2e-6, memory="0.7MB", **KW)
    assert res.stats["tiles"] == len(plan.tiles) > 4
    _same(res, serial)


def test_budget_below_one_tile_fails_early_with_minimum(cloud):
    """A budget below the output cubes plus one tile row is refused before any work, and the
    message gives the minimum."""
    with pytest.raises(MemoryBudgetError, match=r"below the minimum .* raise --memory to at least \d+MB"):
        synthesize_products(cloud, LINE, 2e-6, memory="100kB", **KW)


@pytest.mark.parametrize("text, value", [("8GB", 8e9), ("512 MiB", 512 * 2**20), (2e9, 2e9),
                                         ("1.5kb", 1500)])
def test_parse_memory(text, value):
    assert parse_memory(text) == int(value)


@pytest.mark.parametrize("text", ["lots", "-1GB", "0", "8 parsecs"])
def test_parse_memory_bad(text):
    with pytest.raises(ConfigError, match="memory budget"):
        parse_memory(text)


def _write_zarr(snap, path):
    zarr = pytest.importorskip("zarr")
    root = zarr.open_group(str(path), mode="w")
    root.attrs["cell_size"] = snap.cell_size_cm
    root.attrs["cell_size_unit"] = "cm"
    for name, arr, unit in (("n_h2", snap.n_h2_cm3, "cm-3"), ("t_kin", snap.t_kin_k, "K"),
                            ("velocity", snap.velocity_cms, "cm/s")):
        z = root.create_array(name, shape=arr.shape, dtype=arr.dtype)
        z[...] = arr
        z.attrs["units"] = unit


def _write_fits(snap, path):
    from astropy.io import fits
    hdus = [fits.PrimaryHDU()]
    for name, arr, unit in (("N_H2", snap.n_h2_cm3, "cm-3"), ("T_KIN", snap.t_kin_k, "K")):
        h = fits.ImageHDU(np.ascontiguousarray(arr.T), name=name)
        h.header["BUNIT"] = unit
        h.header["CDELT1"], h.header["CUNIT1"] = snap.cell_size_cm, "cm"
        hdus.append(h)
    for i, comp in enumerate(("VX", "VY", "VZ")):
        h = fits.ImageHDU(np.ascontiguousarray(snap.velocity_cms[i].T), name=comp)
        h.header["BUNIT"] = "cm/s"
        hdus.append(h)
    fits.HDUList(hdus).writeto(path)


@pytest.mark.parametrize("fmt", ["hdf5", "zarr", "fits"])
@pytest.mark.parametrize("los", ["z", "-x", "y"])
def test_tiled_from_disk_equals_in_memory(cloud, tmp_path, fmt, los):
    """A snapshot read slab by slab from HDF5 / zarr / FITS gives the same cube as the
    in-memory snapshot seen along the same axis (to 1e-6)."""
    path = tmp_path / {"hdf5": "c.h5", "zarr": "c.zarr", "fits": "c.fits"}[fmt]
    {"hdf5": _write_hdf5, "zarr": _write_zarr, "fits": _write_fits}[fmt](cloud, path)
    sigma = cloud.sigma_turb_cms
    sig_kw = {"sigma_turb": float(np.asarray(sigma).mean()) * u.cm / u.s} if np.ndim(sigma) == 0 \
        else None
    if sig_kw is None:
        pytest.skip("demo cloud with per-cell sigma_turb")
    src = SnapshotFile(str(path), **sig_kw)
    kw = dict(KW, line_of_sight=los)
    res = synthesize_products(src, LINE, 2e-6, memory="1MB", **kw)
    ref = synthesize_products(cloud, LINE, 2e-6, **kw)
    assert res.stats["tiles"] > 1
    _same(res, ref)


def test_lazy_block_reads_only_its_slab(cloud, tmp_path):
    """SnapshotFile.block returns exactly the view's columns x0:x1 (exact copy)."""
    path = tmp_path / "c.h5"
    _write_hdf5(cloud, path)
    src = SnapshotFile(str(path), sigma_turb=float(np.asarray(cloud.sigma_turb_cms)) * u.cm / u.s)
    for los in ("z", "-z", "x", "-y"):
        full = cloud.view(los)
        blk = src.block(5, 9, los)
        np.testing.assert_array_equal(blk.n_h2_cm3, full.n_h2_cm3[5:9])
        np.testing.assert_array_equal(blk.velocity_cms, full.velocity_cms[:, 5:9])
    with pytest.raises(ConfigError, match="load the snapshot into memory"):
        src.block(0, 2, {"euler_deg": (10, 20, 30)})


@pytest.mark.slow
def test_local_cluster_same_cube(cloud, serial):
    """LocalCluster with 2 worker processes (loopback) gives the same cube as serial."""
    pytest.importorskip("distributed")
    with executor_context(workers=2) as ex:
        assert ex.n_workers == 2
        res = synthesize_products(cloud, LINE, 2e-6, memory="1MB", executor=ex, **KW)
    _same(res, serial)


def _slow_job(i, delay):
    time.sleep(delay)
    return i * i


@pytest.mark.slow
def test_killed_worker_run_still_completes():
    """A worker process killed mid-run: dask.distributed reschedules its tasks and the run
    completes with the same result (dask.distributed docs, 'Resilience')."""
    pytest.importorskip("distributed")
    with executor_context(workers=2) as ex:
        pids = list(ex.client.run(os.getpid).values())
        killer = threading.Timer(1.0, os.kill, args=(pids[0], 9))
        killer.start()
        try:
            got = dict(ex.map(_slow_job, [(i, 0.25) for i in range(16)]))
        finally:
            killer.cancel()
    assert got == {i: i * i for i in range(16)}


def test_serial_executor_thin_cloud_matches_cellwise_analytic(cloud):
    """An explicit SerialExecutor on the (non-uniform) demo cloud at an abundance low enough
    to be thin (peak tau < 1e-3): each pixel's integrated intensity is the sum over its cells
    of (h c^3 A n_u dz / (8 pi k nu^2)) [1 - (e^{h nu/kT} - 1) / (e^{h nu/kT_bg} - 1)]
    (Mangum & Shirley 2015, PASP 127, 266, eqs. 30 and 80 in the thin limit), with n_u from
    the Boltzmann distribution summed here over the molecule's levels, within 0.2 %."""
    import astropy.constants as const
    h, k, c = const.h.cgs.value, const.k_B.cgs.value, const.c.cgs.value
    x_ab = 1e-10
    res = synthesize_products(cloud, LINE, x_ab, executor=SerialExecutor(), **KW)
    assert res.stats["tau_max"] < 1e-3
    mol, nu, a = LINE.molecule, LINE.freq_hz, LINE.a_ul_s
    t = cloud.t_kin_k[..., None]
    q = np.sum(mol.g * np.exp(-mol.energy_k / t), axis=-1)
    f_u = mol.g[LINE.upper] * np.exp(-mol.energy_k[LINE.upper] / cloud.t_kin_k) / q
    n_u = cloud.n_h2_cm3 * x_ab * f_u
    x0 = h * nu / k
    per_cell = (h * c**3 * a * n_u * cloud.cell_size_cm / (8 * np.pi * k * nu**2)
                * (1 - np.expm1(x0 / cloud.t_kin_k) / np.expm1(x0 / 2.725)))
    ref = per_cell.sum(axis=2).T / 1e5                               # K km/s, (y, x)
    got = res.cube.unmasked_data[:].value.sum(axis=0) * 0.3
    np.testing.assert_allclose(got, ref, rtol=2e-3)


def test_npz_file_source(cloud, tmp_path):
    """An .npz snapshot also works as a SnapshotFile (decompressed per read)."""
    path = tmp_path / "c.npz"
    write_npz(cloud, str(path))
    res = synthesize_products(SnapshotFile(str(path)), LINE, 2e-6, memory="1MB", **KW)
    _same(res, synthesize_products(cloud, LINE, 2e-6, **KW))


def _value_of(d):
    return d["t"]


def test_dask_map_keeps_dict_arguments_apart():
    """Two jobs whose argument is a dict with the same keys each get their own dict (dask's
    scatter of a dict scatters its values under the dict's keys, so the second job used to
    read the first one's values)."""
    distributed = pytest.importorskip("distributed")
    from synth.parallel import DaskExecutor
    with distributed.Client(processes=False, n_workers=1, threads_per_worker=2,
                            dashboard_address=None, timeout="60s") as client:
        out = dict(DaskExecutor(client).map(_value_of, [({"t": 1},), ({"t": 4},)]))
    assert out == {0: 1, 1: 4}
