"""Files of ``synth ratios``: a line-ratio grid as CSV, figure and plain-text summary.

The numbers are those of :func:`synth.excitation.line_ratios.line_ratio_grid` (one-zone
estimates, docs/line_ratios.md); this module only writes and draws them.
"""

import os
import shutil

import numpy as np
import astropy.units as u

__all__ = ["ratio_csv", "ratio_figure", "ratio_summary", "write_line_ratios"]


def _pair_name(pair):
    return f"{pair[0]}/{pair[1]}"


def ratio_csv(grid):
    """The grid as CSV text: one row per grid point, units in the header row."""
    cols = ["column_per_width [cm-2 per km/s]", "temperature [K]", "density [cm-3]"]
    cols += [f"W({s}) [K km/s]" for s in grid.transitions]
    cols += [f"ratio {_pair_name(p)} [W/W]" for p in grid.pairs]
    out = [",".join(cols)]
    ncol = grid.column_per_width.to_value(u.cm**-2 / (u.km / u.s))
    t_k = grid.temperature.to_value(u.K)
    n = grid.density.to_value(u.cm**-3)
    w = grid.integrated_intensity.to_value(u.K * u.km / u.s)
    for i, c in enumerate(ncol):
        for j, t in enumerate(t_k):
            for k, d in enumerate(n):
                vals = [f"{c:.6g}", f"{t:.6g}", f"{d:.6g}"]
                vals += [f"{v:.6g}" for v in w[i, j, k]]
                vals += ["" if not np.isfinite(r) else f"{r:.6g}" for r in grid.ratio[i, j, k]]
                out.append(",".join(vals))
    return "\n".join(out) + "\n"


def ratio_figure(grid, path=None):
    """One panel per line pair (rows) and N/dv (columns): the ratio over log n(H2) x log
    T_kin as colour with labelled contours and a colour bar; dashed, the two lines' critical
    densities (downward form) against T; dotted, their effective excitation densities."""
    from matplotlib.figure import Figure
    from matplotlib.ticker import LogFormatterSciNotation, LogLocator, MaxNLocator
    from ..analysis.plots import readable_log_axis
    n = grid.density.to_value(u.cm**-3)
    t_k = grid.temperature.to_value(u.K)
    ncol = grid.column_per_width.to_value(u.cm**-2 / (u.km / u.s))
    rows, cols = len(grid.pairs), ncol.size
    fig = Figure(figsize=(5.2 * cols + 0.4, 3.9 * rows + 0.6), layout="constrained")
    axes = np.atleast_2d(fig.subplots(rows, cols, squeeze=False))
    styles = ("#ff9f1c", "#4dd2ff")   # numerator, denominator
    for r, pair in enumerate(grid.pairs):
        for c in range(cols):
            ax = axes[r, c]
            z = grid.ratio[c, :, :, r]
            finite = z[np.isfinite(z)]
            if finite.size == 0:
                ax.text(0.5, 0.5, "ratio undefined (denominator 0)", ha="center",
                        transform=ax.transAxes)
                continue
            mesh = ax.pcolormesh(n, t_k, z, shading="nearest", cmap="viridis")
            cbar = fig.colorbar(mesh, ax=ax)
            cbar.set_label(f"W({pair[0]}) / W({pair[1]})")
            if t_k.size > 1 and n.size > 1 and np.ptp(finite) > 0:
                levels = MaxNLocator(8).tick_values(finite.min(), finite.max())
                levels = levels[(levels > finite.min()) & (levels < finite.max())]
                cs = ax.contour(n, t_k, z, levels=levels, colors="white", linewidths=0.8)
                ax.clabel(cs, fmt="%.3g", fontsize=7)
            for s, colour in zip(pair, styles):
                j = grid.transitions.index(s)
                nc = grid.critical_density[:, j].to_value(u.cm**-3)
                ne = grid.effective_density[c, :, j].to_value(u.cm**-3)
                ax.plot(nc, t_k, "--", color=colour, lw=1.3, label=f"n_crit {s}")
                if np.any((ne >= n.min()) & (ne <= n.max())):   # NaN compares False
                    ax.plot(ne, t_k, ":", color=colour, lw=1.8, label=f"n_eff {s}")
            ax.set_xscale("log")
            ax.set_yscale("log")
            ax.set_xlim(n.min(), n.max())
            ax.set_ylim(t_k.min(), t_k.max())
            for axis, values in ((ax.xaxis, n), (ax.yaxis, t_k)):
                readable_log_axis(axis)   # ticks at 1, 2, 5 x 10^k
                span = values.max() / values.min()
                if span > 1e3:   # 1-2-5 would crowd a wide range: decades
                    axis.set_major_locator(LogLocator(base=10.0))
                    axis.set_major_formatter(LogFormatterSciNotation())
                elif span < 10:   # a short range: every integer x 10^k
                    axis.set_major_locator(LogLocator(base=10.0, subs=np.arange(1.0, 10.0)))
            ax.set_xlabel("n(H2) [cm-3]")
            ax.set_ylabel("T_kin [K]")
            ax.set_title(f"{grid.species} {_pair_name(pair)}, N/dv = {ncol[c]:.3g} "
                         "cm-2 per km/s", fontsize=9)
            ax.legend(loc="lower right", fontsize=6, framealpha=0.7)
    fig.suptitle(f"{grid.species} line ratios of one uniform zone\n({grid.geometry} geometry, "
                 f"FWHM {grid.fwhm.to_value(u.km / u.s):g} km/s; estimates, not a cloud model)",
                 fontsize=9)
    if path is not None:
        fig.savefig(path, dpi=90)
    return fig


def ratio_summary(grid):
    """Plain text: per line its critical and effective densities at the lowest and highest
    temperature; per pair and N/dv, the density span over which the ratio moves from 10 % to
    90 % of its change across the grid at the middle temperature."""
    t_k = grid.temperature.to_value(u.K)
    n = grid.density.to_value(u.cm**-3)
    ncol = grid.column_per_width.to_value(u.cm**-2 / (u.km / u.s))
    ends = sorted({0, t_k.size - 1})
    out = [f"{grid.species}: {n.size} densities {n.min():.3g}-{n.max():.3g} cm-3 x "
           f"{t_k.size} temperatures {t_k.min():.3g}-{t_k.max():.3g} K x {ncol.size} N/dv; "
           f"{grid.geometry} geometry, FWHM {grid.fwhm.to_value(u.km / u.s):g} km/s "
           "(one-zone estimates)",
           f"{'line':>8} {'T_kin [K]':>10} {'n_crit [cm-3]':>14} {'n_crit,all [cm-3]':>18} "
           f"{'N/dv [cm-2 per km/s]':>21} {'n_eff [cm-3]':>13}"]

    def fmt(v):
        return f"{v:.3e}" if np.isfinite(v) else "-"
    for j, s in enumerate(grid.transitions):
        for it in ends:
            for ic, c in enumerate(ncol):
                out.append(f"{s:>8} {t_k[it]:10.4g} "
                           f"{fmt(grid.critical_density[it, j].to_value(u.cm**-3)):>14} "
                           f"{fmt(grid.critical_density_all[it, j].to_value(u.cm**-3)):>18} "
                           f"{c:21.4g} "
                           f"{fmt(grid.effective_density[ic, it, j].to_value(u.cm**-3)):>13}")
    mid = t_k.size // 2
    out.append(f"{'ratio':>8} {'N/dv [cm-2 per km/s]':>21} {'T_kin [K]':>10} "
               f"{'range':>17} {'responds over n [cm-3]':>24}")
    for p, pair in enumerate(grid.pairs):
        for ic, c in enumerate(ncol):
            z = grid.ratio[ic, mid, :, p]
            span = _response_span(n, z)
            rng = "-" if not np.any(np.isfinite(z)) else \
                f"{np.nanmin(z):.3g}-{np.nanmax(z):.3g}"
            resp = "-" if span is None else f"{span[0]:.3g}-{span[1]:.3g}"
            out.append(f"{_pair_name(pair):>8} {c:21.4g} {t_k[mid]:10.4g} {rng:>17} "
                       f"{resp:>24}")
    return "\n".join(out)


def _response_span(n, z):
    """Densities at which a ratio curve z(n) has covered 10 % and 90 % of its total
    variation along n (cumulative |dz|); None if it does not vary or has gaps."""
    if z.size < 2 or not np.all(np.isfinite(z)):
        return None
    step = np.abs(np.diff(z))
    total = step.sum()
    if not total > 0:
        return None
    cum = np.concatenate([[0.0], np.cumsum(step)]) / total
    logn = np.log10(n)
    order = np.argsort(logn)
    if not np.all(order == np.arange(n.size)):
        return None
    return tuple(10.0 ** np.interp(q, cum, logn) for q in (0.1, 0.9))


def write_line_ratios(grid, out_dir, overwrite=False, figure=True):
    """Write ``line_ratios.csv`` (and ``line_ratios.png``) into a new folder ``out_dir``,
    built under a temporary name and renamed into place; an existing folder is replaced only
    with ``overwrite=True`` and only if synth wrote it. Returns the file names."""
    from ..fitsio import atomic_path, write_text
    from ..report.comparison import check_out_dir
    from ..rundir import finish_output, make_partial, run_path, sweep_debris, unregister_cleanup
    out_dir = check_out_dir(out_dir, overwrite)
    sweep_debris(os.path.dirname(out_dir))
    tmp = make_partial(out_dir)
    files = ["line_ratios.csv"] + (["line_ratios.png"] if figure else [])
    try:
        write_text(ratio_csv(grid), run_path(tmp, "line_ratios.csv"))
        if figure:
            fig = ratio_figure(grid)
            with atomic_path(run_path(tmp, "line_ratios.png")) as part:
                fig.savefig(part, format="png", dpi=90)
        finish_output(tmp, out_dir, kind="ratios")
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        unregister_cleanup(tmp)
        raise
    return files
