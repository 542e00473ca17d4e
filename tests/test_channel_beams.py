"""The restoring beam per channel where the synthesised beam changes across the band."""

import numpy as np
import pytest
import astropy.units as u
from astropy.io import fits
from astropy.wcs import WCS
from spectral_cube import SpectralCube, VaryingResolutionSpectralCube

from synth.fitsio import write_cube
from synth.instrument.array_observe import BEAM_VARIES
from synth.instrument.interferometer import Array
from synth.instrument.observe import observe

from test_imaging import gaussian_sky, make_cube


def _wide_band_cube(nch=5, n=96, nu0=220e9, dnu=5e9):
    """An invented source on a frequency axis 220-240 GHz (a 9 % wide band)."""
    w = WCS(naxis=3)
    w.wcs.ctype = ["RA---SIN", "DEC--SIN", "FREQ"]
    w.wcs.cunit = ["deg", "deg", "Hz"]
    w.wcs.cdelt = [-0.5 / 3600, 0.5 / 3600, dnu]
    w.wcs.crpix = [n // 2 + 1, n // 2 + 1, 1]
    w.wcs.crval = [83.8, -30.0, nu0]
    w.wcs.restfrq = 230e9
    w.wcs.specsys = "LSRK"
    d = gaussian_sky(n, 8.0, 1.0, nch=nch)
    return SpectralCube(data=d / d.max() * u.K, wcs=w)


def _observe(cube, **kw):
    return observe(cube, Array("compact-16", tsys=90 * u.K), seed=1, deconvolver="hogbom",
                   pointing_pattern="single", pixel=0.5 * u.arcsec, sample_interval=900 * u.s,
                   spectral_axis="frequency", **kw)


def test_a_wide_band_gets_a_beam_per_channel_that_scales_as_one_over_frequency():
    """Natural weighting: the uv coverage in wavelengths scales with nu, so the synthesised
    beam's axes scale as 1 / nu (the Fourier scaling theorem; Thompson, Moran & Swenson 2017,
    ch. 5): the fitted beams follow nu_ref / nu within 2 % (the fit is on pixels); the cube
    carries them per channel."""
    cube = _wide_band_cube()
    obs = _observe(cube, weighting="natural")
    assert isinstance(obs, VaryingResolutionSpectralCube)
    nu = obs.spectral_axis.to_value(u.Hz)
    major = obs.beams.major.to_value(u.arcsec)
    minor = obs.beams.minor.to_value(u.arcsec)
    mid = nu.size // 2
    np.testing.assert_allclose(major / major[mid], nu[mid] / nu, rtol=0.02)
    np.testing.assert_allclose(minor / minor[mid], nu[mid] / nu, rtol=0.02)
    assert major[0] / major[-1] - 1 > BEAM_VARIES


@pytest.mark.parametrize("unit", ["Jy/beam", "K"])
def test_beams_table_reads_back_with_spectral_cube(tmp_path, unit):
    """Written with the FITS beams table (BEAMS extension: BMAJ, BMIN, BPA, CHAN, POL) and the
    middle channel's beam in BMAJ/BMIN/BPA: astropy's FITS verification raises nothing, and
    spectral-cube reads a VaryingResolutionSpectralCube whose beams equal the fitted ones
    (float32 table: 1e-6) and whose data equal the written data (float32)."""
    obs = _observe(_wide_band_cube(), unit=unit)
    path = tmp_path / "wide.fits"
    write_cube(obs, path)
    with fits.open(path) as hdul:
        hdul.verify("exception")
        assert hdul[1].header["EXTNAME"] == "BEAMS"
        table = hdul[1].data
        np.testing.assert_array_equal(table["CHAN"], np.arange(obs.shape[0]))
        h = hdul[0].header
        mid = obs.beams[obs.shape[0] // 2]
        assert h["BMAJ"] == pytest.approx(mid.major.to_value(u.deg), rel=1e-12)
        assert h["BMIN"] == pytest.approx(mid.minor.to_value(u.deg), rel=1e-12)
    back = SpectralCube.read(path)
    assert isinstance(back, VaryingResolutionSpectralCube)
    for key in ("major", "minor"):
        np.testing.assert_allclose(getattr(back.beams, key).to_value(u.arcsec),
                                   getattr(obs.beams, key).to_value(u.arcsec), rtol=1e-6)
    np.testing.assert_allclose(back.beams.pa.to_value(u.deg) % 180,
                               obs.beams.pa.to_value(u.deg) % 180, atol=1e-4)
    np.testing.assert_allclose(back.unmasked_data[:].value,
                               np.asarray(obs.unmasked_data[:].value, dtype=np.float32))


def test_k_conversion_uses_each_channels_beam():
    """In K each channel is converted with its own beam: T = S c^2 / (2 k nu^2 Omega_beam)
    (Rayleigh-Jeans; radio-beam's Beam.jtok), not with the middle channel's beam."""
    cube = _wide_band_cube()
    jy, k = _observe(cube, unit="Jy/beam"), _observe(cube, unit="K")
    ratio = np.nanmax(k.unmasked_data[:].value, axis=(1, 2)) / np.nanmax(
        jy.unmasked_data[:].value, axis=(1, 2))
    nu = jy.spectral_axis.to_value(u.Hz)
    expect = np.array([b.jtok(f * u.Hz).value for b, f in zip(jy.beams, nu)])
    np.testing.assert_allclose(ratio, expect, rtol=1e-9)
    one_beam = np.array([jy.beams[nu.size // 2].jtok(f * u.Hz).value for f in nu])
    assert abs(ratio[0] / one_beam[0] - 1) > 0.05      # the middle beam would be 8 % off


def test_a_narrow_band_keeps_one_beam():
    """0.5 km/s channels at 230 GHz: the beam changes by far less than 1 % across 8 channels;
    the cube has one beam (BMAJ/BMIN/BPA, no table)."""
    d = gaussian_sky(96, 8.0, 1.0, nch=8)
    cube = make_cube(d / d.max(), pix_arcsec=0.5, unit=u.K)
    obs = observe(cube, Array("compact-16", tsys=90 * u.K), seed=1, pointing_pattern="single",
                  pixel=0.5 * u.arcsec, sample_interval=900 * u.s)
    assert not isinstance(obs, VaryingResolutionSpectralCube)
    assert obs.beam.major > 0 * u.arcsec


def test_unit_changes_keep_the_beam_per_channel():
    """to_unit K <-> Jy/beam of a cube with a beam per channel converts each channel with
    its own beam and keeps the beams: the round trip returns the data (1e-12)."""
    from synth.instrument.beam import to_unit
    jy = _observe(_wide_band_cube(), unit="Jy/beam")
    k = to_unit(jy, "K")
    assert isinstance(k, VaryingResolutionSpectralCube)
    nu = jy.spectral_axis.to_value(u.Hz)
    c = 0
    expect = jy.unmasked_data[c].value * jy.beams[c].jtok(nu[c] * u.Hz).value
    np.testing.assert_allclose(k.unmasked_data[c].value, expect, rtol=1e-12)
    back = to_unit(k, "Jy/beam")
    np.testing.assert_allclose(back.unmasked_data[:].value, jy.unmasked_data[:].value,
                               rtol=1e-12, atol=1e-15)
