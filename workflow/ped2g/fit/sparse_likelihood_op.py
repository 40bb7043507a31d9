"""PyTensor Op around the sparse engine's log-likelihood (:mod:`ped2g.fit.sparse_mme`,
docs/methods.md §2.14).

One Op, five outputs: the log-likelihood and its gradients with respect to the residuals
``y - X b`` (missing cells 0), G, R and the stacked extra-effect covariances (n_c, t, t). The
gradient outputs are what :meth:`SparseMMELogp.L_op` returns, so a NUTS gradient costs one kernel
call (as in :mod:`ped2g.fit.marginal_likelihood_op`). The design's structural arrays (index maps,
the pattern and supernodes of the factor) are inputs of the Op, so they enter the model as
``pm.Data`` and never as constants compiled into the graph.
"""

from __future__ import annotations

import numpy as np
import pytensor.tensor as pt
from pytensor.gradient import DisconnectedType
from pytensor.graph.basic import Apply
from pytensor.graph.op import Op

from . import sparse_factor, sparse_mme
from .numba_ops import register_kernel
from .sparse_mme import INPUT_NAMES, canonical_logp_and_grad, mme_logp_and_grad

#: Kind of each structural input (in the order of :data:`ped2g.fit.sparse_mme.INPUT_NAMES`): integer
#: ("i", any width: ``pm.Data`` stores integers at PyMC's integer precision, and the numba kernel
#: compiles for whichever it gets) or float64 ("f").
INPUT_KINDS = "iifiiiiiiiiiiif"
INPUT_NDIMS = (1, 1, 1, 1, 1, 1, 1, 1, 1, 1, 1, 3, 2, 1, 1)


class SparseMMELogp(Op):
    """Outputs (log L, d/d resid, d/dG, d/dR, d/dcovs); only the first is differentiable.

    ``canonical``: the kernel is :func:`ped2g.fit.sparse_mme.canonical_logp_and_grad` and the
    structural inputs are the one-trait design's (``Design.likelihood_inputs``)."""

    __props__ = ("canonical",)

    def __init__(self, canonical: bool = False):
        self.canonical = bool(canonical)

    def make_node(self, resid, G, R, covs, *structure):
        if len(structure) != len(INPUT_NAMES):
            raise TypeError(f"SparseMMELogp needs {len(INPUT_NAMES)} structural inputs ({', '.join(INPUT_NAMES)})")
        resid = pt.as_tensor_variable(resid, dtype="float64")
        G = pt.as_tensor_variable(G, dtype="float64")
        R = pt.as_tensor_variable(R, dtype="float64")
        covs = pt.as_tensor_variable(covs, dtype="float64")
        if resid.ndim != 2 or G.ndim != 2 or R.ndim != 2 or covs.ndim != 3:
            raise TypeError("SparseMMELogp needs resid (n, t), G (t, t), R (t, t) and covs (n_c, t, t)")
        structure = [pt.as_tensor_variable(x) for x in structure]
        for name, x, kind, ndim in zip(INPUT_NAMES, structure, INPUT_KINDS, INPUT_NDIMS):
            ok = x.dtype.startswith("int") if kind == "i" else x.dtype == "float64"
            if not ok or x.ndim != ndim:
                raise TypeError(f"structural input {name} must be {'integer' if kind == 'i' else 'float64'} "
                                f"with {ndim} dimensions, got {x.dtype} with {x.ndim}")
        outputs = [pt.dscalar(), resid.type(), G.type(), R.type(), covs.type()]
        return Apply(self, [resid, G, R, covs, *structure], outputs)

    def perform(self, node, inputs, output_storage):
        kernel = canonical_logp_and_grad if self.canonical else mme_logp_and_grad
        value, d_resid, dG, dR, dcovs = kernel(*inputs)
        output_storage[0][0] = np.asarray(value)
        output_storage[1][0] = d_resid
        output_storage[2][0] = dG
        output_storage[3][0] = dR
        output_storage[4][0] = dcovs

    def infer_shape(self, fgraph, node, shapes):
        return [(), shapes[0], shapes[1], shapes[2], shapes[3]]

    def connection_pattern(self, node):
        first = [[True] + [False] * 4 for _ in range(4)]
        return first + [[False] * 5 for _ in INPUT_NAMES]

    def L_op(self, inputs, outputs, output_grads):
        g = output_grads[0]
        for other in output_grads[1:]:
            if not isinstance(other.type, DisconnectedType):
                raise NotImplementedError("only the log-likelihood output of SparseMMELogp is differentiable")
        return [g * outputs[1], g * outputs[2], g * outputs[3], g * outputs[4],
                *[DisconnectedType()() for _ in INPUT_NAMES]]


def sparse_mme_logp(resid, G, R, covs, structure, canonical: bool = False) -> pt.TensorVariable:
    """The marginal log-likelihood (a scalar) for residuals ``resid`` (n, t), ``G``, ``R`` and the
    stacked extra-effect covariances ``covs`` (n_c, t, t); ``structure`` the design's arrays in the
    order of :data:`ped2g.fit.sparse_mme.INPUT_NAMES` (tensors or arrays): those of
    ``Design.likelihood_inputs()``, with ``canonical=Design.canonical``."""
    return SparseMMELogp(canonical)(resid, G, R, covs, *structure)[0]


def _kernel(op):
    kernel = canonical_logp_and_grad if op.canonical else mme_logp_and_grad

    def sparse_mme(resid, G, R, covs, term_pos, term_midx, term_coef, Cp, Ci, Cj, snode, Lp, Li, c_to_l,
                   rec_pattern, rec_index, patterns, n_levels, const):
        value, d_resid, dG, dR, dcovs = kernel(resid, G, R, covs, term_pos, term_midx, term_coef, Cp, Ci, Cj,
                                               snode, Lp, Li, c_to_l, rec_pattern, rec_index, patterns, n_levels,
                                               const)
        return np.asarray(value), d_resid, dG, dR, dcovs

    return sparse_mme


register_kernel(SparseMMELogp, [__file__, sparse_factor.__file__, sparse_mme.__file__], _kernel)
