"""The product by T = (I - P)^-1 down a pedigree, and by T' up it, as PyTensor Ops.

The products are the pedigree's one recursion (:mod:`ped2g.pedigree.recursion`: its numba
kernels ``down_matrix`` and ``up_matrix``), here with the animals in the generation order of
:func:`ped2g.fit.latent.generation_layout`. Each Op is the other's gradient:
``d<a, h>/dm = T' h`` for ``a = T m``, and the reverse.

Why Ops and not a graph: the recursion written as PyTensor operations is one gather and one
``set_subtensor`` per generation, so the graph, and with it numba's compile time, grows with the
depth of the pedigree. These kernels are two functions whatever the depth, compiled once and
cached on disk by numba.

Parents are given as positions in the same order, ``n`` (the number of animals) for an unknown
parent. A parent that does not come before its offspring is an error (ValueError).
"""

from __future__ import annotations

import numpy as np
import pytensor.tensor as pt
from pytensor.gradient import DisconnectedType
from pytensor.graph.basic import Apply
from pytensor.graph.op import Op

from ..pedigree import recursion
from ..pedigree.recursion import down_matrix, up_matrix
from .numba_ops import register_kernel


class PedigreeProduct(Op):
    """``T m`` (``transpose=False``) or ``T' m`` (``transpose=True``) for m (animals, traits)."""

    __props__ = ("transpose",)

    def __init__(self, transpose: bool = False):
        self.transpose = bool(transpose)

    def make_node(self, m, sire, dam):
        m = pt.as_tensor_variable(m, dtype="float64")
        sire = pt.as_tensor_variable(sire, dtype="int64")
        dam = pt.as_tensor_variable(dam, dtype="int64")
        if m.ndim != 2 or sire.ndim != 1 or dam.ndim != 1:
            raise TypeError("PedigreeProduct needs m (animals, traits), sire (animals,) and dam (animals,)")
        return Apply(self, [m, sire, dam], [pt.matrix(dtype="float64", shape=m.type.shape)])

    def perform(self, node, inputs, output_storage):
        m, sire, dam = inputs
        kernel = up_matrix if self.transpose else down_matrix
        output_storage[0][0] = kernel(np.asarray(m, dtype=np.float64), np.asarray(sire, dtype=np.int64),
                                      np.asarray(dam, dtype=np.int64))

    def infer_shape(self, fgraph, node, shapes):
        return [shapes[0]]

    def connection_pattern(self, node):
        return [[True], [False], [False]]

    def L_op(self, inputs, outputs, output_grads):
        _, sire, dam = inputs
        other = up_product if not self.transpose else down_product
        return [other(output_grads[0], sire, dam), DisconnectedType()(), DisconnectedType()()]


down_product = PedigreeProduct(transpose=False)
up_product = PedigreeProduct(transpose=True)


def _product(op):
    if op.transpose:
        def product(m, sire, dam):
            return up_matrix(m, sire, dam)
    else:
        def product(m, sire, dam):
            return down_matrix(m, sire, dam)
    return product


register_kernel(PedigreeProduct, [__file__, recursion.__file__], _product)
