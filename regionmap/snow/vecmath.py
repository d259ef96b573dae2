"""Elementary functions that the compiler can vectorise.

A call to the C library's ``exp`` inside a loop stops LLVM from vectorising the loop, so the
per-layer passes of the column kernel would run one layer at a time. :func:`exp_vec` uses only
multiplies, adds and bit operations, so a loop over layers that calls it runs 4 layers per
instruction on AVX2. Each lane computes exactly what a scalar call computes (no reassociation,
no fused operations), so results do not depend on where a layer falls in a vector.

Method: Cody & Waite (1980) argument reduction x = k ln 2 + r with |r| <= ln(2)/2 (ln 2 split
in a high part exact in 32 bits and a low correction), exp(r) by its Taylor series to r**12
(truncation below 4e-16 relative) in Horner form, and 2**k assembled from its exponent bits;
k is rounded to nearest by the 1.5 * 2**52 "magic number" addition (e.g. Muller et al. 2018,
Handbook of Floating-Point Arithmetic, 2nd ed., Sec. 11.2.2).
"""

from __future__ import annotations

from numba import njit, types
from numba.extending import intrinsic

__all__ = ["exp_vec"]

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
