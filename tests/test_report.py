"""Run analysis and the run report: survival files against assess, a self-contained page
that renders in headless Chromium with every image loaded, and [analysis] bad input."""

import base64
import csv
import html
import json
import os
import re
import shutil
import subprocess
import tempfile

import numpy as np
import pytest
import astropy.units as u
from astropy.io import fits
from spectral_cube import SpectralCube

import synth
from synth.analysis.survival import assess
from synth.errors import ConfigError
from synth.report.html import report_html
from synth.report.run_analysis import spectra_positions

# a small invented survey: a 0.5 pc clump at 4 kpc (26 arcsec, 1.6 arcsec pixels), two tracers,
# a single dish and a compact invented array with 12 m dishes
SMALL = """
[cloud]
source = "demo"
cells = 16
box_pc = 0.5
mean_n_h2_cm3 = 1e4
mach = 4.0
seed = 3

[sky]
distance_pc = 4000
dec_deg = 6.2

[channels]
width_kms = 0.25

[[tracer]]
species = "13CO"
transition = "1-0"
abundance = 2e-6

[[tracer]]
species = "HCO+"
transition = "1-0"
abundance = 1e-9

[output]
figures = true

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
"""


@pytest.fixture(scope="module")
def small_run(tmp_path_factory):
    base = tmp_path_factory.mktemp("report")
    cfg = base / "small.toml"
    cfg.write_text(SMALL)
    out = base / "run"
    summary = synth.run_config(str(cfg), str(out), progress=False, log=lambda *a, **k: None)
    return out, summary


def _csv_rows(path):
    with open(path, newline="") as fh:
        return list(csv.DictReader(fh))


def _observed_path(out, summary, tracer, setup):
    unit = summary["setups"][setup][tracer]["unit"]
    return out / f"{tracer}_{setup}_{'jyb' if 'Jy' in unit else 'k'}.fits"


def test_survival_files_agree_with_assess(small_run):
    """survival.csv and survival.json hold, per tracer x setup, what assess() gives on the
    run's own FITS cubes with the run's documented choices: noise = the NOISERMS card, the
    ideal cube put on the observed grid by assess itself, and for an array its
    primary-beam-corrected map (docs/report.md). Float32 files: rtol 1e-3."""
    out, summary = small_run
    rows = _csv_rows(out / "survival.csv")
    jrows = json.loads((out / "survival.json").read_text())
    assert len(rows) == len(jrows) == 4
    assert {(r["tracer"], r["setup"]) for r in rows} == {
        (t, s) for t in ("13CO_1-0", "HCOp_1-0") for s in ("dish", "array")}
    for r, j in zip(rows, jrows):
        ideal = SpectralCube.read(str(out / f"{r['tracer']}_ideal.fits"))
        path = _observed_path(out, summary, r["tracer"], r["setup"])
        obs = SpectralCube.read(str(path))
        hdr = fits.getheader(path)
        kw = {"noise": float(hdr["NOISERMS"]) * u.Unit(hdr["NOISEUNI"])}
        assert bool(hdr["PBCORR"]) is (r["setup"] == "array")
        m = assess(ideal, obs, **kw)
        for key in ("flux_fraction", "peak_snr", "fidelity_median", "mom0_correlation",
                    "half_recovery_scale_arcsec", "fraction_above_3sigma"):
            ref = m.as_row()[key]
            assert float(r[key]) == pytest.approx(ref, rel=1e-3), (r["tracer"], r["setup"], key)
            assert j[key] == pytest.approx(float(r[key]), rel=1e-12)
        survives = m.peak_snr >= 5 and m.flux_fraction >= 0.5
        assert (r["survives"] == "True") is survives and j["survives"] is survives
        pb = j["flux_fraction_pb"]
        assert (pb is None) is (r["setup"] == "dish")


def test_summary_and_plan_files(small_run):
    """summary.json carries the analysis; plan.csv has one row per tracer x setup, equal to
    the summary's, and plan.txt ends with the planning disclaimer."""
    out, summary = small_run
    on_disk = json.loads((out / "summary.json").read_text())
    assert on_disk["analysis"]["survival"] == json.loads((out / "survival.json").read_text())
    rows = _csv_rows(out / "plan.csv")
    assert len(rows) == 4 == len(summary["analysis"]["plan"])
    for r, s in zip(rows, summary["analysis"]["plan"]):
        assert float(r["time_per_pointing_s"]) == pytest.approx(s["time_per_pointing_s"],
                                                                 rel=1e-12)
    text = (out / "plan.txt").read_text()
    assert text.strip().endswith(synth.planning.DISCLAIMER)
    assert "official tools" in text


def _report_images(text):
    return re.findall(r'<img src="([^"]*)"', text)


def test_report_is_self_contained(small_run):
    """report.html embeds every PNG of the run folder, byte for byte, as a data URI; nothing
    points at a file or the network (no http(s), no script, no stylesheet link)."""
    out, _ = small_run
    text = (out / "report.html").read_text()
    assert "http://" not in text and "https://" not in text
    assert "<script" not in text and "<link" not in text and "@import" not in text
    srcs = _report_images(text)
    assert len(re.findall(r"src=", text)) == len(srcs)
    pngs = sorted(p for p in os.listdir(out) if p.endswith(".png"))
    # per tracer mom0 + spectra, per observation moments + spectra, recovery, uv, and one
    # map layout per setup
    assert len(srcs) == len(pngs) == 2 * 2 + 2 * 2 * 2 + 2 + 1 + 2
    blobs = sorted(base64.b64decode(s.split(",", 1)[1]) for s in srcs)
    assert all(s.startswith("data:image/png;base64,") for s in srcs)
    assert blobs == sorted((out / p).read_bytes() for p in pngs)
    for section in ("Configuration", "Survival matrix", "Planning estimates", "Provenance",
                    html.escape(synth.planning.DISCLAIMER), synth.__version__):
        assert section in text


def test_report_escapes_strings(tmp_path):
    """Every string from the run is HTML-escaped (a config value, a note, a tracer name)."""
    bad = "<script>alert('x')</script>"
    summary = {"config_hash": "h", "config": {"note": bad}, "tracers": {bad: {"line": bad}},
               "analysis": {"tracers": {bad: {"setups": {"s": {"notes": [bad]}}}},
                            "survival": [], "plan": [], "disclaimer": bad}}
    text = report_html(str(tmp_path), summary)
    assert "<script" not in text
    assert text.count("&lt;script&gt;") >= 5


def test_run_without_setups(tmp_path):
    """A run with no [[setup]] still gets a report with the ideal-cube parts only: no
    survival or plan files, one moment-0 map and one spectra figure per tracer."""
    cfg = tmp_path / "bare.toml"
    cfg.write_text(SMALL.split("[[setup]]")[0].replace("cells = 16", "cells = 10"))
    out = tmp_path / "run"
    summary = synth.run_config(str(cfg), str(out), progress=False, log=lambda *a, **k: None)
    names = set(os.listdir(out))
    assert not names & {"survival.csv", "survival.json", "plan.csv", "plan.txt"}
    assert summary["analysis"]["survival"] == [] and summary["analysis"]["plan"] == []
    srcs = _report_images((out / "report.html").read_text())
    assert len(srcs) == 4 == sum(n.endswith(".png") for n in names)


def test_default_spectra_positions():
    """Default spectra: the map centre and the pixel of largest sum over channels."""
    from synth.analysis.matching import cube_from_array
    data = np.zeros((4, 9, 12))
    data[1, 2, 7] = 5.0
    cube = cube_from_array(data, pixscale=1 * u.arcsec, channel_width=0.5 * u.km / u.s,
                           restfreq=110 * u.GHz)
    assert spectra_positions(cube) == [(6, 4), (7, 2)]
    assert spectra_positions(cube, [[1, 8]]) == [(1, 8)]
    with pytest.raises(ConfigError, match=r"spectra_positions has \[12, 0\]; valid: 0 <= x < 12"):
        spectra_positions(cube, [[12, 0]])


@pytest.mark.parametrize("line, match", [
    ("target_snr = 0", r"\[analysis\].target_snr must be > 0, got 0"),
    ("percentile = 120", r"\[analysis\].percentile must be in 0..100, got 120"),
    ("emission_floor = 1.5", r"\[analysis\].emission_floor must be in \(0, 1\)"),
    ("time_h = -1", r"\[analysis\].time_h must be > 0, got -1"),
    ("spectra_positions = [[1]]", r"spectra_positions has \[1\]; give pixel pairs"),
    ("spectra_positions = [[1.5, 2]]", r"give pixel pairs \[x, y\] of integers"),
    ("target_sn = 3", r"unknown key 'target_sn' in \[analysis\]; did you mean 'target_snr'"),
])
def test_bad_analysis_section(tmp_path, line, match):
    cfg = tmp_path / "c.toml"
    cfg.write_text(SMALL + f"\n[analysis]\n{line}\n")
    from synth.config import load_config
    with pytest.raises(ConfigError, match=match):
        load_config(str(cfg))


# ---- headless Chromium ---------------------------------------------------------------------

_CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")
_PROBE = """<script>window.addEventListener('load', function () {
  var im = document.images, ok = 0;
  for (var i = 0; i < im.length; i++) { if (im[i].complete && im[i].naturalWidth > 0) ok++; }
  document.body.setAttribute('data-images', String(im.length));
  document.body.setAttribute('data-loaded', String(ok));
});</script>"""


def _chromium(args, profile):
    cmd = [_CHROMIUM, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
           "--no-first-run", "--disable-background-networking", "--disable-component-update",
           "--disable-sync", f"--user-data-dir={profile}", "--virtual-time-budget=20000"] + args
    return subprocess.run(cmd, capture_output=True, text=True, timeout=180)


@pytest.mark.skipif(_CHROMIUM is None, reason="headless Chromium (Debian package chromium) "
                                              "is not installed")
def test_report_renders_in_chromium(small_run, tmp_path):
    """Headless Chromium loads the page: every <img> is complete with a natural width > 0,
    their number is the number of figures of the run, and a screenshot is not blank."""
    out, _ = small_run
    page = tmp_path / "probe.html"
    page.write_text((out / "report.html").read_text().replace("</body>", _PROBE + "</body>"))
    with tempfile.TemporaryDirectory() as prof:
        res = _chromium(["--dump-dom", page.as_uri()], prof)
    body = re.search(r"<body[^>]*>", res.stdout)
    assert body, res.stderr[-2000:]
    n_img = int(re.search(r'data-images="(\d+)"', body.group(0)).group(1))
    n_ok = int(re.search(r'data-loaded="(\d+)"', body.group(0)).group(1))
    n_png = sum(p.endswith(".png") for p in os.listdir(out))
    # per tracer: mom0, spectra, recovery; per tracer x setup: moments, spectra; uv of the
    # array; a layout per setup: 2 x 3 + 2 x 2 x 2 + 1 + 2
    assert n_img == n_ok == n_png == 17
    shot = tmp_path / "shot.png"
    with tempfile.TemporaryDirectory() as prof:
        _chromium(["--window-size=1200,1800", f"--screenshot={shot}",
                   (out / "report.html").as_uri()], prof)
    from matplotlib.image import imread
    img = imread(str(shot))[..., :3]
    assert img.shape[:2] == (1800, 1200)
    dark = (img.mean(axis=2) < 0.5).mean()      # text, tables and figures
    assert 0.01 < dark < 0.6 and float(img.std()) > 0.05


def test_plan_csv_has_one_unit_per_column(small_run):
    """plan.csv: no per-unit column pairs and no line column repeating the tracer; rms and
    target filled on every row with their unit in brightness_unit (K for the dish, Jy/beam
    for the array); times in seconds (1 h and 2 h of the config; total = pointings x time
    per pointing); plan.txt shows times in s, min or h."""
    out, _ = small_run
    rows = _csv_rows(out / "plan.csv")
    header = list(rows[0])
    assert "line" not in header and not [h for h in header if h.endswith(("_K", "_Jy/beam"))]
    assert not [h for h in header if h.endswith("_h")]
    for r in rows:
        assert r["brightness_unit"] == {"dish": "K", "array": "Jy/beam"}[r["setup"]]
        assert float(r["rms"]) > 0 and float(r["target"]) > 0
        assert float(r["integration_time_s"]) == {"dish": 3600.0, "array": 7200.0}[r["setup"]]
        assert float(r["total_time_s"]) == pytest.approx(
            int(r["n_pointings"]) * float(r["time_per_pointing_s"]), rel=1e-12)
    text = (out / "plan.txt").read_text()
    assert re.search(r"\s1 h\s", text) and re.search(r"\s2 h\s", text)


@pytest.mark.parametrize("seconds, text", [(42.0, "42 s"), (150.0, "2.5 min"), (5400.0, "1.5 h"),
                                           (7200.0, "2 h"), (None, "-"), (float("nan"), "-")])
def test_duration_text(seconds, text):
    from synth.planning import duration_text
    assert duration_text(seconds) == text


@pytest.mark.parametrize("raw, typeset", [
    ("HCO+ 1-0", "HCO⁺ 1–0"), ("13CO 1-0", "¹³CO 1–0"), ("C18O 2-1", "C¹⁸O 2–1"),
    ("N2H+ 1-0", "N₂H⁺ 1–0"), ("H13CO+ 1-0", "H¹³CO⁺ 1–0"), ("CS 2-1", "CS 2–1"),
    ("cube line", "cube line")])
def test_typeset_line(raw, typeset):
    """Mass numbers up, atom counts down, charge up, an en dash between the levels."""
    from synth.report.html import typeset_line
    assert typeset_line(raw) == typeset


def test_report_headings_show_the_typeset_line(small_run):
    """Section headings name the line as typeset (HCO⁺ 1–0), not the file-safe tracer name
    (HCOp_1-0); the file names keep the file-safe form."""
    out, _ = small_run
    page = (out / "report.html").read_text(encoding="utf-8")
    heads = re.findall(r"<h[34]>(.*?)</h[34]>", page)
    assert "HCO⁺ 1–0" in heads and "¹³CO 1–0" in heads
    assert "HCO⁺ 1–0 with array" in heads
    assert not [h for h in heads if "HCOp" in h or "_1-0" in h]
    assert (out / "HCOp_1-0_ideal.fits").exists()
