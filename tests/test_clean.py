"""Högbom CLEAN and restoration (Högbom 1974, A&AS 15, 417)."""

import numpy as np
import pytest
import astropy.units as u

from synth.instrument.clean import hogbom
from synth.instrument.imaging import fit_restoring_beam, restore, restoring_kernel
from synth.instrument.interferometer import Interferometer, observe_interferometric
from synth.instrument.uv import uv_tracks
from synth.instrument.visibilities import ImageGeometry, grid_dirty, predict

from test_imaging import make_cube

SOURCES = [((64, 64), 1.0), ((80, 50), 0.5), ((45, 90), 0.3), ((30, 40), 0.2)]


def _field():
    d = np.zeros((2, 128, 128))
    for (y, x), s in SOURCES:
        d[:, y, x] = s
    return d


def test_clean_point_field_fluxes_and_residuals():
    """Restored fluxes of four point sources within 1 % (noise 1.5 mJy, 3 sigma threshold);
    the CLEAN stops with every residual below the threshold (Högbom 1974)."""
    arr = Interferometer("ring-24")
    obs = observe_interferometric(make_cube(_field()), arr, seed=11, deconvolve=True,
                                  primary_beam=False, sample_interval=300 * u.s, threshold=3.0)
    img = obs.unmasked_data[:].value
    for (y, x), s in SOURCES:
        np.testing.assert_allclose(img[:, y, x], s, rtol=0.01)
    assert obs.meta["DECONV"] and obs.meta["CLEANIT"] > 0

    # the same CLEAN on its own: residuals below threshold, model flux ~ input
    t = uv_tracks(arr, -30 * u.deg, (-2, 2) * u.hourangle, 300 * u.s)
    pix = np.deg2rad(0.2 / 3600)
    g = ImageGeometry(128, 128, -pix, pix, 64, 64)
    w = np.ones(t.uvw_m.shape[0])
    vis = predict(_field()[0], t.uvw_m, 230e9, g)
    dirty = grid_dirty(vis, t.uvw_m, 230e9, w, g)
    psf = grid_dirty(np.ones(w.size, complex), t.uvw_m, 230e9, w, g, shape=(256, 256))
    dirty.setflags(write=False)
    model, res, n = hogbom(dirty, psf, threshold=1e-3, gain=0.1, niter=20000)
    assert 0 < n < 20000
    assert np.abs(res).max() < 1e-3
    assert model.sum() == pytest.approx(sum(s for _, s in SOURCES), rel=0.01)


def test_hogbom_on_exact_psf_sum():
    """A dirty image that is a sum of shifted PSFs is cleaned back to its components (1e-3)."""
    y, x = np.mgrid[-64:64, -64:64]
    psf = np.exp(-(x**2 + y**2) / 8.0) * np.cos(0.3 * x)           # peak 1 at (64, 64)
    dirty = 2.0 * psf[64 - 20:64 + 44, 64 - 30:64 + 34] + 0.7 * psf[64 - 40:64 + 24, 64 - 10:64 + 54]
    model, res, _ = hogbom(dirty, psf, threshold=1e-4, gain=0.2, niter=5000)
    assert model[20, 30] == pytest.approx(2.0, rel=1e-3)
    assert model[40, 10] == pytest.approx(0.7, rel=1e-3)
    assert np.abs(res).max() < 1e-4


def test_restore_gives_beam_peak_and_area():
    """A 1 Jy component restored with a Gaussian beam peaks at 1 Jy/beam, and the restored
    sum x pixel area / beam area = 1 Jy (beam solid angle 1.1331 theta_maj theta_min;
    radio-beam FWHM_TO_AREA)."""
    from radio_beam import Beam
    beam = Beam(major=1.0 * u.arcsec, minor=0.6 * u.arcsec, pa=20 * u.deg)
    pix = np.deg2rad(0.1 / 3600)
    model = np.zeros((128, 128))
    model[64, 64] = 1.0
    img = restore(model, np.zeros_like(model), beam, -pix, pix)
    assert img[64, 64] == pytest.approx(1.0, rel=1e-12)
    area_pix = beam.sr.to_value(u.sr) / pix**2
    assert img.sum() / area_pix == pytest.approx(1.0, rel=1e-4)
    fit = fit_restoring_beam(restoring_kernel(beam, -pix, pix, shape=(129, 129)), -pix, pix)
    assert fit.major.to_value(u.arcsec) == pytest.approx(1.0, rel=1e-6)
