"""What this process may use of the machine: CPUs and memory of its allocation, not of the node.

On a cluster a job gets a share of a node (a SLURM job's CPUs and its memory limit, enforced by
a control group); on a workstation the process gets what is free. The fit sizes its work by
these numbers (chains run in parallel on the allowed CPUs; the marginal engine's dense
eigendecomposition must fit in memory).
"""

from __future__ import annotations

import os
from pathlib import Path

#: Control-group files that bound this process's memory: (limit, current use); cgroup v2, then v1.
_CGROUP_FILES = (
    ("/sys/fs/cgroup/memory.max", "/sys/fs/cgroup/memory.current"),
    ("/sys/fs/cgroup/memory/memory.limit_in_bytes", "/sys/fs/cgroup/memory/memory.usage_in_bytes"),
)


def available_cpus() -> int:
    """CPUs this process may use: the scheduler's allocation (e.g. a SLURM job), not the node's count."""
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:  # platforms without sched_getaffinity (macOS)
        return os.cpu_count() or 1


def _meminfo_available(path: str = "/proc/meminfo") -> float | None:
    try:
        for line in Path(path).read_text().splitlines():
            if line.startswith("MemAvailable:"):
                return float(line.split()[1]) * 1024.0
    except (OSError, ValueError, IndexError):
        return None
    return None


def _cgroup_headroom(files=_CGROUP_FILES) -> float | None:
    for limit_file, usage_file in files:
        try:
            limit = Path(limit_file).read_text().strip()
            usage = float(Path(usage_file).read_text().strip())
        except (OSError, ValueError):
            continue
        if limit == "max" or float(limit) >= 2.0 ** 60:   # no limit set (v2 "max"; v1 a huge number)
            return None
        return max(float(limit) - usage, 0.0)
    return None


def available_memory() -> float | None:
    """Bytes of memory this process can still allocate without swapping or being killed.

    The smaller of the kernel's estimate of available memory (``MemAvailable``) and the headroom
    under this process's control-group limit (a SLURM job's memory request); ``None`` where
    neither can be read (e.g. macOS), in which case callers should not refuse work on memory
    grounds.
    """
    values = [v for v in (_meminfo_available(), _cgroup_headroom()) if v is not None]
    return min(values) if values else None
