"""Streaming: one block protocol, LVG and rotated views read block by block within --memory.

The references are the in-memory paths of the same code base (the whole-grid velocity
gradients, table and rotation of synth.excitation and synth.snapshot.views, which their own
tests check against analytic solutions): reading block by block must not change a number
beyond float rounding, and the tracemalloc peak must stay within the budget.
"""

import ast
import pathlib
import tracemalloc

import numpy as np
import pytest
import astropy.units as u

import synth
from synth.errors import ConfigError, MemoryBudgetError
from synth.excitation.gradient import velocity_gradient_norm
from synth.excitation.lvg import lvg_blocks, lvg_excitation
from synth.snapshot.core import Snapshot
from synth.snapshot.lazy import SnapshotFile
from synth.snapshot.readers import write_hdf5
from synth.snapshot.views import RotatedView, view
from synth.transfer.synthesize import synthesize_products

LINE = synth.Line("13CO", "1-0")
ROOT = pathlib.Path(__file__).resolve().parents[1]


def _cloud(n, seed=0):
    """An invented periodic cloud: log-normal-like density and smooth velocity from sines."""
    rng = np.random.default_rng(seed)
    x = np.linspace(0, 2 * np.pi, n, endpoint=False).astype(np.float32)
    X, Y, Z = np.meshgrid(x, x, x, indexing="ij")
    ph = rng.uniform(0, 2 * np.pi, 4).astype(np.float32)
    dens = (1e3 * np.exp(1.5 * np.sin(X + ph[0]) * np.cos(2 * Y) + np.sin(Z + X + ph[1])))
    t = 15 + 5 * np.cos(Y + Z + ph[2])
    v = np.stack([2e5 * np.sin(Y), 2e5 * np.sin(Z + X + ph[3]), 3e5 * np.sin(X) * np.cos(Y)])
    return Snapshot(n_h2=dens.astype(np.float32) * u.cm**-3, t_kin=t.astype(np.float32) * u.K,
                    velocity=v.astype(np.float32) * u.cm / u.s, cell_size=0.02 * u.pc,
                    sigma_turb=0.2 * u.km / u.s)


def _file(snap, tmp_path, name="c.h5"):
    path = tmp_path / name
    write_hdf5(snap, path)
    return SnapshotFile(str(path), sigma_turb=float(snap.sigma_turb_cms) * u.cm / u.s)


KW = dict(distance=1 * u.kpc, channel_width=0.5 * u.km / u.s,
          velocity_range=(-4, 4) * u.km / u.s, products=("tau",))


def _peak(fn):
    tracemalloc.start()
    try:
        out = fn()
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    return out, peak


def _assert_same(a, b, tol=1e-6):
    ca, cb = a.cube.unmasked_data[:].value, b.cube.unmasked_data[:].value
    assert ca.shape == cb.shape
    assert np.max(np.abs(ca - cb)) <= tol * np.max(np.abs(cb))
    ta, tb = a.tau.unmasked_data[:].value, b.tau.unmasked_data[:].value
    assert np.max(np.abs(ta - tb)) <= tol * max(1.0, np.max(tb))


# ---- the block protocol ---------------------------------------------------------------------

def test_snapshot_and_file_give_the_same_blocks_with_halo(tmp_path):
    """Snapshot.block and a SnapshotFile view's block both return rows x0-h : x1+h, cut at
    the box faces, exactly (a copy of the stored values)."""
    snap = _cloud(12)
    src = _file(snap, tmp_path)
    for los in ("z", "-x", "y"):
        full = snap.view(los)
        fv = src.view(los)
        assert fv.shape == full.shape
        for x0, x1, h in ((0, 3, 1), (4, 7, 2), (9, 12, 1), (0, 12, 0)):
            lo, hi = max(0, x0 - h), min(full.shape[0], x1 + h)
            for b in (full.block(x0, x1, halo=h), fv.block(x0, x1, halo=h)):
                np.testing.assert_array_equal(b.n_h2_cm3, full.n_h2_cm3[lo:hi])
                np.testing.assert_array_equal(b.velocity_cms, full.velocity_cms[:, lo:hi])
    with pytest.raises(ConfigError, match="block 3:2 outside 0:12"):
        snap.block(3, 2)
    with pytest.raises(ConfigError, match="halo must be >= 0"):
        src.view("z").block(0, 2, halo=-1)


def test_snapshot_block_is_a_read_only_view_of_its_rows():
    """An in-memory Snapshot's block shares its rows with the snapshot (no copy), cannot be
    written, and carries the fields with their units, the per-cell abundance and sigma_turb."""
    snap = _cloud(10)
    cells = snap.shape
    ab = np.random.default_rng(2).uniform(1e-5, 2e-5, cells)
    sig = np.full(cells, 3e4)
    snap = snap._replace(abundance={"CO": ab}, sigma_turb_cms=sig)
    b = snap.block(3, 6, halo=1)
    assert b.shape == (5,) + cells[1:]
    for got, whole in ((b.n_h2_cm3, snap.n_h2_cm3), (b.t_kin_k, snap.t_kin_k),
                       (b.velocity_cms, snap.velocity_cms),
                       (b.sigma_turb_cms, snap.sigma_turb_cms)):
        assert np.shares_memory(got, whole) and not got.flags.writeable
    np.testing.assert_array_equal(b.velocity_cms, snap.velocity_cms[:, 2:7])
    np.testing.assert_array_equal(b.abundance_for("CO", 1e-4), ab[2:7])
    assert b.n_h2.unit == u.cm**-3 and b.velocity.unit == u.cm / u.s
    np.testing.assert_array_equal(b.t_kin.to_value(u.K), snap.t_kin_k[2:7])
    assert b.cell_size_cm == snap.cell_size_cm


def test_transfer_imports_no_solver_and_no_executor():
    """synth/transfer never imports an excitation solver (lte, lvg, statistical_equilibrium,
    tables, gradient) nor synth.parallel: the excitation arrives as a product or a block
    function and the executor is handed in."""
    banned = {"parallel", "lte", "lvg", "statistical_equilibrium", "tables", "escape",
              "gradient"}
    for path in (ROOT / "synth" / "transfer").glob("*.py"):
        for node in ast.walk(ast.parse(path.read_text())):
            if isinstance(node, ast.ImportFrom) and node.module:
                parts = set(node.module.split("."))
                assert not parts & banned, (path.name, node.module)
                assert not (node.module.endswith("excitation") and
                            {a.name for a in node.names} & banned), (path.name, node.module)


# ---- LVG streaming ----------------------------------------------------------------------------

def test_gradients_from_blocks_with_one_cell_halo_equal_the_whole_grid():
    """|dv/ds| of the rows of a block read with a one-cell halo equals the whole-grid value
    exactly (central differences reach into the halo; one-sided only at the box faces)."""
    snap = _cloud(10, seed=3)
    whole = velocity_gradient_norm(snap.velocity_cms, snap.cell_size_cm)
    for x0, x1 in ((0, 3), (3, 7), (7, 10), (4, 5)):
        blk = snap.block(x0, x1, halo=1)
        lo = max(0, x0 - 1)
        got = velocity_gradient_norm(blk.velocity_cms, snap.cell_size_cm,
                                     slice(x0 - lo, x1 - lo))
        np.testing.assert_array_equal(got, whole[x0:x1])


def test_lvg_table_does_not_depend_on_the_block_size():
    """The table is built from the same check sample and ranges whatever the rows per pass
    (a hashed sample), so the excitation is identical to the whole-grid call."""
    snap = _cloud(16, seed=1)
    ref = lvg_excitation(snap, LINE, 2e-6)
    for rows in (1, 5):
        blocks = lvg_blocks(snap, LINE, 2e-6, rows=rows)
        assert blocks.info["table_shape"] == ref.info["table_shape"]
        assert blocks.info["ranges_log10"] == ref.info["ranges_log10"]
        e = blocks(snap.block(6, 9, halo=1), 6, 9, slice(1, 4))
        np.testing.assert_array_equal(e.t_ex_k, ref.t_ex_k[6:9])
        np.testing.assert_array_equal(e.opacity_integral, ref.opacity_integral[6:9])


def test_lvg_from_file_within_64mb_equals_in_memory(tmp_path):
    """LVG on a 128^3 HDF5 snapshot with memory='64MB': the same cube and tau as the run in
    memory (to 1e-6), and the tracemalloc peak (table, cubes, tiles) within the budget."""
    snap = _cloud(128)
    src = _file(snap, tmp_path)
    ref = synthesize_products(snap, LINE, 2e-6, "lvg", **KW)
    del snap
    budget = 64e6
    res, peak = _peak(lambda: synthesize_products(src, LINE, 2e-6, "lvg", memory="64MB", **KW))
    assert res.stats["tiles"] > 2
    assert res.excitation_info["table_error"] < 0.01
    _assert_same(res, ref)
    assert peak <= budget, f"peak {peak / 1e6:.1f} MB over the 64 MB budget"


def test_lvg_budget_below_its_table_is_refused(tmp_path):
    snap = _cloud(8)
    with pytest.raises(MemoryBudgetError, match="below the 40 MB an LVG table needs"):
        synthesize_products(_file(snap, tmp_path), LINE, 2e-6, "lvg", memory="20MB", **KW)


# ---- rotated views ----------------------------------------------------------------------------

@pytest.mark.parametrize("los, edges", [({"rotation": (30, 45, 0)}, "nearest"),
                                        ({"rotation": (30, 45, 0)}, "periodic"),
                                        ({"rotation": (10, 70, 20), "grid": "same"}, "periodic"),
                                        ({"rotation": (10, 70, 20), "grid": "same"}, "nearest")])
@pytest.mark.parametrize("axis", [None, 2])
def test_rotated_blocks_equal_the_in_memory_view(tmp_path, los, edges, axis):
    """Every block of a RotatedView of an HDF5 file, read a few source rows at a time, holds
    the fields of the in-memory rotated view (synth.snapshot.views.view), both edge modes,
    read along the axis it chooses and along z."""
    snap = _cloud(14, seed=2)
    snap = snap._replace(abundance={"13CO": np.random.default_rng(4).uniform(
        1e-6, 2e-6, snap.shape)})
    ref = view(snap, los, edges)
    rv = RotatedView(_file(snap, tmp_path), los, edges, chunk_bytes=4 * 14 * 14 * 56,
                     pass_cells=500)
    if axis is not None:
        rv._axis = axis
    assert rv.shape == ref.shape
    nx = rv.shape[0]
    for x0, x1 in ((0, 4), (4, nx - 3), (nx - 3, nx)):
        b = rv.block(x0, x1, halo=1)
        lo, hi = max(0, x0 - 1), min(nx, x1 + 1)
        for name in ("n_h2_cm3", "t_kin_k"):
            r = getattr(ref, name)[lo:hi]
            assert np.max(np.abs(getattr(b, name) - r)) <= 1e-6 * np.max(r)
        r = ref.velocity_cms[:, lo:hi]
        assert np.max(np.abs(b.velocity_cms - r)) <= 1e-6 * np.max(np.abs(r))
        r = ref.abundance_for("13CO", 0)[lo:hi]
        assert np.max(np.abs(b.abundance_for("13CO", 0) - r)) <= 1e-6 * np.max(r)


def test_rotated_view_streamed_from_file_within_budget(tmp_path):
    """A (30, 45, 0) deg view of a 64^3 HDF5 snapshot synthesised block by block with
    memory='10MB' equals the in-memory rotated view's cube (to 1e-6), and the tracemalloc
    peak stays within the budget (no whole-grid copy: the snapshot's fields alone are
    64^3 x 20 B = 5.2 MB, twice that while a read is validated, and its rotated grid holds
    about 3 times as many cells)."""
    snap = _cloud(64, seed=5)
    src = _file(snap, tmp_path)
    los = {"rotation": (30, 45, 0)}
    ref = synthesize_products(snap.view(los), LINE, 2e-6, **KW)
    del snap
    res, peak = _peak(lambda: synthesize_products(src, LINE, 2e-6, line_of_sight=los,
                                                  memory="10MB", **KW))
    assert res.stats["tiles"] > 2
    _assert_same(res, ref)
    assert peak <= 10e6, f"peak {peak / 1e6:.1f} MB over the 10 MB budget"


def test_pipeline_reads_lvg_and_rotations_by_blocks(tmp_path):
    """With --memory and a snapshot file, the pipeline reads LVG tracers and rotated views
    block by block too (summary: read_by_tiles), and the cube equals the run without a
    budget (in memory) to 1e-6."""
    snap = _cloud(16, seed=6)
    write_hdf5(snap, tmp_path / "c.h5")
    conf = {"cloud": {"source": str(tmp_path / "c.h5"), "sigma_turb_kms": 0.2,
                      "edges": "periodic"},
            "sky": {"distance_pc": 1000, "line_of_sight": {"rotation": [30, 45, 0]}},
            "channels": {"width_kms": 0.5, "velocity_min_kms": -4, "velocity_max_kms": 4},
            "tracer": [{"species": "13CO", "transition": "1-0", "abundance": 2e-6,
                        "excitation": "lvg"}]}
    from synth.config import validate_config
    from synth.pipeline import synthesize_config
    conf = validate_config(conf)
    info = {}
    (_, _, res), = list(synthesize_config(conf, memory="45MB", info=info))
    assert info["read_by_tiles"]
    (_, _, ref), = list(synthesize_config(conf))
    _assert_same(res, ref)
