"""Config, pipeline, FITS output and the command line (bad input included)."""

import json
import os

import numpy as np
import pytest
import astropy.units as u
from astropy.io import fits
from spectral_cube import SpectralCube

import synth
from synth import cli
from synth.config import SCHEMA, load_config, validate_config
from synth.errors import ConfigError, OutputError, SnapshotError, UnknownSpeciesError
from synth.fitsio import write_cube

MINIMAL = """
[cloud]
source = "demo"
size = 12
seed = 3
[sky]
distance_pc = 2000
[channels]
width_kms = 0.5
velocity_min_kms = -12
velocity_max_kms = 12
[[tracer]]
species = "13CO"
transition = "1-0"
abundance = 2e-6
[output]
products = ["tau", "column"]
"""


@pytest.fixture
def conf_file(tmp_path):
    p = tmp_path / "run.toml"
    p.write_text(MINIMAL)
    return p


def test_written_cube_reads_back_with_spectral_cube(tmp_path):
    """SpectralCube.read of a written cube gives the same data, spectral axis and rest
    frequency; spectral-cube's moment0() equals our integrated intensity (sum T dv)."""
    snap = synth.demo_cloud(n=12, seed=5)
    line = synth.Line("CO", "2-1")
    cube = synth.synthesize(snap, line, 1e-4, distance=2 * u.kpc,
                            channel_width=0.4 * u.km / u.s, velocity_range=(-12, 12) * u.km / u.s)
    path = write_cube(cube, str(tmp_path / "c.fits"), conf_hash="abc")
    back = SpectralCube.read(path)
    np.testing.assert_array_equal(back.unmasked_data[:].value, cube.unmasked_data[:].value)
    np.testing.assert_allclose(back.spectral_axis.to_value(u.m / u.s),
                               cube.spectral_axis.to_value(u.m / u.s), rtol=1e-12)
    assert back.wcs.wcs.restfrq == pytest.approx(line.freq_hz, rel=1e-12)
    assert back.unit == u.K
    mom0 = back.with_spectral_unit(u.km / u.s).moment0().to_value(u.K * u.km / u.s)
    ours = cube.unmasked_data[:].value.sum(axis=0) * 0.4
    np.testing.assert_allclose(mom0, ours, rtol=1e-5)
    hdr = fits.getheader(path)
    assert hdr["SYNTHVER"] == synth.__version__ and hdr["CONFHASH"] == "abc"
    assert hdr["CTYPE3"] == "VRAD" and hdr["SPECSYS"] == "LSRK"


def test_run_config_writes_products(conf_file, tmp_path):
    """A run writes one cube per tracer, tau and column products, a moment-0 PNG and a JSON
    summary whose integrated intensity equals the cube's (sum T dv, exact)."""
    out = tmp_path / "run1"
    summary = synth.run_config(str(conf_file), str(out), progress=False)
    names = set(os.listdir(out))
    assert {"13CO_1-0_column.fits", "13CO_1-0_ideal.fits", "13CO_1-0_mom0.png",
            "13CO_1-0_tau.fits", "summary.json"} <= names
    on_disk = json.loads((out / "summary.json").read_text())
    assert on_disk["config_hash"] == summary["config_hash"]
    cube = SpectralCube.read(str(out / "13CO_1-0_ideal.fits"))
    peak = cube.unmasked_data[:].value.sum(axis=0).max() * 0.5
    assert on_disk["tracers"]["13CO_1-0"]["peak_integrated_k_kms"] == pytest.approx(peak, rel=1e-6)
    col = fits.getdata(out / "13CO_1-0_column.fits")
    snap = synth.demo_cloud(n=12, seed=3)
    ref = (snap.n_h2_cm3 * 2e-6).sum(axis=2).T * snap.cell_size_cm
    np.testing.assert_allclose(col, ref, rtol=1e-6)


def test_same_config_same_bytes(conf_file, tmp_path):
    """Same config, same bytes (DEVELOPERS.md: every random draw takes a seed)."""
    synth.run_config(str(conf_file), str(tmp_path / "a"), progress=False)
    synth.run_config(str(conf_file), str(tmp_path / "b"), progress=False)
    a = fits.getdata(tmp_path / "a" / "13CO_1-0_ideal.fits")
    b = fits.getdata(tmp_path / "b" / "13CO_1-0_ideal.fits")
    assert a.tobytes() == b.tobytes()


def test_existing_output_refused_and_untouched(conf_file, tmp_path):
    out = tmp_path / "run"
    out.mkdir()
    (out / "keep.txt").write_text("mine")
    with pytest.raises(OutputError, match="exists; choose another --out or pass --overwrite"):
        synth.run_config(str(conf_file), str(out), progress=False)
    assert os.listdir(out) == ["keep.txt"]
    with pytest.raises(OutputError, match="has no synth-run.json"):
        synth.run_config(str(conf_file), str(out), overwrite=True, progress=False)
    assert os.listdir(out) == ["keep.txt"]
    run = tmp_path / "run2"
    synth.run_config(str(conf_file), str(run), progress=False)
    (run / "stale.txt").write_text("from an older run")
    synth.run_config(str(conf_file), str(run), overwrite=True, progress=False)
    assert "stale.txt" not in os.listdir(run) and "summary.json" in os.listdir(run)
    marker = json.loads((run / "synth-run.json").read_text())
    assert marker["written_by"] == "synth" and "summary.json" in marker["files"]
    assert not [p for p in os.listdir(tmp_path) if p.startswith(".")]


def test_failed_run_leaves_nothing(tmp_path):
    """An error in the middle of a run (unknown transition found late) leaves no folder."""
    bad = MINIMAL.replace('transition = "1-0"', 'transition = "9-7"')
    p = tmp_path / "bad.toml"
    p.write_text(bad)
    with pytest.raises(UnknownSpeciesError, match="unknown transition '9-7'"):
        synth.run_config(str(p), str(tmp_path / "out"), progress=False)
    assert sorted(os.listdir(tmp_path)) == ["bad.toml"]


@pytest.mark.parametrize("edit, match", [
    (("distance_pc", "distanse_pc"), "unknown key 'distanse_pc' in \\[sky\\]; did you mean 'distance_pc'"),
    (("[channels]", "[chanels]"), "unknown section \\[chanels\\]; did you mean 'channels'"),
    (("width_kms = 0.5", "width_kms = -0.5"), "width_kms must be > 0"),
    (("width_kms = 0.5", 'width_kms = "wide"'), "width_kms must be an integer or a number"),
    (("abundance = 2e-6", ""), "needs 'abundance'"),
    (('species = "13CO"\n', 'species = "13CO"\nexcitation = "nlte"\n'), "valid: lte, lvg"),
    (('products = ["tau", "column"]', 'products = ["movie"]'), "valid: 'tau', 'column'"),
    (("size = 12", "size = [12"), "is not valid TOML"),
])
def test_bad_config(tmp_path, edit, match):
    p = tmp_path / "c.toml"
    p.write_text(MINIMAL.replace(*edit))
    with pytest.raises(ConfigError, match=match):
        load_config(str(p))


def test_config_reference_documents_every_key():
    """docs/config.md lists every key of the schema (the reference stays in step)."""
    with open(os.path.join(os.path.dirname(__file__), "..", "docs", "config.md")) as fh:
        doc = fh.read()
    for section, spec in SCHEMA.items():
        assert section in doc
        for key in spec:
            assert f"`{key}`" in doc, f"docs/config.md misses {section}.{key}"


def test_demo_configs_identical():
    """configs/demo.toml (for `synth run`) is the packaged demo config (for `synth demo`)."""
    here = os.path.dirname(__file__)
    from synth.pipeline import DEMO_CONFIG
    with open(os.path.join(here, "..", "configs", "demo.toml")) as a, open(DEMO_CONFIG) as b:
        assert a.read() == b.read()
    validate_config(load_config(DEMO_CONFIG))


def test_cli_bad_input_exit_2_one_line(tmp_path, capsys):
    p = tmp_path / "c.toml"
    p.write_text(MINIMAL.replace("distance_pc", "distanse_pc"))
    assert cli.main(["run", str(p), "--out", str(tmp_path / "o"), "--quiet"]) == 2
    err = capsys.readouterr().err.strip()
    assert err.count("\n") == 0 and err.startswith("synth: error: unknown key 'distanse_pc'")
    assert not (tmp_path / "o").exists()


def test_cli_lines_lists_co(capsys):
    """`synth lines CO` prints CO 1-0 at 115.2712 GHz (Leiden-format CO file,
    Schöier et al. 2005)."""
    assert cli.main(["lines", "CO"]) == 0
    out = capsys.readouterr().out
    assert "115.27" in out and "1-0" in out


def test_cli_run_writes(conf_file, tmp_path, capsys):
    assert cli.main(["run", str(conf_file), "--out", str(tmp_path / "o"), "--quiet"]) == 0
    assert (tmp_path / "o" / "summary.json").exists()


def test_unwritable_output(conf_file, tmp_path):
    """An output folder that cannot be created is a one-line OutputError, nothing written.
    As root (who can write anywhere), a folder on the read-only sysfs stands in."""
    ro = tmp_path / "ro"
    ro.mkdir()
    os.chmod(ro, 0o500)
    try:
        target = ro / "out" if not os.access(ro, os.W_OK) else "/sys/synth-test-out"
        if str(target).startswith("/sys") and not os.path.isdir("/sys"):
            pytest.skip("no unwritable folder available")
        with pytest.raises(OutputError, match="not writable|cannot create"):
            synth.run_config(str(conf_file), str(target), progress=False)
        assert not os.path.exists(target)
    finally:
        os.chmod(ro, 0o700)


def test_output_parent_missing(conf_file, tmp_path):
    with pytest.raises(OutputError, match="does not exist"):
        synth.run_config(str(conf_file), str(tmp_path / "no" / "out"), progress=False)


@pytest.mark.parametrize("make, exc, match", [
    (lambda n, t, v: dict(n_h2=np.where(n > 0, np.nan, n) * u.cm**-3, t_kin=t, velocity=v),
     SnapshotError, "n_h2 has 8 non-finite cell"),
    (lambda n, t, v: dict(n_h2=-n * u.cm**-3, t_kin=t, velocity=v), SnapshotError,
     "n_h2 has 8 negative cell"),
    (lambda n, t, v: dict(n_h2=n * u.cm**-3, t_kin=t[:1], velocity=v), SnapshotError,
     "t_kin has shape \\(1, 2, 2\\) but n_h2 has \\(2, 2, 2\\)"),
    (lambda n, t, v: dict(n_h2=n, t_kin=t, velocity=v), SnapshotError, "n_h2 has no unit"),
    (lambda n, t, v: dict(n_h2=n * u.kg, t_kin=t, velocity=v), SnapshotError,
     "cannot be converted to cm-3"),
    (lambda n, t, v: dict(n_h2=n * u.cm**-3, t_kin=t, velocity=v[:2]), SnapshotError,
     "velocity has shape \\(2, 2, 2, 2\\)"),
    (lambda n, t, v: dict(n_h2=n * u.cm**-3, t_kin=0 * t, velocity=v), SnapshotError,
     "t_kin has 8 cell\\(s\\) <= 0"),
])
def test_bad_snapshot(make, exc, match):
    n = np.ones((2, 2, 2))
    t = np.full((2, 2, 2), 10.0) * u.K
    v = np.zeros((3, 2, 2, 2)) * u.km / u.s
    with pytest.raises(exc, match=match):
        synth.Snapshot(cell_size=0.1 * u.pc, **make(n, t, v))


@pytest.mark.parametrize("kw, match", [
    (dict(distance=2 * u.kpc, channel_width=-0.1 * u.km / u.s), "channel_width must be > 0"),
    (dict(distance=2, channel_width=0.1 * u.km / u.s), "distance needs a unit"),
    (dict(distance=-2 * u.kpc, channel_width=0.1 * u.km / u.s), "distance must be > 0"),
    (dict(distance=2 * u.kpc, channel_width=0.1 * u.km / u.s, products=("movie",)),
     "unknown products"),
])
def test_bad_synthesize_arguments(kw, match):
    with pytest.raises(ConfigError, match=match):
        synth.synthesize(synth.demo_cloud(n=8, seed=1), synth.Line("CO", "1-0"), 1e-4, **kw)


def test_unknown_excitation_method():
    from synth.errors import ExcitationError
    with pytest.raises(ExcitationError, match="valid: lte, lvg"):
        synth.synthesize(synth.demo_cloud(n=8, seed=1), synth.Line("CO", "1-0"), 1e-4,
                         excitation="nlte", distance=2 * u.kpc, channel_width=0.5 * u.km / u.s)


DISH = """
[[setup]]
name = "d30"
kind = "dish"
diameter_m = 8
tsys_k = 120
integration_time_h = 2.0
channel_width_kms = 1.0
"""


def test_dish_setup_writes_k_and_jy_cubes(tmp_path):
    """A [[setup]] dish observation writes K and Jy/beam cubes that convert into each other
    with astropy's brightness_temperature equivalency for the recorded beam (Wilson et al.
    2013, eq. 8.19), and the measured noise equals the radiometer rms recorded in the summary
    within 10 % in the emission-free edge channels (T_sys / (eta sqrt(dnu t)))."""
    p = tmp_path / "c.toml"
    p.write_text(MINIMAL.replace("velocity_min_kms = -12", "velocity_min_kms = -40")
                 .replace("velocity_max_kms = 12", "velocity_max_kms = 40") + DISH)
    summary = synth.run_config(str(p), str(tmp_path / "o"), progress=False)
    k = SpectralCube.read(str(tmp_path / "o" / "13CO_1-0_d30_k.fits"))
    jy = SpectralCube.read(str(tmp_path / "o" / "13CO_1-0_d30_jyb.fits"))
    assert k.unit == u.K and jy.unit == u.Jy / u.beam
    freq = synth.Line("13CO", "1-0").frequency
    factor = (1 * u.Jy).to(u.K, u.brightness_temperature(freq, k.beam.sr)).value
    # the conversion uses each channel's own frequency (|v| <= 40 km/s: nu^2 varies by 3e-4)
    np.testing.assert_allclose(k.unmasked_data[:].value, jy.unmasked_data[:].value * factor,
                               rtol=4e-4, atol=1e-7)
    from synth.instrument.noise import radiometer_rms
    dnu = (1 * u.km / u.s / const_c() * freq).to(u.Hz)
    rms = radiometer_rms(120 * u.K, 0.7, dnu, 2 * u.hr, n_pol=2).to_value(u.K)
    entry = summary["setups"]["d30"]["13CO_1-0"]
    assert entry["noise_rms"] == pytest.approx(rms, rel=1e-3)
    edge = np.concatenate([k.unmasked_data[:8].value.ravel(), k.unmasked_data[-8:].value.ravel()])
    assert np.std(edge) == pytest.approx(rms, rel=0.1)


def const_c():
    import astropy.constants as const
    return const.c


@pytest.mark.parametrize("edit, match", [
    (("kind = \"dish\"", "kind = \"mirror\""), "valid: dish, array"),
    (("diameter_m = 8\n", ""), "needs diameter_m or beam_arcsec"),
    (("integration_time_h = 2.0\n", ""), "give rms_k, or tsys_k and integration_time_h"),
    (("tsys_k = 120", "tsys = 120"), "unknown key 'tsys'.*did you mean 'tsys_k'"),
    (("tsys_k = 120", "zenith_opacity = 0.1\nreceiver_temperature_k = 50"),
     "zenith_opacity of a dish needs latitude_deg"),
])
def test_bad_dish_setup(tmp_path, edit, match):
    p = tmp_path / "c.toml"
    p.write_text(MINIMAL + DISH.replace(*edit))
    with pytest.raises(ConfigError, match=match):
        synth.run_config(str(p), str(tmp_path / "o"), progress=False)
    assert not (tmp_path / "o").exists()


def test_lvg_tracer_in_config(tmp_path):
    """A tracer with excitation = "lvg" runs through the pipeline; the summary records the
    table accuracy the run achieved (< 1 % in T_R, the LVG stage's own check), and the cube
    differs from the LTE one (the demo cloud is mostly below C18O 2-1's critical density,
    ~1e4 cm^-3, common practice, so its populations are far from Boltzmann)."""
    text = MINIMAL.replace('species = "13CO"', 'species = "C18O"').replace(
        'transition = "1-0"', 'transition = "2-1"')
    lvg = text.replace('abundance = 2e-6', 'abundance = 2e-7\nexcitation = "lvg"\naccuracy = 0.01')
    lte = text.replace('abundance = 2e-6', 'abundance = 2e-7')
    (tmp_path / "lvg.toml").write_text(lvg)
    (tmp_path / "lte.toml").write_text(lte)
    s_lvg = synth.run_config(str(tmp_path / "lvg.toml"), str(tmp_path / "a"), progress=False)
    s_lte = synth.run_config(str(tmp_path / "lte.toml"), str(tmp_path / "b"), progress=False)
    t_lvg, t_lte = s_lvg["tracers"]["C18O_2-1"], s_lte["tracers"]["C18O_2-1"]
    assert t_lvg["excitation_info"]["table_error"] < 0.01
    ratio = t_lvg["mean_integrated_k_kms"] / t_lte["mean_integrated_k_kms"]
    assert abs(ratio - 1) > 0.05


def test_lvg_options_on_lte_tracer_refused(tmp_path):
    p = tmp_path / "c.toml"
    p.write_text(MINIMAL.replace('abundance = 2e-6', 'abundance = 2e-6\ngeometry = "slab"'))
    with pytest.raises(ConfigError, match="sets LVG options geometry but its excitation is 'lte'"):
        synth.run_config(str(p), str(tmp_path / "o"), progress=False)
