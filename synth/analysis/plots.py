"""Figures for the analysis products (matplotlib, no pyplot state, no display needed).

Every helper returns a ``matplotlib.figure.Figure`` and, given ``path``, also writes a PNG.
"""

import numpy as np
from matplotlib.figure import Figure

__all__ = ["moment_figure", "recovery_figure", "fidelity_figure", "structure_figure",
           "spectra_figure"]


def _finish(fig, path, dpi=100):
    if path is not None:
        fig.savefig(path, dpi=dpi)
    return fig


def _panel(fig, ax, image, title, cmap, vmin=None, vmax=None, label=""):
    im = ax.imshow(image, origin="lower", cmap=cmap, vmin=vmin, vmax=vmax)
    ax.set_title(title, fontsize=9)
    ax.set_xticks([])
    ax.set_yticks([])
    fig.colorbar(im, ax=ax, shrink=0.8, label=label)


def moment_figure(survival, path=None, title=""):
    """Ideal (beam-convolved) and observed moment maps 0 and 1, side by side."""
    mi, mo = survival.ideal_moments, survival.observed_moments
    fig = Figure(figsize=(8, 7))  # a fixed layout: constrained layout costs 2x the drawing
    axes = fig.subplots(2, 2, gridspec_kw=dict(left=0.02, right=0.93, bottom=0.02,
                                               top=0.9 if title else 0.95, wspace=0.3,
                                               hspace=0.15))
    top = np.nanmax(mi.mom0.value) if np.isfinite(np.nanmax(mi.mom0.value)) else None
    unit0 = mi.mom0.unit.to_string()
    _panel(fig, axes[0, 0], mi.mom0.value, "ideal moment 0", "viridis", 0, top, unit0)
    _panel(fig, axes[0, 1], mo.mom0.value, "observed moment 0", "viridis", 0, top, unit0)
    v = np.concatenate([mi.mom1.value[np.isfinite(mi.mom1.value)], [0.0]])
    lo, hi = np.percentile(v, [2, 98])
    _panel(fig, axes[1, 0], mi.mom1.value, "ideal moment 1", "RdBu_r", lo, hi, "km/s")
    _panel(fig, axes[1, 1], mo.mom1.value, "observed moment 1", "RdBu_r", lo, hi, "km/s")
    if title:
        fig.suptitle(title)
    return _finish(fig, path)


def recovery_figure(survivals, path=None, title="Recovered fraction of power per scale"):
    """Recovered power (the noise-unbiased cross-power estimate) against angular scale for
    several {label: Survival}."""
    fig = Figure(figsize=(6.5, 4.5))
    ax = fig.subplots(gridspec_kw=dict(left=0.12, right=0.97, bottom=0.12, top=0.92))
    for label, m in survivals.items():
        t = m.recovery[m.recovery["reliable"]]
        if m.beam is not None:  # below the restoring beam the ratio is noise over nothing
            t = t[np.asarray(t["scale_arcsec"]) >= m.beam.major.to_value("arcsec")]
        order = np.argsort(t["scale_arcsec"])
        line, = ax.plot(np.asarray(t["scale_arcsec"])[order],
                        np.asarray(t["recovered_power"])[order], marker="o", ms=3,
                        label=str(label))
        half = m.half_recovery_scale.value
        if np.isfinite(half):
            ax.axvline(half, color=line.get_color(), ls=":", lw=1)
    ax.axhline(0.5, color="0.5", lw=0.8)
    ax.set_xscale("log")
    from matplotlib.ticker import NullFormatter, ScalarFormatter
    ax.xaxis.set_major_formatter(ScalarFormatter())
    ax.xaxis.set_minor_formatter(NullFormatter())
    ax.set_xlabel("angular scale 1/k (arcsec; scales >= each restoring beam)")
    ax.axhline(1.0, color="0.7", lw=0.8, ls="--")
    ax.set_ylabel("recovered power (cross-power, noise-unbiased)")
    ax.set_title(title, fontsize=10)
    ax.legend(fontsize=8)
    return _finish(fig, path)


def fidelity_figure(survival, path=None):
    """Histogram of log10 fidelity over the emitting voxels, and velocity-centroid histograms."""
    fig = Figure(figsize=(9, 3.8), layout="constrained")
    a1, a2 = fig.subplots(1, 2)
    edges, counts = survival.fidelity_hist
    a1.stairs(counts, edges, fill=True, alpha=0.6)
    a1.set_xlabel("log10 fidelity")
    a1.set_ylabel("voxels")
    a1.set_title(f"median fidelity {survival.fidelity:.3g}", fontsize=10)
    e, ci, co = survival.centroid_hist
    a2.stairs(ci, e, label="ideal")
    a2.stairs(co, e, label="observed")
    a2.set_xlabel("velocity centroid (km/s)")
    a2.set_ylabel("pixels")
    a2.legend(fontsize=8)
    return _finish(fig, path)


def structure_figure(comparison, path=None):
    """Power spectra (with fitted slopes) and intensity PDFs of the two compared cubes."""
    fig = Figure(figsize=(9, 3.8), layout="constrained")
    a1, a2 = fig.subplots(1, 2)
    for name in comparison.names:
        st = comparison.stats[name]
        a1.loglog(st.power["k"], st.power["power"], marker="o", ms=3,
                  label=f"{name}: slope {st.slope:.2f} ± {st.slope_err:.2f}")
        a2.stairs(st.pdf_density, st.pdf_edges,
                  label=f"{name}: σ_ln {st.lognormal_sigma:.2f}")
    lo, hi = comparison.stats[comparison.names[0]].slope_range
    if np.isfinite(lo) and np.isfinite(hi):
        a1.axvspan(1 / hi, 1 / lo, color="0.9")
    a1.set_xlabel("k (1/arcsec)")
    a1.set_ylabel("power of moment 0")
    a1.legend(fontsize=8)
    a2.set_xlabel("ln(W / <W>)")
    a2.set_ylabel("probability density")
    a2.set_yscale("log")
    a2.legend(fontsize=8)
    return _finish(fig, path)


def spectra_figure(ideal, observed, positions, path=None):
    """Spectra of two cubes at pixel positions [(x, y), ...] (same sky grid)."""
    height = 2.2 * len(positions) + 0.5
    fig = Figure(figsize=(6.5, height))
    axes = np.atleast_1d(fig.subplots(len(positions), 1, sharex=True, gridspec_kw=dict(
        left=0.1, right=0.97, bottom=0.55 / height, top=1 - 0.3 / height, hspace=0.3)))
    for ax, (x, y) in zip(axes, positions):
        for cube, label in ((ideal, "ideal"), (observed, "observed")):
            v = cube.spectral_axis
            ax.step(v.value, cube.unmasked_data[:, y, x].value, where="mid",
                    label=f"{label} ({cube.unit.to_string()})")
        ax.set_title(f"pixel ({x}, {y})", fontsize=9)
        ax.legend(fontsize=7)
    axes[-1].set_xlabel(f"spectral axis ({ideal.spectral_axis.unit.to_string()})")
    return _finish(fig, path)
