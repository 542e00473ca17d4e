"""Per-scale recovery and image fidelity of an observed cube against its reference.

The reference is the ideal cube convolved with the observed restoring beam and expressed in
the observed unit (see :func:`synth.analysis.survival.reference_cube`).
"""

import numpy as np
from astropy.table import Table

from .power import binned_ratio, radial_bins

__all__ = ["recovery_table", "half_recovery_scale", "fidelity_map", "fidelity_summary",
           "RELIABLE_POWER", "excess_note", "EXCESS_LEVEL"]

#: recovered power above this (at scales >= the beam) gets an explanation in the notes
EXCESS_LEVEL = 1.1

#: bins whose reference power is below this fraction of the largest bin are not "reliable"
RELIABLE_POWER = 1e-4

FIDELITY_PERCENTILES = (5, 16, 50, 84, 95)

#: fixed histogram bins in log10(fidelity), so histograms of different setups line up;
#: values outside are counted in the end bins
FIDELITY_LOG_EDGES = np.linspace(-1.0, 4.0, 26)


def recovery_table(obs, ref, pixscale_arcsec, nbins=None):
    """Recovered fraction of power per angular scale, for moment 0 and per channel.

    R(k) = sum_annulus |F_obs|^2 / sum_annulus |F_ref|^2 (azimuthal averages of the two power
    spectra on the same annuli, so the ratio of averages is the ratio of sums), and the
    noise-unbiased amplitude transfer T(k) = sum Re(F_obs F_ref*) / sum |F_ref|^2 (the
    cross-power estimate; noise uncorrelated with the sky averages out of it). For a
    linear filter W(k), R = <|W|^2> and T = <Re W> over the annulus.

    Parameters
    ----------
    obs, ref : ndarray (v, y, x)
        Observed cube and reference, same unit, grid and channels.

    The headline per-scale recovery is ``recovered_power`` = sign(T) T^2: the power ratio
    estimated from the cross-power, which noise does not bias (for a filter W real and
    constant over the annulus it equals W^2 = R); R itself is biased upward by the noise
    power at small scales and is kept for reference.

    Returns
    -------
    astropy.table.Table
        k (1/arcsec), scale_arcsec (1/k), recovered_power (noise-unbiased),
        recovered_fraction (moment 0, noise-biased power ratio), amplitude_transfer,
        reference_power (moment 0, normalised to its largest bin), n_modes, reliable, and
        channel_fraction with shape (n_bins, n_channels) (NaN where the channel's reference
        is empty).
    """
    index, edges = radial_bins(obs.shape[-2:], pixscale_arcsec, nbins)
    nb = edges.size - 1
    f_obs, f_ref = np.fft.fft2(obs.sum(axis=0)), np.fft.fft2(ref.sum(axis=0))
    p_ref = np.abs(f_ref) ** 2
    ratio, den = binned_ratio(np.abs(f_obs) ** 2, p_ref, index, nb)
    cross, _ = binned_ratio((f_obs * np.conj(f_ref)).real, p_ref, index, nb)
    chan, _ = binned_ratio(np.abs(np.fft.fft2(obs)) ** 2, np.abs(np.fft.fft2(ref)) ** 2,
                           index, nb)
    kk = np.hypot(*np.meshgrid(np.fft.fftfreq(obs.shape[-1], pixscale_arcsec),
                               np.fft.fftfreq(obs.shape[-2], pixscale_arcsec)))
    count = np.bincount(index[index >= 0], minlength=nb)
    keep = count > 0
    k_mean = np.bincount(index[index >= 0], weights=kk[index >= 0], minlength=nb)[keep]
    k_mean = k_mean / count[keep]
    ref_norm = den[keep] / den[keep].max() if den[keep].max() > 0 else den[keep]
    t = cross[keep]
    return Table({"k": k_mean, "scale_arcsec": 1.0 / k_mean,
                  "recovered_power": np.sign(t) * t**2,
                  "recovered_fraction": ratio[keep], "amplitude_transfer": t,
                  "reference_power": ref_norm, "n_modes": count[keep],
                  "reliable": ref_norm >= RELIABLE_POWER,
                  "channel_fraction": chan[keep]})


def half_recovery_scale(table, level=0.5, column="recovered_power"):
    """The largest scale up to which the recovered power (noise-unbiased) stays at or above
    ``level``.

    Walking from the smallest reliable scale toward larger ones, the first bin below
    ``level`` ends the run; the crossing is interpolated linearly in ln(scale) between it and
    the previous bin. Returns (scale_arcsec, bounded): NaN if the smallest reliable scale is
    already below ``level``; the largest scale measured and bounded=False if it never drops
    (a lower limit: the map is too small to see the drop).
    """
    t = table[table["reliable"]]
    order = np.argsort(t["scale_arcsec"])
    s = np.asarray(t["scale_arcsec"])[order]
    r = np.asarray(t[column])[order]
    if s.size == 0 or not r[0] >= level:
        return float("nan"), True
    below = np.nonzero(~(r >= level))[0]
    if below.size == 0:
        return float(s[-1]), False
    j = below[0]
    x0, x1 = np.log(s[j - 1]), np.log(s[j])
    frac = (r[j - 1] - level) / (r[j - 1] - r[j])
    return float(np.exp(x0 + frac * (x1 - x0))), True


def fidelity_map(obs, ref):
    """Image fidelity F = |M| / |M - I| with M the reference (beam-convolved model) and I the
    image (Pety, Gueth & Guilloteau 2001, technical memo 398, their definition of the fidelity
    image; reference from memory). Infinite where the image equals the reference."""
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.abs(ref) / np.abs(obs - ref)


def fidelity_summary(obs, ref, mask):
    """Median fidelity over the masked voxels, percentiles, and a histogram of log10 F.

    Returns (median, {percentile: value}, (edges, counts)); the histogram holds the finite
    values only (infinite fidelity means an exact match), clipped to FIDELITY_LOG_EDGES.
    """
    f = fidelity_map(obs, ref)[mask]
    if f.size == 0:
        return float("nan"), {p: float("nan") for p in FIDELITY_PERCENTILES}, \
            (FIDELITY_LOG_EDGES, np.zeros(FIDELITY_LOG_EDGES.size - 1, dtype=int))
    pct = np.percentile(f, FIDELITY_PERCENTILES, method="nearest")
    finite = np.log10(f[np.isfinite(f) & (f > 0)])
    edges = FIDELITY_LOG_EDGES
    counts, _ = np.histogram(np.clip(finite, edges[0], edges[-1]), bins=edges)
    median = float(np.percentile(f, 50, method="nearest"))     # nearest rank: inf-safe
    return median, dict(zip(FIDELITY_PERCENTILES, map(float, pct))), (edges, counts)


def excess_note(table, beam_arcsec=None, level=EXCESS_LEVEL):
    """A note explaining recovered power above ``level`` (or None): at which scales, how
    much, and what makes an observed map hold more power correlated with the model than the
    model itself. Scales below the beam FWHM are not considered."""
    t = table[table["reliable"]]
    if beam_arcsec is not None:
        t = t[np.asarray(t["scale_arcsec"]) >= beam_arcsec]
    p = np.asarray(t["recovered_power"])
    s = np.asarray(t["scale_arcsec"])
    hot = p > level
    if not hot.any():
        return None
    where = ", ".join(f'{v:.2f} at {x:.3g}"' for v, x in sorted(zip(p[hot], s[hot]),
                                                               key=lambda vx: -vx[1]))
    causes = []
    if beam_arcsec is not None and (s[hot] < 2 * beam_arcsec).any():
        causes.append("within two beams of the resolution, the restoring beam is a Gaussian "
                      "fitted to the PSF's main lobe while the PSF itself (robust or uniform "
                      "weighting especially) is not Gaussian, and the reference there is tiny")
    causes += ["CLEAN residuals restored at the clean beam's flux scale (the dirty beam's area "
               "differs)", "a scale measured by both the dish and the array when feathering",
               "primary-beam correction amplifying emission at a map edge"]
    return (f"recovered power above 1 ({where}): the observed map holds more power correlated "
            "with the model than the model itself at these scales. Likely causes: "
            + "; ".join(causes) + ". Noise does not cause it: this estimate uses the "
            "cross-power.")
