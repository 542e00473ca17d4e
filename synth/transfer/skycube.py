"""Sky geometry: the channel grid and the WCS of an ideal PPV cube.

Pixel angle = cell size / distance (small-angle). The map centre (between the middle
pixels for even sizes) sits at the source position (RA, Dec); RA---SIN / DEC--SIN
projection with RA increasing to the left (CDELT1 < 0), a radio-velocity spectral axis
(VRAD, m/s, LSRK) with RESTFRQ, BUNIT K (docs/guide.md, "FITS headers").
"""

from dataclasses import dataclass

import numpy as np
import astropy.units as u
from astropy.wcs import WCS

from ..errors import ConfigError

__all__ = ["ChannelGrid", "channel_grid", "sky_wcs", "DEFAULT_POSITION"]

#: Default source position (an arbitrary sky direction for invented sources).
DEFAULT_POSITION = (120.0 * u.deg, 10.0 * u.deg)


@dataclass(frozen=True)
class ChannelGrid:
    """Ascending channels of equal width; velocities in km/s in the output (LSR) frame."""

    start_kms: float   # lower edge of the first channel
    width_kms: float
    n: int

    @property
    def edges_kms(self):
        return self.start_kms + self.width_kms * np.arange(self.n + 1)

    @property
    def centres_kms(self):
        return self.start_kms + self.width_kms * (np.arange(self.n) + 0.5)


def channel_grid(channel_width, velocity_range):
    """Channels of ``channel_width`` covering ``velocity_range`` = (low, high) edges.

    The number of channels is ceil((high - low) / width) (to 1e-9), so the last edge may lie
    slightly above ``high``.
    """
    try:
        width = float(channel_width.to_value(u.km / u.s))
        lo, hi = (float(v) for v in u.Quantity(velocity_range).to_value(u.km / u.s))
    except (AttributeError, u.UnitConversionError, TypeError, ValueError):
        raise ConfigError(
            f"channel_width and velocity_range must be velocities (e.g. 0.2 * u.km / u.s and "
            f"(-10, 10) * u.km / u.s); got {channel_width!r}, {velocity_range!r}") from None
    if not np.isfinite(width) or width <= 0:
        raise ConfigError(f"channel_width must be > 0, got {width} km/s")
    if not (np.isfinite(lo) and np.isfinite(hi)) or hi <= lo:
        raise ConfigError(f"velocity_range must be (low, high) with low < high, got ({lo}, {hi}) km/s")
    n = int(np.ceil((hi - lo) / width - 1e-9))
    return ChannelGrid(lo, width, n)


def sky_wcs(nx, ny, pixel_deg, grid, rest_freq_hz, position=None):
    """A 3-D celestial + VRAD WCS for a cube of (v, y, x) = (grid.n, ny, nx)."""
    ra, dec = position if position is not None else DEFAULT_POSITION
    w = WCS(naxis=3)
    w.wcs.ctype = ["RA---SIN", "DEC--SIN", "VRAD"]
    w.wcs.cunit = ["deg", "deg", "m/s"]
    w.wcs.crpix = [(nx + 1) / 2.0, (ny + 1) / 2.0, 1.0]
    w.wcs.crval = [u.Quantity(ra, u.deg).value, u.Quantity(dec, u.deg).value,
                   grid.centres_kms[0] * 1e3]
    w.wcs.cdelt = [-pixel_deg, pixel_deg, grid.width_kms * 1e3]
    w.wcs.restfrq = rest_freq_hz
    w.wcs.specsys = "LSRK"
    w.wcs.radesys = "ICRS"
    w.wcs.equinox = 2000.0
    return w
