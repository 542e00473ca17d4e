"""Elementary functions for numba loops that LLVM can vectorise: no libm calls (numba has no
vector libm here), no branches (selects only), 2^k built from its bits (synth._bits). Each is
within a few ulp of numpy over the ranges below (tests/test_vmath.py).

- ``exp_parts(x)``: (2^k, e^r - 1) with x = k ln 2 + r, |r| <= ln 2 / 2 (Cody & Waite 1980
  range reduction, ln 2 in two parts; e^r - 1 by its Taylor series to 13th order), x clamped
  to [-700, 700]. e^x = 2^k (e^r - 1) + 2^k, and e^x - 1 = 2^k (e^r - 1) + (2^k - 1) without
  cancellation for small x.
- ``exp(x)``: e^x for |x| <= 700.
- ``ln(x)``: natural log of a positive normal float64: x = 2^e m with m in [sqrt(1/2), sqrt(2)),
  ln m = 2 atanh(s), s = (m - 1) / (m + 1), |s| <= 0.172, by its series to s^23
  (Abramowitz & Stegun 1964, 4.1.27 for ln((1 + s)/(1 - s))).
- ``log1p(y)``: ln(1 + y) for y > -1, with the correction ((1 + y) - 1 - y) / (1 + y) for the
  rounding of 1 + y (Goldberg 1991, "What every computer scientist should know about
  floating-point arithmetic", theorem 4).
- ``sinh(x)``: the odd Taylor series to x^19 / 19! for |x| < 1, (e^|x| - e^-|x|) / 2 above,
  |x| <= 700.
"""

import math

import numpy as np
from numba import njit

from ._bits import bits_to_float, float_to_bits

__all__ = ["exp_parts", "exp", "ln", "log1p", "sinh"]

_LOG2E = 1.4426950408889634
# ln 2 in two parts (the fdlibm constants): k * _LN2_HI is exact for |k| < 2^20
_LN2_HI = 6.93147180369123816490e-01
_LN2_LO = 1.90821492927058770002e-10
_SQRT2 = 1.4142135623730951
_CLAMP = 700.0


@njit(cache=True, inline="always")
def exp_parts(x):
    """(2^k, e^r - 1) with x = k ln 2 + r (module docstring); x clamped to +-700."""
    x = min(max(x, -_CLAMP), _CLAMP)
    kf = math.floor(x * _LOG2E + 0.5)
    r = (x - kf * _LN2_HI) - kf * _LN2_LO
    p = 1.0 / 6227020800.0
    p = p * r + 1.0 / 479001600.0
    p = p * r + 1.0 / 39916800.0
    p = p * r + 1.0 / 3628800.0
    p = p * r + 1.0 / 362880.0
    p = p * r + 1.0 / 40320.0
    p = p * r + 1.0 / 5040.0
    p = p * r + 1.0 / 720.0
    p = p * r + 1.0 / 120.0
    p = p * r + 1.0 / 24.0
    p = p * r + 1.0 / 6.0
    p = p * r + 0.5
    q = (p * r + 1.0) * r
    return bits_to_float((np.int64(kf) + 1023) << 52), q


@njit(cache=True, inline="always")
def exp(x):
    """e^x for |x| <= 700."""
    s, q = exp_parts(x)
    return s * q + s


@njit(cache=True, inline="always")
def ln(x):
    """Natural log of a positive normal float64."""
    b = float_to_bits(x)
    e = (b >> 52) - 1023
    m = bits_to_float((b & 0xFFFFFFFFFFFFF) | 0x3FF0000000000000)
    big = m > _SQRT2
    m = m * 0.5 if big else m
    ef = np.float64(e + 1) if big else np.float64(e)
    s = (m - 1.0) / (m + 1.0)
    z = s * s
    p = 1.0 / 23.0
    p = p * z + 1.0 / 21.0
    p = p * z + 1.0 / 19.0
    p = p * z + 1.0 / 17.0
    p = p * z + 1.0 / 15.0
    p = p * z + 1.0 / 13.0
    p = p * z + 1.0 / 11.0
    p = p * z + 1.0 / 9.0
    p = p * z + 1.0 / 7.0
    p = p * z + 1.0 / 5.0
    p = p * z + 1.0 / 3.0
    return ef * _LN2_HI + (2.0 * s + (2.0 * s * z * p + ef * _LN2_LO))


@njit(cache=True, inline="always")
def log1p(y):
    """ln(1 + y) for y > -1."""
    u = 1.0 + y
    return ln(u) - ((u - 1.0) - y) / u


@njit(cache=True, inline="always")
def sinh(x):
    """sinh(x) for |x| <= 700."""
    a = abs(x)
    z = a * a
    p = 1.0 / 121645100408832000.0
    p = p * z + 1.0 / 355687428096000.0
    p = p * z + 1.0 / 1307674368000.0
    p = p * z + 1.0 / 6227020800.0
    p = p * z + 1.0 / 39916800.0
    p = p * z + 1.0 / 362880.0
    p = p * z + 1.0 / 5040.0
    p = p * z + 1.0 / 120.0
    p = p * z + 1.0 / 6.0
    small = a + a * z * p
    ea = exp(a)
    large = 0.5 * (ea - 1.0 / ea)
    r = small if a < 1.0 else large
    return r if x >= 0.0 else -r
