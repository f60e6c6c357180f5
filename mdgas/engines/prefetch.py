"""A cache prefetch hint for the numba kernels.

``prefetch(arr, i)`` compiles to one prefetch instruction for the element ``arr[i]``
(LLVM's ``llvm.prefetch``): the memory system starts loading that cache line while the
kernel goes on with other work. It is only a hint — it never changes a result and does
nothing outside compiled code. Worth it where the next access is known well ahead and
would otherwise miss the cache, as for the sphere of the next event in ``events.py``.
"""

from __future__ import annotations

from llvmlite import binding, ir
from numba import types
from numba.core import cgutils
from numba.extending import intrinsic

#: LLVM names the intrinsic by its pointer type: opaque ``ptr`` from LLVM 15 on.
_NAME = "llvm.prefetch.p0" if binding.llvm_version_info[0] >= 15 else "llvm.prefetch.p0i8"


@intrinsic
def prefetch(typingctx, arr, idx):
    """Start loading ``arr[idx]`` into all cache levels (read access); no bounds check."""
    sig = types.void(arr, idx)

    def codegen(context, builder, signature, args):
        aryty = signature.args[0]
        ary = context.make_array(aryty)(context, builder, args[0])
        ptr = cgutils.get_item_pointer(context, builder, aryty, ary, [args[1]],
                                       wraparound=False)
        i32 = ir.IntType(32)
        byte_ptr = ir.IntType(8).as_pointer()
        fn = cgutils.get_or_insert_function(
            builder.module, ir.FunctionType(ir.VoidType(), [byte_ptr, i32, i32, i32]),
            _NAME)
        # read access, highest temporal locality, data (not instruction) cache
        builder.call(fn, [builder.bitcast(ptr, byte_ptr), i32(0), i32(3), i32(1)])
        return context.get_dummy_value()

    return sig, codegen
