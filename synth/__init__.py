"""synth: mock molecular-line observations of simulated molecular clouds.

3-D density / temperature / velocity grid -> level populations per tracer (LTE or LVG) ->
line-of-sight radiative transfer into PPV cubes -> single-dish and interferometric observing
-> what survives per tracer and spatial scale -> how long each setup needs.

The public API is the short list in ``__all__``; names are imported on first use.
"""

__version__ = "0.1.0"

# public name -> module that defines it (imported lazily, PEP 562)
_API = {
    "Snapshot": "synth.snapshot.core",
    "demo_cloud": "synth.snapshot.demo",
    "read_snapshot": "synth.snapshot.readers",
    "Line": "synth.molecules.registry",
    "MolecularData": "synth.molecules.data_model",
    "read_leiden": "synth.molecules.leiden",
    "molecule": "synth.molecules.registry",
    "Excitation": "synth.excitation.product",
    "lte_excitation": "synth.excitation.lte",
    "excite": "synth.excitation.lvg",
    "OneZoneExcitation": "synth.excitation.lvg",
    "synthesize": "synth.transfer.synthesize",
    "Dish": "synth.instrument.single_dish",
    "Array": "synth.instrument.interferometer",
    "observe": "synth.instrument.observe",
    "uv_coverage": "synth.instrument.uv",
    "assess": "synth.analysis.survival",
    "compare": "synth.analysis.compare",
    "plan": "synth.planning",
    "run_config": "synth.pipeline",
    "view": "synth.snapshot.views",
    "write_npz": "synth.snapshot.readers",
    "read_yt": "synth.snapshot.yt_reader",
    "demo_source": "synth.snapshot.demo",
    "SnapshotFile": "synth.snapshot.lazy",
    "builtin_species": "synth.molecules.registry",
    "synthesize_products": "synth.transfer.synthesize",
    "critical_density": "synth.excitation.lvg",
    "effective_excitation_density": "synth.excitation.line_ratios",
    "line_ratio_grid": "synth.excitation.line_ratios",
    "interferometer_rms": "synth.instrument.visibilities",
    "largest_scale": "synth.instrument.uv",
    "plot_uv_and_beam": "synth.instrument.imaging",
    "radiometer_rms": "synth.instrument.noise",
    "survival_matrix": "synth.analysis.survival",
    "structure_statistics": "synth.analysis.stats",
    "moment_maps": "synth.analysis.moments",
    "executor_context": "synth.parallel",
}

__all__ = sorted(_API) + ["__version__"]


def __getattr__(name):
    if name in _API:
        import importlib
        value = getattr(importlib.import_module(_API[name]), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'synth' has no attribute {name!r}")


def __dir__():
    return __all__
