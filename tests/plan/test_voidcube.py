"""Tests for the one command on the PATH, ``voidcube`` (``plan.voidcube.main``), and its groups."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest

from plan.voidcube import GROUPS, main
from tests.cli_helpers import run_main

REPO = Path(__file__).resolve().parents[2]


def test_one_console_script_named_voidcube():
    text = (REPO / "pyproject.toml").read_text(encoding="utf-8")
    section = text.split("[project.scripts]\n", 1)[1].split("\n\n", 1)[0]  # tomllib is Python 3.11+
    assert section.strip().splitlines() == ['voidcube = "plan.voidcube:main"']


def test_no_group_lists_the_three_groups_and_exits_2():
    code, out, _ = run_main(main, [])
    assert code == 2
    for group in ("plan", "reconstruct", "demo"):
        assert f"  {group} " in out
    assert set(GROUPS) == {"plan", "reconstruct", "demo"}


def test_unknown_group_is_a_user_error():
    code, out, err = run_main(main, ["invert"])
    assert code == 2 and "unknown group 'invert'" in err and "Traceback" not in err


@pytest.mark.parametrize("group, command", [("plan", "simulate"), ("reconstruct", "check-picks"),
                                            ("demo", None)])
def test_each_group_has_its_own_help(group, command):
    code, out, _ = run_main(main, [group, "--help"])
    assert code == 0
    assert f"usage: voidcube {group}" in out
    if command:
        assert command in out


def test_a_group_runs_its_command(tmp_path):
    site = tmp_path / "site.yaml"
    site.write_text("name: tiny\nmodel: {origin_m: [0, 0, 0], size_m: [4, 4, 4], cell_m: 1}\n"
                    "ground: {flat_elevation_m: 3}\nrock: {velocity_m_per_ns: 0.1, conductivity_ms_per_m: 1, "
                    "antenna_frequency_mhz: 100}\n", encoding="utf-8")
    code, out, err = run_main(main, ["reconstruct", "check-inputs", "--site", site])
    assert code == 0, err
    assert "inputs are valid" in out


def test_python_dash_m_runs_the_dispatcher():
    result = subprocess.run([sys.executable, "-m", "plan.voidcube", "--version"], cwd=REPO,
                            capture_output=True, text=True, timeout=60)
    assert result.returncode == 0 and result.stdout.startswith("voidcube ")
