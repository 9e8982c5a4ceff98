"""Tests for ``reconstruct.forward.kernels``: is a first run about to compile the kernels?

The check reads numba's own on-disk cache index; the reference is numba's
documented cache location: with ``NUMBA_CACHE_DIR`` set, the cache is looked
for there first (numba documentation, "Environment variables: NUMBA_CACHE_DIR").
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import numpy as np

from reconstruct.forward.eikonal import travel_time_field
from reconstruct.forward.kernels import COMPILING_MESSAGE, kernels_need_compiling
from reconstruct.forward.ray_tracing import polyline_matrix, trace_rays
from reconstruct.model.grid import Grid

REPO = Path(__file__).resolve().parents[3]


def test_an_empty_cache_needs_compiling(tmp_path):
    env = dict(os.environ, NUMBA_CACHE_DIR=str(tmp_path / "empty_cache"), PYTHONPATH=str(REPO))
    code = "from reconstruct.forward.kernels import kernels_need_compiling as k; print(k())"
    result = subprocess.run([sys.executable, "-c", code], cwd=REPO, env=env, capture_output=True, text=True,
                            timeout=120)
    assert result.returncode == 0, result.stderr
    assert result.stdout.strip() == "True"


def test_kernels_used_in_this_process_need_no_compiling():
    grid = Grid(origin_m=(0.0, 0.0, 0.0), cell_m=(1.0, 1.0, 1.0), shape=(6, 6, 6))
    field = travel_time_field(grid, np.full(grid.shape, 1 / 0.12), (0.5, 3.0, 3.0))
    polylines, _ = trace_rays(field, np.array([[5.5, 3.0, 3.0]]))
    polyline_matrix(grid, polylines)
    assert kernels_need_compiling() is False
    assert "first run only" in COMPILING_MESSAGE
