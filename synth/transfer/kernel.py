"""The line-of-sight kernel: channel-integrated profiles, the formal solution, channel averaging.

For each sky column the cells are visited front to back (z index 0 nearest). A cell with
velocity-integrated optical depth ``tau_int`` (km/s), centroid ``v0``, 1-D dispersion
``sigma`` and a linear velocity change ``delta`` across its depth contributes, in channel
k = [e_k, e_{k+1}],

    tau_k = tau_int * (F(e_{k+1}) - F(e_k)) / (e_{k+1} - e_k),

the profile integrated over the channel (not sampled at its centre). F is the cumulative
profile: the Gaussian CDF Phi((e - v0) / sigma) for a static cell, and its average over a
uniform spread of centroids v0 +- delta/2 when the velocity changes across the cell,

    F(e) = [G(e - v0 + delta/2) - G(e - v0 - delta/2)] / delta,
    G(x) = x Phi(x / sigma) + sigma phi(x / sigma),

(G is the antiderivative of the Gaussian CDF; the boxcar-averaged profile is the Gaussian
convolved with the box of width delta), so coarse grids in fast flows leave no gaps.
The formal solution for piecewise-constant source functions S_c (K) is

    I_k = sum_c S_c (1 - exp(-tau_ck)) prod_{c' in front of c} exp(-tau_c'k)
          + J_bg prod_c exp(-tau_ck),

and the output is T_B = I_k - J_bg (Rybicki & Lightman 1979, eq. 1.29, in
Rayleigh-Jeans-equivalent units).

Channel averaging. A spectrometer channel reports the intensity averaged over its bandpass
(an ideal filter channel is a boxcar as wide as the channel; Wilson, Rohlfs & Hüttemeister
2013, Tools of Radio Astronomy, ch. 5, from memory), and since exp(-tau) is not linear,
<I> over a channel differs from I(<tau>) once the line is optically thick and narrower than the
channel. Each channel is therefore split into m equal sub-channels, the formal solution is
evaluated on every sub-channel (with the profile integrated over the sub-channel as above) and
the emergent intensities are averaged:

    I_k = (1/m) sum_{j=1..m} I_kj.

m is chosen per column so that a sub-channel is no wider than

    w = sigma_min / sqrt(1 + 2 ln(1 + tau_peak)),    m = ceil(dv / w), at most MAX_SUB,

where sigma_min is the narrowest thermal+turbulent dispersion among the column's cells and
tau_peak = sum_c |tau_int,c| / (sqrt(2 pi) sigma_c) bounds the column's peak optical depth.
The square root is about the half-width, in dispersions, of the velocity range over which a Gaussian
line of peak depth tau_peak is optically thick (tau > 1/e: |v - v0| < sigma sqrt(2 ln tau_peak
+ 2)); the edge of that range is where the intensity changes fastest, so the sub-channel shrinks
with it: w = sigma for a thin line, sigma/3 at tau_peak ~ 50 (a Gaussian line evaluated on
one such sub-channel is within ~1-2 % of its exact channel average, computed in numpy for
tau_peak = 1 to 1000). A column with tau_peak < TAU_LINEAR gets m = 1 (I is then linear in
tau to a relative error below TAU_LINEAR / 2, so averaging tau or I is the same). So
sub-sampling costs time only in columns that are thick and whose lines are narrower than a
channel or so; the LTE benchmark's columns (channels of a third of sigma) stay at m = 1 or 2.
The optical-depth output is the channel average of tau (the mean over the sub-channels,
which equals the profile integrated over the whole channel), not tau at the channel centre.

Each cell is evaluated only over the (sub-)channels within t_w dispersions (plus delta/2) of
its centroid, where the Gaussian wing has fallen to WING_TAU of the larger of the cell's peak
optical depth tau_pk = |tau_int| / (sqrt(2 pi) sigma) and 1:

    t_w = sqrt(2 ln(max(tau_pk, 1) / WING_TAU)),

5.26 for an optically thin cell, 6.1 at tau_pk = 100, 6.8 at 10^4. So the optical depth a
channel misses is at most WING_TAU of the cell's peak for a thin cell, and at most WING_TAU
absolute for a thick one (an emergent-intensity error below WING_TAU of the cell's peak
contribution or of its source function). A fixed window of 5 sigma missed 3.7e-6 tau_pk: 3.7e-4
of the source function in the wing of a cell with tau_pk = 100. Cumulative-profile
values are shared between neighbouring channels (one F evaluation per channel edge).
Negative tau (population inversion from an LVG solution) amplifies, as the formal solution
says.

Arithmetic (what makes the kernel fast without trading accuracy). The channel loops are
written so that LLVM turns them into SIMD code: no branches, no table look-ups (gathers are not
vectorised), no libm calls (numba has no vector exp here), loops over whole vectors (entries
past a cell's window get tau = 0 and change nothing). Phi and G come from the Mills ratio
M(x) = (1 - Phi(x)) / phi(x) (Abramowitz & Stegun 1964, 26.2.5, 7.1.2):

    Phi(-x) = phi(x) M(x),   Phi(x) = 1 - phi(x) M(x),   G(t) = max(t, 0) + phi(t) (1 - |t| M(|t|)),

with M and 1 - x M as degree-16 polynomials in (x - 5)/(x + 5) (fitted to
scipy.special.erfcx, 1e-12 relative; F is exact to ~1e-15 absolute times sigma/delta,
where the previous cubic-Hermite tables gave ~2e-10 times sigma/delta) and phi by the
range-reduced exponential of synth._vmath. For a cell whose velocity change is at most 2.5 dispersions
(h = delta / 2 sigma <= 1.25; most cells of a resolved flow) the box average is a series in h
instead, F = Phi(t) - phi(t) P_h(t) with P_h a polynomial in t whose coefficients are made
once per cell (see _box_series; exact to 1e-15): one Phi and 14 multiply-adds per channel
edge where the closed form needs two G. exp(-tau) - 1 comes from the reduction
x = k ln 2 + r (Cody & Waite 1980), the Taylor series of e^r - 1 and 2^k built from its bits
(an LLVM bitcast, which vectorises), 1 ulp also for tiny tau (no cancellation in
1 - exp(-tau)); |tau| is clamped at 700 (exp(-700) ~ 1e-304). The sums stay
in float64; tests/test_kernel.py checks every piece and whole columns against scipy/numpy
and mpmath.
Columns are processed in blocks of 64 per parallel task (numba prange: every core).
"""

import math

import numpy as np
from numba import njit, prange

from .._vmath import exp as vexp, exp_parts

__all__ = ["WING_TAU", "MAX_SUB", "TAU_LINEAR", "transfer_columns", "column_inputs",
           "cumulative_profile", "sub_channels", "emission_counts", "window_halfwidth"]

#: Optical depth, relative to max(peak optical depth, 1), at which a cell's evaluated window
#: ends (see the module docstring): each channel misses at most this much of its depth.
WING_TAU = 1e-6
_T_THIN = math.sqrt(2.0 * math.log(1.0 / WING_TAU))  # t_w of a thin cell, 5.257

_SMALL_DELTA = 1e-3  # delta / sigma below which the box average is skipped (error < 1e-7)
_SQRT_2PI = math.sqrt(2.0 * math.pi)

#: Most sub-channels per channel (a still wider channel is sub-sampled more coarsely than
#: the rule of the module docstring asks).
MAX_SUB = 64
#: A column whose summed peak optical depth is below this is treated as linear: one
#: sub-channel (the intensity is then linear in tau to a relative error < TAU_LINEAR / 2).
TAU_LINEAR = 0.01

# The Gaussian CDF and G without tables or branches. For x >= 0 (Abramowitz & Stegun 1964,
# 26.2.5 and 7.1.2 for the Mills ratio M(x) = (1 - Phi(x)) / phi(x)):
#     Phi(-x) = phi(x) M(x),        Phi(x) = 1 - phi(x) M(x),
#     G(t) = t Phi(t) + phi(t) = max(t, 0) + phi(t) H(|t|),   H(x) = 1 - x M(x),
# (G(-x) = phi(x) (1 - x M(x)) and G(x) = G(-x) + x since G(x) - G(-x) = x). M and H are
# smooth and bounded on [0, inf): they are polynomials of degree 16 in y = (x - _L) / (x + _L)
# times ((x + _L) / _L)^-p (p = 1 for M, 2 for H: their decay 1/x and 1/x^2), fitted by least
# squares on Chebyshev nodes against scipy.special.erfcx (M(x) = sqrt(pi/2) erfcx(x/sqrt(2)));
# tests/test_kernel.py refits them and checks them to 1e-12 relative on [0, _X_MAX].
# Beyond |t| = _X_MAX phi < 2e-16, so x is clamped there. phi(t) = exp(-t^2/2)/sqrt(2 pi)
# uses synth._vmath.exp. Everything is arithmetic without branches or table look-ups, so that LLVM
# vectorises the channel loops (numba gives no vector exp or gather here).
_L = 5.0
_X_MAX = 8.5
_INV_SQRT_2PI = 1.0 / math.sqrt(2.0 * math.pi)


@njit(cache=True, inline="always")
def _mills_m(y):
    """M(x) (x + _L) / _L as a polynomial in y = (x - _L) / (x + _L)."""
    p = -1.2759058279053083e-07
    p = p * y + -1.0267255279521523e-06
    p = p * y + -2.4885794252646457e-06
    p = p * y + 1.1932994663685267e-06
    p = p * y + 8.079104661012406e-06
    p = p * y + -2.49279481411915e-05
    p = p * y + -2.970860083317724e-05
    p = p * y + 0.0002731886855688533
    p = p * y + -0.0003999940518235834
    p = p * y + -0.0015006581863562258
    p = p * y + 0.010425100346855504
    p = p * y + -0.034650946764006735
    p = p * y + 0.08272894315469996
    p = p * y + -0.15718221510988334
    p = p * y + 0.2483094123146434
    p = p * y + -0.3335733190377916
    p = p * y + 0.385616209430632
    return p


@njit(cache=True, inline="always")
def _mills_h(y):
    """H(x) ((x + _L) / _L)^2 as a polynomial in y = (x - _L) / (x + _L)."""
    p = -5.30472372864641e-07
    p = p * y + -3.444574152110329e-06
    p = p * y + -5.802083426931015e-06
    p = p * y + 8.37838703526285e-06
    p = p * y + 1.639790489264411e-05
    p = p * y + -7.981004065905092e-05
    p = p * y + -1.0530890529694114e-05
    p = p * y + 0.0006058816720999965
    p = p * y + -0.001211700714442113
    p = p * y + -0.001761063741961806
    p = p * y + 0.016696059982167694
    p = p * y + -0.05409125671818305
    p = p * y + 0.1173798899636211
    p = p * y + -0.19192892660511654
    p = p * y + 0.24329497645443965
    p = p * y + -0.23275309254102589
    p = p * y + 0.14383790569368513
    return p


@njit(cache=True, inline="always")
def _expm1_neg(tau):
    """exp(-tau) - 1 to about 1 ulp, also for tiny tau (no cancellation in 1 - exp(-tau)):
    x = -tau = k ln 2 + r with |r| <= ln 2 / 2 (Cody & Waite 1980 reduction; synth._vmath),
    e^x - 1 = 2^k (e^r - 1) + (2^k - 1), exact in its last step for k = 0. |tau| is clamped
    at 700: exp(-700) ~ 1e-304 stands for the 0 of a larger optical depth, and an inversion
    deeper than -700 is clamped."""
    s, q = exp_parts(-tau)
    return s * q + (s - 1.0)


@njit(cache=True, inline="always")
def _phi_mills(t):
    """(phi(t), M(|t|), H(|t|)) with |t| clamped to _X_MAX."""
    x = min(abs(t), _X_MAX)
    w = 1.0 / (x + _L)
    y = (x - _L) * w
    lw = _L * w
    ph = vexp(-0.5 * x * x) * _INV_SQRT_2PI
    return ph, _mills_m(y) * lw, _mills_h(y) * lw * lw


@njit(cache=True, inline="always")
def _phi_cdf(t):
    """Gaussian CDF Phi(t)."""
    x = min(abs(t), _X_MAX)
    w = 1.0 / (x + _L)
    pm = vexp(-0.5 * x * x) * _INV_SQRT_2PI * _mills_m((x - _L) * w) * _L * w
    return 1.0 - pm if t >= 0.0 else pm


@njit(cache=True, inline="always")
def _g(t):
    """G(t) = t Phi(t) + phi(t), the antiderivative of Phi."""
    x = min(abs(t), _X_MAX)
    w = 1.0 / (x + _L)
    lw = _L * w
    h = _mills_h((x - _L) * w) * lw * lw
    return max(t, 0.0) + vexp(-0.5 * x * x) * _INV_SQRT_2PI * h


# The box average by a series in h = delta / (2 sigma), for h <= _H_SERIES. With
# F_h(t) = (1 / 2h) int_{-h}^{h} Phi(t + x) dx and Phi^(2n) = -He_{2n-1} phi (Hermite
# polynomials; Abramowitz & Stegun 1964, 26.2.4, 22.11.8), the Taylor series of Phi about t
# gives
#     F_h(t) = Phi(t) - phi(t) P_h(t),   P_h(t) = sum_{n>=1} h^2n / (2n+1)! He_{2n-1}(t),
# and gathering powers of t,
#     P_h(t) = t u sum_{k>=0} Q_k(u) (u t^2)^k,   u = h^2,
#     Q_k(u) = sum_{m>=0} (-u/2)^m / ((2k+1)! m! (2j) (2j+1)),   j = k + 1 + m,
# (Q_k(u) (2k+1)! is the moment int_0^1 x^(2k+1) (1 - x) exp(-u x^2 / 2) dx). Truncated at
# _SER_K terms in k and _SER_M + 1 in m it is exact to < 1e-15 absolute for h <= 1.25 and
# |t| <= _T_SER (checked against mpmath in tests/test_kernel.py). One Phi and a polynomial
# per channel edge replace the two G evaluations of the closed form.
_SER_K = 14
_SER_M = 18
_H_SERIES = 1.25
_T_SER = 10.0  # |t| is clamped here: beyond it phi(t) P_h(t) < 1e-17 for h <= _H_SERIES


def _series_table():
    """_SER_E[k, m]: the coefficient of u^m in Q_k(u)."""
    table = np.empty((_SER_K, _SER_M + 1))
    for k in range(_SER_K):
        for m in range(_SER_M + 1):
            j = k + 1 + m
            table[k, m] = (-0.5) ** m / (math.factorial(2 * k + 1) * math.factorial(m)
                                        * (2 * j) * (2 * j + 1))
    return table


_SER_E = _series_table()


@njit(cache=True, inline="always")
def _series_q(u, k):
    """Q_k(u) (Horner in u)."""
    p = _SER_E[k, _SER_M]
    for m in range(_SER_M - 1, -1, -1):
        p = p * u + _SER_E[k, m]
    return p


@njit(cache=True, inline="always")
def _box_series(t, u, q):
    """F_h(t) by the series above; ``q`` the tuple (Q_0(u), ..., Q_13(u)), u = h^2."""
    tc = min(max(t, -_T_SER), _T_SER)
    x = abs(tc)
    xm = min(x, _X_MAX)
    w = 1.0 / (xm + _L)
    ph = vexp(-0.5 * x * x) * _INV_SQRT_2PI
    pm = ph * _mills_m((xm - _L) * w) * _L * w
    cdf = 1.0 - pm if t >= 0.0 else pm
    sv = u * tc * tc
    p = q[13]
    p = p * sv + q[12]
    p = p * sv + q[11]
    p = p * sv + q[10]
    p = p * sv + q[9]
    p = p * sv + q[8]
    p = p * sv + q[7]
    p = p * sv + q[6]
    p = p * sv + q[5]
    p = p * sv + q[4]
    p = p * sv + q[3]
    p = p * sv + q[2]
    p = p * sv + q[1]
    p = p * sv + q[0]
    return cdf - ph * tc * u * p


@njit(cache=True, inline="always")
def _cdf(e, v0, sigma, delta):
    if delta < _SMALL_DELTA * sigma:
        return _phi_cdf((e - v0) / sigma)
    h = 0.5 * delta / sigma
    if h <= _H_SERIES:
        u = h * h
        q = (_series_q(u, 0), _series_q(u, 1), _series_q(u, 2), _series_q(u, 3),
             _series_q(u, 4), _series_q(u, 5), _series_q(u, 6), _series_q(u, 7),
             _series_q(u, 8), _series_q(u, 9), _series_q(u, 10), _series_q(u, 11),
             _series_q(u, 12), _series_q(u, 13))
        return _box_series((e - v0) / sigma, u, q)
    hv = 0.5 * delta
    inv = 1.0 / sigma
    return sigma * (_g((e - v0 + hv) * inv) - _g((e - v0 - hv) * inv)) / delta


@njit(cache=True)
def _cumulative_profile(e, v0, sigma, delta):
    out = np.empty(e.size)
    for i in range(e.size):
        out[i] = _cdf(e[i], v0, sigma, delta)
    return out


def cumulative_profile(e, v0, sigma, delta):
    """F(e) of the module docstring for an array of edges (km/s); used by tests."""
    e = np.ascontiguousarray(e, dtype=np.float64)
    return _cumulative_profile(e, float(v0), float(sigma), float(delta))


def transfer_columns(tau_int, src, v0, sigma, delta, e0, dv, nch, j_bg, out, tau_out):
    """Integrate ``ncol`` columns of ``nz`` cells into ``nch`` channels.

    Parameters (plain arrays; velocities in km/s, temperatures in K)
    ----------
    tau_int, src, v0, sigma, delta : (ncol, nz) float32
        Velocity-integrated optical depth of each cell (km/s), source function J(T_ex) (K),
        centroid, dispersion and velocity change across the cell.
    e0, dv : float
        First channel edge and channel width (ascending channels).
    nch : int
    j_bg : float
        J(T_bg) of the background (K).
    out : (ncol, nch) float32
        Receives T_B above the background, the emergent intensity averaged over each channel.
    tau_out : (ncol, nch) float32 or (0, 0)
        Receives the total optical depth averaged over each channel when it has ``ncol`` rows.
    """
    _transfer(tau_int, src, v0, sigma, delta, e0, dv, nch, j_bg, out, tau_out)


@njit(cache=True, inline="always")
def _wing(ti, sg):
    """t_w of the module docstring for a cell with tau_int ``ti`` and dispersion ``sg``."""
    tpk = abs(ti) / (_SQRT_2PI * sg)
    if tpk <= 1.0:
        return _T_THIN
    return math.sqrt(2.0 * math.log(tpk / WING_TAU))


def window_halfwidth(tau_int, sigma, delta):
    """Half-width (km/s) of the velocity window the kernel evaluates for each cell:
    t_w sigma + delta / 2 (module docstring), as float64 arrays; used by the benchmark and
    the tests."""
    ti, sg, dl = (np.asarray(a, dtype=np.float64) for a in (tau_int, sigma, delta))
    with np.errstate(divide="ignore", invalid="ignore"):
        tpk = np.abs(ti) / (_SQRT_2PI * sg)
        tw = np.sqrt(2.0 * np.log(np.maximum(tpk, 1.0) / WING_TAU))
    return tw * sg + 0.5 * dl


@njit(cache=True, inline="always")
def _n_sub(tau_int, sigma, c, nz, dv):
    """Sub-channels per channel for column ``c`` (see the module docstring)."""
    sg_min = math.inf
    tau_peak = 0.0
    for z in range(nz):
        ti = tau_int[c, z]
        if ti == 0.0:
            continue
        sg = sigma[c, z]
        if sg < sg_min:
            sg_min = sg
        tau_peak += abs(ti) / (_SQRT_2PI * sg)
    if tau_peak < TAU_LINEAR or sg_min == math.inf:
        return 1
    width = sg_min / math.sqrt(1.0 + 2.0 * math.log(1.0 + tau_peak))
    m = int(math.ceil(dv / width - 1e-9))
    if m < 1:
        return 1
    if m > MAX_SUB:
        return MAX_SUB
    return m


@njit(cache=True)
def _sub_all(tau_int, sigma, dv):
    ncol, nz = tau_int.shape
    out = np.empty(ncol, dtype=np.int64)
    for c in range(ncol):
        out[c] = _n_sub(tau_int, sigma, c, nz, dv)
    return out


def sub_channels(tau_int, sigma, dv):
    """Sub-channels per channel the kernel uses for each of ``ncol`` columns.

    ``tau_int``, ``sigma``: (ncol, nz) as in :func:`transfer_columns`; ``dv`` channel width.
    """
    return _sub_all(np.ascontiguousarray(tau_int, dtype=np.float32),
                    np.ascontiguousarray(sigma, dtype=np.float32), float(dv))


_LANES = 8  # the channel loops run over a multiple of this many entries (no scalar remainder)
_CHUNK = 64  # columns per parallel task (their scratch arrays are allocated once)


@njit(cache=True, parallel=True, fastmath={"contract"}, error_model="numpy")
def _transfer(tau_int, src, v0, sigma, delta, e0, dv, nch, j_bg, out, tau_out):
    ncol, nz = tau_int.shape
    want_tau = tau_out.shape[0] == ncol
    n_chunks = (ncol + _CHUNK - 1) // _CHUNK
    for b in prange(n_chunks):
        size = nch + 2 * _LANES  # grown when a column needs sub-channels
        inten = np.empty(size)
        trans = np.empty(size)
        tsum = np.empty(size if want_tau else 0)
        fe = np.empty(size)
        uu = np.empty(nz)
        coef = np.empty((_SER_K, nz))
        acc = np.empty(nz)
        for c in range(b * _CHUNK, min(ncol, (b + 1) * _CHUNK)):
            m = _n_sub(tau_int, sigma, c, nz, dv)
            if nch * m + 2 * _LANES > size:
                size = nch * m + 2 * _LANES
                inten = np.empty(size)
                trans = np.empty(size)
                tsum = np.empty(size if want_tau else 0)
                fe = np.empty(size)
            _column(tau_int, src, v0, sigma, delta, e0, dv, nch, j_bg, out, tau_out, c, nz,
                    m, want_tau, inten, trans, tsum, fe, uu, coef, acc)


@njit(cache=True, inline="always")
def _column(tau_int, src, v0, sigma, delta, e0, dv, nch, j_bg, out, tau_out, c, nz, m,
            want_tau, inten, trans, tsum, fe, uu, coef, acc):
    ns = nch * m
    sdv = dv / m
    for k in range(ns + 2 * _LANES):
        inten[k] = 0.0
        trans[k] = 1.0
    if want_tau:
        for k in range(ns + 2 * _LANES):
            tsum[k] = 0.0
    # the series coefficients Q_k(h^2) of every cell of the column, with the cells in the
    # vector lanes (h is capped where the closed form is used instead)
    for z in range(nz):
        hz = 0.5 * np.float64(delta[c, z]) / np.float64(sigma[c, z])
        uu[z] = min(hz * hz, _H_SERIES * _H_SERIES)
    for k in range(_SER_K):
        for z in range(nz):
            acc[z] = _SER_E[k, _SER_M]
        for mi in range(_SER_M - 1, -1, -1):
            e_km = _SER_E[k, mi]
            for z in range(nz):
                acc[z] = acc[z] * uu[z] + e_km
        for z in range(nz):
            coef[k, z] = acc[z]
    for z in range(nz):
        ti = tau_int[c, z]
        if ti == 0.0:
            continue
        s = np.float64(src[c, z])
        vc = np.float64(v0[c, z])
        sg = np.float64(sigma[c, z])
        dl = np.float64(delta[c, z])
        half = _wing(ti, sg) * sg + 0.5 * dl
        k_lo = int(math.floor((vc - half - e0) / sdv))
        k_hi = int(math.ceil((vc + half - e0) / sdv))
        if k_lo < 0:
            k_lo = 0
        if k_hi > ns:
            k_hi = ns
        if k_lo >= k_hi:
            continue
        n = k_hi - k_lo
        # the loops run over whole vectors; entries past the window are computed and unused
        n_pairs = (n + _LANES - 1) // _LANES * _LANES
        n_edges = (n + _LANES) // _LANES * _LANES  # >= n + 1
        inv = 1.0 / sg
        a0 = (e0 + k_lo * sdv - vc) * inv
        step = sdv * inv
        # the cumulative profile at the edges e0 + (k_lo + j) sdv, j = 0..n
        if dl < _SMALL_DELTA * sg:
            for j in range(n_edges):
                fe[j] = _phi_cdf(a0 + j * step)
        elif 0.5 * dl * inv <= _H_SERIES:
            u = uu[z]
            q = (coef[0, z], coef[1, z], coef[2, z], coef[3, z], coef[4, z], coef[5, z],
                 coef[6, z], coef[7, z], coef[8, z], coef[9, z], coef[10, z], coef[11, z],
                 coef[12, z], coef[13, z])
            for j in range(n_edges):
                fe[j] = _box_series(a0 + j * step, u, q)
        else:
            hs = 0.5 * dl * inv
            box = sg / dl
            for j in range(n_edges):
                t = a0 + j * step
                fe[j] = box * (_g(t + hs) - _g(t - hs))
        scale = ti / sdv
        # pairs j >= n get tau = 0 (no change; the arrays are padded for them)
        if want_tau:
            for j in range(n_pairs):
                tau = scale * (fe[j + 1] - fe[j]) if j < n else 0.0
                em = _expm1_neg(tau)  # exp(-tau) - 1
                k = k_lo + j
                tr = trans[k]
                inten[k] -= s * em * tr
                trans[k] = tr + tr * em
                tsum[k] += tau
        else:
            for j in range(n_pairs):
                tau = scale * (fe[j + 1] - fe[j]) if j < n else 0.0
                em = _expm1_neg(tau)
                k = k_lo + j
                tr = trans[k]
                inten[k] -= s * em * tr
                trans[k] = tr + tr * em
    inv_m = 1.0 / m
    for k in range(nch):
        acc = 0.0
        tacc = 0.0
        for j in range(k * m, (k + 1) * m):
            acc += inten[j] + j_bg * trans[j]
            if want_tau:
                tacc += tsum[j]
        out[c, k] = acc * inv_m - j_bg
        if want_tau:
            tau_out[c, k] = tacc * inv_m


def column_inputs(opacity, t_ex, vz, t_kin, sig_turb, depth_km, t0, v_sys, therm,
                  tau_int, src, v0, sigma, delta):
    """The kernel's (ncol, nz) float32 inputs of a block of (n, ny, nz) cells, in one parallel
    pass (computed in float64, rounded once):

    tau_int = opacity depth_km (km/s; opacity in s^-1, depth_km the cell depth),
    src = t0 / (exp(t0 / T_ex) - 1) (J(T_ex), K; t0 = h nu / k),
    v0 = v_z / 1e5 + v_sys (km/s), sigma = sqrt(therm T_kin + sigma_turb^2) / 1e5 (km/s;
    therm = k / m), delta = |dv_z/dz| / 1e5 per cell (km/s; central differences inside,
    one-sided at the two faces, as numpy.gradient). ``sig_turb`` (cm/s) has one value or one
    per cell."""
    _column_inputs(opacity, t_ex, vz, t_kin, sig_turb, float(depth_km), float(t0),
                   float(v_sys), float(therm), tau_int, src, v0, sigma, delta)


@njit(cache=True, parallel=True, nogil=True)
def _column_inputs(opacity, t_ex, vz, t_kin, sig_turb, depth_km, t0, v_sys, therm,
                   tau_int, src, v0, sigma, delta):
    n, ny, nz = vz.shape
    one_sig = sig_turb.size == 1
    for x in prange(n):
        for y in range(ny):
            c = x * ny + y
            for z in range(nz):
                tex = np.float64(t_ex[x, y, z])
                tau_int[c, z] = np.float64(opacity[x, y, z]) * depth_km
                src[c, z] = t0 / math.expm1(t0 / tex)
                v0[c, z] = np.float64(vz[x, y, z]) * 1e-5 + v_sys
                st = sig_turb[0] if one_sig else sig_turb[(x * ny + y) * nz + z]
                sigma[c, z] = math.sqrt(therm * np.float64(t_kin[x, y, z]) + st * st) * 1e-5
                if nz == 1:
                    g = 0.0
                elif z == 0:
                    g = np.float64(vz[x, y, 1]) - np.float64(vz[x, y, 0])
                elif z == nz - 1:
                    g = np.float64(vz[x, y, nz - 1]) - np.float64(vz[x, y, nz - 2])
                else:
                    g = 0.5 * (np.float64(vz[x, y, z + 1]) - np.float64(vz[x, y, z - 1]))
                delta[c, z] = abs(g) * 1e-5


def emission_counts(tau_int, src, delta, sigma, j_bg, fwhm_per_sigma):
    """[emitting cells, under-resolved emitting cells, emission weight, under-resolved weight]
    of (ncol, nz) cell arrays, the sums :func:`synth.transfer.synthesize.resolution_counts`
    defines (w = |src - j_bg| |tau_int|; under-resolved: delta > fwhm_per_sigma sigma), in one
    parallel pass without float64 temporaries."""
    shape = np.shape(tau_int)
    arrays = [np.ascontiguousarray(a).reshape(-1, shape[-1] if len(shape) else 1)
              for a in (tau_int, src, delta, sigma)]
    return _emission_counts(*arrays, float(j_bg), float(fwhm_per_sigma))


@njit(cache=True, parallel=True)
def _emission_counts(tau_int, src, delta, sigma, j_bg, fwhm_per_sigma):
    ncol, nz = tau_int.shape
    n_chunks = (ncol + _CHUNK - 1) // _CHUNK
    part = np.zeros((n_chunks, 4))
    for b in prange(n_chunks):
        n_emit = 0.0
        n_bad = 0.0
        w_all = 0.0
        w_bad = 0.0
        for c in range(b * _CHUNK, min(ncol, (b + 1) * _CHUNK)):
            for z in range(nz):
                w = abs(np.float64(src[c, z]) - j_bg) * abs(np.float64(tau_int[c, z]))
                if w > 0.0:
                    n_emit += 1.0
                    w_all += w
                    if delta[c, z] > fwhm_per_sigma * sigma[c, z]:
                        n_bad += 1.0
                        w_bad += w
        part[b, 0] = n_emit
        part[b, 1] = n_bad
        part[b, 2] = w_all
        part[b, 3] = w_bad
    return part.sum(axis=0)
