"""Visibilities out: the simulated visibilities of an array setup as a random-group UVFITS file.

The file follows the random-group UVFITS convention (Greisen 2012, technical memo 117, "The FITS
interferometry data interchange format"; Wells, Greisen & Harten 1981, A&AS 44, 363 for
random groups): one group per visibility row with the parameters UU, VV, WW (light seconds),
DATE (Julian date, split into two parameters), BASELINE (256 a1 + a2, antennas numbered from
1) and INTTIM (s); the data axes COMPLEX (real, imaginary, weight), STOKES (I = 1), FREQ,
IF, RA and DEC; and an antenna table (EXTNAME "AIPS AN", the name the UVFITS convention requires) with the antenna positions relative to the array centre
in the Earth-centred frame (rotated to the site's meridian; the invented site sits at
longitude 0). Weights are 1 / sigma^2 (sigma per real and imaginary part, Jy). The UVFITS
baseline direction is opposite synth's (and the usual reader's): the file holds -uvw and the
conjugate visibilities, the same measurement, which a reader such as pyuvdata turns back.

Times: the hour angles of the track are placed on an invented date, at the UTC times when the
mean sidereal time at longitude 0 equals RA + H (astropy's sidereal time), so that the local
sidereal time of every row is consistent with its hour angle.
"""

import numpy as np
import astropy.units as u
from astropy.coordinates import EarthLocation
from astropy.io import fits
from astropy.time import Time

from ..errors import InstrumentError
from ..sky import C_M_S
from .uv import enu_to_xyz

__all__ = ["write_uvfits", "REFERENCE_DATE"]

#: the invented date the tracks are placed on (UTC)
REFERENCE_DATE = "2026-03-20"
_SOLAR_PER_SIDEREAL = 0.99726956633     # solar seconds per sidereal second (IERS 2010)


def _row_jd(hour_angle_rad, ra_deg):
    """Julian dates (UTC) of rows at hour angles H for a source at RA: LST(t) = RA + H."""
    t0 = Time(f"{REFERENCE_DATE}T00:00:00", scale="utc")
    gmst0 = t0.sidereal_time("mean", longitude=0 * u.deg).to_value(u.hourangle)
    lst_h = (ra_deg / 15.0 + np.degrees(hour_angle_rad) / 15.0)
    dt_sid_h = np.mod(lst_h - gmst0, 24.0)
    return t0.jd + dt_sid_h * 3600.0 * _SOLAR_PER_SIDEREAL / 86400.0


def _antenna_table(arrays, freq_hz, t0):
    """The antenna table (EXTNAME "AIPS AN", as the convention names it) of every array's antennas (numbered from 1 in order)."""
    lat = arrays[0].latitude.to_value(u.rad)
    if any(abs(a.latitude.to_value(u.rad) - lat) > 1e-12 for a in arrays):
        raise InstrumentError("visibilities out: the arrays of one file must share a site "
                              "(the same latitude)")
    names, xyz = [], []
    for arr in arrays:
        names += [f"{n}"[:8] for n in arr.antenna_names]
        xyz.append(enu_to_xyz(arr.positions_m, lat))
    xyz = np.vstack(xyz)
    n = xyz.shape[0]
    centre = EarthLocation.from_geodetic(0 * u.deg, lat * u.rad, 0 * u.m)
    cols = [fits.Column(name="ANNAME", format="8A", array=np.array(names)),
            fits.Column(name="STABXYZ", format="3D", unit="METERS", array=xyz),
            fits.Column(name="NOSTA", format="1J", array=np.arange(1, n + 1)),
            fits.Column(name="MNTSTA", format="1J", array=np.zeros(n, dtype=np.int32)),
            fits.Column(name="STAXOF", format="1E", array=np.zeros(n)),
            fits.Column(name="POLTYA", format="1A", array=np.full(n, "X")),
            fits.Column(name="POLAA", format="1E", array=np.zeros(n)),
            fits.Column(name="POLTYB", format="1A", array=np.full(n, "Y")),
            fits.Column(name="POLAB", format="1E", array=np.zeros(n)),
            fits.Column(name="DIAMETER", format="1E",
                        array=np.concatenate([a.diameters_m for a in arrays]))]
    hdu = fits.BinTableHDU.from_columns(cols)
    h = hdu.header
    h["EXTNAME"], h["EXTVER"] = "AIPS AN", 1
    h["ARRAYX"], h["ARRAYY"], h["ARRAYZ"] = (float(c.to_value(u.m)) for c in
                                             (centre.x, centre.y, centre.z))
    h["FRAME"] = "ITRF"
    h["FREQ"] = float(freq_hz)
    h["RDATE"] = REFERENCE_DATE
    h["GSTIA0"] = float(t0.sidereal_time("apparent", longitude=0 * u.deg).to_value(u.deg))
    h["DEGPDY"] = 360.9856438593
    h["UT1UTC"], h["IATUTC"], h["DATUTC"] = 0.0, 37.0, 0.0
    h["TIMESYS"] = "UTC"
    h["ARRNAM"] = "+".join(a.name for a in arrays)[:68]
    h["XYZHAND"] = "RIGHT"
    h["NUMORB"], h["NOPCAL"], h["FREQID"], h["NO_IF"] = 0, 0, 1, 1
    h["POLTYPE"] = "X-Y LIN"
    h["POLARX"], h["POLARY"] = 0.0, 0.0
    return hdu


def write_uvfits(path, tracks, vis, freqs_hz, arrays, ra_deg, dec_deg, hour_angle_rad,
                 object_name="synth", sample_time_s=None):
    """Write visibilities (rows x channels, Jy, complex) of one pointing as random-group UVFITS.

    Parameters
    ----------
    path : str
    tracks : synth.instrument.interferometer.Tracks
        uvw (m), noise per row, antenna numbers (from 0 over all arrays).
    vis : ndarray (n_rows, n_channels) complex
    freqs_hz : ndarray (n_channels,)
        Uniformly spaced channel frequencies.
    arrays : list of Array (in the order of ``tracks``' antenna numbers)
    ra_deg, dec_deg : float
        Phase centre (the pointing).
    hour_angle_rad : ndarray (n_rows,)
        Hour angle of each row.
    """
    vis = np.asarray(vis)
    freqs_hz = np.atleast_1d(np.asarray(freqs_hz, dtype=np.float64))
    n_rows, n_chan = vis.shape
    if tracks.uvw_m.shape[0] != n_rows or freqs_hz.size != n_chan:
        raise InstrumentError(f"visibilities out: {n_rows} rows x {n_chan} channels do not "
                              f"match {tracks.uvw_m.shape[0]} uvw rows and {freqs_hz.size} "
                              "frequencies")
    if n_chan > 1 and not np.allclose(np.diff(freqs_hz), freqs_hz[1] - freqs_hz[0],
                                      rtol=1e-6, atol=0):
        raise InstrumentError("visibilities out: the channels must be uniformly spaced")
    if int(max(tracks.ant1.max(), tracks.ant2.max())) + 1 > 255:
        raise InstrumentError("visibilities out: more than 255 antennas do not fit the "
                              "BASELINE parameter")
    jd = _row_jd(hour_angle_rad, ra_deg)
    jd_day = np.floor(jd - 0.5) + 0.5
    data = np.zeros((n_rows, 1, 1, 1, n_chan, 1, 3))
    # the UVFITS direction convention is opposite ours (Greisen 2012, technical memo 117): write
    # -uvw and the conjugate visibilities, which describe the same measurement
    data[..., 0] = vis.real[:, None, None, None, :, None]
    data[..., 1] = -vis.imag[:, None, None, None, :, None]
    data[..., 2] = (1.0 / tracks.sigma_jy ** 2 * np.ones(n_rows))[:, None, None, None, None,
                                                                  None]
    uvw_s = -tracks.uvw_m / C_M_S
    baseline = 256.0 * (tracks.ant1 + 1) + (tracks.ant2 + 1)
    inttim = np.full(n_rows, float(sample_time_s or 0.0))
    groups = fits.GroupData(data, bitpix=-64,
                            parnames=["UU", "VV", "WW", "DATE", "DATE", "BASELINE",
                                      "INTTIM"],
                            pardata=[uvw_s[:, 0], uvw_s[:, 1], uvw_s[:, 2], jd_day,
                                     jd - jd_day, baseline, inttim])
    hdu = fits.GroupsHDU(groups)
    h = hdu.header
    for i in range(1, 8):
        h[f"PSCAL{i}"], h[f"PZERO{i}"] = 1.0, 0.0
    axes = [("COMPLEX", 1.0, 1.0, 1.0), ("STOKES", 1.0, 1.0, 1.0),
            ("FREQ", freqs_hz[0], 1.0, (freqs_hz[1] - freqs_hz[0]) if n_chan > 1 else 1.0),
            ("IF", 1.0, 1.0, 1.0), ("RA", float(ra_deg), 1.0, 1.0),
            ("DEC", float(dec_deg), 1.0, 1.0)]
    for i, (ctype, crval, crpix, cdelt) in enumerate(axes, start=2):
        h[f"CTYPE{i}"], h[f"CRVAL{i}"] = ctype, float(crval)
        h[f"CRPIX{i}"], h[f"CDELT{i}"], h[f"CROTA{i}"] = crpix, float(cdelt), 0.0
    t0 = Time(f"{REFERENCE_DATE}T00:00:00", scale="utc")
    h["DATE-OBS"] = REFERENCE_DATE
    h["OBJECT"] = str(object_name)[:68]
    h["TELESCOP"] = "+".join(a.name for a in arrays)[:68]
    h["INSTRUME"] = "synth"
    h["EPOCH"] = 2000.0
    h["RADESYS"] = "fk5"
    h["BUNIT"] = "JY"
    h["BSCALE"], h["BZERO"] = 1.0, 0.0
    lat = arrays[0].latitude.to_value(u.deg)
    h["LAT"], h["LON"], h["ALT"] = float(lat), 0.0, 0.0
    h["ORIGIN"] = "synth (simulated visibilities)"
    hdul = fits.HDUList([hdu, _antenna_table(arrays, freqs_hz[0], t0)])
    hdul.writeto(path, overwrite=False)
    return path

