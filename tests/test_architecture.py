"""The house rules that a machine can check: layers that only look down, no import cycles,
kernels that import nothing from bem3d (import-linter contracts in pyproject.toml), and a
clean lint (ruff, the rule set in pyproject.toml)."""

import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
BIN = Path(sys.executable).parent


def run(tool, *args):
    return subprocess.run([str(BIN / tool), *args], cwd=ROOT, capture_output=True, text=True)


def test_layers_only_look_down_and_nothing_imports_in_a_circle():
    done = run("lint-imports")
    assert done.returncode == 0, done.stdout[-3000:] + done.stderr[-2000:]
    assert "Contracts: 3 kept, 0 broken." in done.stdout


def test_lint_is_clean():
    done = run("ruff", "check", "bem3d", "tests", "tools")
    assert done.returncode == 0, done.stdout[-3000:] + done.stderr[-2000:]
