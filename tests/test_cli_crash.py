"""A stage that dies in native code leaves a Python stack in its log (the stage's stderr)."""

import os
import subprocess
import sys
from pathlib import Path

WORKFLOW = Path(__file__).resolve().parents[1] / "workflow"

CRASH = """
import ctypes, sys
import ped2g.pedigree.command as stage
def crash(args):
    ctypes.string_at(0)          # reads address 0: a segmentation fault in native code
stage.run = crash
from ped2g.cli import main
sys.exit(main(["pedigree", "raw.csv", "--out", "x"]))
"""


def test_a_native_crash_in_a_stage_prints_the_python_stack_to_stderr(tmp_path):
    env = dict(os.environ, PYTHONPATH=str(WORKFLOW))
    env.pop("PYTHONFAULTHANDLER", None)
    run = subprocess.run([sys.executable, "-c", CRASH], cwd=tmp_path, env=env, capture_output=True,
                         text=True, timeout=120)
    assert run.returncode != 0
    assert "Fatal Python error: Segmentation fault" in run.stderr, run.stderr[-2000:]
    assert "in crash" in run.stderr, run.stderr[-2000:]
