"""A dish's T_sys through the plane-parallel atmosphere over its track: observe and plan."""

import numpy as np
import pytest
import astropy.units as u
from scipy.integrate import quad

from synth.errors import InstrumentError
from synth.instrument.observe import observe
from synth.instrument.single_dish import Dish
from synth.planning import plan

from test_imaging import make_cube

NU = 230.538e9
LAT = 8.0          # invented site latitude, deg
TAU, T_RX, T_ATM = 0.15, 50.0, 270.0


def _dish(**kw):
    site = dict(latitude=LAT * u.deg, zenith_opacity=TAU, receiver_temperature=T_RX * u.K)
    return Dish(diameter=40 * u.m, main_beam_efficiency=0.8, **dict(site, **kw))


def _formula_tsys(dec_deg, h0_h=-2.0, h1_h=2.0):
    """[<T_sys^-2>]^-1/2 over the track, by quadrature: T_sys = [T_rx + T_atm (1 - e^-tau A)]
    e^(tau A) with A = 1 / sin el (Thompson, Moran & Swenson 2017, sec. 13.1, from memory),
    sin el = sin phi sin delta + cos phi cos delta cos H (Smart 1977, ch. 2); the samples of
    a track weighted by 1 / sigma^2, sigma proportional to T_sys (radiometer equation)."""
    phi, dec = np.radians(LAT), np.radians(dec_deg)

    def inv_t2(h):
        sin_el = np.sin(phi) * np.sin(dec) + np.cos(phi) * np.cos(dec) * np.cos(h)
        tau = TAU / sin_el
        return ((T_RX + T_ATM * (1 - np.exp(-tau))) * np.exp(tau)) ** -2
    h0, h1 = np.radians(15 * h0_h), np.radians(15 * h1_h)
    return (quad(inv_t2, h0, h1)[0] / (h1 - h0)) ** -0.5


def _noise_cube(dec, nch=48, n=64):
    return make_cube(np.zeros((nch, n, n)), pix_arcsec=2.0, dec=dec, unit=u.K, nu0=NU)


def _radiometer(tsys, cube, t_s, eta=0.8, n_pol=2):
    """sigma = T_sys / (eta sqrt(n_pol dnu t)) (Wilson, Rohlfs & Hüttemeister 2013, eq. 4.41,
    number from memory); dnu = dv nu / c for the cube's 0.5 km/s channels."""
    dnu = 0.5e3 / 299792458.0 * NU
    return tsys / (eta * np.sqrt(n_pol * dnu * t_s))


@pytest.mark.parametrize("dec", [-30.0, 60.0])
def test_dish_noise_follows_the_elevation_of_its_track(dec):
    """The same dish at declination -30 and +60 (latitude +8): the recorded and the measured
    noise equal the radiometer equation with the track's effective T_sys (quadrature of the
    formula, 0.1 % for the recorded figure, 3 % for the rms over 48 x 64 x 64 voxels of
    beam-correlated noise)."""
    cube = _noise_cube(dec)
    obs = observe(cube, _dish(), integration_time=600 * u.s, seed=3, guard_band=0 * u.arcsec)
    expect = _radiometer(_formula_tsys(dec), cube, 600.0)
    assert obs.meta["NOISERMS"] == pytest.approx(expect, rel=1e-3)
    assert np.std(obs.unmasked_data[:].value) == pytest.approx(expect, rel=0.03)


def test_the_two_declinations_differ_and_the_elevation_limit_cuts_the_track():
    """-30 deg culminates at 52 deg, +60 deg at 38 deg elevation from latitude +8: the
    higher airmass gives more noise (the formula's ratio, 0.1 %). A track that starts below
    the 15 deg limit averages only the part above it."""
    t = {d: _dish().effective_tsys(d * u.deg).to_value(u.K) for d in (-30.0, 60.0)}
    assert t[60.0] / t[-30.0] == pytest.approx(_formula_tsys(60.0) / _formula_tsys(-30.0),
                                               rel=1e-3)
    assert t[60.0] > 1.05 * t[-30.0]
    # at +60 the source is at 15 deg elevation at |H| = h_lim: integrate from there
    phi, dec, lim = np.radians(LAT), np.radians(60.0), np.radians(15.0)
    h_lim = np.arccos((np.sin(lim) - np.sin(phi) * np.sin(dec)) / (np.cos(phi) * np.cos(dec)))
    long = _dish(hour_angles=(-6, 0) * u.hourangle).effective_tsys(60 * u.deg).to_value(u.K)
    assert long == pytest.approx(_formula_tsys(60.0, -np.degrees(h_lim) / 15, 0.0), rel=2e-3)


@pytest.mark.parametrize("dec", [-30.0, 60.0])
def test_planned_rms_equals_observed_rms(dec):
    """plan() uses the same effective T_sys: its rms for the time equals the measured rms of
    the observed noise within 5 %."""
    cube = _noise_cube(dec)
    dish = _dish()
    p = plan(dish, NU * u.Hz, cube=None, declination=dec * u.deg, integration_time=600 * u.s,
             channel_width=0.5 * u.km / u.s)
    obs = observe(cube, dish, integration_time=600 * u.s, seed=5, guard_band=0 * u.arcsec)
    assert p.rms.to_value(u.K) == pytest.approx(np.std(obs.unmasked_data[:].value), rel=0.05)


@pytest.mark.parametrize("kw, match", [
    (dict(latitude=None), "zenith_opacity: needs latitude"),
    (dict(zenith_opacity=0.0), r"zenith_opacity: 0\.0; must be a number > 0"),
    (dict(latitude=95 * u.deg), r"latitude: .* within \[-90, 90\] deg"),
    (dict(hour_angles=(2, -2) * u.hourangle), "hour_angles: .* start < stop"),
])
def test_bad_dish_site(kw, match):
    with pytest.raises(InstrumentError, match=match):
        _dish(**kw)


def test_a_source_that_never_rises_is_refused_in_one_line():
    with pytest.raises(InstrumentError, match=r"declination -80 deg: the source stays below"):
        _dish().effective_tsys(-80 * u.deg)


def test_config_dish_with_a_site():
    """A [[setup]] dish with latitude_deg and zenith_opacity builds a dish whose T_sys follows
    the elevation over the setup's hour angles (the same figure as the API)."""
    from synth.observing import make_instrument
    st = dict(kind="dish", name="d", diameter_m=40.0, beam_arcsec=None, main_beam_efficiency=0.8,
              n_pol=2, tsys_k=None, fwhm_factor=None, latitude_deg=LAT, zenith_opacity=TAU,
              receiver_temperature_k=T_RX, atmosphere_temperature_k=T_ATM,
              hour_angles_h=[-2.0, 2.0])
    dish = make_instrument(st)
    assert dish.effective_tsys(-30 * u.deg).to_value(u.K) == pytest.approx(
        _formula_tsys(-30.0), rel=1e-3)


def test_a_run_with_a_dish_site(tmp_path):
    """Through a config: a dish setup with latitude_deg, zenith_opacity and
    receiver_temperature_k (no tsys_k) records the noise of the radiometer equation with the
    track's effective T_sys toward [sky] dec_deg (the quadrature above, 0.1 %)."""
    import json
    from synth.pipeline import run_config
    conf = {"cloud": {"source": "demo", "cells": 16, "box_pc": 1.0},
            "sky": {"distance_pc": 2000.0, "dec_deg": 60.0},
            "channels": {"width_kms": 0.5, "velocity_min_kms": -2.0, "velocity_max_kms": 2.0},
            "tracer": [{"species": "CO", "transition": "2-1", "abundance": 1e-4}],
            "output": {"figures": False},
            "setup": [{"name": "d", "kind": "dish", "diameter_m": 40, "main_beam_efficiency": 0.8,
                       "latitude_deg": LAT, "zenith_opacity": TAU,
                       "receiver_temperature_k": T_RX, "integration_time_h": 0.5}]}
    run_config(conf, tmp_path / "run", progress=False, log=None)
    summary = json.loads((tmp_path / "run" / "summary.json").read_text())
    entry = next(iter(summary["setups"]["d"].values()))
    from synth.molecules.registry import Line
    nu = Line("CO", "2-1").frequency.to_value(u.Hz)
    dnu = 0.5e3 / 299792458.0 * nu
    expect = _formula_tsys(60.0) / (0.8 * np.sqrt(2 * dnu * 1800.0))
    assert entry["noise_rms"] == pytest.approx(expect, rel=1e-3)
