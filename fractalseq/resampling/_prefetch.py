"""Software prefetch for numba kernels whose next reads are known ahead but lie far apart in memory.

``prefetch_item(arr, i)`` / ``prefetch_cell(arr, row, col)`` ask the processor to bring the cache line
holding that element in (LLVM's ``prefetch`` intrinsic: a read, kept in every level).  It changes no
value, only when the line arrives; an address outside the array is never dereferenced by a prefetch.
"""

from __future__ import annotations

from llvmlite import ir
from numba import types
from numba.core import cgutils
from numba.extending import intrinsic


def _emit(context, builder, aryty, ary_value, indices) -> None:
    ary = context.make_array(aryty)(context, builder, ary_value)
    ptr = cgutils.get_item_pointer(context, builder, aryty, ary, indices, wraparound=False)
    i8p = ir.IntType(8).as_pointer()
    i32 = ir.IntType(32)
    fn = cgutils.get_or_insert_function(builder.module, ir.FunctionType(ir.VoidType(), [i8p, i32, i32, i32]), "llvm.prefetch.p0")
    builder.call(fn, [builder.bitcast(ptr, i8p), ir.Constant(i32, 0), ir.Constant(i32, 3), ir.Constant(i32, 1)])


@intrinsic
def prefetch_item(typingctx, arr, i):
    """Prefetch the cache line of ``arr[i]`` (a 1-D array)."""
    sig = types.void(arr, i)

    def codegen(context, builder, signature, args):
        _emit(context, builder, signature.args[0], args[0], [args[1]])
        return context.get_dummy_value()

    return sig, codegen


@intrinsic
def prefetch_cell(typingctx, arr, row, col):
    """Prefetch the cache line of ``arr[row, col]`` (a 2-D array)."""
    sig = types.void(arr, row, col)

    def codegen(context, builder, signature, args):
        _emit(context, builder, signature.args[0], args[0], [args[1], args[2]])
        return context.get_dummy_value()

    return sig, codegen
