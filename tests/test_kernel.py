"""The line-of-sight kernel's arithmetic against reference libraries (scipy, numpy, mpmath).

The kernel evaluates the Gaussian CDF and its antiderivative through the Mills ratio
(Abramowitz & Stegun 1964, 26.2.5 and 7.1.2) with fitted polynomials, and exp(-tau) - 1 by
doubling; these tests refit the polynomials, check each piece against scipy.special /
numpy / mpmath, and check whole columns against an independent float64 formal solution
written with scipy.special.ndtr and numpy.expm1.
"""

import math

import numpy as np
import pytest
from numba import njit
from numpy.polynomial import chebyshev
from scipy.special import erfcx, ndtr

from synth.transfer import kernel as K
from synth.transfer.kernel import column_inputs, cumulative_profile, emission_counts, \
    sub_channels, transfer_columns


def _mills(x):
    """M(x) = (1 - Phi(x)) / phi(x) = sqrt(pi/2) erfcx(x / sqrt(2)) (scipy.special.erfcx)."""
    return math.sqrt(math.pi / 2) * erfcx(x / math.sqrt(2))


def _fit(power, f, degree=16):
    """Least squares on Chebyshev nodes of y = (x - L)/(x + L), the recipe of the kernel."""
    lo, hi = -1.0, (K._X_MAX - K._L) / (K._X_MAX + K._L)
    n = 600
    y = np.cos(np.pi * (np.arange(n) + 0.5) / n) * (hi - lo) / 2 + (hi + lo) / 2
    x = K._L * (1 + y) / (1 - y)
    c = chebyshev.cheb2poly(chebyshev.chebfit(y, f(x) * (1 + x / K._L) ** power, degree))
    return c[::-1]


@njit
def _eval_m(x):
    out = np.empty_like(x)
    for i in range(x.size):
        w = 1.0 / (x[i] + K._L)
        out[i] = K._mills_m((x[i] - K._L) * w) * K._L * w
    return out


@njit
def _eval_h(x):
    out = np.empty_like(x)
    for i in range(x.size):
        w = 1.0 / (x[i] + K._L)
        out[i] = K._mills_h((x[i] - K._L) * w) * (K._L * w) ** 2
    return out


@njit
def _eval_expm1(tau):
    out = np.empty_like(tau)
    for i in range(tau.size):
        out[i] = K._expm1_neg(tau[i])
    return out


@njit
def _eval_gauss_exp(x):
    out = np.empty_like(x)
    for i in range(x.size):
        out[i] = K.vexp(x[i])
    return out


def test_mills_polynomials_match_erfcx():
    """M and H = 1 - x M as the kernel evaluates them, against scipy.special.erfcx on
    [0, X_MAX], to 1e-12 relative; and the coefficients are those the fit recipe gives."""
    x = np.linspace(0.0, K._X_MAX, 8001)
    m_ref = _mills(x)
    np.testing.assert_allclose(_eval_m(x), m_ref, rtol=1e-12, atol=0)
    np.testing.assert_allclose(_eval_h(x), 1 - x * m_ref, rtol=1e-12, atol=0)
    # the constants in the kernel are the fit (to rounding of the printed digits)
    import inspect
    for fn, power, f in ((K._mills_m, 1, _mills), (K._mills_h, 2, lambda x: 1 - x * _mills(x))):
        src = inspect.getsource(fn.py_func)
        consts = [float(s.split()[-1]) for s in src.splitlines() if s.strip().startswith("p = ")]
        np.testing.assert_allclose(consts, _fit(power, f), rtol=1e-9, atol=1e-15)


def test_expm1_matches_numpy():
    """exp(-tau) - 1 against numpy.expm1 to 2 ulp (4.5e-16 relative) for |tau| <= 699,
    tiny tau included (no cancellation), inversions (tau < 0) included; beyond the clamp it
    is exp(-700) - 1 (or exp(700) - 1 for an inversion deeper than -700)."""
    rng = np.random.default_rng(4)
    tau = np.concatenate([np.logspace(-15, np.log10(699), 20000),
                          -np.logspace(-15, np.log10(699), 20000),
                          rng.uniform(-5, 5, 5000), rng.uniform(-699, 699, 5000)])
    np.testing.assert_allclose(_eval_expm1(tau), np.expm1(-tau), rtol=4.5e-16, atol=0)
    assert _eval_expm1(np.array([0.0]))[0] == 0.0
    assert _eval_expm1(np.array([1e4]))[0] == pytest.approx(np.expm1(-700.0), rel=1e-15)
    assert _eval_expm1(np.array([-1e4]))[0] == pytest.approx(np.expm1(700.0), rel=1e-15)


def test_gaussian_factor_matches_numpy_exp():
    """exp(x) on [-37, 0] (the Gaussian factor exp(-t^2/2) up to |t| = 8.5; the kernel's
    synth._vmath.exp) against numpy.exp, relative 2e-13."""
    x = np.linspace(-37.0, 0.0, 5001)
    np.testing.assert_allclose(_eval_gauss_exp(x), np.exp(x), rtol=2e-13, atol=0)


@pytest.mark.parametrize("delta", [0.0, 4e-4, 0.005, 0.3, 0.8, 0.999, 1.0, 1.003,
                                   2.0, 40.0])
def test_cumulative_profile_matches_mpmath(delta):
    """F(e), the Gaussian CDF box-averaged over a centroid spread delta (sigma 0.4: the
    series in h = delta / 2 sigma up to h = 1.25, i.e. delta = 1.0, the closed form above),
    against mpmath at 30
    digits (closed form sigma/delta [G(a + h) - G(a - h)], G(t) = t Phi(t) + phi(t)), to 1e-13
    absolute times max(1, sigma/delta) (the box average divides a difference of two G values
    by delta/sigma), and its channel differences (what the optical depths are made of) to
    1e-9 relative plus twice that absolute error."""
    mp = pytest.importorskip("mpmath")
    mp.mp.dps = 30
    v0, sigma = 0.1, 0.4
    e = np.linspace(v0 - 6 * sigma - delta, v0 + 6 * sigma + delta, 161)

    def g(t):
        return t * mp.ncdf(t) + mp.npdf(t)

    ref = []
    for x in e:
        a = (mp.mpf(float(x)) - v0) / sigma
        if delta == 0.0:
            ref.append(float(mp.ncdf(a)))
        else:
            h = mp.mpf(delta) / 2 / sigma
            ref.append(float(sigma * (g(a + h) - g(a - h)) / delta))
    ref = np.array(ref)
    got = cumulative_profile(e, v0, sigma, delta)
    amplify = max(1.0, sigma / max(delta, 1e-300))
    np.testing.assert_allclose(got, ref, atol=1e-13 * amplify, rtol=0)
    np.testing.assert_allclose(np.diff(got), np.diff(ref), atol=2e-13 * amplify, rtol=1e-9)


@njit
def _eval_series_part(t, h):
    """F_h(t) - Phi(t) as the kernel's series evaluates it."""
    u = h * h
    q = (K._series_q(u, 0), K._series_q(u, 1), K._series_q(u, 2), K._series_q(u, 3),
         K._series_q(u, 4), K._series_q(u, 5), K._series_q(u, 6), K._series_q(u, 7),
         K._series_q(u, 8), K._series_q(u, 9), K._series_q(u, 10), K._series_q(u, 11),
         K._series_q(u, 12), K._series_q(u, 13))
    out = np.empty_like(t)
    for i in range(t.size):
        out[i] = K._box_series(t[i], u, q) - K._phi_cdf(t[i])
    return out


@pytest.mark.parametrize("h", [1e-3, 0.05, 0.3, 0.7, 1.0, 1.25])
def test_box_series_matches_mpmath(h):
    """The series part of the box-averaged profile, F_h(t) - Phi(t) = -phi(t) P_h(t) (Taylor
    series of Phi with Hermite-polynomial derivatives, Abramowitz & Stegun 1964, 26.2.4 and
    22.11.8, from memory), against the closed form evaluated by mpmath at 30 digits
    ((G(t + h) - G(t - h)) / 2h - Phi(t), G(t) = t Phi(t) + phi(t)) to 1e-15 absolute on
    |t| <= 14 (the kernel clamps |t| at 10 beyond which the term is < 1e-17), up to the
    largest h the kernel gives it; the truncation grows fast beyond (3e-15 at h = 1.5, 8e-12
    at h = 2 with the same terms, from the same comparison), which is why h is capped."""
    mp = pytest.importorskip("mpmath")
    mp.mp.dps = 30
    assert h <= K._H_SERIES
    t = np.linspace(-14.0, 14.0, 561)
    hm = mp.mpf(h)

    def g(x):
        return x * mp.ncdf(x) + mp.npdf(x)

    ref = np.array([float((g(mp.mpf(x) + hm) - g(mp.mpf(x) - hm)) / (2 * hm)
                          - mp.ncdf(mp.mpf(x))) for x in t])
    np.testing.assert_allclose(_eval_series_part(t, h), ref, atol=1e-15, rtol=0)


def _reference_columns(tau_int, src, v0, sigma, delta, e0, dv, nch, j_bg, window=True):
    """The formal solution of the kernel docstring written independently in float64 numpy:
    F from scipy.special.ndtr, exp(-tau) - 1 from numpy.expm1, the kernel's sub-channel
    counts and (``window``) its velocity window, else every channel
    (Rybicki & Lightman 1979, eq. 1.29)."""
    def g(t):
        return t * ndtr(t) + np.exp(-0.5 * t * t) / np.sqrt(2 * np.pi)
    ncol, nz = tau_int.shape
    m_all = sub_channels(tau_int, sigma, dv)
    out = np.empty((ncol, nch))
    tau_out = np.empty((ncol, nch))
    for c in range(ncol):
        m = int(m_all[c])
        ns, sdv = nch * m, dv / m
        edges = e0 + np.arange(ns + 1) * sdv
        inten, trans, tsum = np.zeros(ns), np.ones(ns), np.zeros(ns)
        for z in range(nz):
            ti = float(tau_int[c, z])
            if ti == 0.0:
                continue
            s, vc, sg, dl = (float(a[c, z]) for a in (src, v0, sigma, delta))
            if window:
                half = float(K.window_halfwidth(ti, sg, dl))
                lo = max(int(np.floor((vc - half - e0) / sdv)), 0)
                hi = min(int(np.ceil((vc + half - e0) / sdv)), ns)
            else:
                lo, hi = 0, ns
            if lo >= hi:
                continue
            e = edges[lo:hi + 1]
            if dl < 1e-3 * sg:
                f = ndtr((e - vc) / sg)
            else:
                f = sg * (g((e - vc + dl / 2) / sg) - g((e - vc - dl / 2) / sg)) / dl
            tau = ti / sdv * np.diff(f)
            em = np.expm1(-tau)
            inten[lo:hi] -= s * em * trans[lo:hi]
            trans[lo:hi] *= 1 + em
            tsum[lo:hi] += tau
        out[c] = (inten + j_bg * trans).reshape(nch, m).mean(axis=1) - j_bg
        tau_out[c] = tsum.reshape(nch, m).mean(axis=1)
    return out, tau_out


def _random_columns(ncol, nz, seed, thick=1.0, invert=False):
    rng = np.random.default_rng(seed)
    tau_int = (rng.lognormal(-2.0, 1.5, (ncol, nz)) * thick).astype(np.float32)
    tau_int[rng.random((ncol, nz)) < 0.1] = 0.0
    if invert:  # a few inverted cells (negative opacity, negative J) as an LVG solution gives
        flip = rng.random((ncol, nz)) < 0.05
        tau_int[flip] = -0.05 * np.abs(tau_int[flip])
    src = rng.uniform(3.0, 40.0, (ncol, nz)).astype(np.float32)
    v0 = np.cumsum(rng.normal(0, 0.15, (ncol, nz)), axis=1).astype(np.float32)
    sigma = rng.uniform(0.08, 0.4, (ncol, nz)).astype(np.float32)
    delta = np.abs(rng.normal(0, 0.2, (ncol, nz))).astype(np.float32)
    delta[rng.random((ncol, nz)) < 0.1] = 0.0  # static cells take the plain CDF
    return tau_int, src, v0, sigma, delta


@pytest.mark.parametrize("case", ["thin", "thick", "inverted"])
def test_columns_match_float64_reference(case):
    """Whole columns (T_B and the channel-mean tau) against the independent float64 formal
    solution above: every voxel above 1e-4 of the peak to 2e-7 relative (float32 outputs
    round at 6e-8), all voxels to 1e-7 of the peak; the thick case uses sub-channels."""
    thick = {"thin": 0.01, "thick": 30.0, "inverted": 1.0}[case]
    cols = _random_columns(24, 60, seed=len(case), thick=thick, invert=case == "inverted")
    e0, dv, nch, j_bg = -4.0, 0.11, 72, 0.8
    if case == "thick":
        assert sub_channels(cols[0], cols[3], dv).max() > 1
    h = cols[4] / (2 * cols[3])   # the three profile forms all occur: plain CDF, series, closed
    assert (h == 0).any() and ((h > 0.01) & (h <= K._H_SERIES)).any() and (h > K._H_SERIES).any()
    out = np.empty((24, nch), np.float32)
    tau = np.empty((24, nch), np.float32)
    transfer_columns(*cols, e0, dv, nch, j_bg, out, tau)
    ref, ref_tau = _reference_columns(*cols, e0, dv, nch, j_bg)
    for got, want in ((out, ref), (tau, ref_tau)):
        peak = np.abs(want).max()
        assert np.abs(got - want).max() <= 1e-7 * peak
        big = np.abs(want) > 1e-4 * peak
        np.testing.assert_allclose(got[big], want[big], rtol=2e-7)


@pytest.mark.parametrize("case", ["thin", "thick", "inverted"])
def test_columns_match_every_channel(case):
    """Whole columns against the formal solution over every channel (no window, float64
    numpy): each of the nz cells misses at most WING_TAU of optical depth per channel (of
    its peak if thin), so the channel-mean tau is within nz WING_TAU and T_B within 3e-6 of
    the column's peak (we measure 1.2e-7, 1.6e-6 and 5.9e-7; a fixed 5-sigma window gives
    4.3e-7, 2.8e-4 and 1.1e-5)."""
    thick = {"thin": 0.01, "thick": 30.0, "inverted": 1.0}[case]
    cols = _random_columns(24, 60, seed=len(case), thick=thick, invert=case == "inverted")
    e0, dv, nch, j_bg = -4.0, 0.11, 72, 0.8
    out = np.empty((24, nch), np.float32)
    tau = np.empty((24, nch), np.float32)
    transfer_columns(*cols, e0, dv, nch, j_bg, out, tau)
    ref, ref_tau = _reference_columns(*cols, e0, dv, nch, j_bg, window=False)
    peak = np.abs(ref).max(axis=1, keepdims=True)
    assert (np.abs(out - ref) / peak).max() <= 3e-6
    assert np.abs(tau - ref_tau).max() <= 60 * K.WING_TAU + 6e-8 * ref_tau.max()


@pytest.mark.parametrize("tau_peak", [1e-3, 0.5, 30.0, 3e3, 3e5])
def test_window_misses_at_most_wing_tau(tau_peak):
    """The velocity window against the formal solution over every channel (no window): one
    cell, static and with a velocity change, alone in front of the background. The
    channel-mean optical depth a channel misses is at most WING_TAU min(tau_pk, 1), so T_B
    (S = 10 K, no background) is off by at most S times that (plus float32 rounding). A fixed
    window of 5 sigma misses 3.7e-6 tau_pk (phi(5) / phi(0) = exp(-12.5), the Gaussian;
    Abramowitz & Stegun 1964, 26.2.1)."""
    e0, dv, nch, j_bg = -3.0, 0.02, 300, 0.0
    for dl in (0.0, 0.3):
        sg = 0.2
        cols = [np.array([[x]], np.float32) for x in
                (tau_peak * np.sqrt(2 * np.pi) * sg, 10.0, 0.0, sg, dl)]
        out = np.empty((1, nch), np.float32)
        tau = np.empty((1, nch), np.float32)
        transfer_columns(*cols, e0, dv, nch, j_bg, out, tau)
        ref, ref_tau = _reference_columns(*cols, e0, dv, nch, j_bg, window=False)
        bound = K.WING_TAU * min(tau_peak, 1.0)
        assert np.abs(tau - ref_tau).max() <= 1.05 * bound + 6e-8 * ref_tau.max()
        assert np.abs(out - ref).max() <= 10.0 * 1.05 * bound + 6e-8 * np.abs(ref).max()
        # the window reaches where the omitted depth matters: wider for thicker cells
        reached = np.count_nonzero(tau)
        assert reached >= 2 * K.window_halfwidth(cols[0], sg, dl)[0, 0] / dv - 2


def test_emission_counts_match_numpy():
    """The parallel counts against the numpy expressions of resolution_counts."""
    tau_int, src, _, sigma, delta = _random_columns(50, 40, seed=9, invert=True)
    j_bg, fwhm = 0.8, float(np.sqrt(8 * np.log(2)))
    w = np.abs(src.astype(np.float64) - j_bg) * np.abs(tau_int.astype(np.float64))
    emitting = w > 0
    bad = emitting & (delta.astype(np.float64) > fwhm * sigma.astype(np.float64))
    want = [emitting.sum(), bad.sum(), w.sum(), w[bad].sum()]
    np.testing.assert_allclose(emission_counts(tau_int, src, delta, sigma, j_bg, fwhm), want,
                               rtol=1e-12)


@pytest.mark.parametrize("nz, per_cell_sigma", [(9, False), (9, True), (2, True), (1, False)])
def test_column_inputs_match_numpy(nz, per_cell_sigma):
    """The kernel's inputs made in one pass against the same formulas in float64 numpy, to
    float32 rounding (6e-8): J(T_ex) = t0 / expm1(t0 / T_ex) (Mangum & Shirley 2015, PASP 127,
    266, eq. 24; inverted, negative T_ex included), numpy.gradient of v_z along z (edge_order
    1; the library is the reference), and the 1-D dispersion sigma = sqrt(k T / m +
    sigma_turb^2) (thermal plus turbulent in quadrature; Wilson, Rohlfs & Hüttemeister 2013,
    Tools of Radio Astronomy, from memory)."""
    rng = np.random.default_rng(nz)
    n, ny = 3, 4
    shape = (n, ny, nz)
    opac = rng.uniform(1e-10, 1e-8, shape).astype(np.float32)
    t_ex = rng.uniform(3.0, 60.0, shape).astype(np.float32)
    t_ex[0, 0, 0] = -8.0
    vz = rng.normal(0, 2e5, shape).astype(np.float32)
    t_kin = rng.uniform(8.0, 40.0, shape).astype(np.float32)
    sig = rng.uniform(1e4, 5e4, shape) if per_cell_sigma else np.array(3e4)
    depth, t0, v_sys, therm = 3.1e13, 5.53, 42.0, 1.380649e-16 / (28.0 * 1.66053907e-24)
    got = [np.empty((n * ny, nz), np.float32) for _ in range(5)]
    column_inputs(opac, t_ex, vz, t_kin, sig.reshape(-1), depth, t0, v_sys, therm, *got)
    v = vz.astype(np.float64)
    grad = np.gradient(v, axis=2) if nz > 1 else np.zeros_like(v)
    want = [opac.astype(np.float64) * depth, t0 / np.expm1(t0 / t_ex.astype(np.float64)), v * 1e-5 + v_sys,
            np.sqrt(therm * t_kin.astype(np.float64) + np.square(sig)) * 1e-5,
            np.abs(grad) * 1e-5]
    for g, w in zip(got, want):
        np.testing.assert_allclose(g, w.reshape(n * ny, nz), rtol=6e-8, atol=0)
