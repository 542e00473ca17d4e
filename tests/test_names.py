"""One name per concept: every [[setup]] key is a Python argument of the same name (without
its unit suffix) with the same default, and every Python observing option is reachable from
the config, except the few listed here with their reason (docs/names.md)."""

import dataclasses
import inspect

import astropy.units as u
import numpy as np
import pytest

from synth.config import SCHEMA, REQUIRED, RENAMED_KEYS
from synth.instrument.interferometer import OBSERVE_OPTIONS, RENAMED_OPTIONS, Array
from synth.instrument.observe import observe
from synth.instrument.single_dish import Dish
from synth.observing import (INSTRUMENT_KEYS, OBSERVE_KEYS, RUN_ONLY_KEYS, python_name,
                             python_value)

#: config keys whose default differs from Python's on purpose
CONFIG_DEFAULT_DIFFERS = {
    "seed": "a run is reproducible by default (seed 1); a Python call draws fresh noise and "
            "records the seed (NSEED), as numpy does",
    "name": "a setup's name labels its files, so the config requires one",
}
#: Python observing options the config does not offer, with the reason
PYTHON_ONLY = {
    "with_maps": "the return type of observe(); a run writes every map anyway",
    "spectral_axis": "a run writes velocity cubes; frequency axes are for the Python user",
    "channel_start": "a run's channels start at the ideal cube's ([channels] velocity_min_kms)",
    "unit": "a run writes both K and Jy/beam cubes",
    "rms": "array: an image rms in Jy/beam (a dish's rms is rms_k)",
    "primary_beam": "False ignores the primary beam: an idealisation for tests",
    "bandwidth": "the channel width of single-channel cubes; a run always has a spectral axis",
    "beyond_box": "a property of the sky, so the config has it in [sky]",
    "beam": "the dish's beam is beam_arcsec (a radio_beam.Beam in Python)",
}
_PY_OBSERVE = {k for k, p in inspect.signature(observe).parameters.items()
               if p.kind == p.KEYWORD_ONLY} | set(OBSERVE_OPTIONS)
_FIELDS = {cls: {f.name: f for f in dataclasses.fields(cls) if f.init} for cls in (Dish, Array)}


def _python_default(key, kind, target):
    name = python_name(key)[0]
    if target == "instrument":
        f = _FIELDS[Dish if kind == "dish" else Array][name]
        return REQUIRED if f.default is dataclasses.MISSING else f.default
    if name in OBSERVE_OPTIONS:
        return OBSERVE_OPTIONS[name]
    return inspect.signature(observe).parameters[name].default


def _same(config_value, py_value):
    if config_value is None or py_value is None:
        return config_value is None and py_value is None
    if isinstance(config_value, (str, bool)) or isinstance(py_value, (str, bool)):
        return config_value == py_value
    a, b = u.Quantity(config_value), u.Quantity(py_value)
    if a.unit.is_equivalent(b.unit):
        return bool(np.allclose(a.to_value(b.unit), b.value, rtol=1e-12, atol=0))
    return config_value == py_value


def _cases():
    for kind in ("dish", "array"):
        for key in INSTRUMENT_KEYS[kind]:
            yield kind, key, "instrument"
        for key in OBSERVE_KEYS[kind]:
            yield kind, key, "observe"


@pytest.mark.parametrize("kind, key, target", list(_cases()))
def test_setup_key_has_the_python_default(kind, key, target):
    """Each key's default, as the Python argument takes it, equals that argument's default."""
    cfg_default = SCHEMA["setup"][key][1]
    py_default = _python_default(key, kind, target)
    if key in CONFIG_DEFAULT_DIFFERS:
        return
    if cfg_default is None and py_default is REQUIRED:
        return          # required in Python, checked per kind in the config (e.g. antennas)
    assert _same(python_value(key, cfg_default), py_default), (
        f"[[setup]] {key} = {cfg_default!r} but {python_name(key)[0]} defaults to {py_default!r}")


def test_every_setup_key_is_mapped_once():
    """Each [[setup]] key builds the instrument, goes to observe(), or organises the run."""
    mapped = set(RUN_ONLY_KEYS)
    for kind in ("dish", "array"):
        mapped |= set(INSTRUMENT_KEYS[kind]) | set(OBSERVE_KEYS[kind])
    assert mapped == set(SCHEMA["setup"])


def test_every_python_option_is_reachable_from_the_config():
    """observe() keywords, OBSERVE_OPTIONS and the instruments' fields all have a config key,
    except the listed Python-only ones."""
    from_config = {python_name(k)[0] for kind in ("dish", "array")
                   for k in INSTRUMENT_KEYS[kind] + OBSERVE_KEYS[kind]}
    python = (_PY_OBSERVE | set(_FIELDS[Dish]) | set(_FIELDS[Array])) - {"noise_options"}
    missing = python - from_config - set(PYTHON_ONLY) - {"dish_options", "declination"}
    assert not missing, f"no config key for {sorted(missing)}"


def test_renamed_names_are_not_live_names():
    """An old name is refused with a hint and is no key or option any more."""
    live = set(SCHEMA["setup"]) | set(SCHEMA["cloud"]) | _PY_OBSERVE
    assert not set(RENAMED_KEYS) & live
    assert not set(RENAMED_OPTIONS) & live


def test_break_it_a_changed_default_is_caught(monkeypatch):
    """The comparison sees a mismatch: a config default of 0.25 for primary_beam_cutoff."""
    spec = dict(SCHEMA["setup"])
    types, _, text = spec["primary_beam_cutoff"]
    monkeypatch.setitem(SCHEMA["setup"], "primary_beam_cutoff", (types, 0.25, text))
    with pytest.raises(AssertionError, match="primary_beam_cutoff"):
        test_setup_key_has_the_python_default("array", "primary_beam_cutoff", "observe")


@pytest.mark.parametrize("make, match", [
    (lambda: Array("ring-16", taper=1.1), "Array: taper= was renamed to fwhm_factor"),
    (lambda: Array("ring-16", efficiency=0.7), "Array: efficiency= was renamed to aperture_efficiency"),
    (lambda: Array("ring-16", dish_diameter=10 * u.m), "dish_diameter= was renamed to diameter"),
    (lambda: Array("ring-16", quantization_efficiency=0.9),
     "quantization_efficiency= was renamed to system_efficiency"),
    (lambda: Dish(diameter=30 * u.m, efficiency=0.7),
     "Dish: efficiency= was renamed to main_beam_efficiency"),
    (lambda: Dish(diameter=30 * u.m, taper=1.1), "Dish: taper= was renamed to fwhm_factor"),
])
def test_renamed_instrument_fields_are_refused_with_their_new_name(make, match):
    """The instruments' old keywords get the same one-line hint as old config keys."""
    from synth.errors import InstrumentError
    with pytest.raises(InstrumentError, match=match):
        make()


def test_one_spelling_of_units_in_text():
    """Text, tables and figures write Jy/beam, K km/s and km/s one way (astropy writes
    "Jy / beam"); FITS cards keep the FITS spelling."""
    from synth.sky import unit_text
    assert unit_text(u.Jy / u.beam) == "Jy/beam"
    assert unit_text("Jy/beam") == "Jy/beam"
    assert unit_text(u.K * u.km / u.s) == "K km/s"
    assert unit_text(u.Jy / u.beam * u.km / u.s) == "Jy/beam km/s"
    assert unit_text(u.km / u.s) == "km/s"
