"""Survival of statistics: each statistic of the ideal cube against the observed cubes.

For one tracer and one setup, the statistics layer (:func:`synth.analysis.statistics.
measure_statistics`) is applied to the ideal cube (the model sky on the observed grid, at its
own resolution) and to the observed cube of each of N seeded noise realisations, with the
*same* settings: the observed beam sets the fitting ranges and the dendrogram's min_npix, the
observed noise (in K) its thresholds.

Per statistic:

- ideal value v_i with its fit uncertainty e_i;
- observed mean m_o over the realisations, with uncertainty
  e_o = sqrt(s_o^2 + <e_fit>^2): s_o the standard deviation over the realisations (ddof 1;
  0 for one realisation) and <e_fit> the mean fit uncertainty of the observed values;
- the shift m_o - v_i, its uncertainty e = sqrt(e_o^2 + e_i^2) and the shift in sigma,
  (m_o - v_i) / e. The fit uncertainties of ideal and observed are partly the same sampling
  ("cosmic") variance of one sky, so e is conservative: a shift of many sigma is the
  observation's doing, not chance.
"""

import numpy as np
import astropy.units as u

from .statistics import STATISTICS, measure_statistics
from .survival import recorded_noise

__all__ = ["observation_statistics", "measure_observed", "statistics_survival", "survival_line",
           "statistics_figure", "statistics_columns", "SHIFT_COLUMNS", "time_for_uncertainty",
           "planning_lines"]

#: per-statistic columns added to a survival-matrix row (suffixes of ``<statistic>_``)
SHIFT_COLUMNS = ("ideal", "ideal_err", "observed", "observed_err", "shift", "shift_sigma")


def observation_statistics(ideal, observed, *, noise=None, statistics=None, dendrogram=None,
                           scale_range=None):
    """(ideal statistics, observed statistics) of one observation, measured alike.

    ``observed`` is an observed cube or an ObservedMap (then its primary-beam-corrected map
    against its model sky ``sky``, and ``ideal`` may be None). The observed cube is measured
    with its beam and its noise (``noise``, else its recorded NOISERMS, else estimated); the
    ideal cube with the same beam, noise in K and fitting range.
    """
    from .matching import cube_beam
    if hasattr(observed, "layout"):
        ideal = observed.sky if ideal is None else ideal
        observed = observed.corrected
    noise = recorded_noise(observed) if noise is None else noise
    beam = cube_beam(observed)
    info = {}
    obs = measure_statistics(observed, beam=beam, noise=noise, statistics=statistics,
                             dendrogram=dendrogram, scale_range=scale_range, info=info)
    rng = info.get("scale_range_arcsec")
    ide = measure_statistics(ideal, beam=beam, noise=info["noise_k"] * u.K,
                             statistics=statistics, dendrogram=dendrogram,
                             scale_range=tuple(rng) if rng else None)
    return ide, obs


def statistics_survival(ideal, observed, *, tracer="", setup=""):
    """Rows (one per statistic) comparing ``ideal`` ({name: Stat}) with ``observed`` (a list
    of {name: Stat}, one per noise realisation). See the module docstring."""
    if isinstance(observed, dict):
        observed = [observed]
    rows = []
    for name in STATISTICS:
        if name not in ideal:
            continue
        vi, ei, unit = ideal[name]
        vals = np.array([o[name].value for o in observed if name in o], dtype=float)
        errs = np.array([o[name].error for o in observed if name in o], dtype=float)
        ok = np.isfinite(vals)
        n = int(ok.sum())
        mean = float(vals[ok].mean()) if n else np.nan
        spread = float(vals[ok].std(ddof=1)) if n > 1 else 0.0
        fit = float(np.nanmean(errs[ok])) if n and np.isfinite(errs[ok]).any() else 0.0
        e_o = float(np.hypot(spread, fit)) if n else np.nan
        ei = float(ei) if np.isfinite(ei) else 0.0
        shift = mean - float(vi)
        e = float(np.hypot(e_o, ei))
        with np.errstate(divide="ignore", invalid="ignore"):
            ns = shift / e if e > 0 else (0.0 if shift == 0 else np.copysign(np.inf, shift))
        rows.append({"tracer": str(tracer), "setup": str(setup), "statistic": name,
                     "unit": unit, "ideal": float(vi), "ideal_err": ei, "observed": mean,
                     "observed_spread": spread, "observed_fit_err": fit, "observed_err": e_o,
                     "shift": shift, "shift_err": e, "shift_sigma": float(ns),
                     "realisations": n})
    for r in rows:
        r["line"] = survival_line(r)
    return rows


def _num(v, e):
    if not np.isfinite(v):
        return "-"
    if not (np.isfinite(e) and e > 0):
        return f"{v:.3g}"
    digits = max(0, min(6, 1 - int(np.floor(np.log10(e)))))
    return f"{v:.{digits}f} ± {e:.{digits}f}" if abs(v) < 1e5 else f"{v:.3g} ± {e:.2g}"


def survival_line(row):
    """One plain-language line, e.g. "size_linewidth_slope: 0.52 ± 0.04 ideal, 0.71 ± 0.09
    observed with <setup> (N = 20): shifted by 2.1σ"."""
    unit = f" {row['unit']}" if row.get("unit") else ""
    ns = row["shift_sigma"]
    if not np.isfinite(row["observed"]) or not np.isfinite(row["ideal"]):
        verdict = "not measurable on both"
    elif abs(ns) < 1:
        verdict = f"survives (shift {ns:+.1f}σ)"
    else:
        verdict = f"shifted by {ns:+.1f}σ" if np.isfinite(ns) else "shifted (no uncertainty)"
    tracer = f"{row['tracer']}: " if row.get("tracer") else ""
    return (f"{tracer}{row['statistic']}: {_num(row['ideal'], row['ideal_err'])}{unit} ideal, "
            f"{_num(row['observed'], row['observed_err'])}{unit} observed with "
            f"{row['setup'] or 'this setup'} (N = {row['realisations']}): {verdict}")


def statistics_columns(rows):
    """{(tracer, setup): {"<statistic>_<column>": value}} for the survival matrix
    (:data:`SHIFT_COLUMNS`)."""
    out = {}
    for r in rows:
        cell = out.setdefault((r["tracer"], r["setup"]), {})
        for c in SHIFT_COLUMNS:
            cell[f"{r['statistic']}_{c}"] = r[c]
    return out


def statistics_figure(rows, title="Survival of statistics: |shift| / uncertainty"):
    """Per statistic, the tracer x setup grid coloured by |shift| / uncertainty (0 to >= 5),
    each cell labelled with the signed shift in sigma. Returns a matplotlib Figure."""
    from matplotlib.figure import Figure
    from matplotlib import colormaps
    stats = [s for s in STATISTICS if any(r["statistic"] == s for r in rows)]
    tracers = list(dict.fromkeys(r["tracer"] for r in rows))
    setups = list(dict.fromkeys(r["setup"] for r in rows))
    ncol = min(4, max(len(stats), 1))
    nrow = int(np.ceil(len(stats) / ncol)) if stats else 1
    w = max(2.2, 0.9 * len(setups) + 1.4)
    h = max(1.6, 0.45 * len(tracers) + 1.1)
    fig = Figure(figsize=(ncol * w + 1.2, nrow * h + 0.8))
    axes = np.atleast_1d(fig.subplots(nrow, ncol, squeeze=False)).ravel()
    # grey: not measurable on one of the two (not "a large shift")
    cmap, vmax = colormaps["magma_r"].with_extremes(bad="0.85"), 5.0
    image = None
    index = {(r["tracer"], r["setup"], r["statistic"]): r for r in rows}
    for ax, s in zip(axes, stats):
        grid = np.full((len(tracers), len(setups)), np.nan)
        for i, t in enumerate(tracers):
            for j, st in enumerate(setups):
                r = index.get((t, st, s))
                if r is not None:
                    ok = (np.isfinite(r["shift_sigma"]) and np.isfinite(r["ideal"])
                          and np.isfinite(r["observed"]))
                    grid[i, j] = abs(r["shift_sigma"]) if ok else np.nan
                    txt = f"{r['shift_sigma']:+.1f}σ" if ok else "n/a"
                    ax.text(j, i, txt, ha="center", va="center", fontsize=8,
                            color="white" if np.nan_to_num(grid[i, j], nan=0) > 2.5 else "black")
        image = ax.imshow(np.ma.masked_invalid(np.clip(grid, 0, vmax)), cmap=cmap, vmin=0,
                          vmax=vmax, aspect="auto")
        ax.set_title(s.replace("_", " "), fontsize=9)
        ax.set_xticks(range(len(setups)), setups, fontsize=8, rotation=30, ha="right")
        ax.set_yticks(range(len(tracers)), tracers, fontsize=8)
    for ax in axes[len(stats):]:
        ax.set_visible(False)
    fig.subplots_adjust(left=0.08, right=0.9, bottom=0.12, top=0.9, hspace=0.9, wspace=0.6)
    if image is not None:
        cax = fig.add_axes([0.92, 0.15, 0.015, 0.7])
        fig.colorbar(image, cax=cax, label="|shift| / uncertainty (clipped at 5; grey: n/a)")
    fig.suptitle(title, fontsize=11)
    return fig


def measure_observed(observed, statistics=None, dendrogram=None):
    """The statistics of one observed cube (or ObservedMap: its primary-beam-corrected map)
    with its beam and recorded noise, as :func:`observation_statistics` measures it."""
    from .matching import cube_beam
    cube = observed.corrected if hasattr(observed, "layout") else observed
    return measure_statistics(cube, beam=cube_beam(cube), noise=recorded_noise(cube),
                              statistics=statistics, dendrogram=dendrogram)


def time_for_uncertainty(row, target, time_s):
    """Observing time (s) for a statistic to be measured to ``target`` (its unit), from one
    survival row measured with ``time_s`` of observing and N >= 2 noise realisations.

    The observed uncertainty has two parts (module docstring): the spread over noise
    realisations s, which scales as 1/sqrt(time) (radiometer noise; tested for the power
    slope and the PDF width), and the fit uncertainty f, the sampling variance of one sky,
    which observing longer does not shrink. So

        t = time_s * s^2 / (target^2 - f^2),

    inf when target <= f (the sky itself limits the statistic), NaN without a spread (one
    realisation) or a time. An estimate: the observatory's own official tools and policies
    decide a proposal."""
    s, f = float(row.get("observed_spread", np.nan)), float(row.get("observed_fit_err", 0.0))
    target, time_s = float(target), float(time_s) if time_s is not None else np.nan
    if not (target > 0 and np.isfinite(time_s) and time_s > 0 and row.get("realisations", 0) >= 2
            and np.isfinite(s)):
        return np.nan
    f = f if np.isfinite(f) else 0.0
    if target <= f:
        return np.inf
    return time_s * s * s / (target * target - f * f)


def planning_lines(rows):
    """Plain-language planning lines of rows that carry ``target`` and ``time_for_target_s``,
    e.g. "CO_1-0 power_slope to ± 0.05 with compact: 3.2 h (spread ± 0.080 in 1.25 h, fit
    ± 0.010)"."""
    from ..planning import duration_text as readable_time
    out = []
    for r in rows:
        if r.get("target") is None:
            continue
        t = r.get("time_for_target_s")
        if t is None or not np.isfinite(t):
            what = ("not reachable: the fit uncertainty (the sky's own sampling variance) "
                    "is larger" if t is not None and np.isinf(t) else
                    "needs >= 2 noise realisations and a known time")
        else:
            what = readable_time(t)
        line = f"{r['tracer']} {r['statistic']} to ± {r['target']:g} with {r['setup']}: {what}"
        if r.get("time_s"):
            line += (f" (spread ± {r['observed_spread']:.3g} in "
                     f"{readable_time(r['time_s'])}, fit ± {r['observed_fit_err']:.3g})")
        out.append(line)
    return out
