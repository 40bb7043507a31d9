"""Registering the numba implementation of ped2g's own PyTensor Ops (the likelihood and pedigree
kernels), so that nutpie's and PyTensor's numba backends compile them natively."""

from __future__ import annotations

from collections.abc import Callable

from .kernel_cache import source_digest


def register_kernel(op_type: type, source_file: str | list[str], make: Callable) -> None:
    """Make ``numba_njit(make(op))`` the numba implementation of every ``op_type`` node.

    ``make(op)`` returns a plain Python function of the node's inputs that calls the module's
    ``numba.njit`` kernel. PyTensor caches the compiled function on disk under a key made of the
    Op's type, its props and a number: here a hash of ``source_file`` (the Op's module, or a list
    of the modules its kernel lives in), so that a changed kernel is never served stale from the
    cache (it was, before the hash).
    """
    from pytensor.link.numba.dispatch.basic import numba_njit, register_funcify_default_op_cache_key

    files = [source_file] if isinstance(source_file, str) else list(source_file)
    source_hash = int(source_digest(files)[:12], 16)

    @register_funcify_default_op_cache_key(op_type)
    def numba_funcify(op, node=None, **kwargs):
        return numba_njit(make(op)), source_hash
