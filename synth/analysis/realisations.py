"""Survival metrics over seeded noise realisations: their mean and spread.

One noise realisation gives one value of each survival metric; its scatter over
realisations is the metric's uncertainty from the noise. :func:`assess_realisations`
observes the same sky N times with seeds ``seed, seed + 1, ...`` and assesses each
observation as a run does (the model on the observation's own grid), returning the mean and
the standard deviation (ddof = 1) of every scalar metric and of the per-scale recovered power.

What the noise does not change is computed once (:func:`synth.instrument.observe.observe_seeds`):
the spectral step, the map layout and the model on it; for a dish the beam convolution; for
an array the uv tracks, weights, primary beams, PSFs, restoring beam and the noiseless dirty
image of every channel and pointing. Each realisation adds its own noise-only dirty image
(seeded as a full observation with that seed, so realisation ``s`` equals ``observe(...,
seed=s)``) and is deconvolved on its own: CLEAN is not linear in its input (the PSF's FFT,
which gives the residual outside each pointing's CLEAN box, is shared). The survival
reference (the model convolved to the restoring beam) is made once too. The realisations are
assessed ASSESS_THREADS at a time.
"""

from dataclasses import dataclass

import numpy as np

from ..errors import InstrumentError

__all__ = ["Realisations", "assess_realisations", "METRICS", "MIN_REALISATIONS"]

#: the scalar survival metrics summarised over realisations
METRICS = ("flux_fraction", "flux_fraction_pb", "half_recovery_scale_arcsec",
           "fidelity_median", "fidelity_mom0", "peak_snr", "fraction_above_3sigma",
           "mom0_correlation")
MIN_REALISATIONS = 2
#: realisations assessed side by side (each assessment is independent; results in seed order)
ASSESS_THREADS = 2


@dataclass(frozen=True, eq=False)
class Realisations:
    """Mean and standard deviation of each metric over ``n`` noise realisations;
    ``scale_arcsec`` with ``recovered_power_mean`` / ``_std`` per scale bin."""

    n: int
    mean: dict
    std: dict
    scale_arcsec: np.ndarray
    recovered_power_mean: np.ndarray
    recovered_power_std: np.ndarray
    measured: tuple = ()     # what ``measure`` returned for each realisation, in seed order

    def as_row(self):
        """``<metric>`` (the mean) and ``<metric>_std`` for a survival row."""
        row = {}
        for k in METRICS:
            row[k], row[f"{k}_std"] = self.mean[k], self.std[k]
        return row


def _check_n(n):
    if isinstance(n, bool) or not isinstance(n, (int, np.integer)) or n < MIN_REALISATIONS:
        raise InstrumentError(f"realisations: {n!r}; give an integer >= {MIN_REALISATIONS} "
                              "(one realisation has no spread)")
    return int(n)


def assess_realisations(cube, instrument, n, *, seed=0, emission_floor=0.01, measure=None,
                        **observe_kw):
    """Observe ``cube`` with ``instrument`` ``n`` times (seeds ``seed`` ... ``seed + n - 1``)
    and summarise the survival metrics (see the module docstring).

    ``measure``, a callable, is also applied to each ObservedMap (e.g. the statistics layer);
    its results are kept in ``measured``. ``observe_kw`` are :func:`synth.observe` options
    (the noise must be on)."""
    from ..instrument.observe import observe_seeds
    from .survival import assess_map, reference_cube
    n = _check_n(n)
    if observe_kw.get("noise") is False:
        raise InstrumentError("realisations: noise = False gives n identical observations; "
                              "realisations need the noise on")
    observe_kw = {k: v for k, v in observe_kw.items() if k not in ("seed", "with_maps")}
    rows, curves, scales, measured = [], [], None, []
    observe_kw.pop("noise", None)
    maps = observe_seeds(cube, instrument, [int(seed) + i for i in range(n)], **observe_kw)
    ref = reference_cube(maps[0].sky, maps[0].corrected)  # same sky, grid, beam for all
    if measure is not None:
        measured = [measure(omap) for omap in maps]
    from concurrent.futures import ThreadPoolExecutor
    with ThreadPoolExecutor(ASSESS_THREADS) as pool:     # numpy and FFTs release the GIL
        assessed = list(pool.map(lambda omap: assess_map(omap, emission_floor, reference=ref),
                                 maps))
    for m in assessed:
        rows.append(m.as_row())
        t = m.recovery
        scales = np.asarray(t["scale_arcsec"])
        curves.append(np.asarray(t["recovered_power"]))
    values = {k: np.array([float(r[k]) for r in rows]) for k in METRICS}
    with np.errstate(invalid="ignore"):
        mean = {k: float(np.nanmean(v)) if np.isfinite(v).any() else float("nan")
                for k, v in values.items()}
        std = {k: float(np.nanstd(v, ddof=1)) if np.isfinite(v).sum() > 1 else float("nan")
               for k, v in values.items()}
    curves = np.array(curves)
    return Realisations(n=n, mean=mean, std=std, scale_arcsec=scales,
                        recovered_power_mean=curves.mean(axis=0),
                        recovered_power_std=curves.std(axis=0, ddof=1),
                        measured=tuple(measured))
