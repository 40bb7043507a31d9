"""The README's quick start and CI stay in step (project convention: CI runs the README's test command)."""

import re
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def _quick_start_commands() -> list[str]:
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    section = text.split("## Quick start", 1)[1]
    block = re.search(r"```bash\n(.*?)```", section, re.S).group(1)
    return [ln for ln in block.splitlines() if ln.strip() and not ln.lstrip().startswith("#")]


def test_quick_start_has_two_commands():
    commands = _quick_start_commands()
    assert len(commands) == 2
    assert "snakemake" in commands[0]
    assert "pytest" in commands[1]


def test_ci_runs_exactly_the_readme_test_command():
    test_command = _quick_start_commands()[1].strip()
    ci = (ROOT / ".ci" / "run").read_text(encoding="utf-8")
    ci_lines = [ln.strip() for ln in ci.splitlines() if ln.strip() and not ln.strip().startswith("#")]
    assert test_command in ci_lines
