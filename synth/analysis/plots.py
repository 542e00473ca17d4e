"""Figures for the analysis products (matplotlib, no pyplot state, no display needed).

Every helper returns a ``matplotlib.figure.Figure`` and, given ``path``, also writes a PNG.

Conventions (docs/report.md): maps are drawn in offset arcsec from the map centre (east to
the left) with the beam as an ellipse in the lower left corner; moment 1 of an observed cube
is blank where its moment 0 is below ``MOM1_NSIGMA`` (3) times the moment-0 noise; a moment-0
map with negative bowls (an interferometer's; a pixel below -``BOWL_NSIGMA`` (5) sigma) is
drawn with a diverging colour map on limits symmetric about zero; spectra carry a title and a y-axis label; log axes label ticks at
1, 2 and 5 times powers of ten, so that even a short range shows more than one label.
"""

import warnings

import numpy as np
from matplotlib.figure import Figure
from matplotlib.patches import Ellipse
from matplotlib.ticker import FuncFormatter, LogLocator, NullFormatter

from ..sky import unit_text

__all__ = ["moment_figure", "recovery_figure", "fidelity_figure", "structure_figure",
           "spectra_figure", "line_moment0", "masked_moment1", "readable_log_axis",
           "MOM1_NSIGMA", "BOWL_NSIGMA"]

#: moment 1 of an observed cube is shown where moment 0 >= MOM1_NSIGMA x its noise
MOM1_NSIGMA = 3.0
#: line-free channels needed to measure the noise per pixel (else the cube's one rms)
MIN_FREE_CHANNELS = 8
#: a moment-0 map whose lowest pixel is below -BOWL_NSIGMA x its noise has negative bowls
#: (drawn on a diverging colour map, limits symmetric about zero); noise alone rarely
#: reaches 5 sigma over a map of 10^4 pixels
BOWL_NSIGMA = 5.0


def line_moment0(data, line_channels, channel_kms, noise):
    """Integrated intensity over the line's channels with no signal mask, so that negative
    bowls stay visible, and its noise: rms per channel x channel width x sqrt(number of
    channels) (independent channels). The rms per channel is measured per pixel over the
    line-free channels when there are at least MIN_FREE_CHANNELS of them (a primary-beam-
    corrected mosaic is noisier at its edges), else ``noise``: a number, or a map of the rms
    per channel (an observation's sensitivity map). Blank (NaN) voxels
    count as 0; a pixel blank in every channel stays NaN. Returns (map, sigma) in the data's
    unit x km/s; sigma is a map or a number."""
    data = np.asarray(data, dtype=float)
    line = np.asarray(line_channels, dtype=bool)
    sel = data[line]
    mom0 = np.nansum(sel, axis=0) * float(channel_kms)
    mom0[~np.isfinite(sel).any(axis=0)] = np.nan
    given = np.asarray(noise, dtype=float)
    rms = float(given) if given.ndim == 0 else np.where(np.isfinite(given), given, np.inf)
    if (~line).sum() >= MIN_FREE_CHANNELS:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)    # all-NaN (blank) pixels
            per_pixel = np.nanstd(data[~line], axis=0)
        rms = np.where(np.isfinite(per_pixel) & (per_pixel > 0), per_pixel, rms)
    return mom0, rms * float(channel_kms) * np.sqrt(max(sel.shape[0], 1))


def masked_moment1(mom1, mom0, sigma0, nsigma=MOM1_NSIGMA):
    """Moment 1 (plain array) with NaN where moment 0 < nsigma x sigma0 (or is NaN)."""
    out = np.array(mom1, dtype=float)
    out[~(np.asarray(mom0) >= nsigma * sigma0)] = np.nan
    return out


def readable_log_axis(axis):
    """Ticks at 1, 2 and 5 x 10^n, labelled in plain numbers (no minor labels)."""
    axis.set_major_locator(LogLocator(base=10.0, subs=(1.0, 2.0, 5.0)))
    axis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:g}"))
    axis.set_minor_formatter(NullFormatter())


def _finish(fig, path, dpi=100):
    if path is not None:
        fig.savefig(path, dpi=dpi)
    return fig


def _panel(fig, ax, image, title, cmap, vmin=None, vmax=None, label="", extent=None,
           beam=None):
    im = ax.imshow(image, origin="lower", cmap=cmap, vmin=vmin, vmax=vmax, extent=extent,
                   interpolation="nearest")
    ax.set_title(title, fontsize=9)
    if extent is None:
        ax.set_xlabel("x (pixels)", fontsize=8)
        ax.set_ylabel("y (pixels)", fontsize=8)
    else:
        ax.set_xlabel("RA offset (arcsec)", fontsize=8)
        ax.set_ylabel("Dec offset (arcsec)", fontsize=8)
        if beam is not None:
            _beam_ellipse(ax, beam, extent, "white" if cmap == "viridis" else "black")
    ax.tick_params(labelsize=7)
    fig.colorbar(im, ax=ax, shrink=0.8, label=label)
    return im


def _beam_ellipse(ax, beam, extent, colour):
    """The beam (FWHM, PA east of north) in the lower left corner of a map drawn with
    ``extent`` in offset arcsec, east to the left."""
    major = float(beam.major.to_value("arcsec"))
    minor = float(beam.minor.to_value("arcsec"))
    pa = float(beam.pa.to_value("deg"))
    left, right, bottom, top = extent
    pad = 0.6 * major + 0.03 * abs(top - bottom)
    centre = (left - pad if left > right else left + pad, bottom + pad)
    # x grows to the east (to the left on the page): PA east of north is -PA in data angle
    ax.add_patch(Ellipse(centre, width=minor, height=major, angle=-pa, facecolor="none",
                         edgecolor=colour, lw=1.2, label="beam"))


def _extent(shape, pixel_arcsec):
    if pixel_arcsec is None:
        return None
    ny, nx = shape
    half_x, half_y = nx * pixel_arcsec / 2, ny * pixel_arcsec / 2
    return [half_x, -half_x, -half_y, half_y]


def moment_figure(survival, path=None, title="", observed=None, noise_map=None):
    """Ideal (beam-convolved) and observed moment maps 0 and 1, side by side.

    With ``observed`` (the observed cube given to ``assess``) the maps are drawn in offset
    arcsec with the beam, the observed moment 0 is the integrated intensity over the line's
    channels (those where the reference emits) with no signal mask (:func:`line_moment0`),
    and the observed moment 1 is blank where that moment 0 < MOM1_NSIGMA x its noise
    (:func:`masked_moment1`). A moment-0 map with negative bowls (a pixel below
    -BOWL_NSIGMA x its noise; without ``observed``, any negative pixel) is drawn on a
    diverging colour map with limits symmetric about zero (both moment-0 panels on one
    scale).
    """
    mi, mo = survival.ideal_moments, survival.observed_moments
    fig = Figure(figsize=(8.4, 7.4))  # a fixed layout: constrained layout costs 2x the drawing
    axes = fig.subplots(2, 2, gridspec_kw=dict(left=0.09, right=0.95, bottom=0.07,
                                               top=0.9 if title else 0.94, wspace=0.45,
                                               hspace=0.35))
    extent, beam, sigma0 = None, survival.beam, 0.0
    obs0, obs1 = np.asarray(mo.mom0.value), mo.mom1.value
    title0, title1 = "observed moment 0", "observed moment 1"
    if observed is not None:
        from .matching import channel_width_ms, pixel_scale_arcsec
        extent = _extent(mi.mom0.shape, float(pixel_scale_arcsec(observed)))
        data = observed.unmasked_data[:].to_value(survival.noise.unit)   # blanks stay NaN
        line = np.asarray(mi.mask).any(axis=(1, 2))
        obs0, sigma0 = line_moment0(data, line, channel_width_ms(observed) / 1e3,
                                    survival.noise.value if noise_map is None else noise_map)
        obs1 = masked_moment1(mo.mom1.value, obs0, sigma0)
        title0 = "observed moment 0 (line channels, no mask)"
        title1 = f"observed moment 1 (moment 0 >= {MOM1_NSIGMA:g} sigma)"
    top = np.nanmax(mi.mom0.value) if np.isfinite(np.nanmax(mi.mom0.value)) else None
    low = np.nanmin(obs0) if np.isfinite(obs0).any() else 0.0
    unit0 = unit_text(mi.mom0.unit)
    if low < -BOWL_NSIGMA * float(np.nanmedian(sigma0)):   # negative bowls: a diverging map, symmetric limits
        peak = max(abs(low), top or 0.0, float(np.nanmax(obs0)))
        cmap0, lo0, hi0 = "RdBu_r", -peak, peak
    else:
        cmap0, lo0, hi0 = "viridis", 0, top
    _panel(fig, axes[0, 0], mi.mom0.value, "ideal moment 0", cmap0, lo0, hi0, unit0, extent,
           beam)
    _panel(fig, axes[0, 1], obs0, title0, cmap0, lo0, hi0, unit0, extent, beam)
    v = np.concatenate([mi.mom1.value[np.isfinite(mi.mom1.value)], [0.0]])
    lo, hi = np.percentile(v, [2, 98])
    _panel(fig, axes[1, 0], mi.mom1.value, "ideal moment 1", "RdBu_r", lo, hi, "km/s", extent,
           beam)
    _panel(fig, axes[1, 1], obs1, title1, "RdBu_r", lo, hi, "km/s", extent, beam)
    if title:
        fig.suptitle(title)
    return _finish(fig, path)


def recovery_figure(survivals, path=None, title="Recovered fraction of power per scale",
                    spreads=None):
    """Recovered power (the noise-unbiased cross-power estimate) against angular scale for
    several {label: Survival}; ``spreads`` ({label: Realisations}) adds error bars (the
    standard deviation over noise realisations) at the same scales."""
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
        r = (spreads or {}).get(label)
        if r is not None:
            keep = np.isin(np.round(r.scale_arcsec, 9),
                           np.round(np.asarray(t["scale_arcsec"]), 9))
            ax.errorbar(r.scale_arcsec[keep], r.recovered_power_mean[keep],
                        yerr=r.recovered_power_std[keep], fmt="none",
                        ecolor=line.get_color(), elinewidth=1, capsize=2)
        half = m.half_recovery_scale.value
        if np.isfinite(half):
            ax.axvline(half, color=line.get_color(), ls=":", lw=1)
    ax.axhline(0.5, color="0.5", lw=0.8)
    ax.set_xscale("log")
    readable_log_axis(ax.xaxis)
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
    readable_log_axis(a1.xaxis)
    readable_log_axis(a1.yaxis)
    a1.legend(fontsize=8)
    a2.set_xlabel("ln(W / <W>)")
    a2.set_ylabel("probability density")
    a2.set_yscale("log")
    readable_log_axis(a2.yaxis)
    a2.legend(fontsize=8)
    return _finish(fig, path)


def spectra_figure(ideal, observed, positions, path=None, title="Spectra: ideal and observed"):
    """Spectra of two cubes at pixel positions [(x, y), ...] (same sky grid), with a title
    and the brightness unit on the y axis."""
    height = 2.2 * len(positions) + 0.8
    fig = Figure(figsize=(6.5, height))
    axes = np.atleast_1d(fig.subplots(len(positions), 1, sharex=True, gridspec_kw=dict(
        left=0.13, right=0.97, bottom=0.55 / height, top=1 - 0.6 / height, hspace=0.35)))
    for ax, (x, y) in zip(axes, positions):
        for cube, label in ((ideal, "ideal"), (observed, "observed")):
            v = cube.spectral_axis
            ax.step(v.value, cube.unmasked_data[:, y, x].value, where="mid",
                    label=f"{label} ({unit_text(cube.unit)})")
        ax.set_title(f"pixel ({x}, {y})", fontsize=9)
        ax.set_ylabel(_brightness_label(observed.unit), fontsize=8)
        ax.legend(fontsize=7)
    spec = ideal.spectral_axis.unit
    axes[-1].set_xlabel("radio velocity (km/s)" if spec.to_string() == "km / s"
                        else f"spectral axis ({spec.to_string()})")
    fig.suptitle(title, fontsize=10)
    return _finish(fig, path)


def _brightness_label(unit):
    text = unit_text(unit)
    if text == "K":
        return "T_B (K)"
    return f"intensity ({text})"
