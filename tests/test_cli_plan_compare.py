"""`synth plan` and `synth compare`: numbers equal to the library's, bad input exits 2."""

import json
import re

import numpy as np
import pytest
import astropy.units as u
from astropy.io import fits
from spectral_cube import SpectralCube

import synth
from synth.cli import main
from synth.config import load_config
from synth.pipeline import build_snapshot

CONF = """
[cloud]
source = "demo"
cells = 12
box_pc = 0.5
mean_n_h2_cm3 = 1e4
mach = 4.0
seed = 5

[sky]
distance_pc = 4000
ra_deg = 131.50
dec_deg = 6.2

[channels]
width_kms = 0.25
velocity_min_kms = -3.0
velocity_max_kms = 3.0

[[tracer]]
species = "13CO"
transition = "1-0"
abundance = 2e-6

[[tracer]]
species = "C18O"
transition = "1-0"
abundance = 2e-7

[[setup]]
name = "dish"
kind = "dish"
diameter_m = 40
main_beam_efficiency = 0.6
tsys_k = 150
integration_time_h = 1.0

[[setup]]
name = "array"
kind = "array"
antennas = "compact-16"
diameter_m = 10
latitude_deg = 8
tsys_k = 90
sample_interval_s = 900
"""


@pytest.fixture(scope="module")
def conf_path(tmp_path_factory):
    path = tmp_path_factory.mktemp("plan") / "plan.toml"
    path.write_text(CONF)
    return path


def _rows(text):
    """Table rows of the plan output: {(tracer, setup): [cells]}."""
    out = {}
    for line in text.splitlines():
        cells = re.split(r"\s{2,}", line.strip())
        if len(cells) >= 12 and cells[0] in ("13CO_1-0", "C18O_1-0"):
            out[(cells[0], cells[1])] = cells
    return out


def _direct_plans(path, target_snr, hours):
    """synth.plan on cubes synthesized here with synth.synthesize (not through the CLI)."""
    conf = load_config(str(path))
    snap = build_snapshot(conf["cloud"])
    dish = synth.Dish(diameter=40 * u.m, main_beam_efficiency=0.6, tsys=150 * u.K, name="dish")
    arr = synth.Array(antennas="compact-16", diameter=12 * u.m,
                               latitude=8 * u.deg, tsys=90 * u.K, name="array")
    out = {}
    for tr in conf["tracer"]:
        line = synth.Line(tr["species"], tr["transition"])
        cube = synth.synthesize(snap, line, tr["abundance"], distance=4000 * u.pc,
                                channel_width=0.25 * u.km / u.s,
                                velocity_range=(-3, 3) * u.km / u.s,
                                position=(131.50 * u.deg, 6.2 * u.deg))
        for inst, kw in ((dish, {}), (arr, {"sample_interval": 900 * u.s})):
            out[(tr["name"], inst.name)] = synth.planning.plan(
                inst, line, target_snr=target_snr, cube=cube, integration_time=hours * u.hr,
                **kw)
    return out


def test_plan_cli_matches_plan(conf_path, capsys):
    """One row per tracer x setup; beam, largest scale, rms, target and time per pointing as
    synth.plan gives them on independently synthesized cubes (3 significant digits), and the
    dish rms equals the radiometer equation sigma = T_sys / (eta sqrt(2 dnu t)) (two polarisations), dnu = nu dv / c
    (Wilson, Rohlfs & Hüttemeister 2013, Tools of Radio Astronomy, eq. 4.41)."""
    assert main(["plan", str(conf_path), "--target-snr", "4", "--time", "2h"]) == 0
    text = capsys.readouterr().out
    rows = _rows(text)
    assert set(rows) == {(t, s) for t in ("13CO_1-0", "C18O_1-0") for s in ("dish", "array")}
    assert synth.planning.DISCLAIMER in text
    direct = _direct_plans(conf_path, 4.0, 2.0)
    for key, cells in rows.items():
        p = direct[key].as_row()
        unit = "K" if p["kind"] == "dish" else "Jy/beam"
        assert p["brightness_unit"] == unit
        assert cells[7].endswith(" " + unit) and cells[8].endswith(" " + unit)
        got = {"beam": float(cells[3]), "rms": float(cells[7].split()[0]),
               "target": float(cells[8].split()[0]),
               "t": u.Quantity(cells[10]).to_value(u.s), "n": int(cells[11])}
        assert got["beam"] == pytest.approx(p["beam_major_arcsec"], rel=6e-3)
        assert got["rms"] == pytest.approx(p["rms"], rel=6e-3)
        assert got["target"] == pytest.approx(p["target"], rel=6e-3)
        assert got["t"] == pytest.approx(p["time_per_pointing_s"], rel=6e-3)
        assert got["n"] == p["n_pointings"]
        if key[1] == "dish":
            nu_hz = p["frequency_ghz"] * 1e9
            dnu = nu_hz * 0.25 / 299792.458
            assert got["rms"] == pytest.approx(150 / (0.6 * np.sqrt(2 * dnu * 7200)), rel=6e-3)
        else:
            assert cells[4] != "-" and float(cells[4]) > got["beam"]   # LAS > resolution


@pytest.mark.parametrize("argv, match", [
    (["--percentile", "150"], "--percentile must be in 0..100, got 150"),
    (["--target-snr", "-1"], "--target-snr must be > 0"),
    (["--time", "3kg"], "--time '3kg' is not a time"),
    (["--time=0h"], "--time must be > 0"),
])
def test_plan_cli_bad_options(conf_path, capsys, argv, match):
    assert main(["plan", str(conf_path)] + argv) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and err.startswith("synth: error: ") and match in err


def test_plan_cli_bad_config(tmp_path, capsys):
    """A missing file, and a config without setups, exit 2 with one line."""
    assert main(["plan", str(tmp_path / "none.toml")]) == 2
    assert "does not exist" in capsys.readouterr().err
    bare = tmp_path / "bare.toml"
    bare.write_text(CONF.split("[[setup]]")[0])
    assert main(["plan", str(bare)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "no [[setup]] tables: nothing to plan" in err


def _cube(seed, beam_arcsec, unit="K"):
    """An invented smooth cube: seeded Gaussian random field times a Gaussian line."""
    from radio_beam import Beam
    from scipy.ndimage import gaussian_filter
    from synth.analysis.matching import cube_from_array
    rng = np.random.default_rng(seed)
    sky = np.exp(gaussian_filter(rng.standard_normal((64, 64)), 2.0) * 3.0)
    v = np.arange(10) - 4.5
    data = sky[None] * np.exp(-0.5 * (v / 2.0) ** 2)[:, None, None]
    return cube_from_array(data, pixscale=1 * u.arcsec, channel_width=0.5 * u.km / u.s,
                           restfreq=110.2 * u.GHz, unit=unit,
                           beam=Beam(beam_arcsec * u.arcsec))


@pytest.fixture(scope="module")
def two_cubes(tmp_path_factory):
    base = tmp_path_factory.mktemp("cmp")
    a, b = base / "obs.fits", base / "model.fits"
    _cube(1, 2.5).write(str(a))
    _cube(2, 2.0).write(str(b))
    return a, b


def test_compare_cli_matches_compare(two_cubes, tmp_path, capsys):
    """Printed table and comparison.json equal synth.analysis.compare on the same files;
    --out holds the figures (PNG) and refuses to be overwritten without --overwrite."""
    from synth.analysis.compare import compare
    a, b = two_cubes
    out = tmp_path / "cmp"
    assert main(["compare", str(a), str(b), "--names", "obs", "model", "--out", str(out)]) == 0
    text = capsys.readouterr().out
    ref = compare(SpectralCube.read(str(a)), SpectralCube.read(str(b)), names=("obs", "model"))
    for step in ref.steps:
        assert step in text
    saved = json.loads((out / "comparison.json").read_text())
    assert saved["steps"] == list(ref.steps) and saved["names"] == ["obs", "model"]
    assert saved["beam"]["major_arcsec"] == pytest.approx(2.5, rel=1e-6)  # common beam
    printed = {}
    for line in text.splitlines():
        cells = line.split()
        if len(cells) >= 4 and cells[0] in ref.stats["obs"].as_dict():
            printed[cells[0]] = [float(c) if c != "-" else np.nan for c in cells[1:3]]
    stats = {n: ref.stats[n].as_dict() for n in ("obs", "model")}
    assert set(printed) == set(stats["obs"])
    for key, (va, vb) in printed.items():
        assert va == pytest.approx(stats["obs"][key], rel=1e-5, nan_ok=True)
        assert vb == pytest.approx(stats["model"][key], rel=1e-5, nan_ok=True)
        for name in ("obs", "model"):
            want = stats[name][key]
            got = saved["stats"][name][key]
            assert (got is None and not np.isfinite(want)) or got == pytest.approx(want,
                                                                                 rel=1e-12)
    for png in ("structure.png", "moments.png"):
        assert (out / png).read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    before = (out / "comparison.json").read_bytes()
    assert main(["compare", str(a), str(b), "--out", str(out)]) == 2
    assert "exists" in capsys.readouterr().err
    assert (out / "comparison.json").read_bytes() == before
    assert main(["compare", str(a), str(b), "--out", str(out), "--overwrite"]) == 0


def test_compare_cli_bad_input(two_cubes, tmp_path, capsys):
    """A missing file, a 2-D image, a non-FITS file and a bad scale range exit 2, one line."""
    a, _ = two_cubes
    img = tmp_path / "image.fits"
    fits.PrimaryHDU(np.zeros((8, 8))).writeto(img)
    txt = tmp_path / "notes.txt"
    txt.write_text("not a cube\n")
    cases = [([str(tmp_path / "none.fits"), str(a)], "A.fits: the file"),
             ([str(a), str(img)], "B.fits: "), ([str(txt), str(a)], "is not a spectral cube"),
             ([str(a), str(a), "--scale-range", "5", "2"], "--scale-range needs 0 < LO < HI")]
    for argv, match in cases:
        assert main(["compare"] + argv) == 2
        err = capsys.readouterr().err
        assert err.count("\n") == 1 and err.startswith("synth: error: ") and match in err
