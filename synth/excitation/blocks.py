"""Excitation block by block: what the transfer stage is handed instead of a solver.

The transfer stage (:mod:`synth.transfer.synthesize`) reads its snapshot in blocks of sky
columns (the block protocol: ``source.block(x0, x1, halo=h)``) and asks a *block function*
for each block's :class:`~synth.excitation.product.Excitation`:

    exc = blocks(block, x0, x1, inner)

``block`` holds the view's rows x0:x1 at its rows ``inner`` plus up to ``blocks.halo`` rows
of halo on either side (cut at the box faces); the result covers the rows ``inner`` only.
Every block function has ``halo`` (rows it needs beyond the block), ``info`` (the solver's
diagnostics) and ``extra_bytes_per_cell`` (what it holds per cell of a block beyond the
fields, for the tile planner). They are small and pickle, so dask workers call them.

- :class:`ProductBlocks`: a whole-grid Excitation already computed, sliced per block;
- :class:`LteBlocks`: LTE per block (no halo);
- :class:`synth.excitation.lvg.LvgBlocks`: the LVG table, built once from a sample read slab
  by slab, applied per block with a one-cell halo (velocity gradients).

:func:`block_excitation` chooses one by method name.
"""

import numpy as np

from ..errors import ExcitationError
from .product import EXCITATION_METHODS, Excitation

__all__ = ["ProductBlocks", "LteBlocks", "block_excitation", "excite_snapshot",
           "LVG_BYTES_PER_CELL", "LVG_TABLE_BYTES"]

#: Bytes per cell an LVG block holds beyond the fields: the gradient norm and K (float32),
#: the broadcast abundance (float64) and the table's T_ex and opacity (float32).
LVG_BYTES_PER_CELL = 24
#: Peak of building an LVG table, which happens before the cubes are allocated: the check
#: sample (n_check cells), the node populations (at most max_table_nodes x levels) and the
#: solver's chunked Newton work. Measured with tracemalloc: 10-26 MB for 13CO 1-0, CO 3-2
#: and C18O 2-1 (14 levels) on a 128^3 grid, independent of the grid size (the solver works
#: in chunks); this figure adds a margin of 1.5.
LVG_TABLE_BYTES = 40_000_000


class ProductBlocks:
    """A computed whole-grid :class:`Excitation` handed out block by block."""

    halo = 0
    extra_bytes_per_cell = 0

    def __init__(self, excitation):
        self.excitation = excitation
        self.info = excitation.info

    def __call__(self, block, x0, x1, inner):
        e = self.excitation
        return Excitation(e.line, e.t_ex_k[x0:x1], e.opacity_integral[x0:x1], e.method, e.info)


class LteBlocks:
    """LTE excitation of each block (:func:`synth.excitation.lte.lte_excitation`)."""

    halo = 0
    extra_bytes_per_cell = 0

    def __init__(self, line, abundance, t_ex=None):
        self.line, self.abundance, self.t_ex = line, float(abundance), t_ex
        self.info = {"t_ex": "t_kin" if t_ex is None else "fixed"}

    def __call__(self, block, x0, x1, inner):
        from .lte import lte_excitation
        exc = lte_excitation(block, self.line, self.abundance, t_ex=self.t_ex)
        if inner == slice(0, block.shape[0]):
            return exc
        return Excitation(exc.line, exc.t_ex_k[inner], exc.opacity_integral[inner], exc.method,
                          exc.info)


def block_excitation(source, line, abundance, method="lte", t_ex=None, options=None, rows=None,
                     keep_columns=False):
    """The block function of excitation ``method`` for ``source`` (a Snapshot or a block
    source). For "lvg" the table is built now, reading ``source`` ``rows`` rows at a time
    (:func:`synth.excitation.lvg.lvg_blocks`; ``keep_columns`` as there)."""
    if isinstance(method, Excitation):
        return ProductBlocks(method)
    if callable(method) and not isinstance(method, str):
        return method
    if method not in EXCITATION_METHODS:
        raise ExcitationError(
            f"unknown excitation method {method!r}; valid: {', '.join(EXCITATION_METHODS)}")
    options = dict(options or {})
    if method == "lte":
        if options:
            raise ExcitationError(
                f"excitation options {sorted(options)} apply to 'lvg' only, not to 'lte'")
        return LteBlocks(line, abundance, t_ex)
    if t_ex is not None:
        raise ExcitationError("t_ex fixes an LTE excitation temperature; it cannot be used with 'lvg'")
    from .lvg import lvg_blocks
    blocks = lvg_blocks(source, line, abundance, rows=rows, keep_columns=keep_columns,
                        **options)
    blocks.extra_bytes_per_cell = LVG_BYTES_PER_CELL
    return blocks


def excite_snapshot(snapshot, line, abundance, excitation="lte", t_ex=None, options=None):
    """Run the excitation stage chosen by name on a whole in-memory snapshot; returns an
    :class:`Excitation`."""
    blocks = block_excitation(snapshot, line, abundance, excitation, t_ex, options)
    if isinstance(blocks, LteBlocks):
        from .lte import lte_excitation
        return lte_excitation(snapshot, line, abundance, t_ex=t_ex)
    n = snapshot.shape[0]
    exc = blocks(snapshot, 0, n, slice(0, n))
    return Excitation(exc.line, np.asarray(exc.t_ex_k), np.asarray(exc.opacity_integral),
                      exc.method, blocks.info)
