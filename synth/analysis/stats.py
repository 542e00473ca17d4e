"""Structure statistics of a cube, measured identically on model and observed cubes.

- spatial power spectrum of the moment-0 map and its fitted slope (:mod:`.power`);
- intensity PDF of the moment-0 map, eta = ln(W / <W>), with a log-normal fit (the usual
  description of column-density PDFs of turbulent clouds: Vázquez-Semadeni 1994, ApJ 423,
  681; Kainulainen et al. 2009, A&A 508, L35);
- mean, standard deviation, skewness and excess kurtosis of the moment maps.
"""

from dataclasses import dataclass

import numpy as np
import astropy.units as u
from astropy.table import Table
from scipy import stats as sps

from ..errors import InstrumentError
from .matching import cube_beam, pixel_scale_arcsec
from .moments import moment_maps
from .power import fit_power_slope, power_spectrum

__all__ = ["StructureStats", "intensity_pdf", "lognormal_fit", "map_statistics",
           "structure_statistics", "default_scale_range"]


@dataclass(frozen=True, eq=False)
class StructureStats:
    """Structure statistics of one cube (see the module docstring for the definitions)."""

    power: Table                 # moment-0 power spectrum (k, scale_arcsec, power, n_modes)
    slope: float                 # d ln P / d ln k over slope_range
    slope_err: float             # its 1-sigma uncertainty
    slope_range: tuple           # (smallest, largest) scale used, arcsec
    pdf_edges: np.ndarray        # bin edges in eta = ln(W / <W>)
    pdf_density: np.ndarray      # probability density per unit eta
    lognormal_mu: float          # mean of eta
    lognormal_sigma: float       # standard deviation of eta
    map_stats: dict              # {"mom0"|"mom1"|"mom2": {"mean","std","skew","kurtosis"}}
    moments: object              # the Moments the statistics were measured on
    flux: u.Quantity             # sum of the moment-0 map over the map (unit km/s, per pixel)

    def as_dict(self):
        """Plain scalars for tables and JSON."""
        row = {"slope": self.slope, "slope_err": self.slope_err,
               "lognormal_mu": self.lognormal_mu, "lognormal_sigma": self.lognormal_sigma,
               "flux": float(self.flux.value)}
        for name, st in self.map_stats.items():
            row.update({f"{name}_{k}": v for k, v in st.items()})
        return row


def lognormal_fit(values):
    """Maximum-likelihood log-normal parameters of positive values.

    For x log-normal, eta = ln(x / <x>) is Gaussian; the ML estimates are the sample mean and
    (biased, 1/N) standard deviation of eta (e.g. Aitchison & Brown 1957, The Lognormal
    Distribution, ch. 5). Returns (mu, sigma) of eta.
    """
    x = np.asarray(values, dtype=np.float64)
    x = x[np.isfinite(x) & (x > 0)]
    if x.size < 3:
        raise InstrumentError(f"intensity PDF: {x.size} positive values; need at least 3")
    eta = np.log(x / x.mean())
    return float(eta.mean()), float(eta.std())


def intensity_pdf(values, nbins=40):
    """Histogram density of eta = ln(x/<x>) of the positive values: (edges, density)."""
    x = np.asarray(values, dtype=np.float64)
    x = x[np.isfinite(x) & (x > 0)]
    if x.size < 3:
        raise InstrumentError(f"intensity PDF: {x.size} positive values; need at least 3")
    density, edges = np.histogram(np.log(x / x.mean()), bins=nbins, density=True)
    return edges, density


def map_statistics(image):
    """Mean, std, skewness and excess kurtosis of the finite pixels of a map (plain floats)."""
    v = np.asarray(image, dtype=np.float64)
    v = v[np.isfinite(v)]
    if v.size < 4:
        return {"mean": np.nan, "std": np.nan, "skew": np.nan, "kurtosis": np.nan}
    return {"mean": float(v.mean()), "std": float(v.std()),
            "skew": float(sps.skew(v)), "kurtosis": float(sps.kurtosis(v))}


def default_scale_range(shape, pixscale_arcsec, beam=None):
    """Scales for the slope fit: from max(3 pixels, 2 beam FWHM) to a third of the map; for a
    map only a few beams across, from 1 beam FWHM to half the map. None when even that
    leaves no range (the slope is then not fitted)."""
    pix_lo = 3.0 * pixscale_arcsec
    fwhm = beam.major.to_value(u.arcsec) if beam is not None else 0.0
    size = min(shape) * pixscale_arcsec
    for lo, hi in ((max(pix_lo, 2.0 * fwhm), size / 3.0), (max(pix_lo, fwhm), size / 2.0)):
        if hi > 1.5 * lo:
            return lo, hi
    return None


def structure_statistics(cube, *, scale_range=None, noise=None, mask=None, nbins=None,
                         apodize="tukey", pdf_bins=40, automatic_range=False):
    """Power spectrum, intensity PDF and moment-map statistics of one cube.

    Parameters
    ----------
    cube : SpectralCube
        K or Jy/beam, beam optional.
    scale_range : (float, float), optional
        Angular scales (arcsec) for the slope fit; :func:`default_scale_range` if None (on a
        map too small for any range the slope is NaN). ``automatic_range=True`` marks a given
        range as chosen automatically (too few bins in it then gives a NaN slope, not an error).
    noise, mask
        Passed to :func:`synth.analysis.moments.moment_maps`.
    apodize : {None, "tukey"}
        Window applied to the moment-0 map before the FFT (edges of a non-periodic map
        otherwise add a k^-2 spectrum of their own).
    """
    mom = moment_maps(cube, noise=noise, mask=mask)
    pix = pixel_scale_arcsec(cube)
    m0 = np.nan_to_num(mom.mom0.value)
    table = power_spectrum(m0, pix, nbins=nbins, apodize=apodize)
    rng = scale_range or default_scale_range(m0.shape, pix, cube_beam(cube))
    slope, err = np.nan, np.nan
    if rng is not None:
        try:
            slope, err, _ = fit_power_slope(table, rng)
        except InstrumentError:
            if scale_range is not None and not automatic_range:  # the user's own range
                raise
    rng = rng if rng is not None else (np.nan, np.nan)
    edges, dens = intensity_pdf(m0, pdf_bins)
    mu, sig = lognormal_fit(m0)
    maps = {"mom0": mom.mom0.value, "mom1": mom.mom1.value, "mom2": mom.mom2.value}
    return StructureStats(power=table, slope=slope, slope_err=err, slope_range=tuple(rng),
                          pdf_edges=edges, pdf_density=dens, lognormal_mu=mu,
                          lognormal_sigma=sig,
                          map_stats={k: map_statistics(v) for k, v in maps.items()},
                          moments=mom, flux=np.nansum(mom.mom0))
