"""Keeping numba's on-disk cache of ped2g's kernels honest across modules.

numba (``@njit(cache=True)``) keys a cached function on its own source file only. A kernel that
calls a kernel of another module keeps the old compiled code of that callee after the callee's
module changes (seen in an editable install: ``sparse_mme``'s kernels kept the old
``sparse_factor`` code until their cache files were deleted). :func:`forget_if_changed` records a
hash of the modules a kernel depends on beside numba's cache and empties that kernel's cache
when the hash differs, so the next call compiles afresh.
"""

from __future__ import annotations

import hashlib
from pathlib import Path


def source_digest(files: list[str]) -> str:
    """SHA-256 of the concatenated bytes of ``files``."""
    return hashlib.sha256(b"".join(Path(f).read_bytes() for f in files)).hexdigest()


def forget_if_changed(dispatchers, dependencies: list[str]) -> list[str]:
    """Empty the on-disk cache of each numba dispatcher in ``dispatchers`` whose recorded hash of
    ``dependencies`` (source files) differs from theirs now; return the names of those emptied.

    Call it at import, right after the kernels are defined and before any is called. A cache that
    cannot be written (read-only install) is left alone: numba then compiles in memory anyway.
    """
    digest = source_digest(dependencies)
    emptied = []
    for dispatcher in dispatchers:
        cache = getattr(dispatcher, "_cache", None)
        path = getattr(cache, "cache_path", None)
        if path is None:
            continue
        stamp = Path(path) / f"{dispatcher.py_func.__module__}.{dispatcher.py_func.__qualname__}.deps"
        try:
            if stamp.exists() and stamp.read_text() == digest:
                continue
            cache.flush()
            stamp.parent.mkdir(parents=True, exist_ok=True)
            stamp.write_text(digest)
        except OSError:
            continue
        emptied.append(dispatcher.py_func.__qualname__)
    return emptied
