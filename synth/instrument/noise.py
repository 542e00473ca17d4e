"""Thermal noise: the radiometer equation and noise correlated on the beam scale.

The rms of a total-power measurement with system temperature T_sys, bandwidth dnu and
integration time t is sigma = T_sys / sqrt(dnu t) (the radiometer equation; Wilson, Rohlfs &
Hüttemeister 2013, Tools of Radio Astronomy, 6th ed., eq. 4.41 -- equation number from memory,
not checked). On the main-beam brightness scale it is divided by the beam efficiency eta:
sigma_T = T_sys / (eta sqrt(dnu t)). The equation is for an ideal receiver (radiometer
constant 1); switched observations cost a further factor, to be folded into ``time``
(the effective on-source time) by the caller.

A map made with a beam has noise correlated over the beam: we draw white Gaussian noise
per pixel, convolve it with the beam kernel (periodic, so the field is stationary up to the
edges) and rescale by 1 / sqrt(sum k^2) -- the exact variance of the convolved field --
so the expected rms per channel equals the target. The autocorrelation of such a field is
the kernel's autocorrelation: for a Gaussian of FWHM theta it is a Gaussian of FWHM
sqrt(2) theta.
"""

import numpy as np
import astropy.units as u

from ..errors import InstrumentError
from .beam import pixel_kernel
from .spectral import HANNING_VARIANCE_FACTOR, HANNING_WEIGHTS

__all__ = ["radiometer_rms", "time_for_rms", "correlated_noise", "hanning_noise_factor",
           "N_POL"]


def _positive(value, unit, field, hint):
    """``value`` as a float in ``unit``; InstrumentError unless it is a positive number."""
    try:
        number = u.Quantity(value).to_value(unit) if isinstance(value, u.Quantity) else None
    except u.UnitConversionError:
        number = None
    if number is None:
        raise InstrumentError(f"{field}: expected a Quantity in {unit} (e.g. {hint}), "
                              f"got {value!r}")
    if not (np.isfinite(number) and number > 0):
        raise InstrumentError(f"{field}: must be positive, got {value}")
    return float(number)


def _efficiency(value):
    eta = float(value)
    if not (0 < eta <= 1):
        raise InstrumentError(f"efficiency: must be in (0, 1], got {value!r}")
    return eta


def _bandwidth_hz(value):
    if not isinstance(value, u.Quantity):
        value = float(value) * u.Hz  # the parameter name says Hz
    return _positive(value, u.Hz, "channel_width_hz", "200 * u.kHz")


def radiometer_rms(tsys, efficiency, channel_width_hz, time, n_pol=1):
    """Noise rms per channel on the main-beam temperature scale.

    .. math:: \\sigma_T = T_{sys} / (\\eta \\sqrt{n_{pol} \\Delta\\nu\\, t})

    (Wilson, Rohlfs & Hüttemeister 2013, eq. 4.41, number from memory; averaging ``n_pol``
    independent polarisation channels of the same total intensity divides the variance by
    n_pol.)

    Parameters
    ----------
    tsys : Quantity (temperature)
    efficiency : float in (0, 1]
        Beam efficiency eta converting antenna to main-beam temperature.
    channel_width_hz : Quantity (frequency) or float in Hz
    time : Quantity (time)
        Effective on-source integration time.
    n_pol : {1, 2}
        Polarisations averaged (a Dish records two by default).

    Returns
    -------
    Quantity, K

    Examples
    --------
    >>> import astropy.units as u
    >>> round(radiometer_rms(100 * u.K, 1.0, 1 * u.MHz, 1 * u.s).to_value(u.K), 6)
    0.1
    """
    tsys_k = _positive(tsys, u.K, "tsys", "120 * u.K")
    t_s = _positive(time, u.s, "integration_time", "2 * u.hr")
    dnu_hz = _bandwidth_hz(channel_width_hz)
    return tsys_k / (_efficiency(efficiency) * np.sqrt(_n_pol(n_pol) * dnu_hz * t_s)) * u.K


def time_for_rms(tsys, efficiency, channel_width_hz, rms, n_pol=1):
    """Integration time reaching ``rms`` per channel: t = (T_sys / (eta sigma))^2 /
    (n_pol dnu) (the radiometer equation solved for t). Returns a Quantity in s."""
    tsys_k = _positive(tsys, u.K, "tsys", "120 * u.K")
    rms_k = _positive(rms, u.K, "rms", "0.05 * u.K")
    dnu_hz = _bandwidth_hz(channel_width_hz)
    return (tsys_k / (_efficiency(efficiency) * rms_k)) ** 2 / (_n_pol(n_pol) * dnu_hz) * u.s


#: polarisations a receiver can average
N_POL = (1, 2)


def _n_pol(n_pol):
    if isinstance(n_pol, bool) or n_pol not in N_POL:
        raise InstrumentError(f"n_pol: {n_pol!r}; valid: 1 or 2 polarisations")
    return int(n_pol)


def hanning_noise_factor():
    """rms of white noise after Hanning smoothing relative to before: sqrt(sum w^2) =
    sqrt(3/8) ~ 0.612 for weights (1/4, 1/2, 1/4)."""
    return float(np.sqrt(HANNING_VARIANCE_FACTOR))


def _periodic_kernel(kernel, ny, nx):
    """The kernel folded onto a (ny, nx) periodic grid with its centre at pixel (0, 0)."""
    ky, kx = kernel.shape
    iy = (np.arange(ky) - ky // 2) % ny
    ix = (np.arange(kx) - kx // 2) % nx
    grid = np.zeros((ny, nx))
    np.add.at(grid, (iy[:, None], ix[None, :]), kernel)
    return grid


def correlated_noise(shape, beam, pixscale, rms, rng, hanning=False):
    """Gaussian noise of rms ``rms`` per channel, correlated spatially on the beam scale.

    Parameters
    ----------
    shape : tuple (n_chan, ny, nx)
    beam : radio_beam.Beam
    pixscale : Quantity (angle)
    rms : float or Quantity
        Target rms per channel; a Quantity returns values in its unit.
    rng : numpy.random.Generator
    hanning : bool
        Also correlate neighbouring channels with the Hanning weights (periodically), as
        Hanning smoothing does to white channel noise; the rms stays ``rms``. Ignored
        for fewer than 3 channels.

    Returns
    -------
    ndarray of float64
    """
    if not isinstance(rng, np.random.Generator):
        raise InstrumentError(f"rng: expected numpy.random.Generator "
                              f"(np.random.default_rng(seed)), got {type(rng).__name__}")
    rms_value = u.Quantity(rms).value if isinstance(rms, u.Quantity) else float(rms)
    if not (np.isfinite(rms_value) and rms_value >= 0):
        raise InstrumentError(f"rms: must be >= 0, got {rms!r}")
    n_chan, ny, nx = shape
    kernel = _periodic_kernel(pixel_kernel(beam, pixscale), ny, nx)
    gain = np.fft.rfft2(kernel) / np.sqrt(np.sum(kernel**2))
    white = rng.standard_normal((n_chan, ny, nx))
    field = np.fft.irfft2(np.fft.rfft2(white, axes=(1, 2)) * gain, s=(ny, nx), axes=(1, 2))
    if hanning and n_chan >= 3:
        w0, w1, w2 = HANNING_WEIGHTS
        field = (w0 * np.roll(field, 1, axis=0) + w1 * field + w2 * np.roll(field, -1, axis=0))
        field /= hanning_noise_factor()
    return field * rms_value
