"""Visibilities out: random-group UVFITS read back with pyuvdata (a test-only dependency)."""

import warnings

import numpy as np
import pytest
import astropy.units as u

from synth.instrument.array_observe import simulate_visibilities
from synth.instrument.interferometer import Array
from synth.instrument.uvfits import write_uvfits

from test_imaging import gaussian_sky, make_cube


def _read(path):
    pyuvdata = pytest.importorskip("pyuvdata")
    with warnings.catch_warnings():
        # pyuvdata compares the uvw with the antenna positions in apparent coordinates of the
        # invented date; synth does not precess (about 1.5 m on 250 m baselines): say so, but
        # do not fail on that warning
        warnings.filterwarnings("ignore", message="The uvw_array does not match")
        return pyuvdata.UVData.from_file(str(path))


def test_uvfits_round_trip_through_pyuvdata(tmp_path):
    """Written visibilities of ring-24 (3 channels, noise on) read back by pyuvdata: uvw within
    1e-6 m, visibilities within 1e-6 relative, frequencies, antenna pairs, phase centre and
    weights 1/sigma^2 (random-group UVFITS, Greisen 2012, technical memo 117)."""
    cube = make_cube(gaussian_sky(64, 6.0, 2.0, nch=3), pix_arcsec=0.2)
    arr = Array("ring-24", tsys=90 * u.K)
    p = simulate_visibilities(cube, arr, seed=3, sample_interval=600 * u.s,
                              pointing_pattern="single")[0]
    path = write_uvfits(tmp_path / "vis.uvfits", p["tracks"], p["vis"], p["freqs_hz"],
                        p["arrays"], p["ra_deg"], p["dec_deg"], p["hour_angle_rad"],
                        sample_time_s=600.0)
    uv = _read(path)
    t = p["tracks"]
    assert uv.Nblts == t.uvw_m.shape[0] and uv.Nfreqs == 3 and uv.Npols == 1
    np.testing.assert_allclose(uv.uvw_array, t.uvw_m, rtol=0, atol=1e-6)
    vis = uv.data_array[:, :, 0]
    assert np.abs(vis - p["vis"]).max() <= 1e-6 * np.abs(p["vis"]).max()
    np.testing.assert_allclose(uv.freq_array.ravel(), p["freqs_hz"], rtol=1e-12)
    np.testing.assert_array_equal(uv.ant_1_array, t.ant1 + 1)
    np.testing.assert_array_equal(uv.ant_2_array, t.ant2 + 1)
    cat = next(iter(uv.phase_center_catalog.values()))
    assert np.degrees(cat["cat_lon"]) == pytest.approx(120.0, abs=1e-9)
    assert np.degrees(cat["cat_lat"]) == pytest.approx(10.0, abs=1e-9)
    assert uv.telescope.Nants == arr.n_antennas


def test_point_source_visibilities_equal_its_flux():
    """A noiseless 1 Jy point source at the phase centre has V = 1 + 0i on every baseline
    (TMS 3rd ed. eq. 3.7 with A(0) = 1)."""
    d = np.zeros((2, 64, 64))
    d[:, 32, 32] = 1.0
    p = simulate_visibilities(make_cube(d), Array("ring-24", tsys=90 * u.K), noise=False,
                              sample_interval=1200 * u.s, pointing_pattern="single")[0]
    np.testing.assert_allclose(p["vis"], 1.0, atol=1e-6)


def test_config_writes_one_file_per_pointing(tmp_path):
    """A setup with write_visibilities = true writes <tracer>_<setup>_p<k>.uvfits for each of
    its pointings (the count observe makes), each readable by pyuvdata."""
    from synth.pipeline import run_config
    conf = {"cloud": {"source": "demo", "cells": 16, "box_pc": 1.0},
            "sky": {"distance_pc": 2000.0, "dec_deg": -20.0},
            "channels": {"width_kms": 1.0, "velocity_min_kms": -4.0, "velocity_max_kms": 4.0},
            "tracer": [{"species": "CO", "transition": "1-0", "abundance": 1e-4}],
            "output": {"figures": False},
            "setup": [{"name": "mos", "kind": "array", "antennas": "compact-10",
                       "diameter_m": 10, "latitude_deg": 8, "tsys_k": 90,
                       "integration_time_h": 1.0, "deconvolver": "none",
                       "sample_interval_s": 1200, "write_visibilities": True}]}
    summary = run_config(conf, tmp_path / "run", progress=False, log=None)
    n = summary["setups"]["mos"]["CO_1-0"]["n_pointings"]
    files = {p.name for p in (tmp_path / "run").glob("*.uvfits")}
    assert files == {f"CO_1-0_mos_p{k}.uvfits" for k in range(1, n + 1)} and n > 1
    uv = _read(tmp_path / "run" / "CO_1-0_mos_p1.uvfits")
    assert uv.Nfreqs == 8
    from astropy.io import fits
    with fits.open(tmp_path / "run" / "CO_1-0_mos_p1.uvfits") as hdul:
        hdul.verify("exception")
