"""Planning estimates (synth.planning)."""

import json

import numpy as np
import pytest
import astropy.units as u

from synth.errors import InstrumentError
from synth.analysis.matching import cube_from_array
from synth.planning import DISCLAIMER, hex_pointings, plan, plan_rows, plan_table

NU_CO10 = 115.2712018 * u.GHz


def _cube(n=64, pix=4.0, nchan=24, line=slice(8, 16), nu=NU_CO10, dv=200.0, size=8.0):
    """Invented source: a Gaussian of sigma ``size`` pixels with a Gaussian line in the
    channels ``line``; the other channels are empty (for measuring the noise)."""
    y, x = np.mgrid[:n, :n] - n / 2
    prof = np.zeros(nchan)
    k = np.arange(line.stop - line.start)
    prof[line] = np.exp(-0.5 * ((k - k.mean()) / 1.5) ** 2)
    data = prof[:, None, None] * 5.0 * np.exp(-(x**2 + y**2) / (2 * size**2))
    return cube_from_array(data, pixscale=pix * u.arcsec, channel_width=dv * u.m / u.s,
                           restfreq=nu, center=(120.0 * u.deg, -30 * u.deg))


def _dish():
    single_dish = pytest.importorskip("synth.instrument.single_dish",
                                      exc_type=ImportError)
    return single_dish.Dish(diameter=30 * u.m, main_beam_efficiency=0.7, tsys=120 * u.K)


@pytest.mark.parametrize("seed", [1, 2])
def test_planned_time_through_observe_gives_target_snr(seed):
    """Planning time inverted back through observe gives the target S/N within 5 %, with the
    noise measured in the empty channels of the observed cube (radiometer equation,
    Wilson, Rohlfs & Hüttemeister 2013, used by both)."""
    observe = pytest.importorskip("synth.instrument.observe", exc_type=ImportError).observe
    cube, dish = _cube(), _dish()
    p = plan(dish, NU_CO10, target_snr=5.0, cube=cube)
    obs = observe(cube, dish, integration_time=p.time_to_target, seed=seed)
    data = obs.unmasked_data[:].to_value(u.K)
    rms = np.concatenate([data[:6], data[-6:]]).std()
    assert p.target_brightness.to_value(u.K) / rms == pytest.approx(5.0, rel=0.05)


def test_interferometer_planned_time_gives_planned_noise():
    """Array: the planned time fed to observe (natural weighting) gives image noise
    target / S/N within 5 % in the empty channels (point-source sensitivity, TMS 3rd ed.
    eq. 6.62, used by both)."""
    pytest.importorskip("synth.instrument.interferometer", exc_type=ImportError)
    from synth.instrument.interferometer import Array
    from synth.instrument.observe import observe
    cube = _cube(n=96, pix=0.6, nchan=12, line=slice(5, 7), nu=230.538 * u.GHz, dv=500.0,
                 size=3.0)
    arr = Array(antennas="compact-16", tsys=90 * u.K)
    p = plan(arr, target_snr=5.0, cube=cube, sample_interval=600 * u.s)
    obs = observe(cube, arr, integration_time=p.time_to_target, seed=4,
                  sample_interval=600 * u.s, deconvolver="none", correct_primary_beam=False)
    data = obs.unmasked_data[:].to_value(u.Jy / u.beam)
    rms = np.concatenate([data[:4], data[-4:]]).std()
    assert rms == pytest.approx(p.target_brightness.to_value(u.Jy / u.beam) / 5.0, rel=0.05)


def test_interferometer_rms_worked_example_and_inverse():
    """Point-source rms for an invented array (T_sys 100 K, D 10 m, eta_a 0.7, system
    efficiency 0.9, N 30, 1 MHz, 60 s, 2 pol) = 17.27 mJy, from Thompson, Moran & Swenson
    2017 eq. 6.62 evaluated by hand (test_uv.py), within 1 %; the
    planned time reproduces target / S/N through the forward formula to 1e-9; the largest
    scale is 0.6 lambda / B_min (Wilner & Welch 1994) from the shortest projected baseline."""
    pytest.importorskip("synth.instrument.interferometer", exc_type=ImportError)
    from synth.instrument.interferometer import Array
    from synth.instrument.uv import uv_coverage
    from synth.instrument.visibilities import interferometer_rms
    rng = np.random.default_rng(0)
    enu = np.c_[rng.uniform(-300, 300, 30), rng.uniform(-300, 300, 30), np.zeros(30)]
    arr = Array(antennas=enu, diameter=10 * u.m, aperture_efficiency=0.7, tsys=100 * u.K)
    nu = 230.538 * u.GHz
    p = plan(arr, nu, channel_width=1 * u.MHz, integration_time=60 * u.s,
             declination=-30 * u.deg, cube=_cube(n=32, pix=0.1, nu=nu), target_snr=4.0)
    assert p.rms.to_value(u.mJy / u.beam) == pytest.approx(17.27, rel=0.01)
    back = interferometer_rms(arr, 1 * u.MHz, p.time_to_target)
    assert back.to_value(u.Jy) == pytest.approx(p.target_brightness.value / 4.0, rel=1e-9)
    uvw = uv_coverage(arr, -30 * u.deg, (-2, 2) * u.hourangle, 300 * u.s).to_value(u.m)
    lam_m = nu.to_value(u.m, equivalencies=u.spectral())
    las = 0.6 * lam_m / np.hypot(uvw[:, 0], uvw[:, 1]).min() * 206264.806
    assert p.largest_scale.to_value(u.arcsec) == pytest.approx(las, rel=1e-6)


def test_single_dish_resolution_and_rms():
    """A 10 m dish with fwhm_factor 1.13 at 230.54 GHz: FWHM 30.3" (Wilson, Rohlfs &
    Hüttemeister 2013 sect. 6.1, memory; arcseconds computed); the rms for 1 h in 1 MHz
    follows T_sys / (eta sqrt(n_pol dnu t)) (radiometer equation, two polarisations by
    default)."""
    sd = pytest.importorskip("synth.instrument.single_dish", exc_type=ImportError)
    dish = sd.Dish(diameter=10 * u.m, main_beam_efficiency=0.8, tsys=150 * u.K)
    nu = 230.538 * u.GHz
    p = plan(dish, nu, channel_width=1 * u.MHz, integration_time=1 * u.hour)
    assert p.resolution.major.to_value(u.arcsec) == pytest.approx(30.31, rel=5e-3)
    assert p.rms.to_value(u.K) == pytest.approx(150 / (0.8 * np.sqrt(2 * 1e6 * 3600)), rel=1e-9)
    assert np.isnan(p.largest_scale.value) and p.time_to_target is None


def test_channel_width_velocity_to_frequency():
    """Radio convention: dnu = nu0 dv / c (as observe converts)."""
    p = plan(_dish(), NU_CO10, channel_width=0.5 * u.km / u.s)
    assert p.channel_width_hz.to_value(u.Hz) == pytest.approx(
        NU_CO10.to_value(u.Hz) * 0.5 / 299792.458, rel=1e-12)


@pytest.mark.parametrize("w, h, n", [(0.5, 0.5, 1), (2.0, 0.0, 3), (4.0, 4.0, 23)])
def test_hex_pointings(w, h, n):
    """Hexagonal grid (rows sqrt(3)/2 spacing apart, alternate rows shifted by half a
    spacing; common practice for mosaics): counts for fields in units of the spacing,
    counted by hand (4 x 4: rows of 5, 4, 5, 4, 5)."""
    assert hex_pointings(w * u.arcsec, h * u.arcsec, 1 * u.arcsec) == n


def test_total_time_and_table():
    """Total time = pointings x time per pointing; the table and rows carry the disclaimer
    and are JSON-serialisable."""
    cube = _cube()
    p = plan(_dish(), NU_CO10, cube=cube, target_snr=3.0, integration_time=10 * u.min)
    assert p.total_time.to_value(u.s) == pytest.approx(p.n_pointings * p.time_to_target.value)
    assert p.n_pointings > 1
    text = plan_table([p])
    assert DISCLAIMER in text and "dish" in text
    assert DISCLAIMER in p.notes
    json.dumps(plan_rows([p]))


def test_percentile_orders_the_time():
    """A higher percentile of the emission is brighter, so it needs less time."""
    cube, dish = _cube(), _dish()
    t25 = plan(dish, NU_CO10, cube=cube, percentile=25).time_to_target
    t75 = plan(dish, NU_CO10, cube=cube, percentile=75).time_to_target
    assert t75 < t25


@pytest.mark.parametrize("kwargs, match", [
    ({"target_snr": 0}, "target_snr"),
    ({"percentile": 120}, "percentile"),
    ({"emission_floor": 1.5}, "emission_floor"),
    ({"channel_width": 3 * u.m}, "channel_width"),
    ({"channel_width": 0 * u.km / u.s}, "channel_width"),
])
def test_bad_input(kwargs, match):
    with pytest.raises(InstrumentError, match=match):
        plan(_dish(), NU_CO10, cube=_cube(), **kwargs)


@pytest.mark.parametrize("setup, line, match", [
    ("dish", NU_CO10, "setup"),
    (None, 3 * u.m / u.s, "line"),
    (None, None, "line"),
])
def test_bad_setup_or_line(setup, line, match):
    with pytest.raises(InstrumentError, match=match):
        plan(setup if setup is not None else _dish(), line, channel_width=1 * u.MHz)


def test_needs_channel_width_without_cube():
    with pytest.raises(InstrumentError, match="channel_width"):
        plan(_dish(), NU_CO10)


def test_plan_accepts_a_line():
    """A Line gives the frequency (CO 1-0 at 115.2712018 GHz, Schöier et al. 2005) and the
    label."""
    registry = pytest.importorskip("synth.molecules.registry", exc_type=ImportError)
    p = plan(_dish(), registry.Line("CO", "1-0"), channel_width=0.2 * u.km / u.s)
    assert p.frequency.to_value(u.GHz) == pytest.approx(115.2712018, rel=1e-8)
    assert p.line == "CO 1-0"


def test_field_size_one_value_in_a_list():
    """A map size given as a one-element list (as a config's single number becomes) is a
    square field: the same pointings as the plain number."""
    from synth.instrument.interferometer import Array
    arr = Array("compact-16", tsys=90 * u.K)
    kw = dict(channel_width=0.5 * u.km / u.s, declination=-30 * u.deg)
    a = plan(arr, 230.538 * u.GHz, field_size=[60] * u.arcsec, **kw)
    b = plan(arr, 230.538 * u.GHz, field_size=60 * u.arcsec, **kw)
    assert a.n_pointings == b.n_pointings > 1
