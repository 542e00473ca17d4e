"""IEEE 754 bit patterns of float64 values inside numba kernels (plain LLVM bitcasts, which
vectorise where a libm call or a float max reduction does not).

- ``bits_to_float(b)``: the float64 whose bit pattern is the int64 ``b``; e.g. 2^k is
  ``bits_to_float((k + 1023) << 52)`` for -1022 <= k <= 1023 (IEEE 754 binary64 layout).
- ``float_to_bits(x)``: the int64 bit pattern of ``x``. For x >= 0 (and not NaN) the patterns
  order as the values do, so the max of non-negative floats is the max of their patterns,
  an integer reduction that LLVM vectorises.
"""

from llvmlite import ir
from numba import types
from numba.extending import intrinsic

__all__ = ["bits_to_float", "float_to_bits"]


@intrinsic
def bits_to_float(typingctx, bits):
    def codegen(context, builder, signature, args):
        return builder.bitcast(args[0], ir.DoubleType())
    return types.float64(types.int64), codegen


@intrinsic
def float_to_bits(typingctx, x):
    def codegen(context, builder, signature, args):
        return builder.bitcast(args[0], ir.IntType(64))
    return types.int64(types.float64), codegen
