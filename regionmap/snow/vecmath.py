"""Elementary functions that the compiler can vectorise.

A call to the C library's ``exp``, ``log`` or ``pow`` inside a loop stops LLVM from
vectorising the loop, so the per-layer passes of the column kernel would run one layer at a
time. :func:`exp_vec` and :func:`log_vec` use only multiplies, adds, divisions and bit
operations, so a loop over layers that calls them runs 4 layers per instruction on AVX2 (8 on
AVX-512). Each lane computes exactly what a scalar call computes (no reassociation, no fused
operations), so results do not depend on where a layer falls in a vector.

exp: Cody & Waite (1980) argument reduction x = k ln 2 + r with |r| <= ln(2)/2 (ln 2 split
in a high part exact in 32 bits and a low correction), exp(r) by its Taylor series to r**12
(truncation below 4e-16 relative) in Horner form, and 2**k assembled from its exponent bits;
k is rounded to nearest by the 1.5 * 2**52 "magic number" addition (e.g. Muller et al. 2018,
Handbook of Floating-Point Arithmetic, 2nd ed., Sec. 11.2.2).

log: x = 2**k m with m in [sqrt(2)/2, sqrt(2)) from the exponent and significand bits, then
log m = 2 atanh(s) = 2 (s + s**3/3 + s**5/5 + ...) with s = (m - 1)/(m + 1), |s| <= 0.172,
to s**23 (truncation below 1e-17 relative), and log x = k ln 2 + log m with ln 2 split as
above (the same reduction, e.g. Muller et al. 2018, Sec. 11.3).
"""

from __future__ import annotations

from numba import njit, types
from numba.extending import intrinsic

__all__ = ["exp_vec", "log_vec", "padded_count", "LANES"]

_LOG2_E = 1.4426950408889634
_LN2_HI = 0.6931471803691238  # ln 2 rounded to 32 significant bits: k * _LN2_HI is exact
_LN2_LO = 1.9082149292705877e-10  # ln 2 - _LN2_HI
_ROUND_MAGIC = 6755399441055744.0  # 1.5 * 2**52: adding it rounds |x| < 2**51 to an integer
_ROUND_MAGIC_BITS = 0x4338000000000000  # its IEEE-754 bit pattern
_X_MIN, _X_MAX = -708.0, 709.0  # 2**k stays a normal number


@intrinsic
def _bits_to_float64(typingctx, bits):
    """Reinterpret an int64 bit pattern as a float64 (no conversion)."""
    sig = types.float64(types.int64)

    def codegen(context, builder, signature, args):
        return builder.bitcast(args[0], context.get_value_type(types.float64))

    return sig, codegen


@intrinsic
def _float64_to_bits(typingctx, x):
    """Reinterpret a float64 as its int64 bit pattern (no conversion)."""
    sig = types.int64(types.float64)

    def codegen(context, builder, signature, args):
        return builder.bitcast(args[0], context.get_value_type(types.int64))

    return sig, codegen


@njit(cache=True, nogil=True, error_model="numpy", inline="always")
def exp_vec(x):
    """e**x for float64 ``x``, within 1e-15 relative of the C library's exp.

    Arguments are clipped to [-708, 709] (the result stays a normal number; the kernel's
    arguments lie far inside). NaN in gives NaN out. See the module notes for the method.
    """
    x = min(max(x, _X_MIN), _X_MAX)
    shifted = x * _LOG2_E + _ROUND_MAGIC
    k = shifted - _ROUND_MAGIC
    r = (x - k * _LN2_HI) - k * _LN2_LO
    p = 1.0 / 479001600.0
    p = 1.0 / 39916800.0 + r * p
    p = 1.0 / 3628800.0 + r * p
    p = 1.0 / 362880.0 + r * p
    p = 1.0 / 40320.0 + r * p
    p = 1.0 / 5040.0 + r * p
    p = 1.0 / 720.0 + r * p
    p = 1.0 / 120.0 + r * p
    p = 1.0 / 24.0 + r * p
    p = 1.0 / 6.0 + r * p
    p = 0.5 + r * p
    p = 1.0 + r * p
    p = 1.0 + r * p
    k_int = _float64_to_bits(shifted) - _ROUND_MAGIC_BITS
    return p * _bits_to_float64((k_int + 1023) << 52)


_SQRT_HALF = 0.7071067811865476
_EXPONENT_MASK = 0x7FF0000000000000
_ONE_BITS = 0x3FF0000000000000  # the bit pattern of 1.0


@njit(cache=True, nogil=True, error_model="numpy", inline="always")
def log_vec(x):
    """Natural logarithm of a positive normal float64 ``x``, within 2 ulp of the C library's.

    Zero, negative, subnormal and non-finite arguments give meaningless results (the
    kernel's arguments are positive and far from those limits). See the module notes.
    """
    bits = _float64_to_bits(x)
    k = ((bits & _EXPONENT_MASK) >> 52) - 1023
    m = _bits_to_float64((bits & ~_EXPONENT_MASK) | _ONE_BITS)  # in [1, 2)
    low = m < 2.0 * _SQRT_HALF
    m = m if low else 0.5 * m
    kf = float(k) if low else float(k + 1)
    s = (m - 1.0) / (m + 1.0)
    z = s * s
    p = 1.0 / 23.0
    p = 1.0 / 21.0 + z * p
    p = 1.0 / 19.0 + z * p
    p = 1.0 / 17.0 + z * p
    p = 1.0 / 15.0 + z * p
    p = 1.0 / 13.0 + z * p
    p = 1.0 / 11.0 + z * p
    p = 1.0 / 9.0 + z * p
    p = 1.0 / 7.0 + z * p
    p = 1.0 / 5.0 + z * p
    p = 1.0 / 3.0 + z * p
    log_m = 2.0 * s + 2.0 * s * (z * p)
    return kf * _LN2_HI + (kf * _LN2_LO + log_m)


#: float64 lanes of the widest vectors the loops over layers compile to here (AVX-512); a
#: multiple of the AVX2 width, so the padding below also fits 4-lane machines
LANES = 8


@njit(cache=True, nogil=True, error_model="numpy", inline="always")
def padded_count(n):
    """``n`` rounded up to a whole number of vectors (:data:`LANES`).

    LLVM vectorises a loop over layers in whole vectors and finishes the last few layers one
    at a time, and for short loops (about 36 layers) those few scalar iterations cost about
    as much as the vectors. A loop that maps each layer to itself, reading and writing only
    that layer's slots, can instead run to ``padded_count(n)``: the slots above the top
    layer are scratch (arrays are allocated to ``padded_count(capacity)``), never read as
    layers and never saved.
    """
    return (n + (LANES - 1)) // LANES * LANES
