"""numba's on-disk cache and kernels that call another module's kernels (ped2g.fit.kernel_cache).

Check: a cached kernel ``g`` in one module calls a cached kernel ``f`` of another; after ``f``'s
module changes, a fresh process must get the new ``f`` through ``g``. numba keys ``g``'s cache on
``g``'s own file only (numba documentation, "Cache invalidation": "changes in other files are not
detected"; recalled from memory), so without the guard the fresh process gets the old code: the
control below shows that on the numba installed here.
"""

from __future__ import annotations

import ast
import subprocess
import sys
from pathlib import Path

WORKFLOW = Path(__file__).resolve().parents[2] / "workflow"

CALLER = """
import numba
from .callee import f
{guard}

@numba.njit(cache=True)
def g():
    return f() + 0

{call}
"""
GUARD_IMPORT = "from ped2g.fit.kernel_cache import forget_if_changed\nfrom . import callee"
GUARD_CALL = "EMPTIED = forget_if_changed([g], [__file__, callee.__file__])"


def _package(root: Path, guarded: bool) -> None:
    pkg = root / "kc_demo"
    pkg.mkdir()
    (pkg / "__init__.py").write_text("")
    (pkg / "callee.py").write_text("import numba\n\n@numba.njit(cache=True)\ndef f():\n    return 1\n")
    (pkg / "caller.py").write_text(CALLER.format(guard=GUARD_IMPORT if guarded else "",
                                                 call=GUARD_CALL if guarded else ""))


def _run(root: Path) -> tuple[int, list[str]]:
    """g() in a fresh process, and the kernels the guard emptied there (None without a guard)."""
    code = "import kc_demo.caller as c; print(c.g()); print(getattr(c, 'EMPTIED', None))"
    out = subprocess.run([sys.executable, "-c", code],
                         cwd=root, capture_output=True, text=True, check=True,
                         env={"PYTHONPATH": f"{root}:{WORKFLOW}", "PATH": "/usr/bin:/bin"})
    value, emptied = out.stdout.split("\n")[:2]
    return int(value), ast.literal_eval(emptied)


def _change_callee(root: Path) -> None:
    path = root / "kc_demo" / "callee.py"
    path.write_text(path.read_text().replace("return 1", "return 2000"))


def test_a_changed_callee_reaches_a_cached_caller_through_the_guard(tmp_path):
    _package(tmp_path, guarded=True)
    assert _run(tmp_path) == (1, ["g"])       # first run: no record yet, compiles and caches
    assert _run(tmp_path) == (1, [])          # unchanged: the cache is kept
    _change_callee(tmp_path)
    assert _run(tmp_path) == (2000, ["g"])    # callee changed: g's cache emptied, new code


def test_without_the_guard_numba_serves_the_old_callee(tmp_path):
    """Control: the hazard the guard exists for, on the numba installed here."""
    _package(tmp_path, guarded=False)
    assert _run(tmp_path) == (1, None)
    _change_callee(tmp_path)
    assert _run(tmp_path) == (1, None), "numba now tracks other modules itself: the guard is redundant"
