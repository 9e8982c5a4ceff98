"""Exact first arrivals past a fast sphere buried in rock under flat ground with air above.

An outside reference for a void under a flat ground surface: rock of
velocity ``v_rock`` below the ground at ``ground_m``, air (``v_air``) above it
and inside a sphere (centre, radius) that lies wholly below the ground.
Between two points at or below the ground, the first arrival is the least
time over all paths (Fermat's principle). The fastest path of each family
is made of straight pieces, so the candidates are:

1. through the rock past the sphere: the straight segment, or refracted
   through the sphere (:func:`tests.references.sphere.first_arrival_ns`);
2. the refracted air wave along the ground surface, or the direct air wave
   between points on it (:mod:`tests.references.air_halfspace`), when its
   critical-angle legs miss the sphere (:func:`head_legs_miss_sphere`; a
   caller chooses a geometry where they do, see :func:`first_arrival_ns`);
3. through the sphere on one point's side, then up to the ground and along
   it in the air to the other point: minimised over the sphere's entry and
   exit points with ``scipy.optimize.minimize``, the part from the exit point
   timed by the head-wave formula.

Each candidate is the time of a real path, so their least is an upper bound
of the first arrival that equals it when the fastest path is among them.
Families 1 and 3 are minimised only where a lower bound says they could win:
outside the sphere a path covers at least the distance to the sphere at rock
slowness, and any path from a point at depth ``d1`` through the ground
surface to a point at depth ``d2`` and offset ``x`` takes at least
``x s_air + (d1 + d2) sqrt(s_rock^2 - s_air^2)`` (each rock leg of length
``sqrt(h^2 + d^2)`` costs ``s_rock sqrt(h^2 + d^2) >= s_air h + d
sqrt(s_rock^2 - s_air^2)`` by the Cauchy-Schwarz inequality).

References
----------
.. [1] Cerveny, V. (2001), Seismic Ray Theory, Cambridge University Press:
   Fermat's principle, rays as paths of stationary time.
.. [2] Telford, W. M., Geldart, L. P. and Sheriff, R. E. (1990), Applied
   Geophysics, 2nd ed., Cambridge University Press, refraction section: the
   head-wave time (from memory).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.optimize import minimize

from tests.references.air_halfspace import head_wave_time_ns
from tests.references.sphere import _angles_of, _on_sphere, polyline_time_ns
from tests.references.sphere import first_arrival_ns as sphere_first_arrival_ns

__all__ = ["BuriedSphere", "first_arrival_ns", "head_legs_miss_sphere", "sphere_then_air_wave_ns"]


@dataclass(frozen=True)
class BuriedSphere:
    """Flat ground at ``ground_m`` (air above), a sphere of air below it, rock around; m and m/ns."""

    ground_m: float
    centre: tuple
    radius: float
    v_rock: float
    v_air: float

    def __post_init__(self):
        if self.centre[2] + self.radius >= self.ground_m:
            raise ValueError("the sphere must lie below the ground")
        if not self.v_air > self.v_rock:
            raise ValueError("air must be faster than rock")

    @property
    def c(self) -> np.ndarray:
        return np.asarray(self.centre, dtype=float)

    @property
    def s_rock(self) -> float:
        return 1.0 / self.v_rock

    @property
    def s_air(self) -> float:
        return 1.0 / self.v_air

    @property
    def k_vertical(self) -> float:
        """Head-wave time per metre of depth, ns/m: sqrt(s_rock^2 - s_air^2)."""
        return float(np.sqrt(self.s_rock**2 - self.s_air**2))

    @property
    def tan_critical(self) -> float:
        sin_c = self.s_air / self.s_rock
        return float(sin_c / np.sqrt(1.0 - sin_c**2))


def head_legs_miss_sphere(case: BuriedSphere, a, b) -> bool:
    """True when the critical-angle legs of the air wave between ``a`` and ``b`` both miss the sphere."""
    def misses(p, q):
        depth = case.ground_m - p[2]
        if depth <= 0:
            return True
        towards = (q[:2] - p[:2]) / np.linalg.norm(q[:2] - p[:2])
        top = np.array([*(p[:2] + towards * depth * case.tan_critical), case.ground_m])
        d = top - p
        t = np.clip((case.c - p) @ d / (d @ d), 0.0, 1.0)
        return np.linalg.norm(p + t * d - case.c) > case.radius

    a, b = np.asarray(a, dtype=float), np.asarray(b, dtype=float)
    return misses(a, b) and misses(b, a)


def sphere_then_air_wave_ns(case: BuriedSphere, a, b, *, starts=8, seed=0):
    """Least time over A -> P -> Q (P, Q on the sphere) -> up to the ground -> air -> down to B (family 3)."""
    a, b = np.asarray(a, dtype=float), np.asarray(b, dtype=float)
    centre, radius = case.c, case.radius
    depth_b = case.ground_m - b[2]

    def from_exit(q):
        x = np.linalg.norm(b[:2] - q[:2])
        head = float(head_wave_time_ns(x, case.ground_m - q[2], depth_b, case.s_rock, case.s_air))
        return head if np.isfinite(head) else np.linalg.norm(b - q) * case.s_rock  # a real path, slower

    def cost(v):
        p, q = _on_sphere(v[:2], centre, radius), _on_sphere(v[2:], centre, radius)
        return polyline_time_ns([a, p, q], centre, radius, case.v_air, case.v_rock) + from_exit(q)

    horizontal = b[:2] - centre[:2]
    towards_b = np.array([*(0.5 * horizontal / max(np.linalg.norm(horizontal), 1e-9)), 1.0])
    guesses = [np.concatenate([_angles_of(a, centre), _angles_of(centre + towards_b, centre)]),
               np.concatenate([_angles_of(a, centre), [0.05, 0.0]]),
               np.concatenate([_angles_of(a, centre), _angles_of(b, centre)])]
    rng = np.random.default_rng(seed)
    while len(guesses) < starts:
        guesses.append(np.concatenate([[np.arccos(rng.uniform(-1, 1)), rng.uniform(-np.pi, np.pi)],
                                       [np.arccos(rng.uniform(0, 1)), rng.uniform(-np.pi, np.pi)]]))
    return min(minimize(cost, g, method="Nelder-Mead",
                        options={"xatol": 1e-9, "fatol": 1e-11, "maxiter": 20000, "maxfev": 40000}).fun
               for g in guesses)


def first_arrival_ns(case: BuriedSphere, a, b, *, starts=8):
    """Exact first arrival (ns) between ``a`` and ``b`` and the family of its path.

    Families: ``"straight"`` (through rock), ``"air wave"``, ``"through sphere"``
    (rock and sphere only), ``"sphere + air wave"``. Raises ValueError where an
    air wave would be timed with a leg that crosses the sphere (choose another
    geometry).
    """
    a, b = np.asarray(a, dtype=float), np.asarray(b, dtype=float)
    if a[2] > case.ground_m or b[2] > case.ground_m:
        raise ValueError("points must lie at or below the ground")
    s_rock, s_air, centre, radius = case.s_rock, case.s_air, case.c, case.radius
    x = float(np.linalg.norm(b[:2] - a[:2]))
    straight = polyline_time_ns([a, b], centre, radius, case.v_air, case.v_rock)
    head = float(head_wave_time_ns(x, case.ground_m - a[2], case.ground_m - b[2], s_rock, s_air))
    if np.isfinite(head) and not head_legs_miss_sphere(case, a, b):
        raise ValueError(f"an air-wave leg between {a.tolist()} and {b.tolist()} crosses the sphere")
    best, family = min((straight, "straight"), (head, "air wave"))
    ra, rb = np.linalg.norm(a - centre), np.linalg.norm(b - centre)
    if s_rock * (ra + rb - 2 * radius) < best:  # a path through the sphere could be faster
        t = sphere_first_arrival_ns(a, b, centre, radius, case.v_air, case.v_rock, starts=starts)
        if t < best - 1e-9:
            best, family = t, "through sphere"
    top_depth = case.ground_m - centre[2] - radius
    for p, q, rp in ((a, b, ra), (b, a, rb)):  # family 3, the sphere on either side
        x_cq = max(np.linalg.norm(q[:2] - centre[:2]) - radius, 0.0)
        bound = s_rock * (rp - radius) + s_air * x_cq + case.k_vertical * (top_depth + case.ground_m - q[2])
        if bound < best:
            t = sphere_then_air_wave_ns(case, p, q, starts=starts)
            if t < best - 1e-9:
                best, family = t, "sphere + air wave"
    return best, family
