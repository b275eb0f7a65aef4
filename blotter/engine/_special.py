"""Exponential, normal density and normal CDF for the compiled kernels, written so that LLVM
vectorizes the loops that call them (libm's exp and erfc are opaque calls it cannot).

``fexp``: Cody–Waite reduction x = k ln 2 + t, |t| <= ln 2 / 2, then e^t by its Taylor
polynomial of degree 13 and 2^k by building the float's bits. ``ncdf``: Φ(−|x|) =
½ erfcx(|x|/√2) e^{−x²/2}, with erfcx(z) = C(t) / (z + 3) and C a 25-term Chebyshev series in
t = (z − 3)/(z + 3), which maps z in [0, ∞) onto [−1, 1), evaluated as a polynomial in t by
Estrin's scheme (``ERFCX_POLY``). Errors against SciPy are measured by
``tests/engine/test_special.py`` and stated in ACCURACY.md.
"""

from __future__ import annotations

import numpy as np
from llvmlite import ir
from numba import njit, types
from numba.extending import intrinsic

_LOG2E = 1.4426950408889634
_LN2_HI = 6.93147180369123816490e-01
"""ln 2 rounded to 32 significant bits, so k × _LN2_HI is exact for |k| < 2^21."""
_LN2_LO = 1.90821492927058770002e-10
_ROUND = 6755399441055744.0
"""1.5 × 2^52: adding and subtracting it rounds a double of magnitude below 2^51 to an integer."""
EXP_MIN = -708.0
"""Below this fexp returns 0 (e^-708 ≈ 3e-308; subnormal results are not needed here)."""
EXP_MAX = 709.0
"""Above this fexp returns +inf."""
_INV_SQRT2 = 0.7071067811865476
_INV_SQRT_2PI = 0.3989422804014327

ERFCX_POLY = np.array([
    1.0740069070883397003, -0.88339445316988346133, 0.5902283571041023341,
    -0.31046726190058322251, 0.11952776128726767066, -0.026827234624051415689,
    -0.0012124166268458320224, 0.0030340619960581382021, -0.00054830969437658363103,
    -0.00027677781402214097085, 0.00010756149572800276909, 0.000030398051585726808394,
    -0.000017470579898367112443, -4.7490282761035752121e-6, 2.7653934843589291637e-6,
    9.9881701429109740059e-7, -4.0795588546379700614e-7, -2.3385368009140524357e-7,
    4.6057900194248514805e-8, 5.1182421970120698123e-8, -9.8183566055919013478e-10,
    -8.6937742690358282031e-9, -9.783136387840650949e-10, 8.1106872961899929362e-10,
    1.6421143016942985511e-10,
])
"""Coefficients of 1, t, t², ... of (z + 3) erfcx(z) with t = (z − 3)/(z + 3): the 25-term
Chebyshev series of that function in t (interpolated at 96 Chebyshev points in 40-digit
arithmetic; its tail beyond 25 terms is below 1e-17) written in powers of t. The magnitudes of
the coefficients sum to about 3, the function's size, so the power form loses nothing to
cancellation."""
_M0 = float(ERFCX_POLY[0])
_M1 = float(ERFCX_POLY[1])
_M2 = float(ERFCX_POLY[2])
_M3 = float(ERFCX_POLY[3])
_M4 = float(ERFCX_POLY[4])
_M5 = float(ERFCX_POLY[5])
_M6 = float(ERFCX_POLY[6])
_M7 = float(ERFCX_POLY[7])
_M8 = float(ERFCX_POLY[8])
_M9 = float(ERFCX_POLY[9])
_M10 = float(ERFCX_POLY[10])
_M11 = float(ERFCX_POLY[11])
_M12 = float(ERFCX_POLY[12])
_M13 = float(ERFCX_POLY[13])
_M14 = float(ERFCX_POLY[14])
_M15 = float(ERFCX_POLY[15])
_M16 = float(ERFCX_POLY[16])
_M17 = float(ERFCX_POLY[17])
_M18 = float(ERFCX_POLY[18])
_M19 = float(ERFCX_POLY[19])
_M20 = float(ERFCX_POLY[20])
_M21 = float(ERFCX_POLY[21])
_M22 = float(ERFCX_POLY[22])
_M23 = float(ERFCX_POLY[23])
_M24 = float(ERFCX_POLY[24])


@intrinsic
def _bits_to_float(typingctx, bits):  # type: ignore[no-untyped-def]
    """The float64 whose IEEE bits are the int64 ``bits``."""
    sig = types.float64(types.int64)

    def codegen(context, builder, signature, args):  # type: ignore[no-untyped-def]
        return builder.bitcast(args[0], ir.DoubleType())

    return sig, codegen



@intrinsic
def _float_to_bits(typingctx, x):  # type: ignore[no-untyped-def]
    """The IEEE bits of the float64 ``x`` as a uint64."""
    sig = types.uint64(types.float64)

    def codegen(context, builder, signature, args):  # type: ignore[no-untyped-def]
        return builder.bitcast(args[0], ir.IntType(64))

    return sig, codegen


@njit(cache=True, nogil=True, error_model="numpy", inline="always")
def bits(x: float) -> np.uint64:
    """The IEEE bits of ``x`` (for hashing exact values)."""
    return _float_to_bits(x)  # type: ignore[call-arg]


@njit(cache=True, nogil=True, error_model="numpy", inline="always", fastmath={"contract"})
def fexp(x: float) -> float:
    """e^x to within 1 unit in the last place for x in [EXP_MIN, EXP_MAX]; 0 below, inf above,
    NaN for NaN."""
    xc = min(max(x, EXP_MIN - 1.0), EXP_MAX + 1.0)
    kf = (xc * _LOG2E + _ROUND) - _ROUND
    t = (xc - kf * _LN2_HI) - kf * _LN2_LO
    p = 1.0 / 6227020800.0
    p = p * t + 1.0 / 479001600.0
    p = p * t + 1.0 / 39916800.0
    p = p * t + 1.0 / 3628800.0
    p = p * t + 1.0 / 362880.0
    p = p * t + 1.0 / 40320.0
    p = p * t + 1.0 / 5040.0
    p = p * t + 1.0 / 720.0
    p = p * t + 1.0 / 120.0
    p = p * t + 1.0 / 24.0
    p = p * t + 1.0 / 6.0
    p = p * t + 0.5
    p = p * t + 1.0
    p = p * t + 1.0
    k = np.int64(kf)
    y = p * _bits_to_float((k + 1023) << 52)  # type: ignore[call-arg]
    if x < EXP_MIN:
        y = 0.0
    if x > EXP_MAX:
        y = np.inf
    if x != x:
        y = x
    return y


@njit(cache=True, nogil=True, error_model="numpy", inline="always", fastmath={"contract"})
def erfcx_series(z: float) -> float:
    """e^{z²} erfc(z) for z >= 0: the series ``ERFCX_CHEB`` as a polynomial in t (``_M``)
    evaluated by Estrin's scheme, whose short dependency chains keep the vector units busy."""
    inv = 1.0 / (z + 3.0)
    t = (z - 3.0) * inv
    t2 = t * t
    t4 = t2 * t2
    t8 = t4 * t4
    t16 = t8 * t8
    p0 = _M0 + _M1 * t
    p1 = _M2 + _M3 * t
    p2 = _M4 + _M5 * t
    p3 = _M6 + _M7 * t
    p4 = _M8 + _M9 * t
    p5 = _M10 + _M11 * t
    p6 = _M12 + _M13 * t
    p7 = _M14 + _M15 * t
    p8 = _M16 + _M17 * t
    p9 = _M18 + _M19 * t
    p10 = _M20 + _M21 * t
    p11 = _M22 + _M23 * t
    q0 = p0 + p1 * t2
    q1 = p2 + p3 * t2
    q2 = p4 + p5 * t2
    q3 = p6 + p7 * t2
    q4 = p8 + p9 * t2
    q5 = p10 + p11 * t2
    o0 = q0 + q1 * t4
    o1 = q2 + q3 * t4
    o2 = q4 + q5 * t4
    h0 = o0 + o1 * t8
    h1 = o2 + _M24 * t8
    return (h0 + h1 * t16) * inv


@njit(cache=True, nogil=True, error_model="numpy", inline="always", fastmath={"contract"})
def ncdf(x: float) -> float:
    """Standard normal CDF Φ(x)."""
    a = abs(x)
    tail = 0.5 * erfcx_series(a * _INV_SQRT2) * fexp(-0.5 * a * a)
    return tail if x < 0.0 else 1.0 - tail


@njit(cache=True, nogil=True, error_model="numpy", inline="always", fastmath={"contract"})
def npdf(x: float) -> float:
    """Standard normal density φ(x)."""
    return _INV_SQRT_2PI * fexp(-0.5 * x * x)


@njit(cache=True, nogil=True, error_model="numpy", inline="always", fastmath={"contract"})
def ncdf_and_pdf(x: float) -> tuple[float, float]:
    """Φ(x) and φ(x), sharing one exponential."""
    a = abs(x)
    e = fexp(-0.5 * a * a)
    tail = 0.5 * erfcx_series(a * _INV_SQRT2) * e
    return (tail if x < 0.0 else 1.0 - tail), _INV_SQRT_2PI * e
