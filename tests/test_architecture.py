"""The import direction is a contract: import-linter checks the contracts in pyproject.toml.

plan -> reconstruct, never back; inside each package a layer imports only the
layers below it; only the report layers draw. import-linter is a
general-purpose tool from the package registry, not written here.
"""

import os
import shutil
import subprocess
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[1]


def test_import_contracts_hold():
    if shutil.which("lint-imports") is None:
        pytest.fail("lint-imports not found: install the test extras (pip install '.[test]')")
    env = dict(os.environ, PYTHONPATH=str(REPO) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    run = subprocess.run(["lint-imports", "--config", str(REPO / "pyproject.toml"), "--no-cache"],
                         cwd=REPO, env=env, capture_output=True, text=True)
    assert run.returncode == 0, run.stdout[-4000:] + run.stderr[-2000:]
    assert "broken" in run.stdout and " 0 broken" in run.stdout, run.stdout[-2000:]


def test_a_forbidden_import_is_caught(tmp_path):
    """The checker is live: a copy of the config with an upside-down layer order fails."""
    text = (REPO / "pyproject.toml").read_text()
    flipped = text.replace('    "io",\n    "model",\n', '    "model",\n    "io",\n')
    assert flipped != text
    config = tmp_path / "pyproject.toml"
    config.write_text(flipped)
    env = dict(os.environ, PYTHONPATH=str(REPO) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    run = subprocess.run(["lint-imports", "--config", str(config), "--no-cache"],
                         cwd=REPO, env=env, capture_output=True, text=True)
    assert run.returncode != 0, run.stdout[-2000:]
    assert "reconstruct.io" in run.stdout
