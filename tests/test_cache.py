"""Reuse of ideal cubes (synth/cache.py, docs/guide.md "Reusing ideal cubes").

The reference of every check is the run that synthesises: a cache hit must give the files of
a fresh run byte for byte (the rule "same inputs, same bytes" of DEVELOPERS.md), and a change
of any input the cube depends on must synthesise again. Synthesis is counted by wrapping
synth.transfer.synthesize.synthesize_products, the one entry point of the pipeline's
synthesis.
"""

import copy
import hashlib
import os

import numpy as np
import pytest
from astropy.io import fits

import synth
from synth import cache
from synth.config import validate_config

CONF = {
    "cloud": {"source": "demo", "cells": 16, "seed": 3, "box_pc": 1.0,
              "mean_n_h2_cm3": 1e4, "mach": 6.0},
    "sky": {"distance_pc": 4000, "dec_deg": 10.0},
    "channels": {"width_kms": 1.0, "velocity_min_kms": -3.0, "velocity_max_kms": 3.0},
    "tracer": [{"species": "CO", "transition": "1-0", "abundance": 1e-4},
               {"species": "13CO", "transition": "1-0", "abundance": 2e-6}],
    "output": {"products": ["tau", "column"], "figures": False},
    "setup": [{"name": "dish", "kind": "dish", "diameter_m": 30.0, "tsys_k": 100.0,
               "integration_time_h": 1.0, "seed": 5}],
}


def _run(conf, out, reuse=None, **kw):
    logs = []
    synth.run_config(copy.deepcopy(conf), str(out), progress=False, log=logs.append,
                     reuse=reuse, **kw)
    return logs


@pytest.fixture(scope="module")
def earlier(tmp_path_factory):
    out = tmp_path_factory.mktemp("cache") / "earlier"
    _run(CONF, out)
    return out


def _fits(folder):
    return sorted(f for f in os.listdir(folder) if f.endswith(".fits"))


def test_hit_gives_the_same_files_without_synthesis(earlier, tmp_path, count):
    """Unchanged inputs: no synthesis, every FITS file (ideal, tau, column, observed) the
    same bytes as the run that synthesised (reference: that run)."""
    logs = _run(CONF, tmp_path / "warm", reuse=str(earlier))
    assert count == []
    assert sum("ideal cube reused from" in m for m in logs) == 2
    assert _fits(earlier) == _fits(tmp_path / "warm")
    assert len(_fits(earlier)) == 3 * 2 + 2 * 2   # ideal, tau, column; dish K and Jy/beam
    for name in _fits(earlier):
        a = (earlier / name).read_bytes()
        b = (tmp_path / "warm" / name).read_bytes()
        assert a == b, name
    import json
    s = json.loads((tmp_path / "warm" / "summary.json").read_text())
    assert s["tracers"]["CO_1-0"]["reused_from"] == str(earlier / "CO_1-0_ideal.fits")
    assert "reused from an earlier run" in (tmp_path / "warm" / "report.html").read_text()


def test_key_card_is_the_sha256_of_the_parts(earlier):
    """IDEALKEY = sha256 (first 32 hex digits) of the canonical JSON of the part hashes
    (reference: hashlib on the parts read back from the header), DATAHASH = sha256 of the
    data as stored (big-endian float32)."""
    import json
    hdr = fits.getheader(earlier / "CO_1-0_ideal.fits")
    parts = {p: hdr[card] for p, card in cache.PART_CARDS.items()}
    blob = json.dumps(parts, sort_keys=True).encode()
    assert hdr[cache.KEY_CARD] == hashlib.sha256(blob).hexdigest()[:32]
    data = fits.getdata(earlier / "CO_1-0_ideal.fits")
    assert hdr[cache.DATA_CARD] == hashlib.sha256(data.astype(">f4").tobytes()).hexdigest()[:32]


@pytest.mark.parametrize("change, part, expect", [
    (lambda c: c["tracer"][1].update(abundance=3e-6), "abundance: 2e-06 -> 3e-06", ["13CO 1-0"]),
    (lambda c: c["channels"].update(width_kms=0.5), "[channels] (width_kms: 1.0 -> 0.5)",
     ["CO 1-0", "13CO 1-0"]),
    (lambda c: c["cloud"].update(seed=4), "[cloud]", ["CO 1-0", "13CO 1-0"]),
    (lambda c: c["sky"].update(distance_pc=3000), "[sky] (distance_pc", ["CO 1-0", "13CO 1-0"]),
])
def test_a_changed_input_is_synthesised_again(earlier, tmp_path, count, change, part, expect):
    """A miss for exactly the tracers whose inputs changed, with the reason in the log."""
    conf = copy.deepcopy(CONF)
    change(conf)
    logs = _run(conf, tmp_path / "b", reuse=str(earlier))
    assert count == expect
    misses = [m for m in logs if "synthesised (" in m]
    assert len(misses) == len(expect) and all(part in m for m in misses), misses


def test_labels_do_not_change_the_key():
    """The tracer's name, [sky] object and beyond_box only label or observe: same key."""
    conf = validate_config(copy.deepcopy(CONF))
    other = copy.deepcopy(conf)
    other["tracer"][0]["name"] = "co"
    other["sky"].update(object="x", beyond_box="repeat")
    other["setup"] = []
    assert cache.ideal_key(conf, conf["tracer"][0]) == cache.ideal_key(other, other["tracer"][0])
    other["tracer"][0]["abundance"] = 1.0001e-4
    assert cache.ideal_key(conf, conf["tracer"][0])[0] != cache.ideal_key(
        other, other["tracer"][0])[0]


def _snapshot_conf(path):
    conf = copy.deepcopy(CONF)
    conf["cloud"] = {"source": str(path)}
    conf["setup"] = []
    conf["tracer"] = conf["tracer"][:1]
    return conf


def test_snapshot_file_content_decides(tmp_path, count):
    """A snapshot file rewritten with the same bytes (a new time stamp) still hits; one value
    changed (same size) misses: the key holds the sha256 of the file's content."""
    from synth.snapshot.demo import demo_cloud
    from synth.snapshot.readers import write_npz
    import astropy.units as u
    path = tmp_path / "cloud.npz"
    snap = demo_cloud(cells=12, seed=2, box=1 * u.pc, mean_n_h2=1e4 * u.cm**-3, mach=6.0)
    write_npz(snap, str(path))
    conf = _snapshot_conf(path)
    _run(conf, tmp_path / "a")
    assert count == ["CO 1-0"]
    data = path.read_bytes()
    path.write_bytes(data)           # same content, new modification time
    os.utime(path, ns=(1, 1))
    logs = _run(conf, tmp_path / "b", reuse=str(tmp_path / "a"))
    assert count == ["CO 1-0"] and any("reused from" in m for m in logs)
    arrays = dict(np.load(path))
    arrays["n_h2"] = arrays["n_h2"].copy()
    arrays["n_h2"][3, 4, 5] *= 1.5
    with open(path, "wb") as fh:
        np.savez(fh, **arrays)
    assert len(path.read_bytes()) == len(data)
    logs = _run(conf, tmp_path / "c", reuse=str(tmp_path / "a"))
    assert count == ["CO 1-0", "CO 1-0"]
    assert any("snapshot file's content" in m for m in logs), logs


@pytest.mark.parametrize("damage", ["truncate", "flip", "delete-summary", "delete-tau"])
def test_a_damaged_earlier_run_is_a_miss(earlier, tmp_path, count, damage):
    """A cube that does not read, whose data changed, or whose run lost its summary or tau
    cube is a miss (synthesised, with the reason), never a crash."""
    import shutil
    copy_dir = tmp_path / "copy"
    shutil.copytree(earlier, copy_dir)
    target = copy_dir / "CO_1-0_ideal.fits"
    if damage == "truncate":
        target.write_bytes(target.read_bytes()[:5000])
    elif damage == "flip":
        raw = bytearray(target.read_bytes())
        raw[len(raw) // 2] ^= 0x40       # inside the data (header 2 blocks, data 3)
        target.write_bytes(bytes(raw))
    elif damage == "delete-summary":
        (copy_dir / "summary.json").unlink()
    else:
        (copy_dir / "CO_1-0_tau.fits").unlink()
    logs = _run(CONF, tmp_path / "b", reuse=str(copy_dir))
    expect = ["CO 1-0", "13CO 1-0"] if damage == "delete-summary" else ["CO 1-0"]
    assert count == expect, logs
    reason = {"truncate": "does not read", "flip": "do not match its DATAHASH",
              "delete-summary": "no readable summary.json", "delete-tau": "no CO_1-0_tau.fits"}
    assert any(reason[damage] in m for m in logs), logs
    a = fits.getdata(earlier / "CO_1-0_ideal.fits")
    b = fits.getdata(tmp_path / "b" / "CO_1-0_ideal.fits")
    assert np.array_equal(a, b)


def test_missing_folder_is_a_miss_and_a_file_is_refused(earlier, tmp_path, count):
    logs = _run(CONF, tmp_path / "b", reuse=str(tmp_path / "nowhere"))
    assert count == ["CO 1-0", "13CO 1-0"]
    assert any("does not exist" in m for m in logs)
    with pytest.raises(synth.errors.ConfigError, match="--reuse .*: is a file"):
        _run(CONF, tmp_path / "c", reuse=str(earlier / "summary.json"))
    assert not (tmp_path / "c").exists()


def test_overwrite_the_folder_it_reuses(earlier, tmp_path, count):
    """--reuse DIR --out DIR --overwrite: the cubes are read before the folder is replaced."""
    import shutil
    run = tmp_path / "run"
    shutil.copytree(earlier, run)
    _run(CONF, run, reuse=str(run), overwrite=True)
    assert count == []
    assert np.array_equal(fits.getdata(run / "CO_1-0_ideal.fits"),
                          fits.getdata(earlier / "CO_1-0_ideal.fits"))
