"""A table of bad inputs across the command line, the config, input files and the Python API.

Each CLI / config / file case runs `synth` in this process and expects exit status 2, exactly
one line on stderr starting ``synth: error:`` that holds the fragment, and afterwards nothing
new in the output folder, its parent or the temporary folder. Most are refused by the
preflight pass (synth.preflight) before any work; the rest by the config schema, the readers
or the instruments. API cases expect a SynthError subclass with the fragment.
"""

import copy
import math
import os
import tempfile

import numpy as np
import pytest

from synth import cli
from synth.errors import SynthError

BASE = {
    "cloud": {"source": "demo", "cells": 10, "seed": 3},
    "sky": {"distance_pc": 2000, "dec_deg": -30.0},
    "channels": {"width_kms": 1.0, "velocity_min_kms": -8.0, "velocity_max_kms": 8.0},
    "tracer": [{"species": "13CO", "transition": "1-0", "abundance": 2e-6}],
    "output": {"figures": False},
}
ARRAY = {"name": "arr", "kind": "array", "antennas": "compact-10", "latitude_deg": 8.0,
         "tsys_k": 90.0, "diameter_m": 10.0, "integration_time_h": 1.0}
DISH = {"name": "dish", "kind": "dish", "diameter_m": 30.0, "rms_k": 0.1}


def _toml_value(v):
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, float) and not math.isfinite(v):
        return "nan" if math.isnan(v) else ("inf" if v > 0 else "-inf")
    if isinstance(v, (int, float)):
        return repr(v)
    if isinstance(v, str):  # non-printable / non-ASCII as TOML \uXXXX escapes
        return '"' + "".join(c if " " <= c <= "~" and c not in '"\\' else f"\\u{ord(c):04X}"
                             for c in v) + '"'
    if isinstance(v, list):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{" + ", ".join(f"{k} = {_toml_value(x)}" for k, x in v.items()) + "}"
    raise TypeError(v)


def to_toml(conf):
    out = [f"{k} = {_toml_value(v)}" for k, v in conf.items()
           if not isinstance(v, (dict, list)) or (isinstance(v, list) and v
                                                   and not isinstance(v[0], dict))]
    for section, body in conf.items():
        if out and section in (ln.split(" = ")[0] for ln in out):
            continue
        if isinstance(body, list):
            for table in body:
                out.append(f"[[{section}]]")
                out += [f"{k} = {_toml_value(v)}" for k, v in table.items()]
        elif isinstance(body, dict):
            out.append(f"[{section}]")
            out += [f"{k} = {_toml_value(v)}" for k, v in body.items()]
    return "\n".join(out) + "\n"


def _set(path, value):
    """An edit that sets conf[a][b]... = value (a list index for [[tables]]); value None
    deletes the key."""
    def edit(conf):
        node = conf
        for k in path[:-1]:
            node = node[k]
        if value is None:
            node.pop(path[-1], None)
        else:
            node[path[-1]] = value
    return edit


def _setup(**kw):
    def edit(conf):
        st = dict(ARRAY if kw.pop("_kind", "array") == "array" else DISH)
        for k, v in kw.items():
            if v is None:
                st.pop(k, None)
            else:
                st[k] = v
        conf.setdefault("setup", []).append(st)
    return edit


def _two_setups(a, b):
    def edit(conf):
        conf["setup"] = [a, b]
    return edit


def _tracer(**kw):
    def edit(conf):
        conf["tracer"][0].update(kw)
    return edit


def _many(*edits):
    def edit(conf):
        for e in edits:
            e(conf)
    return edit


# (id, edit of BASE, fragment of the one-line message)
CONFIG_CASES = [
    ("unknown-section", _set(["chanels"], {"width_kms": 1.0}), "unknown section [chanels]"),
    ("misspelt-key", _set(["sky", "distanse_pc"], 10), "did you mean 'distance_pc'"),
    ("missing-distance", _set(["sky", "distance_pc"], None), "[sky] needs 'distance_pc'"),
    ("negative-distance", _set(["sky", "distance_pc"], -1), "distance_pc must be > 0"),
    ("nan-distance", _set(["sky", "distance_pc"], float("nan")),
     "[sky].distance_pc is nan; give a finite number"),
    ("inf-ra", _set(["sky", "ra_deg"], float("inf")), "[sky].ra_deg is inf"),
    ("nan-abundance", _tracer(abundance=float("nan")), "[[tracer]] #1.abundance is nan"),
    ("dec-95", _set(["sky", "dec_deg"], 95.0), "valid: -90 <= dec_deg <= 90"),
    ("dec-minus-91", _set(["sky", "dec_deg"], -91.0), "dec_deg is -91.0"),
    ("ra-360", _set(["sky", "ra_deg"], 360.0), "valid: 0 <= ra_deg < 360"),
    ("ra-negative", _set(["sky", "ra_deg"], -1.0), "ra_deg is -1.0"),
    ("string-distance", _set(["sky", "distance_pc"], "far"), "must be an integer or a number"),
    ("zero-width", _set(["channels", "width_kms"], 0.0), "width_kms must be > 0"),
    ("width-above-band", _set(["channels", "width_kms"], 50.0), "wider than the band"),
    ("two-billion-channels", _many(_set(["channels", "width_kms"], 1e-8),
                                   _set(["channels", "velocity_min_kms"], -10.0),
                                   _set(["channels", "velocity_max_kms"], 10.0)),
     "2,000,000,000 channels x 10 x 10 pixels"),
    ("only-vmin", _set(["channels", "velocity_max_kms"], None), "needs both velocity_min_kms"),
    ("vmin-above-vmax", _set(["channels", "velocity_min_kms"], 9.0), "must be greater than"),
    ("abundance-zero", _tracer(abundance=0.0), "valid: 0 < abundance < 1"),
    ("abundance-two", _tracer(abundance=2), "abundance is 2; valid: 0 < abundance < 1"),
    ("abundance-text", _tracer(abundance="lots"), "abundance must be an integer or a number"),
    ("unknown-species", _tracer(species="XYZ"), "unknown species 'XYZ'"),
    ("unknown-transition", _tracer(transition="9-7"), "unknown transition '9-7'"),
    ("unknown-excitation", _tracer(excitation="nlte"), "excitation is 'nlte'; valid"),
    ("lvg-option-on-lte", _tracer(geometry="plane-slab"), "sets LVG options geometry"),
    ("lvg-no-rates", _tracer(species="HCN", excitation="lvg"), "no collision rates"),
    ("lvg-geometry", _tracer(excitation="lvg", geometry="cube"), "geometry is 'cube'; valid"),
    ("lvg-geometry-renamed-slab", _tracer(excitation="lvg", geometry="slab"),
     '13CO_1-0\'.geometry "slab" was renamed to "plane-slab"'),
    ("lvg-geometry-renamed-sphere", _tracer(excitation="lvg", geometry="sphere"),
     'geometry "sphere" was renamed to "uniform-sphere"'),
    ("lvg-geometry-renamed-lvg", _tracer(excitation="lvg", geometry="lvg"),
     'geometry "lvg" was renamed to "expanding"'),
    ("lvg-accuracy", _tracer(excitation="lvg", accuracy=2.0), "accuracy is 2.0; valid"),
    ("t-ex-zero", _tracer(t_ex_k=0.0), "t_ex_k is 0.0; valid: > 0 K"),
    ("hyperfine-no-data", _tracer(hyperfine=True),
     "hyperfine=true: no hyperfine data for 13CO 1-0; valid: HCN 1-0, N2H+ 1-0"),
    ("hyperfine-text", _tracer(hyperfine="yes"), "hyperfine must be true or false, got 'yes'"),
    ("background-zero", _set(["sky", "background_k"], 0.0),
     "[sky].background_k must be a finite temperature > 0 K, got 0.0"),
    ("demo-box-zero", _set(["cloud", "box_pc"], 0.0), "[cloud].box_pc is 0.0; valid: > 0"),
    ("demo-mach-negative", _set(["cloud", "mach"], -1.0), "[cloud].mach is -1.0"),
    ("demo-solenoidal", _set(["cloud", "solenoidal_fraction"], 2.0), "solenoidal_fraction is 2.0"),
    ("tracer-name-dotdot", _tracer(name="../x"), "first character '.'"),
    ("tracer-name-abs", _tracer(name="/abs"), "first character '/'"),
    ("tracer-name-slash", _tracer(name="a/b"), "character '/'"),
    ("tracer-name-non-ascii", _tracer(name="é"), "character U+00E9"),
    ("tracer-name-newline", _tracer(name="\n"), "character U+000A"),
    ("tracer-name-formula", _tracer(name="=1+1"), "first character '='"),
    ("species-non-ascii", _tracer(species="CÖ"), "character U+00D6"),
    ("two-tracers-one-name", lambda c: c["tracer"].append(dict(c["tracer"][0])),
     "two tracers are named '13CO_1-0'"),
    ("no-tracer", _set(["tracer"], []), "needs at least one [[tracer]]"),
    ("tracer-not-table", _set(["tracer"], "13CO"), "[[tracer]] must be a list of tables"),
    ("sky-not-table", _set(["sky"], 3), "[sky] must be a table"),
    ("line-of-sight", _set(["sky", "line_of_sight"], "w"), "[sky].line_of_sight is 'w'"),
    ("setup-kind", _setup(kind="radio"), "kind is 'radio'; valid: dish, array"),
    ("setup-name-slash", _setup(name="a/b"), "[[setup]] #1.name = 'a/b' has the character '/'"),
    ("setup-misspelt-key", _setup(diamter_m=12.0), "did you mean 'diameter_m'"),
    ("setup-two-one-name", _two_setups(dict(DISH, name="x"), dict(DISH, name="x")),
     "two setups are named 'x'"),
    ("array-without-antennas", _setup(antennas=None), "'arr' (array) needs 'antennas'"),
    ("array-without-tsys", _setup(tsys_k=None), "'arr' (array) needs 'tsys_k'"),
    ("dish-without-size", _setup(_kind="dish", diameter_m=None), "needs diameter_m or beam_arcsec"),
    ("dish-noise-unset", _setup(_kind="dish", rms_k=None), "adds noise: give rms_k"),
    ("efficiency-above-one", _setup(aperture_efficiency=1.5),
     "aperture_efficiency is 1.5; valid: 0 < aperture_efficiency <= 1"),
    ("tsys-negative", _setup(tsys_k=-5.0), "tsys_k is -5.0; valid: > 0"),
    ("latitude-100", _setup(latitude_deg=100.0), "valid: -90 <= latitude_deg <= 90"),
    ("hour-angles-reversed", _setup(hour_angles_h=[3.0, -1.0]),
     "hour_angles_h is [3.0, -1.0]; valid: [start, stop] in hours"),
    ("weighting", _setup(weighting="briggs"), "weighting is 'briggs'; valid: natural"),
    ("sample-interval-zero", _setup(sample_interval_s=0.0), "sample_interval_s is 0.0; valid: > 0"),
    ("setup-channel-width-zero", _setup(channel_width_kms=0.0), "channel_width_kms is 0.0"),
    ("combine-with-itself", _setup(combine_with=["arr"]), "combine_with names the setup itself"),
    ("combine-with-unknown", _setup(combine_with=["nope"]), "combine_with names 'nope', which is not a setup"),
    ("dish-combines", _two_setups(dict(DISH, combine_with=["arr"]), ARRAY),
     "only kind = \"array\" setups combine"),
    ("setup-channel-finer", _setup(channel_width_kms=0.5), "finer than the ideal cube's"),
    ("setup-channel-above-band", _setup(channel_width_kms=40.0), "wider than the band"),
    ("two-dishes-feathered", lambda c: c.update(setup=[
        dict(DISH, name="d1"), dict(DISH, name="d2"),
        dict(ARRAY, combine_with=["d1", "d2"])]), "names 2 dish setups"),
    ("spectra-position-outside", _set(["analysis"], {"spectra_positions": [[10, 2]]}),
     "valid: 0 <= x < 10, 0 <= y < 10"),
    ("unknown-layout", _setup(antennas="nowhere-7"), ".antennas = 'nowhere-7' is neither a built-in layout"),
    ("fwhm-factor-out-of-range", _setup(_kind="dish", fwhm_factor=5.0), ".fwhm_factor is 5; valid:"),
    ("source-never-rises", _set(["sky", "dec_deg"], -80.0), None),  # with an array: below
    ("map-smaller-than-beam", _setup(map_size_arcsec=0.5),
     "setup 'arr': map_size_arcsec: 0.5 arcsec is smaller than one beam"),
    ("spacing-wider-than-primary-beam", _setup(pointing_spacing_arcsec=200.0),
     "setup 'arr': pointing_spacing_arcsec: 200 arcsec is larger than the primary beam"),
    ("too-many-pointings", _setup(map_size_arcsec=[3000.0, 3000.0], max_pointings=20),
     "setup 'arr': max_pointings: the mosaic needs"),
    ("pixel-coarser-than-nyquist", _setup(pixel_arcsec=20.0),
     "setup 'arr': pixel_arcsec: 20 arcsec is too coarse"),
    ("fast-removed", _setup(fast=True), ".fast: removed: the approximate Fourier-plane path"),
    ("n-pol-three", _setup(n_pol=3), "setup 'arr': n_pol = 3; valid: 1 or 2"),
    ("realisations-zero", _set(["analysis"], {"noise_realisations": 0}),
     "[analysis].noise_realisations must be >= 1"),
    ("mask-sigma-zero", _setup(clean_mask_sigma=0.0),
     "setup 'arr': clean_mask_sigma = 0.0; must be > 0"),
    ("scales-without-multiscale", _setup(deconvolver="hogbom", clean_scales_arcsec=[0, 4]),
     "setup 'arr': clean_scales_arcsec = [0, 4] is for deconvolver = \"multiscale\"; this "
     "setup's deconvolver is \"hogbom\""),
    ("unknown-deconvolver", _setup(deconvolver="maxent"),
     "setup 'arr': deconvolver = 'maxent'; valid: hogbom, multiscale, none"),
    ("visibilities-from-a-dish", _setup(_kind="dish", write_visibilities=True),
     "write_visibilities = true needs kind = \"array\""),
    ("opacity-without-receiver", _setup(zenith_opacity=0.1),
     "setup 'arr': zenith_opacity needs receiver_temperature_k > 0"),
    ("phase-rms-negative", _setup(phase_rms_deg=-5.0),
     "setup 'arr': phase_rms_deg = -5.0; must be >= 0"),
    ("products", _set(["output", "products"], ["movie"]), "products has 'movie'"),
    ("percentile", _set(["analysis"], {"percentile": 120.0}), "percentile must be in 0..100"),
    ("spectra-positions", _set(["analysis"], {"spectra_positions": [[1]]}), "give pixel pairs"),
    # renamed keys: refused with their new name (no silent aliases)
    ("renamed-taper", _setup(_kind="dish", taper=1.1), ".taper was renamed to fwhm_factor"),
    ("renamed-efficiency", _setup(efficiency=0.7),
     "efficiency was renamed to main_beam_efficiency (dish) or aperture_efficiency (array)"),
    ("renamed-hour-angle-start", _setup(hour_angle_start_h=-2.0),
     "hour_angle_start_h was renamed to hour_angles_h = [start, stop]"),
    ("renamed-deconvolve", _setup(deconvolve=True), 'deconvolve was renamed to deconvolver = "hogbom"'),
    ("renamed-scales", _setup(scales_arcsec=[0, 4]), "scales_arcsec was renamed to clean_scales_arcsec"),
    ("renamed-size", _set(["cloud", "size"], 16), "[cloud].size was renamed to cells"),
    ("renamed-mean-density", _set(["cloud", "mean_density_cm3"], 1e3),
     "[cloud].mean_density_cm3 was renamed to mean_n_h2_cm3"),
    ("demo-cells-4", _set(["cloud", "cells"], 4), "[cloud].cells is 4; valid: >= 8"),
    ("source-missing", _set(["cloud", "source"], "nowhere.h5"), "nowhere.h5: no such file"),
    ("source-folder", _set(["cloud", "source"], "."), "is a folder; give a snapshot file"),
    ("datafile-missing", _tracer(datafile="none.dat"), "none.dat: no such file"),
    ("sweep-not-table", _many(_setup(), _set(["sweep"], 3)), "[sweep] must be a table"),
    ("sweep-no-setups", _many(_setup(), _set(["sweep"], {"seed": [1, 2]})),
     "[sweep] needs 'setups'"),
    ("sweep-unknown-setup", _many(_setup(), _set(["sweep"], {"setups": ["nope"], "seed": [1]})),
     "[sweep].setups names 'nope', which is not a [[setup]]; valid: arr"),
    ("sweep-misspelt-key", _many(_setup(), _set(["sweep"], {"setups": ["arr"],
                                                           "integration_tme_h": [1.0]})),
     "unknown key 'integration_tme_h' in [sweep]"),
    ("sweep-fixed-key", _many(_setup(), _set(["sweep"], {"setups": ["arr"], "kind": ["dish"]})),
     "[sweep].kind cannot be swept"),
    ("sweep-not-a-list", _many(_setup(), _set(["sweep"], {"setups": ["arr"],
                                                         "integration_time_h": 2.0})),
     "[sweep].integration_time_h = 2.0; give a list of values"),
    ("sweep-empty-list", _many(_setup(), _set(["sweep"], {"setups": ["arr"], "robust": []})),
     "[sweep].robust = []; give a list of values"),
    ("sweep-value-type", _many(_setup(), _set(["sweep"], {"setups": ["arr"],
                                                         "integration_time_h": [1.0, "long"]})),
     "[sweep].integration_time_h must be an integer or a number, got 'long'"),
    ("sweep-value-twice", _many(_setup(), _set(["sweep"], {"setups": ["arr"],
                                                          "integration_time_h": [1.0, 1.0]})),
     "[sweep].integration_time_h lists 1.0 twice"),
    ("sweep-value-nan", _many(_setup(), _set(["sweep"], {"setups": ["arr"],
                                                        "tsys_k": [50.0, float("nan")]})),
     "[sweep].tsys_k[1] is nan; give a finite number"),
    ("sweep-nothing-swept", _many(_setup(), _set(["sweep"], {"setups": ["arr"]})),
     "[sweep] lists no [[setup]] key to sweep"),
    ("sweep-value-out-of-range", _many(_setup(), _set(["sweep"], {
        "setups": ["arr"], "integration_time_h": [1.0, -1.0]})),
     "'arr_t-1h'.integration_time_h is -1.0; valid: > 0"),
    ("sweep-unknown-layout", _many(_setup(), _set(["sweep"], {
        "setups": ["arr"], "antennas": ["ring-16", "nowhere-7"]})),
     "arr_nowhere-7'.antennas = 'nowhere-7' is neither a built-in layout"),
    ("sweep-combined-setup", _many(_two_setups(DISH, dict(ARRAY, combine_with=["dish"])),
                                   _set(["sweep"], {"setups": ["dish"], "rms_k": [0.1, 0.2]})),
     "[sweep] expands setup 'dish', which setup 'arr' combines with"),
    ("sweep-too-many", _many(_setup(), _set(["sweep"], {"setups": ["arr"],
                                                       "seed": list(range(501))})),
     "[sweep] makes 501 setups; at most 500"),
    ("sweep-name-too-long", _many(_setup(), _set(["sweep"], {"setups": ["arr"],
                                                            "weighting": ["n" * 70]})),
     "[sweep]: the name of setup 'arr' with weighting = 'nnn"),
    ("sweep-name-taken", _many(_two_setups(ARRAY, dict(ARRAY, name="arr_seed2")),
                               _set(["sweep"], {"setups": ["arr"], "seed": [1, 2]})),
     "[sweep] makes a setup named 'arr_seed2', which is already a setup"),
]
# the source-never-rises case needs an array setup too
CONFIG_CASES = [(i, _many(e, _setup()) if i == "source-never-rises" else e,
                 "never rises above 15 deg elevation" if f is None else f)
                for i, e, f in CONFIG_CASES]


@pytest.fixture
def clean_dirs(tmp_path, monkeypatch):
    """Run in tmp_path/work with building the snapshot forbidden (every error must come
    before any work); yield a checker that nothing new appeared in the work folder, its
    parent, the output folder or the temporary folder."""
    work = tmp_path / "work"
    work.mkdir()
    monkeypatch.chdir(work)

    def no_work(*a, **k):
        raise AssertionError("the snapshot was built: this error was not found up front")
    monkeypatch.setattr("synth.pipeline.build_snapshot", no_work)
    tmpdir = tempfile.gettempdir()
    temp_before = set(os.listdir(tmpdir))

    def check(expected_work):
        assert sorted(os.listdir(work)) == sorted(expected_work)
        assert os.listdir(tmp_path) == ["work"]
        new = {n for n in set(os.listdir(tmpdir)) - temp_before
               if n.startswith(("synth-", ".tmp-")) or ".partial-" in n}
        assert not new
    return work, check


def _cli(argv, capsys):
    rc = cli.main(argv)
    err = capsys.readouterr().err.strip().splitlines()
    errors = [ln for ln in err if ln.startswith("synth: error:")]
    return rc, errors


@pytest.mark.parametrize("case, edit, fragment", CONFIG_CASES, ids=[c[0] for c in CONFIG_CASES])
def test_bad_config(case, edit, fragment, clean_dirs, capsys):
    work, check = clean_dirs
    conf = copy.deepcopy(BASE)
    edit(conf)
    (work / "run.toml").write_text(to_toml(conf), encoding="utf-8")
    rc, errors = _cli(["run", "run.toml", "--out", "out", "--quiet"], capsys)
    assert rc == 2 and len(errors) == 1, errors
    assert fragment in errors[0]
    check(["run.toml"])


ANTENNA_CSV = {
    "same-position": "name,east_m,north_m,up_m,diameter_m\na,0,0,0,12\nb,0,0,0,12\nc,40,0,0,12\n",
    "bad-header": "name,x,y,z\na,0,0,0\nb,10,0,0\n",
    "one-antenna": "name,east_m,north_m,up_m,diameter_m\na,0,0,0,12\n",
    "not-a-number": "name,east_m,north_m,up_m,diameter_m\na,0,0,0,12\nb,ten,0,0,12\n",
}
LEIDEN_OTHER = """!MOLECULE
HCN
!MOLECULAR WEIGHT
27.0
!NUMBER OF ENERGY LEVELS
2
!LEVEL + ENERGIES(cm^-1) + WEIGHT + J
1 0.0 1.0 0
2 2.9564 3.0 1
!NUMBER OF RADIATIVE TRANSITIONS
1
!TRANS + UP + LOW + EINSTEINA(s^-1) + FREQ(GHz) + E_u(K)
1 2 1 2.407e-05 88.6316 4.25
!NUMBER OF COLL PARTNERS
0
"""


def _write_npz(path, **arrays):
    with open(path, "wb") as fh:
        np.savez(fh, **arrays)


FILE_CASES = [
    # (id, files {name: text | callable(path)}, edit, fragment)
    ("antennas-same-position", {"ants.csv": ANTENNA_CSV["same-position"]},
     _setup(antennas="ants.csv"), "share the position"),
    ("antennas-bad-header", {"ants.csv": ANTENNA_CSV["bad-header"]},
     _setup(antennas="ants.csv"), "header must be name,east_m,north_m,up_m,diameter_m"),
    ("antennas-one", {"ants.csv": ANTENNA_CSV["one-antenna"]},
     _setup(antennas="ants.csv"), "at least 2 antennas"),
    ("antennas-not-a-number", {"ants.csv": ANTENNA_CSV["not-a-number"]},
     _setup(antennas="ants.csv"), "ants.csv"),
    ("antennas-missing-csv", {}, _setup(antennas="gone.csv"), "gone.csv' is neither a built-in"),
    ("npz-object-array", {"cloud.npz": lambda p: _write_npz(p, n_h2=np.array([{"a": 1}]))},
     _many(_set(["cloud", "source"], "cloud.npz"), _set(["cloud", "cell_size_pc"], 0.1)),
     "holds Python objects, which synth does not load"),
    ("npz-no-density", {"cloud.npz": lambda p: _write_npz(p, t_kin=np.ones((4, 4, 4)))},
     _many(_set(["cloud", "source"], "cloud.npz"), _set(["cloud", "cell_size_pc"], 0.1)),
     "cloud.npz"),
    ("npz-no-temperature", {"cloud.npz": lambda p: _write_npz(
        p, n_h2=np.ones((4, 4, 4)), n_h2_unit=np.array("cm-3"))},
     _many(_set(["cloud", "source"], "cloud.npz"), _set(["cloud", "cell_size_pc"], 0.1)),
     "field 't_kin' not found"),
    ("npz-no-cell-size", {"cloud.npz": lambda p: _write_npz(
        p, n_h2=np.ones((4, 4, 4)), n_h2_unit=np.array("cm-3"), t_kin=np.ones((4, 4, 4)),
        t_kin_unit=np.array("K"), velocity=np.zeros((3, 4, 4, 4)),
        velocity_unit=np.array("km/s"))},
     _set(["cloud", "source"], "cloud.npz"), "no cell size stored"),
    ("npz-garbage", {"cloud.npz": "not a zip file"},
     _set(["cloud", "source"], "cloud.npz"), "is not a .npz file (not a zip archive of arrays)"),
    ("datafile-other-molecule", {"hcn.dat": LEIDEN_OTHER},
     _tracer(species="13CO", datafile="hcn.dat", transition="1-0"),
     "holds molecule 'HCN', not species = '13CO'"),
    ("datafile-garbage", {"x.dat": "hello\n"}, _tracer(datafile="x.dat"), "x.dat"),
]


@pytest.mark.parametrize("case, files, edit, fragment", FILE_CASES,
                         ids=[c[0] for c in FILE_CASES])
def test_bad_file(case, files, edit, fragment, clean_dirs, capsys):
    work, check = clean_dirs
    for name, content in files.items():
        if callable(content):
            content(str(work / name))
        else:
            (work / name).write_text(content)
    conf = copy.deepcopy(BASE)
    edit(conf)
    (work / "run.toml").write_text(to_toml(conf))
    rc, errors = _cli(["run", "run.toml", "--out", "out", "--quiet"], capsys)
    assert rc == 2 and len(errors) == 1, errors
    assert fragment in errors[0]
    check(["run.toml", *files])


def _ratios(*override):
    """argv of a small valid `synth ratios` call with the options in ``override`` replaced."""
    opts = {"--lines": ["2-1/1-0"], "--density": ["1e2", "1e5"], "--temperature": ["10", "30"],
            "--column-per-width": ["1e15"], "--out": ["out"]}
    i = 0
    while i < len(override):
        j = i + 1
        while j < len(override) and not str(override[j]).startswith("--"):
            j += 1
        opts[override[i]] = list(override[i + 1:j])
        i = j
    return ["ratios", "CO", "--quiet"] + [w for k, v in opts.items() for w in (k, *v)]


CLI_CASES = [
    # (id, argv after writing run.toml from BASE, fragment)
    ("config-is-folder", ["run", ".", "--out", "out"], "is a folder; give the path of a TOML"),
    ("config-missing", ["run", "nope.toml", "--out", "out"], "nope.toml does not exist"),
    ("config-not-toml", ["run", "notes.txt", "--out", "out"], "is not valid TOML"),
    ("config-not-utf8", ["run", "latin1.toml", "--out", "out"], "is not UTF-8"),
    ("memory-text", ["run", "run.toml", "--out", "out", "--memory", "lots"], "is not a size"),
    ("memory-tiny", ["run", "run.toml", "--out", "out", "--memory", "1kB"],
     "[channels]: 16 channels x 10 x 10 pixels: memory budget"),
    ("workers-zero", ["run", "run.toml", "--out", "out", "--workers", "0"],
     "--workers must be >= 1"),
    ("scheduler-not-address", ["run", "run.toml", "--out", "out", "--scheduler",
                               "not-an-address"], "is not a scheduler address"),
    ("workers-and-scheduler", ["run", "run.toml", "--out", "out", "--workers", "1",
                               "--scheduler", "tcp://127.0.0.1:1"], "not both"),
    ("demo-cells-4", ["demo", "--out", "out", "--cells", "4"], "--cells must be >= 8"),
    ("reuse-a-file", ["run", "run.toml", "--out", "out", "--reuse", "run.toml"],
     "--reuse run.toml: is a file; give the folder of an earlier run"),
    ("out-parent-missing", ["run", "run.toml", "--out", "no/such/out"], "does not exist"),
    ("out-exists", ["run", "run.toml", "--out", "."], "exists; choose another --out"),
    ("plan-dec-95", ["plan", "dec95.toml"], "valid: -90 <= dec_deg <= 90"),
    ("plan-target-snr", ["plan", "withsetup.toml", "--target-snr", "-1"],
     "--target-snr must be > 0"),
    ("plan-no-setup", ["plan", "run.toml"], "has no [[setup]] tables"),
    ("plan-array-without-antennas", ["plan", "noants.toml"], "'arr' (array) needs 'antennas'"),
    ("zone-renamed", ["zone", "CO", "--density", "1e4", "--temperature", "20",
                      "--column-per-width", "1e16"],
     "the command `synth zone` was renamed to `synth excite`"),
    ("excite-geometry-renamed", ["excite", "CO", "--density", "1e4", "--temperature", "20",
                                 "--column-per-width", "1e16", "--geometry", "slab"],
     '--geometry "slab" was renamed to "plane-slab"'),
    ("excite-geometry-unknown", ["excite", "CO", "--density", "1e4", "--temperature", "20",
                                 "--column-per-width", "1e16", "--geometry", "cube"],
     "--geometry 'cube' unknown; valid: expanding, uniform-sphere, plane-slab"),
    ("excite-ortho-para-renamed", ["excite", "CO", "--density", "1e4", "--temperature", "20",
                                   "--column-per-width", "1e16", "--ortho-para", "3"],
     "the option --ortho-para was renamed to --ortho-para-ratio"),
    ("excite-max-rows-renamed", ["excite", "CO", "--density", "1e4", "--temperature", "20",
                                 "--column-per-width", "1e16", "--max-rows", "3"],
     "the option --max-rows was renamed to --max-lines"),
    ("lines-max-jup-renamed", ["lines", "CO", "--max-jup=3"],
     "the option --max-jup was renamed to --max-lines"),
    ("lines-max-lines-negative", ["lines", "CO", "--max-lines", "-1"],
     "--max-lines must be >= 0 (0 = all), got -1"),
    ("ratios-pair-syntax", _ratios("--lines", "2-1:1-0"),
     "--lines: line pair '2-1:1-0' is not NUMERATOR/DENOMINATOR"),
    ("ratios-pair-unknown", _ratios("--lines", "9-7/1-0"), "unknown transition '9-7'"),
    ("ratios-density-reversed", _ratios("--density", "1e5", "1e2"),
     "--density 100000 100: give LO HI with 0 < LO < HI"),
    ("ratios-temperature-zero", _ratios("--temperature", "0", "30"),
     "--temperature 0 30: give LO HI with 0 < LO < HI"),
    ("ratios-points", _ratios("--density-points", "1"), "--density-points must be 2..400, got 1"),
    ("ratios-columns", _ratios("--column-per-width", *["1e15"] * 7), "at most 6 values"),
    ("ratios-column-negative", _ratios("--column-per-width", "1e15", "-5"),
     "--column-per-width must be > 0, got 1e+15 -5"),
    ("ratios-geometry-renamed", _ratios("--geometry", "sphere"),
     '--geometry "sphere" was renamed to "uniform-sphere"'),
    ("ratios-out-exists", _ratios("--out", "."), "exists; choose another --out"),
]


@pytest.mark.parametrize("case, argv, fragment", CLI_CASES, ids=[c[0] for c in CLI_CASES])
def test_bad_cli(case, argv, fragment, clean_dirs, capsys):
    work, check = clean_dirs
    files = {"run.toml": to_toml(BASE), "notes.txt": "just [ notes\n",
             "dec95.toml": to_toml(dict(copy.deepcopy(BASE), sky={"distance_pc": 2000,
                                                                  "dec_deg": 95.0},
                                        setup=[DISH])),
             "withsetup.toml": to_toml(dict(copy.deepcopy(BASE), setup=[DISH])),
             "noants.toml": to_toml(dict(copy.deepcopy(BASE), setup=[
                 {k: v for k, v in ARRAY.items() if k != "antennas"}]))}
    for name, text in files.items():
        (work / name).write_text(text)
    (work / "latin1.toml").write_bytes('[sky]\nname = "caf\xe9"\n'.encode("latin-1"))
    rc, errors = _cli(argv, capsys)
    assert rc == 2 and len(errors) == 1, errors
    assert fragment in errors[0]
    check([*files, "latin1.toml"])


def _api_cases():
    import astropy.units as u
    import synth
    from synth.config import validate_config
    from synth.instrument.arrays import read_layout_csv

    def conf(**tr):
        c = copy.deepcopy(BASE)
        c["tracer"][0].update(tr)
        return c
    return [
        ("line-unknown", lambda: synth.Line("XYZ", "1-0"), "unknown species"),
        ("interferometer-same-position",
         lambda: synth.Array(antennas=[[0, 0, 0], [0, 0, 0], [9, 0, 0]], tsys=90 * u.K, diameter=10 * u.m),
         "share the position"),
        ("validate-name", lambda: validate_config(conf(name="../x")), "first character '.'"),
        ("validate-nan", lambda: validate_config(conf(abundance=float("nan"))), "is nan"),
        ("layout-missing", lambda: read_layout_csv("no-such.csv"), "no such file"),
        ("run-config-memory", lambda: synth.run_config(BASE, "out", memory="lots",
                                                       progress=False), "is not a size"),
        ("run-config-overwrite-non-run", lambda: synth.run_config(BASE, ".", overwrite=True,
                                                                  progress=False),
         "working folder"),
        ("snapshot-negative-density", lambda: synth.Snapshot(
            n_h2=-np.ones((2, 2, 2)) * u.cm**-3, t_kin=np.ones((2, 2, 2)) * u.K,
            velocity=np.zeros((3, 2, 2, 2)) * u.km / u.s, cell_size=0.1 * u.pc), "n_h2"),
    ]


API_IDS = ["line-unknown", "interferometer-same-position", "validate-name", "validate-nan",
           "layout-missing", "run-config-memory", "run-config-overwrite-non-run",
           "snapshot-negative-density"]


@pytest.mark.parametrize("case", API_IDS)
def test_bad_api(case, clean_dirs):
    work, check = clean_dirs
    fn, fragment = {c[0]: c[1:] for c in _api_cases()}[case]
    with pytest.raises(SynthError) as info:
        fn()
    assert fragment in str(info.value) and "\n" not in str(info.value)
    check([])


def test_table_has_at_least_60_cases():
    assert len(CONFIG_CASES) + len(FILE_CASES) + len(CLI_CASES) + len(API_IDS) >= 60


WARNING_CASES = [
    ("abundance-high", _tracer(abundance=5e-3), "above 1e-3"),
    ("band-misses-line", _many(_set(["sky", "systemic_velocity_kms"], 40.0)),
     "does not cover [sky].systemic_velocity_kms = 40"),
]


@pytest.mark.parametrize("case, edit, fragment", WARNING_CASES,
                         ids=[c[0] for c in WARNING_CASES])
def test_suspicious_config_warns_up_front(case, edit, fragment, tmp_path, monkeypatch):
    """Suspicious but possible values warn (one line) before any work, and the run goes on."""
    from synth.config import validate_config
    from synth.errors import SynthWarning
    from synth.preflight import preflight
    conf = copy.deepcopy(BASE)
    edit(conf)
    with pytest.warns(SynthWarning, match=fragment.replace("[", "\\[").replace("]", "\\]")):
        preflight(validate_config(conf))


def test_datafile_molecule_name_with_a_note_matches(tmp_path):
    """A Leiden file whose molecule line carries a note ("HCN (hfs)") matches species HCN;
    a different molecule does not."""
    from synth.config import validate_config
    from synth.preflight import preflight
    p = tmp_path / "hcn.dat"
    p.write_text(LEIDEN_OTHER.replace("HCN\n", "HCN (invented test file)\n", 1))
    conf = copy.deepcopy(BASE)
    conf["tracer"][0].update(species="hcn", datafile=str(p))
    (line,) = preflight(validate_config(conf))
    assert line.freq_hz == pytest.approx(88.6316e9)
    conf["tracer"][0].update(species="HNC")
    with pytest.raises(SynthError, match="holds molecule 'HCN \\(invented test file\\)'"):
        preflight(validate_config(conf))


def test_plan_reports_a_setup_that_cannot_observe(tmp_path, capsys, monkeypatch):
    """`synth plan` checks the config up front but leaves observing-only conditions (the
    source rising at an array) to the planner, which lists the setup as not planned."""
    monkeypatch.chdir(tmp_path)
    conf = dict(copy.deepcopy(BASE), sky={"distance_pc": 2000, "dec_deg": -80.0},
                setup=[ARRAY, DISH])
    (tmp_path / "p.toml").write_text(to_toml(conf))
    assert cli.main(["plan", "p.toml"]) == 0
    out = capsys.readouterr().out
    assert "not planned: arr / 13CO_1-0" in out and "dish" in out


def test_a_bad_setup_is_refused_before_the_heavy_imports(tmp_path):
    """The one-line error for a setup without antennas comes before synth imports its
    instrument, imaging or cube modules (radio-beam, spectral-cube, scipy.signal, ducc0:
    together over a second on this machine). Checked by which modules are loaded, in a fresh
    interpreter, not by timing."""
    import subprocess
    import sys
    cfg = tmp_path / "bad.toml"
    cfg.write_text('[cloud]\nsource = "demo"\ncells = 8\n[sky]\ndistance_pc = 2000\n'
                   '[channels]\nwidth_kms = 0.5\n[[tracer]]\nspecies = "13CO"\n'
                   'transition = "1-0"\nabundance = 2e-6\n[[setup]]\nname = "arr"\n'
                   'kind = "array"\ntsys_k = 90\nintegration_time_h = 1\n')
    code = ("import sys\nfrom synth import cli\n"
            "try:\n    cli.main(['run', sys.argv[1], '--out', sys.argv[2]])\n"
            "except SystemExit:\n    pass\n"
            "heavy = ['radio_beam', 'spectral_cube', 'scipy.signal', 'ducc0', 'matplotlib']\n"
            "print(' '.join(m for m in heavy if m in sys.modules) or 'none')\n")
    proc = subprocess.run([sys.executable, "-c", code, str(cfg), str(tmp_path / "out")],
                          capture_output=True, text=True, timeout=120)
    assert "[[setup]] 'arr' (array) needs 'antennas'" in proc.stderr
    assert proc.stdout.strip().splitlines()[-1] == "none"
    assert not (tmp_path / "out").exists()
