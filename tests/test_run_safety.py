"""Run folders never lose a user's data: --overwrite replaces only a folder synth wrote, names
stay labels, nothing is written outside the run folder, CSV cells are inert, and debris of
killed runs is removed (synth.rundir)."""

import hashlib
import json
import os
import signal
import subprocess
import sys
import time

import pytest

from synth import cli
from synth.config import validate_config
from synth.errors import ConfigError, OutputError
from synth import rundir
from synth.rundir import MARKER, check_name, csv_cell, run_path, sweep_debris

TINY = """
[cloud]
source = "demo"
cells = 10
seed = 3
[sky]
distance_pc = 2000
[channels]
width_kms = 1.0
velocity_min_kms = -8
velocity_max_kms = 8
[[tracer]]
species = "13CO"
transition = "1-0"
abundance = 2e-6
[output]
figures = false
"""


def _tree(folder):
    """{relative path: sha256} of every file under ``folder`` (and the folder names)."""
    out = {}
    for root, dirs, files in os.walk(folder):
        for d in dirs:
            out[os.path.relpath(os.path.join(root, d), folder) + "/"] = "dir"
        for f in files:
            p = os.path.join(root, f)
            with open(p, "rb") as fh:
                out[os.path.relpath(p, folder)] = hashlib.sha256(fh.read()).hexdigest()
    return out


def _run(argv, capsys):
    rc = cli.main(argv)
    return rc, capsys.readouterr().err.strip()


@pytest.fixture
def tiny(tmp_path):
    p = tmp_path / "in" / "run.toml"
    p.parent.mkdir()
    p.write_text(TINY)
    return p


def test_overwrite_replaces_a_run_folder(tiny, tmp_path, capsys):
    """A folder synth wrote (it has the marker) is replaced by --overwrite, after the new run
    succeeded; the marker lists the files written."""
    out = tmp_path / "out"
    assert _run(["run", str(tiny), "--out", str(out), "--quiet"], capsys)[0] == 0
    marker = json.loads((out / MARKER).read_text())
    assert marker["written_by"] == "synth" and "13CO_1-0_ideal.fits" in marker["files"]
    assert sorted(marker["files"]) == sorted(f for f in os.listdir(out) if f != MARKER)
    (out / "old.txt").write_text("x")
    assert _run(["run", str(tiny), "--out", str(out), "--quiet", "--overwrite"], capsys)[0] == 0
    assert not (out / "old.txt").exists() and (out / MARKER).exists()


def _marked(folder):
    folder.mkdir(parents=True, exist_ok=True)
    (folder / MARKER).write_text(json.dumps({"written_by": "synth", "files": []}))
    return folder


@pytest.mark.parametrize("case, why", [
    ("inputs", "an input of this run"),
    ("dot", "the working folder or one of its parents"),
    ("parent_of_cwd", "the working folder or one of its parents"),
    ("not_a_run", "has no synth-run.json"),
    ("file", "it is a file, not a run folder"),
    ("symlink", "symbolic link"),
])
def test_overwrite_refused_and_nothing_deleted(case, why, tiny, tmp_path, capsys, monkeypatch):
    """--overwrite into a folder holding the inputs, into '.', into a parent of the working
    folder, into a folder synth did not write, onto a file and onto a link: each refused in
    one line with exit 2, every byte under tmp_path unchanged."""
    config = tiny
    if case == "inputs":  # a run folder that also holds the config and snapshot
        out = _marked(tmp_path / "in")
        target = str(out)
    elif case == "dot":
        out = _marked(tmp_path / "here")
        monkeypatch.chdir(out)
        target = "."
    elif case == "parent_of_cwd":
        out = _marked(tmp_path / "top")
        (out / "sub").mkdir()
        monkeypatch.chdir(out / "sub")
        target = str(out)
    elif case == "not_a_run":
        out = tmp_path / "mine"
        out.mkdir()
        (out / "thesis.tex").write_text("years of work")
        target = str(out)
    elif case == "file":
        out = tmp_path / "notes.txt"
        out.write_text("keep me")
        target = str(out)
    else:
        real = _marked(tmp_path / "real")
        out = tmp_path / "link"
        out.symlink_to(real)
        target = str(out)
    before = _tree(tmp_path)
    rc, err = _run(["run", str(config), "--out", target, "--overwrite", "--quiet"], capsys)
    assert rc == 2
    assert err.startswith("synth: error: --overwrite refuses") and why in err
    assert len(err.splitlines()) == 1
    assert _tree(tmp_path) == before


def test_no_overwrite_refuses_existing(tiny, tmp_path, capsys):
    out = tmp_path / "exists"
    out.mkdir()
    rc, err = _run(["run", str(tiny), "--out", str(out), "--quiet"], capsys)
    assert rc == 2 and "exists; choose another --out or pass --overwrite" in err


def test_compare_overwrite_refuses_folder_holding_its_cubes(tmp_path, capsys):
    """synth compare --out --overwrite follows the same rules: a folder holding A.fits is
    refused even when it carries the marker."""
    folder = _marked(tmp_path / "cubes")
    (folder / "a.fits").write_bytes(b"not read")
    (folder / "b.fits").write_bytes(b"not read")
    before = _tree(tmp_path)
    rc, err = _run(["compare", str(folder / "a.fits"), str(folder / "b.fits"), "--out",
                    str(folder), "--overwrite"], capsys)
    assert rc == 2 and "an input of this run" in err
    assert _tree(tmp_path) == before


# -- names are labels, not paths -------------------------------------------------------------

@pytest.mark.parametrize("name, fragment", [
    ("../x", "first character '.'"),
    ("/abs", "first character '/'"),
    ("a/b", "character '/'"),
    ("é", "U+00E9"),
    ("\n", "U+000A"),
    ("=1+1", "first character '='"),
    ("-rf", "first character '-'"),
    ("a b", "character ' '"),
    ("x" * 65, "65 characters long"),
    ("", "non-empty name"),
])
@pytest.mark.parametrize("section", ["tracer", "setup"])
def test_unsafe_names_refused(name, fragment, section):
    raw = {"sky": {"distance_pc": 100}, "channels": {"width_kms": 1.0},
           "tracer": [{"species": "CO", "transition": "1-0", "abundance": 1e-4}]}
    if section == "tracer":
        raw["tracer"][0]["name"] = name
        where = "[[tracer]] #1.name"
    else:
        raw["setup"] = [{"name": name, "kind": "dish", "diameter_m": 10, "rms_k": 0.1}]
        where = "[[setup]] #1.name"
    with pytest.raises(ConfigError, match="names may hold only|non-empty") as info:
        validate_config(raw)
    msg = str(info.value)
    assert fragment in msg and where in msg and "\n" not in msg


@pytest.mark.parametrize("name", ["13CO_1-0", "HCOp", "a.b+c-d", "_x"])
def test_safe_names_accepted(name):
    assert check_name(name, "k") == name


def test_default_tracer_name_checked():
    raw = {"sky": {"distance_pc": 100}, "channels": {"width_kms": 1.0},
           "tracer": [{"species": "C/O", "transition": "1-0", "abundance": 1e-4}]}
    with pytest.raises(ConfigError, match="its default name species_transition.*character '/'"):
        validate_config(raw)


@pytest.mark.parametrize("name", ["../x", "/etc/x", "a/b", "..", ".", ""])
def test_run_path_keeps_files_inside(name, tmp_path):
    with pytest.raises(OutputError, match="not a plain file name inside the run folder"):
        run_path(str(tmp_path), name)
    assert run_path(str(tmp_path), "ok.fits") == os.path.join(str(tmp_path), "ok.fits")


def test_run_path_refuses_symlink_leaving_the_run(tmp_path):
    (tmp_path / "run").mkdir()
    (tmp_path / "run" / "x.fits").symlink_to(tmp_path / "elsewhere.fits")
    with pytest.raises(OutputError):
        run_path(str(tmp_path / "run"), "x.fits")


@pytest.mark.parametrize("cell, inert", [
    ("=1+1", "'=1+1"), ("+x", "'+x"), ("-x", "'-x"), ("@SUM(A1)", "'@SUM(A1)"),
    ("\tx", "'\tx"), ("CO", "CO"), (-1.5, -1.5), (3, 3), (None, None)])
def test_csv_cells_inert(cell, inert):
    assert csv_cell(cell) == inert


def test_csv_writers_make_formulas_inert(tmp_path):
    """Every CSV writer (plan rows, survival matrix, antenna layout) quotes a formula cell and
    keeps negative numbers as numbers."""
    from synth.analysis.survival import matrix_csv
    from synth.instrument.arrays import write_layout_csv
    from synth.report.run_analysis import rows_csv
    rows = [{"tracer": "=HYPERLINK(1)", "setup": "@x", "value": -2.5}]
    for text in (rows_csv(rows), matrix_csv(rows)):
        assert "'=HYPERLINK(1),'@x,-2.5" in text
    write_layout_csv(tmp_path / "a.csv", [[0, 0, 0], [10, 0, 0]], names=["=A1", "-B"])
    text = (tmp_path / "a.csv").read_text()
    assert "\n'=A1," in text and "\n'-B," in text


def test_hostile_names_write_nothing_outside(tmp_path, capsys):
    """A config whose tracer name tries to leave the run folder is refused before anything
    is created: the parent holds only the config afterwards."""
    bad = TINY.replace('abundance = 2e-6', 'abundance = 2e-6\nname = "../../escaped"')
    p = tmp_path / "bad.toml"
    p.write_text(bad)
    rc, err = _run(["run", str(p), "--out", str(tmp_path / "out"), "--quiet"], capsys)
    assert rc == 2 and "[[tracer]] #1.name" in err
    assert os.listdir(tmp_path) == ["bad.toml"]
    assert not (tmp_path.parent / "escaped_ideal.fits").exists()


# -- signals and debris ------------------------------------------------------------------------

def _debris(folder):
    return [n for n in os.listdir(folder) if ".partial-" in n or ".old-" in n]


def test_killed_run_debris_reported_and_removed(tiny, tmp_path, capsys):
    """A partial folder left by a SIGKILLed run (its process gone) is reported and removed by
    the next run into the same parent; one of a live process, one with a name synth does not
    make and one made on another machine (a shared file system) are left alone."""
    dead = subprocess.Popen([sys.executable, "-c", "pass"])
    dead.wait()
    host = rundir.host_tag()
    left = tmp_path / f".out.partial-{host}-{dead.pid}-dead1234"
    left.mkdir()
    (left / "13CO_1-0_ideal.fits").write_bytes(b"half")
    live = tmp_path / f".other.partial-{host}-{os.getppid()}-1234abcd"
    live.mkdir()
    elsewhere = tmp_path / f".third.partial-zzzzzz-{dead.pid}-1234abcd"  # not our name
    elsewhere.mkdir()
    other = "000000" if host != "000000" else "111111"
    other_host = tmp_path / f".fourth.partial-{other}-{dead.pid}-1234abcd"
    other_host.mkdir()
    rc = cli.main(["run", str(tiny), "--out", str(tmp_path / "out")])
    out = capsys.readouterr().out
    assert rc == 0
    assert "removed 1 folder(s) left by an interrupted synth run" in out and left.name in out
    assert not left.exists() and live.exists() and elsewhere.exists() and other_host.exists()
    assert sweep_debris(str(tmp_path)) == []


def test_spill_folders_registered_and_swept(tmp_path):
    """A temporary snapshot spill folder is removed at exit (registered), and one left by a
    killed process (synth-tmp-HOST-PID-XXXX, PID gone) is removed by the next sweep."""
    import tempfile
    from synth import rundir
    mine = rundir.temp_folder()
    (open(os.path.join(mine, "snapshot.h5"), "wb")).close()
    assert mine in rundir._REGISTERED
    rundir.cleanup_registered()
    assert not os.path.exists(mine) and not rundir._REGISTERED
    dead = subprocess.Popen([sys.executable, "-c", "pass"])
    dead.wait()
    stale = os.path.join(tempfile.gettempdir(), f"synth-tmp-{rundir.host_tag()}-{dead.pid}-abcd1234")
    os.mkdir(stale)
    removed = rundir.sweep_debris(str(tmp_path))
    assert stale in removed and not os.path.exists(stale)


def _env():
    env = dict(os.environ)
    root = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
    env["PYTHONPATH"] = root + os.pathsep + env.get("PYTHONPATH", "")
    return env


@pytest.mark.slow
@pytest.mark.parametrize("delay", [0.3, 1.5, 4.0, 8.0])
def test_sigterm_cleans_up(delay, tmp_path):
    """SIGTERM to a running `synth demo --cells 24` (the smallest demo its extended array can
    sample) at a few points: exit 143 with one line, no partial folder and no temporary
    files left."""
    import tempfile
    spills = lambda: {n for n in os.listdir(tempfile.gettempdir()) if n.startswith("synth-tmp-")}
    tmp_before = spills()
    proc = subprocess.Popen([sys.executable, "-m", "synth", "demo", "--cells", "24", "--out",
                             "out", "--quiet"], cwd=tmp_path, env=_env(),
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    time.sleep(delay)
    proc.send_signal(signal.SIGTERM)
    _, err = proc.communicate(timeout=120)
    if proc.returncode == -15:  # still starting Python, before synth's handler: nothing made
        assert os.listdir(tmp_path) == []
    else:
        assert proc.returncode == 143, err
        assert err.strip().splitlines()[-1] == "synth: terminated (SIGTERM); nothing was written"
        assert os.listdir(tmp_path) == []
    assert spills() <= tmp_before


def test_files_and_folders_follow_the_umask(tiny, tmp_path):
    """Run folders and files get 0777 / 0666 less the user's umask, and importing or running
    synth never changes the process umask."""
    import synth.fitsio  # noqa: F401  (used to change the umask at import)
    old = os.umask(0o027)
    try:
        cli.main(["run", str(tiny), "--out", str(tmp_path / "out"), "--quiet"])
        assert os.umask(0o027) == 0o027
    finally:
        os.umask(old)
    assert (tmp_path / "out").stat().st_mode & 0o777 == 0o750
    assert (tmp_path / "out" / "summary.json").stat().st_mode & 0o777 == 0o640


# -- dask etiquette ----------------------------------------------------------------------------

def _worker_env():
    return {k: os.environ.get(k) for k in ("OMP_NUM_THREADS", "MKL_NUM_THREADS",
                                           "OPENBLAS_NUM_THREADS")}


@pytest.mark.slow
def test_local_cluster_etiquette(monkeypatch):
    """A local cluster: workers get one thread each through the environment, the caller's
    environment is untouched, everything listens on 127.0.0.1, no dashboard."""
    pytest.importorskip("distributed")
    from synth.parallel import executor_context
    for k in ("OMP_NUM_THREADS", "MKL_NUM_THREADS", "OPENBLAS_NUM_THREADS"):
        monkeypatch.delenv(k, raising=False)
    unset = {"OMP_NUM_THREADS": None, "MKL_NUM_THREADS": None, "OPENBLAS_NUM_THREADS": None}
    with executor_context(workers=1) as ex:
        assert _worker_env() == unset
        (wenv,) = ex.client.run(_worker_env).values()
        assert wenv == {"OMP_NUM_THREADS": "1", "MKL_NUM_THREADS": "1",
                        "OPENBLAS_NUM_THREADS": "1"}
        info = ex.client.scheduler_info()
        assert info["address"].startswith("tcp://127.0.0.1:")
        assert all(w.startswith("tcp://127.0.0.1:") for w in info["workers"])
        assert getattr(ex, "dashboard_link", None) is None
        port = info.get("services", {}).get("dashboard")
        if port is not None:  # dask's health endpoint may listen (loopback), no dashboard page
            import urllib.error
            import urllib.request
            with pytest.raises(urllib.error.HTTPError, match="404"):
                urllib.request.urlopen(f"http://127.0.0.1:{port}/status", timeout=5)
    assert _worker_env() == unset


# -- LVG and --memory --------------------------------------------------------------------------

LVG_RUN = TINY.replace('abundance = 2e-6', 'abundance = 2e-6\nexcitation = "lvg"')


def test_lvg_over_memory_refused_up_front(tmp_path, capsys, monkeypatch):
    """An LVG tracer needs its table (built before the cubes) and then its cubes and one
    tile: with a --memory below that, the run says so before any work, with the size it
    needs and by how much it is over."""
    def no_work(*a, **k):
        raise AssertionError("the snapshot was built")
    monkeypatch.setattr("synth.pipeline.build_snapshot", no_work)
    p = tmp_path / "lvg.toml"
    p.write_text(LVG_RUN.replace("cells = 10", "cells = 64"))
    rc, err = _run(["run", str(p), "--out", str(tmp_path / "o"), "--quiet", "--memory", "30MB"],
                   capsys)
    assert rc == 2
    assert ("excitation = \"lvg\", which needs about 40 MB" in err
            and "more than --memory 30 MB" in err and "raise --memory to at least" in err)
    assert sorted(os.listdir(tmp_path)) == ["lvg.toml"]


def test_lvg_transfer_gets_the_whole_budget(monkeypatch):
    """With --memory, an LVG tracer is read block by block like an LTE one: its transfer
    stage gets the whole budget (the snapshot is no longer held beside it)."""
    from synth import pipeline
    from synth.config import validate_config
    import tomllib
    seen = []

    def fake(view, line, abundance, excitation, **kw):
        seen.append((excitation, kw["memory"]))
        raise StopIteration
    monkeypatch.setattr("synth.transfer.synthesize.synthesize_products", fake)
    conf = validate_config(tomllib.loads(LVG_RUN))
    with pytest.raises((StopIteration, RuntimeError)):
        list(pipeline.synthesize_config(conf, memory=100_000_000))
    (excitation, budget), = seen
    assert excitation == "lvg" and budget == 100_000_000
