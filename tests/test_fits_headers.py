"""Every FITS file a small run writes is standard FITS (astropy verification with
output_verify="exception") and follows one header convention (synth/fitsio.py docstring):
SI spectral axis, BTYPE, OBJECT, TELESCOP on observations, the model's LINE/EXCIT/ABUND on
every cube, logicals and integer seeds as FITS types, NOISERMS in BUNIT, the beam only as
BMAJ/BMIN/BPA."""

import glob
import os

import numpy as np
import pytest
import astropy.units as u
from astropy.io import fits
from astropy.wcs import WCS

import synth
from synth.errors import OutputError
from synth.fitsio import write_image

# an invented clump: demo cloud of 24 cells, two tracers (LTE and LVG), a dish, an array and
# the array feathered with the dish
SMALL = """
[cloud]
source = "demo"
cells = 24
box_pc = 0.5
mean_n_h2_cm3 = 1e4
mach = 4.0
seed = 3

[sky]
distance_pc = 4000
dec_deg = 6.2
object = "invented clump A"

[channels]
width_kms = 0.25

[[tracer]]
species = "13CO"
transition = "1-0"
abundance = 2e-6

[[tracer]]
species = "C18O"
transition = "1-0"
abundance = 2e-7
excitation = "lvg"

[output]
products = ["tau", "column"]
figures = false

[[setup]]
name = "dish"
kind = "dish"
diameter_m = 40
tsys_k = 150
channel_width_kms = 0.5
integration_time_h = 1.0
seed = 1

[[setup]]
name = "array"
kind = "array"
antennas = "compact-16"
diameter_m = 10
latitude_deg = 8
tsys_k = 90
channel_width_kms = 0.5
integration_time_h = 2.0
sample_interval_s = 900
seed = 2

[[setup]]
name = "both"
kind = "array"
antennas = "compact-16"
combine_with = ["dish"]
diameter_m = 10
latitude_deg = 8
tsys_k = 90
channel_width_kms = 0.5
integration_time_h = 2.0
sample_interval_s = 900
seed = 5
"""

TRACERS = {"13CO_1-0": ("13CO 1-0", "lte", 2e-6), "C18O_1-0": ("C18O 1-0", "lvg", 2e-7)}
SETUPS = ("dish", "array", "both")


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    base = tmp_path_factory.mktemp("fits")
    (base / "small.toml").write_text(SMALL)
    out = base / "run"
    synth.run_config(str(base / "small.toml"), str(out), progress=False,
                     log=lambda *a, **k: None)
    return out


def _headers(run):
    files = sorted(glob.glob(os.path.join(run, "*.fits")))
    assert len(files) == 2 * (3 + 2 + 2 * 4)   # ideal, tau, column; dish 2; arrays 4 each
    out = {}
    for path in files:
        with fits.open(path) as hdul:
            hdul.verify("exception")
            out[os.path.basename(path)] = hdul[0].header.copy()
    return out


def _kind(name):
    for suffix, kind in (("_ideal", "ideal"), ("_tau", "tau"), ("_column", "column"),
                         ("_sensitivity", "noise")):
        if name.endswith(suffix + ".fits"):
            return kind
    return "observed"


def test_every_file_is_standard_fits_with_the_common_cards(run):
    """Verification raises nothing; OBJECT from [sky] object, ORIGIN, BTYPE by product, the
    model's line, excitation and abundance on every file, with FITS types."""
    btype = {"ideal": "Intensity", "tau": "Optical depth", "column": "Column density",
             "noise": "Noise", "observed": "Intensity"}
    for name, hdr in _headers(run).items():
        tracer = name[:len("13CO_1-0")] if name.startswith("13CO") else name[:len("C18O_1-0")]
        line, excit, abund = TRACERS[tracer]
        assert hdr["OBJECT"] == "invented clump A", name
        assert hdr["ORIGIN"] == "synth", name
        assert hdr["BTYPE"] == btype[_kind(name)], name
        assert (hdr["LINE"], hdr["EXCIT"]) == (line, excit), name
        assert isinstance(hdr["ABUND"], float) and hdr["ABUND"] == pytest.approx(abund), name
        assert "BEAM" not in hdr, name
        assert not [c for c in hdr.get("COMMENT", []) if str(c).startswith("Original ")], name


def test_cubes_share_one_spectral_convention(run):
    """CUNIT3 'm s-1' (VRAD) on every cube; the observed cubes' velocities lie within the
    ideal cube's band (the conversion kept the numbers, not only the label)."""
    headers = _headers(run)
    for name, hdr in headers.items():
        if hdr["NAXIS"] != 3:
            continue
        assert (hdr["CTYPE3"], hdr["CUNIT3"]) == ("VRAD", "m s-1"), name
        ideal = headers[name.split("_")[0] + "_1-0_ideal.fits"]
        v_ideal = WCS(ideal).spectral.pixel_to_world_values(np.array([0, ideal["NAXIS3"] - 1]))
        v_obs = WCS(hdr).spectral.pixel_to_world_values(np.array([0, hdr["NAXIS3"] - 1]))
        step = abs(hdr["CDELT3"])
        assert v_ideal.min() - step <= v_obs.min() and v_obs.max() <= v_ideal.max() + step, name


def test_observed_cubes_carry_instrument_cards(run):
    """TELESCOP is the setup; beam as BMAJ/BMIN/BPA floats in deg; NSEED an integer;
    PBCORR a FITS logical; NOISERMS in BUNIT (the K and Jy/beam files differ by the data's
    own K per Jy/beam factor at the middle channel)."""
    headers = _headers(run)
    for tracer in TRACERS:
        for setup in SETUPS:
            k = headers[f"{tracer}_{setup}_k.fits"]
            jy = headers[f"{tracer}_{setup}_jyb.fits"]
            for hdr in (k, jy):
                assert hdr["TELESCOP"] == setup
                assert all(isinstance(hdr[c], float) for c in ("BMAJ", "BMIN", "BPA"))
                assert 0 < hdr["BMIN"] <= hdr["BMAJ"] < 0.1
                assert type(hdr["NSEED"]) is int and type(hdr["PBCORR"]) is bool
                assert u.Unit(hdr["NOISEUNI"]) == u.Unit(hdr["BUNIT"])
            assert u.Unit(k["BUNIT"]) == u.K
            assert u.Unit(jy["BUNIT"]) == u.Jy / u.beam
            with fits.open(os.path.join(run, f"{tracer}_{setup}_k.fits")) as a, \
                    fits.open(os.path.join(run, f"{tracer}_{setup}_jyb.fits")) as b:
                mid = a[0].data.shape[0] // 2
                ratio = np.nanmedian(a[0].data[mid] / b[0].data[mid])
            assert k["NOISERMS"] / jy["NOISERMS"] == pytest.approx(ratio, rel=1e-3)
        assert headers[f"{tracer}_both_k.fits"]["FEATHER"] is True


def test_spectral_axis_in_km_s_is_written_in_si(tmp_path):
    """A header with CUNIT3 km/s is written as m s-1 with CDELT3/CRVAL3 scaled by 1000."""
    hdr = fits.Header({"NAXIS": 3, "CTYPE3": "VRAD", "CUNIT3": "km/s", "CDELT3": 0.5,
                       "CRVAL3": -2.0, "CRPIX3": 1.0, "BUNIT": "K"})
    path = tmp_path / "c.fits"
    write_image(np.zeros((2, 3, 3)), hdr, str(path))
    with fits.open(path) as hdul:
        hdul.verify("exception")
        out = hdul[0].header
    assert (out["CUNIT3"], out["CDELT3"], out["CRVAL3"]) == ("m s-1", 500.0, -2000.0)
    assert out["BTYPE"] == "Intensity"


def test_noise_in_another_unit_than_the_data_is_refused(tmp_path):
    hdr = fits.Header({"NAXIS": 2, "BUNIT": "K", "NOISERMS": 0.1, "NOISEUNI": "Jy/beam"})
    with pytest.raises(OutputError, match="NOISERMS is in Jy/beam but the data in K"):
        write_image(np.zeros((3, 3)), hdr, str(tmp_path / "n.fits"))
    assert not list(tmp_path.iterdir())
