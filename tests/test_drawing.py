"""The figure process (synth.report.drawing): jobs, errors, and runs that draw through it."""

import os
import subprocess
import sys
import textwrap

import pytest

from synth.report.drawing import FigureProcess, figure_process, resolved

HERE = os.path.dirname(os.path.abspath(__file__))
ROOT = os.path.dirname(HERE)


def _boom(text):
    raise ValueError(text)


def test_jobs_run_in_another_process_and_errors_come_back():
    """Results come back in the Future of their job; an exception raised by a job is raised
    where its result is awaited; after shutdown the worker has ended."""
    pool = FigureProcess()
    try:
        pid = pool.submit(os.getpid)
        power = pool.submit(pow, 3, 4)
        bad = pool.submit(_boom, "no such figure")
        assert resolved(power) == 81
        assert resolved(pid) != os.getpid()
        with pytest.raises(ValueError, match="no such figure"):
            resolved(bad)
        assert resolved(7) == 7
    finally:
        pool.shutdown(wait=True)
    assert pool._proc.returncode == 0


def test_a_worker_that_dies_fails_its_jobs_in_one_line():
    """A worker that ends (here: killed) fails the jobs still pending with a message that says
    so, instead of leaving the run waiting."""
    pool = FigureProcess()
    try:
        assert resolved(pool.submit(pow, 2, 3)) == 8
        pool._proc.kill()
        pool._proc.wait()
        late = pool.submit(pow, 2, 5)
        with pytest.raises(RuntimeError, match="figure process ended"):
            late.result(timeout=30)
    finally:
        pool.shutdown(wait=True)


def test_two_workers_share_the_jobs():
    pool = figure_process(2)
    try:
        pids = {resolved(f) for f in [pool.submit(os.getpid) for _ in range(6)]}
        assert len(pids) == 2 and os.getpid() not in pids
    finally:
        pool.shutdown(wait=True)


def test_a_script_without_a_main_guard_runs_once(tmp_path):
    """A user's script that calls run_config at module level (no ``if __name__ ==
    "__main__"``) draws its figures through the worker without being run a second time:
    the worker is ``python -m synth.report.figure_worker``, which never imports the caller's main
    module (multiprocessing's spawn and fork-server workers would), and starts without a
    warning."""
    out = tmp_path / "run"
    script = tmp_path / "user_script.py"
    marker = tmp_path / "started.txt"
    script.write_text(textwrap.dedent(f"""
        import synth
        with open({str(marker)!r}, "a") as f:
            f.write("started\\n")
        conf = {{
            "cloud": {{"source": "demo", "cells": 12, "seed": 3}},
            "sky": {{"distance_pc": 2000}},
            "channels": {{"width_kms": 0.5, "velocity_min_kms": -12, "velocity_max_kms": 12}},
            "tracer": [{{"species": "13CO", "transition": "1-0", "abundance": 2e-6}}],
            "output": {{"figures": True}},
            "setup": [{{"name": "d8", "kind": "dish", "diameter_m": 8, "tsys_k": 120,
                        "integration_time_h": 2.0, "channel_width_kms": 1.0}}],
        }}
        synth.run_config(conf, {str(out)!r}, progress=False, log=lambda *a, **k: None)
    """))
    env = dict(os.environ, PYTHONPATH=ROOT + os.pathsep + os.environ.get("PYTHONPATH", ""))
    proc = subprocess.run([sys.executable, str(script)], env=env, capture_output=True,
                          text=True, timeout=300)
    assert proc.returncode == 0, proc.stderr
    assert marker.read_text() == "started\n"
    assert "Warning" not in proc.stderr, proc.stderr     # the workers start cleanly
    for name in ("13CO_1-0_d8_moments.png", "13CO_1-0_d8_spectra.png", "13CO_1-0_mom0.png",
                 "13CO_1-0_recovery.png", "13CO_1-0_spectra.png", "layout_d8.png"):
        assert (out / name).stat().st_size > 1000, name
