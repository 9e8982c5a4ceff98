"""A truth model for synthetic surveys: background rock with embedded bodies.

Synthetic data serve the demo and recovery tests only. A truth model is a YAML
file (``yaml.safe_load`` only; unknown keys rejected; every problem listed)::

    background_velocity_m_per_ns: 0.115   # optional; default: the site's rock velocity
    bodies:                               # optional list
      - name: cavity under the road
        shape: ellipsoid                  # ellipsoid (semi_axes_m) or box (size_m)
        centre_m: [40, 22, 101]
        semi_axes_m: [5, 4, 2.5]
        fill: air                         # air, water or clay: sets the velocity
        velocity_m_per_ns: 0.2998         # optional; overrides the fill's velocity
    noise:
      sigma_ns: 0.5                       # Gaussian pick noise, ns
      time_zero_sigma_ns: 1.5             # spread of the nodes' time-zero (clock) offsets, ns
      seed: 7
      outlier_fraction: 0.02              # share of picks made gross outliers (default 0)
      outlier_size_ns: 20                 # typical size of an outlier's error, ns (default 20)
      clock_drift_sigma_ns_per_h: 2       # spread of the nodes' clock drifts, ns per hour (default 0)
      shot_interval_s: 30                 # time between shots: node k fires at k times this (default 30)
    refine: 2                             # simulation cells per model cell along each axis

Fill velocities (Davis and Annan, 1989, table of typical properties): air
0.2998 m/ns (c), fresh water 0.033 m/ns, clay 0.06 m/ns.
"""

from __future__ import annotations

import difflib
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import yaml

from reconstruct.errors import InputError
from reconstruct.model.grid import Grid
from reconstruct.model.constants import AIR_VELOCITY_M_PER_NS

__all__ = ["Body", "TruthModel", "load_truth", "parse_truth", "truth_velocity", "FILL_VELOCITY_M_PER_NS"]

#: Typical velocities of void fills (Davis and Annan, 1989).
FILL_VELOCITY_M_PER_NS = {"air": AIR_VELOCITY_M_PER_NS, "water": 0.033, "clay": 0.06}
_SHAPES = ("ellipsoid", "box")


@dataclass(frozen=True)
class Body:
    name: str
    shape: str
    centre_m: tuple[float, float, float]
    half_size_m: tuple[float, float, float]  # semi-axes (ellipsoid) or half edges (box)
    fill: str | None
    velocity_m_per_ns: float

    def contains(self, points_m) -> np.ndarray:
        p = (np.asarray(points_m, dtype=float) - np.asarray(self.centre_m)) / np.asarray(self.half_size_m)
        if self.shape == "ellipsoid":
            return np.sum(p * p, axis=-1) <= 1.0
        return np.all(np.abs(p) <= 1.0, axis=-1)

    @property
    def volume_m3(self) -> float:
        a, b, c = self.half_size_m
        return 4.0 / 3.0 * np.pi * a * b * c if self.shape == "ellipsoid" else 8.0 * a * b * c


@dataclass(frozen=True)
class TruthModel:
    background_velocity_m_per_ns: float | None
    bodies: tuple[Body, ...]
    noise_sigma_ns: float
    time_zero_sigma_ns: float
    seed: int
    refine: int
    source: str = "truth"
    outlier_fraction: float = 0.0
    outlier_size_ns: float = 20.0
    clock_drift_sigma_ns_per_h: float = 0.0
    shot_interval_s: float = 30.0


def _number(value, path, problems, *, positive=False, minimum=None):
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not np.isfinite(value):
        problems.append(f"{path} must be a number (got {value!r})")
        return None
    if positive and not value > 0:
        problems.append(f"{path} must be > 0 (got {value})")
        return None
    if minimum is not None and value < minimum:
        problems.append(f"{path} must be >= {minimum} (got {value})")
        return None
    return float(value)


def _triple(value, path, problems, *, positive=False):
    if not isinstance(value, (list, tuple)) or len(value) != 3:
        problems.append(f"{path} must be a list of three numbers [x, y, z] (got {value!r})")
        return None
    out = [_number(v, f"{path}[{i}]", problems, positive=positive) for i, v in enumerate(value)]
    return None if any(v is None for v in out) else tuple(out)


def _unknown(mapping, allowed, path, problems):
    for key in mapping:
        if key not in allowed:
            near = difflib.get_close_matches(str(key), allowed, n=1)
            hint = f"; did you mean '{near[0]}'?" if near else f"; allowed: {', '.join(allowed)}"
            problems.append(f"{path}{key}: unknown key{hint}")


def parse_truth(data, source: str = "truth") -> TruthModel:
    """Validate a truth-model mapping; raise one InputError listing every problem."""
    problems: list[str] = []
    if not isinstance(data, dict):
        raise InputError(f"{source}: the file must hold a mapping of keys (got {type(data).__name__})")
    _unknown(data, ["background_velocity_m_per_ns", "bodies", "noise", "refine"], "", problems)
    background = None
    if data.get("background_velocity_m_per_ns") is not None:
        background = _number(data["background_velocity_m_per_ns"], "background_velocity_m_per_ns",
                             problems, positive=True)
        if background is not None and background > AIR_VELOCITY_M_PER_NS * 1.0001:
            problems.append(f"background_velocity_m_per_ns {background} is faster than light "
                            f"({AIR_VELOCITY_M_PER_NS:.4f} m/ns); rock is about 0.06 to 0.15 m/ns")
            background = None
    bodies = []
    raw_bodies = data.get("bodies") or []
    if not isinstance(raw_bodies, list):
        problems.append("bodies must be a list")
        raw_bodies = []
    for i, b in enumerate(raw_bodies):
        path = f"bodies[{i}]"
        if not isinstance(b, dict):
            problems.append(f"{path} must be a mapping")
            continue
        _unknown(b, ["name", "shape", "centre_m", "semi_axes_m", "size_m", "fill", "velocity_m_per_ns"],
                 f"{path}.", problems)
        shape = b.get("shape", "ellipsoid")
        if shape not in _SHAPES:
            problems.append(f"{path}.shape must be one of {', '.join(_SHAPES)} (got {shape!r})")
            continue
        centre = _triple(b.get("centre_m"), f"{path}.centre_m", problems)
        wrong = "size_m" if shape == "ellipsoid" else "semi_axes_m"
        if wrong in b:
            right = "semi_axes_m" if shape == "ellipsoid" else "size_m"
            problems.append(f"{path}.{wrong} does not apply to shape {shape}; give {right} instead")
            continue
        if shape == "ellipsoid":
            half = _triple(b.get("semi_axes_m"), f"{path}.semi_axes_m", problems, positive=True)
        else:
            size = _triple(b.get("size_m"), f"{path}.size_m", problems, positive=True)
            half = None if size is None else tuple(s / 2 for s in size)
        fill = b.get("fill")
        if fill is not None and fill not in FILL_VELOCITY_M_PER_NS:
            problems.append(f"{path}.fill must be one of {', '.join(FILL_VELOCITY_M_PER_NS)} (got {fill!r})")
            fill = None
        velocity = None
        if b.get("velocity_m_per_ns") is not None:
            velocity = _number(b["velocity_m_per_ns"], f"{path}.velocity_m_per_ns", problems, positive=True)
            if velocity is not None and velocity > AIR_VELOCITY_M_PER_NS * 1.0001:
                problems.append(f"{path}.velocity_m_per_ns {velocity} is faster than light")
        elif fill is not None:
            velocity = FILL_VELOCITY_M_PER_NS[fill]
        else:
            problems.append(f"{path}: give a fill (air, water, clay) or velocity_m_per_ns")
        if centre is None or half is None or velocity is None:
            continue
        bodies.append(Body(str(b.get("name", f"body {i + 1}")), shape, centre, half, fill, velocity))
    noise = data.get("noise") or {}
    if not isinstance(noise, dict):
        problems.append("noise must be a mapping")
        noise = {}
    _unknown(noise, ["sigma_ns", "time_zero_sigma_ns", "seed", "outlier_fraction", "outlier_size_ns",
                     "clock_drift_sigma_ns_per_h", "shot_interval_s"], "noise.", problems)
    drift = _number(noise.get("clock_drift_sigma_ns_per_h", 0.0), "noise.clock_drift_sigma_ns_per_h", problems,
                    minimum=0.0)
    interval = _number(noise.get("shot_interval_s", 30.0), "noise.shot_interval_s", problems, positive=True)
    sigma = _number(noise.get("sigma_ns", 0.5), "noise.sigma_ns", problems, minimum=0.0)
    time_zero = _number(noise.get("time_zero_sigma_ns", 0.0), "noise.time_zero_sigma_ns", problems, minimum=0.0)
    outlier_fraction = _number(noise.get("outlier_fraction", 0.0), "noise.outlier_fraction", problems,
                               minimum=0.0)
    if outlier_fraction is not None and outlier_fraction > 0.5:
        problems.append(f"noise.outlier_fraction must be at most 0.5 (got {outlier_fraction}); "
                        "it is the share of picks turned into gross outliers, e.g. 0.02")
    outlier_size = _number(noise.get("outlier_size_ns", 20.0), "noise.outlier_size_ns", problems, positive=True)
    seed = noise.get("seed", 0)
    if isinstance(seed, bool) or not isinstance(seed, int) or seed < 0:
        problems.append(f"noise.seed must be a whole number >= 0 (got {seed!r})")
    refine = data.get("refine", 2)
    if isinstance(refine, bool) or not isinstance(refine, int) or not 1 <= refine <= 8:
        problems.append(f"refine must be a whole number from 1 to 8 (got {refine!r})")
    if problems:
        raise InputError(problems, source=source)
    return TruthModel(background, tuple(bodies), sigma, time_zero, int(seed), int(refine), source,
                      outlier_fraction=outlier_fraction, outlier_size_ns=outlier_size,
                      clock_drift_sigma_ns_per_h=drift, shot_interval_s=interval)


def load_truth(path) -> TruthModel:
    """Read a truth-model YAML file."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except OSError as error:
        raise InputError(f"{path}: cannot read the truth model ({error.strerror}); check the path")
    try:
        data = yaml.safe_load(text)
    except yaml.YAMLError as error:
        mark = getattr(error, "problem_mark", None)
        where = f" line {mark.line + 1}, column {mark.column + 1}" if mark else ""
        raise InputError(f"{path}:{where}: not valid YAML ({getattr(error, 'problem', error)}); fix the syntax")
    return parse_truth(data, source=str(path))


def truth_velocity(truth: TruthModel, grid: Grid, ground: np.ndarray, rock_velocity_m_per_ns: float) -> np.ndarray:
    """Velocity ``(nx, ny, nz)`` of the truth model on a grid: air above ground,
    background rock, bodies painted in list order (later bodies win); a body
    never replaces air above the ground."""
    background = truth.background_velocity_m_per_ns or rock_velocity_m_per_ns
    velocity = np.where(ground, background, AIR_VELOCITY_M_PER_NS)
    centres = grid.cell_centres_m()
    for body in truth.bodies:
        inside = body.contains(centres) & ground
        velocity[inside] = body.velocity_m_per_ns
    return velocity
