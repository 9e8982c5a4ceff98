"""First-arrival travel times from one source: a fast-marching eikonal solver.

Design
------
* Lattice: the cell corners of the model grid refined ``refine`` times
  (default 1: the corners of the model cells), so every point of the box can
  be interpolated. Slowness stays constant per model cell.
* Marching: fast marching with a binary heap (Sethian and Popovici 1999),
  compiled with numba; second-order one-sided differences where the cells
  around the two points behind differ by at most ``smooth_contrast``.
* Sharp contrasts: every update looks at the cells around the point. A 3D
  stencil uses its octant's cell, a 2D stencil the faster of the two cells
  sharing its face, a 1D stencil the fastest of the four sharing its edge
  (Podvin and Lecomte 1991), so the air wave runs along the ground surface at c.
  Where the cells are smooth the mean slowness of the point's cells is used
  instead (second order in a gradient; the fastest-cell rule biased a linear
  gradient by -0.8 % at 10 m).
* Source singularity: multiplicative factoring T = s0 |x - x_s| tau (Fomel,
  Luo and Zhao 2009) in the model cells reached from the source without a
  sharp jump, and only from neighbours whose time belongs to the source's own
  wave; waves that came through a sharp contrast (head waves) are continued in
  the plain form. Factoring across the ground surface was measured to run up
  to 13 % early along the critical-angle cone. In the slab of lattice points
  as far from the source as their mirror across a source plane (a source
  half-way between lattice planes), an axis with no accepted neighbour yet
  keeps its exact term tau dT0/dx_a with d(tau)/dx_a = 0: without it a
  homogeneous medium came out 0.1-0.25 % late.
* Faster media (air above a borehole source, voids): plain differences
  there take an additive factor T = s1 |x - xe| + u (the factored idea of
  Fomel, Luo and Zhao 2009 with a second apex) for the fast body nearest the
  source and for the largest, the air above the ground (``fast_bodies="all"``:
  also every fast body with a sharp boundary, a void): xe the point of the
  body closest to the source, s1 its slowness, in the cells reached from it
  without a sharp jump. (With the nearest body only, a small void nearer the
  source than the ground surface takes the factor from the air wave, and
  adding the void delayed first arrivals by up to 4.1 ns on the demo quarry,
  against Fermat's principle; with the nearest and the largest, the default
  used both to simulate picks and to invert them, a small void beside a larger
  one delayed them by up to 2.9 ns there; see EikonalOptions for why "all" is
  not the default.) On a flat ground the
  air wave's time on the surface is exactly such a cone (plus a constant);
  plain first-order differences of it ran up to 1.8 ns late 10-20 m out.
  A closed void is entered over its whole face, not from one point: a 1D
  update there takes the factor only from a neighbour already reached
  through the fast medium (otherwise 1 ns early in an 8 m air-filled cube).
  Still 0.31 % early there (2D stencils); without any factor in voids, up to
  1.4 % late behind an air-filled sphere (Fermat check).
* Two wave families per lattice point: the source's own wave in its smooth
  region (factored) and every wave that crossed a sharp contrast (plain).
  Inside the source's region a stencil takes neighbours of one family only:
  where the refracted air wave overtakes the direct wave (5-7 m from a source
  3 m deep) the two fronts cross at a kink, and stencils mixing them ran up to
  1.6 ns early. Under cells outside that region each neighbour's earlier time
  is used (the source's wave crossing into another medium, an interface wave
  feeding its head wave back). A family more than one lattice step (at the
  slowest cell's slowness) later than the other at a point is not marched on.
  :class:`~reconstruct.forward.time_field.TimeField` interpolates the families one by
  one and takes the earliest: interpolating the minimum across the kink ran
  up to 1.2 ns early (the chord under a concave kink).
* Start values (final, never overwritten: difference stencils across the
  point source ran up to 13 % early in the plain form): lattice points within
  ``source_radius`` steps get the straight-ray time through the cells (exact
  per-cell lengths as in Siddon 1985; a path in a face takes the faster
  side), improved by a solve of the nearby
  model cells ``source_refine`` times finer (a source 0.5 m under the surface
  sends its head wave up at the critical angle, which a 1 m lattice misses by
  0.3 ns for good).
* Only some receivers wanted (``receivers_xyz_m``): the march stops once the
  field around them is final, and the uniform air above them is left out;
  both exact (same times and rays).

Measured (1 m cells, default options, this machine, 2 cores, shared)
-------------------------------------------------------------------
* 200 x 60 x 70 cells with ground, air and a void, whole box: 0.54 s per
  field against 0.34 s for scikit-fmm (order 2, one-cell source) in the same
  run, ratio 1.6 (benchmarks/bench_eikonal.py, machine shared with other
  work). What makes it fast: the marching loop is compiled without numba's
  reference counting (the array arguments of the inlined helpers would cost
  an atomic increment and decrement per call, a third of the run); the
  binary heap has decrease-key, so every point is popped once; and points
  whose eight cells are alike skip the per-stencil search for the fastest
  cell and try only the upwind sides (the same times, to 1e-12 relative).
  Memory grows linearly with the lattice points n: 24n bytes kept per field
  (first arrivals and two families: 20 MiB here) and about 58n at the peak
  while solving (measured from the resident set: 57 bytes per point); a
  process holds one field at a time.
* Homogeneous: exact to 1e-12 at lattice points and, with TimeField's
  apparent-slowness interpolation, between them (crosshole pairs 2-16 m).
* Surface source over a flat ground, receivers 5-80 m on and under the
  surface: median 0.000 %, max 0.42 % (scikit-fmm naive: 1.8 %, 25 %).
* Source 3 m deep: median 0.005 %, max 0.10 % (one family: max 2.3 %, 1.1 ns
  early where the air wave overtakes the direct wave). scikit-fmm naive:
  1.0 %, 16 %.
* Linear gradient (Slotnick 1959), offsets 5-150 m: median 0.014 %, max
  0.13 %; rays within 0.2 m of the analytic circular arcs.
* Crosshole through an air-filled sphere of 3.5 m radius: no pair time later
  than the straight ray through the same cells (Fermat's principle, Cerveny
  2001); without the additive factor in voids 10 of 120 would be, worst 1.4 %.
* Next to a sphere of 2.5 m radius in rock (0.115 m/ns), 42 pairs crossing,
  grazing or passing it, against the exact times (tests/references/sphere.py),
  partly filled cells at their volume-weighted slowness: air-filled median
  +0.19 ns, -1.37 to +2.34; water-filled +0.92 ns, -0.01 to +4.51. Most of it
  is the voxel model, not the solver: the voxel model's own first arrival
  (the earlier of a 4 times finer lattice and a bent ray, a real path through
  the cells) is -2.26 to +0.29 ns off the air-filled sphere and 0 to +5.4 ns
  off the water-filled one; the field is -0.53 to +2.43 ns (air) and -1.86
  to +0.85 ns (water) off the voxel model's time. Finer lattices, bending and
  other rules for the partly filled cells are compared in
  benchmarks/bench_sharp_bodies.py; none meets 0.5 ns median and 1 ns
  maximum for both spheres at 1 m cells.

References
----------
Sethian, J. A. and Popovici, A. M. (1999), 3-D traveltime computation using
the fast marching method, Geophysics 64(2), 516-523.
Podvin, P. and Lecomte, I. (1991), Finite difference computation of
traveltimes in very contrasted velocity models: a massively parallel approach
and its associated tools, Geophys. J. Int. 105, 271-284.
Fomel, S., Luo, S. and Zhao, H. (2009), Fast sweeping method for the factored
eikonal equation, J. Comput. Phys. 228, 6440-6455.
Cerveny, V. (2001), Seismic Ray Theory, Cambridge University Press.
Siddon, R. L. (1985), Fast calculation of the exact radiological path for a
three-dimensional CT array, Medical Physics 12(2), 252-255.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numba import njit
from scipy import ndimage

from reconstruct.errors import is_whole_number
from reconstruct.model.grid import Grid
from reconstruct.forward.time_field import TimeField

__all__ = ["EikonalOptions", "travel_time_field"]

#: A source closer than this fraction of a lattice step to a lattice plane is
#: taken to lie on it. Surface nodes are snapped 1 micrometre inside the
#: highest ground cell; they must count as on the air-ground face so that the
#: air wave along the surface starts at the source.
_ON_PLANE_FRACTION = 1e-4
_HEAD_WAVE_MARGIN = 0.02
#: A wave family more than this many lattice steps (at the slowest cell's
#: slowness) later than the other at a point is not marched on from it.
_DOMINANCE_STEPS = 1.0
#: At most this many fast bodies get an additive factor (labels are uint8).
_MAX_FAST_BODIES = 255


@dataclass(frozen=True)
class EikonalOptions:
    """Settings of :func:`travel_time_field`.

    Parameters
    ----------
    refine : int
        Travel-time lattice points per model cell edge: the lattice spacing is
        ``cell_m / refine``.
    second_order : bool
        Use second-order one-sided differences where the two lattice steps
        behind a point lie in smoothly varying slowness.
    smooth_contrast : float
        Largest ratio of the slowest to the fastest of the cells around a
        lattice point for that point to count as smooth (second order allowed).
    source_radius : float
        Lattice points within this many lattice steps of the source start from
        the straight-ray time through the model (or the finer local solve).
    source_refine : int
        Refinement of the local solve around the source (1: none).
    factored : bool
        Use the factored form near the source (off only for comparisons).
    fast_bodies : {"nearest_and_largest", "nearest", "all"}
        Which bodies of faster cells get an additive factor: the one nearest
        the source and the largest one, the air above the ground (default);
        the nearest alone ("nearest"); or also every one with a sharp boundary,
        voids ("all"). Measured on the demo quarry's truth model (68 sources,
        all pairs): adding the air-filled cavity delayed no first arrival by
        more than 0.25 ns with the default or "all", but by up to 4.1 ns with
        "nearest" (a void nearer the source than the ground surface takes the
        factor from the air wave); adding the small cavity beside the air-filled
        one delayed arrivals by up to 2.85 ns (39 of 2,278 pairs over 0.1 ns)
        with the default (it takes the factor from the larger void behind it)
        and 0.06 ns (none) with "all". The default is the one setting used both
        to simulate picks (plan.synthetic.simulate) and to invert them, so that
        the inversion fits data made by its own physics; chosen by these figures
        (1 m cells, all pairs): the truth model's times with "all" and with the
        default differ by up to 4.5 ns, 95th percentile 0.25 ns (half the
        demo's pick noise); whereas inverting with "all" stalled
        the bent-ray iterations on the demo quarry (the sharp-bounded bodies of
        an inverted model change from step to step and the times jump: RMS
        6.65 -> 5.32 -> 4.61 ns with quartered steps and the air-filled cavity
        not found, against 6.65 -> 5.09 -> 3.88 -> 3.41 ns and the cavity found
        1.5 m off with the default; the same with a sharp-body contrast of 1.5
        instead of ``smooth_contrast``: 4.55 ns, then the misfit rose to 11.7 ns).
    """

    refine: int = 1
    second_order: bool = True
    smooth_contrast: float = 1.1
    source_radius: float = 4.0
    source_refine: int = 4
    factored: bool = True
    fast_bodies: str = "nearest_and_largest"

    def __post_init__(self):
        if self.fast_bodies not in ("nearest_and_largest", "nearest", "all"):
            raise ValueError("EikonalOptions.fast_bodies must be 'nearest_and_largest', 'nearest' or 'all' "
                             f"(got {self.fast_bodies!r})")
        if not is_whole_number(self.refine, 1, 16):
            raise ValueError(f"EikonalOptions.refine must be an integer 1..16 (got {self.refine!r})")
        if not (isinstance(self.smooth_contrast, (int, float)) and self.smooth_contrast >= 1.0
                and math.isfinite(self.smooth_contrast)):
            raise ValueError(
                f"EikonalOptions.smooth_contrast must be a finite number >= 1 (got {self.smooth_contrast!r})"
            )
        if not (isinstance(self.source_radius, (int, float)) and 0.0 <= self.source_radius <= 50.0):
            raise ValueError(
                f"EikonalOptions.source_radius must be a number 0..50 lattice steps (got {self.source_radius!r})"
            )
        if not is_whole_number(self.source_refine, 1, 16):
            raise ValueError(
                f"EikonalOptions.source_refine must be an integer 1..16 (got {self.source_refine!r})"
            )


# --------------------------------------------------------------------------
# numba kernels
# --------------------------------------------------------------------------

@njit(cache=True)
def _cell_slowness(slow, r, I, J, K):
    nx, ny, nz = slow.shape
    if I < 0 or J < 0 or K < 0:
        return np.inf
    ci, cj, ck = I // r, J // r, K // r
    if ci >= nx or cj >= ny or ck >= nz:
        return np.inf
    return slow[ci, cj, ck]


@njit(cache=True)
def _smooth_flags(cs_pad, npx, npy, npz, ratio):
    """1 where the cells around a lattice point differ by at most ``ratio``
    (``cs_pad``: lattice cells' slowness padded by inf, see :func:`_padded_cells`)."""
    out = np.zeros(npx * npy * npz, dtype=np.uint8)
    for i in range(npx):
        for j in range(npy):
            for k in range(npz):
                lo = np.inf
                hi = 0.0
                for o in range(8):
                    s = cs_pad[i + (o >> 2), j + ((o >> 1) & 1), k + (o & 1)]
                    if s < np.inf:
                        lo = min(lo, s)
                        hi = max(hi, s)
                if hi <= ratio * lo:
                    out[(i * npy + j) * npz + k] = 1
    return out


@njit(cache=True)
def _label_region(slow, seed, ratio, labels, value):
    """Give ``value`` to the unlabelled cells reached from cell number ``seed``
    over face neighbours without a jump in slowness larger than ``ratio``."""
    nx, ny, nz = slow.shape
    stack = np.empty(nx * ny * nz, dtype=np.int64)
    top = 0
    ci = seed // (ny * nz)
    cj = (seed // nz) % ny
    ck = seed % nz
    if labels[ci, cj, ck] != 0:
        return
    labels[ci, cj, ck] = value
    stack[top] = seed
    top += 1
    while top > 0:
        top -= 1
        c = stack[top]
        ci = c // (ny * nz)
        cj = (c // nz) % ny
        ck = c % nz
        sc = slow[ci, cj, ck]
        for ax in range(3):
            for d in (-1, 1):
                ni = ci + (d if ax == 0 else 0)
                nj = cj + (d if ax == 1 else 0)
                nk = ck + (d if ax == 2 else 0)
                if ni < 0 or nj < 0 or nk < 0 or ni >= nx or nj >= ny or nk >= nz:
                    continue
                if labels[ni, nj, nk] != 0:
                    continue
                sn = slow[ni, nj, nk]
                if sn <= ratio * sc and sc <= ratio * sn:
                    labels[ni, nj, nk] = value
                    stack[top] = (ni * ny + nj) * nz + nk
                    top += 1


@njit(cache=True)
def _factor_region(slow, seed_cells, ratio):
    """Model cells where the factored form is used (1) or not (0).

    The cells reached from the source cells without crossing a jump in
    slowness larger than ``ratio`` (a flood fill over face neighbours). There T / (s0 * distance) is smooth and
    the factored update removes the source singularity; across a sharp jump
    (a surface source seen from below the ground, where T/T0 has a kink along
    the critical angle) the factored differences were measured to run up to
    several per cent early, the plain ones are not.
    """
    inside = np.zeros(slow.shape, dtype=np.uint8)
    for q in range(seed_cells.shape[0]):
        _label_region(slow, seed_cells[q], ratio, inside, 1)
    return inside


@njit(cache=True, inline='always')
def _heap_sift_up(hk, hv, hpos, pos, key, val):
    """Move ``(key, val)`` up from slot ``pos`` of the binary heap to its place."""
    while pos > 0:
        parent = (pos - 1) >> 1
        if hk[parent] <= key:
            break
        hk[pos] = hk[parent]
        hv[pos] = hv[parent]
        hpos[hv[pos]] = pos
        pos = parent
    hk[pos] = key
    hv[pos] = val
    hpos[val] = pos


@njit(cache=True, inline='always')
def _heap_pop(hk, hv, hpos, size):
    """Remove the smallest key of the heap; returns it, its value and the new size."""
    key = hk[0]
    val = hv[0]
    size -= 1
    if size > 0:
        lk = hk[size]
        lv = hv[size]
        pos = 0
        while True:
            c = 2 * pos + 1
            if c >= size:
                break
            if c + 1 < size and hk[c + 1] < hk[c]:
                c += 1
            if hk[c] >= lk:
                break
            hk[pos] = hk[c]
            hv[pos] = hv[c]
            hpos[hv[pos]] = pos
            pos = c
        hk[pos] = lk
        hv[pos] = lv
        hpos[lv] = pos
    return key, val, size


@njit(cache=True, inline='always')
def _solve(A, B, C, add, s, use, m):
    """Largest root tau of sum over used axes (A tau - B)^2 = s^2, or inf
    (``C`` instead of ``B`` when ``add``: the additive-factor coefficients;
    passing both avoids choosing an array in the hot loop, which costs
    reference counting).

    The root is kept only when every used difference is upwind (A tau - B >= 0):
    otherwise the stencil does not describe a front arriving from those
    neighbours and a smaller stencil covers the case.
    """
    a = 0.0
    b = 0.0
    c = -s * s
    for q in range(m):
        u = use[q]
        a += A[u] * A[u]
        bu = C[u] if add else B[u]
        b += A[u] * bu
        c += bu * bu
    disc = b * b - a * c
    if disc < 0.0 or a <= 0.0:
        return np.inf
    tau = (b + math.sqrt(disc)) / a
    for q in range(m):
        u = use[q]
        bu = C[u] if add else B[u]
        if A[u] * tau - bu < -1e-12 * (abs(bu) + s):
            return np.inf
    return tau


@njit(cache=True, inline='always')
def _factored_stencil(use, kn, Af, qa, qb):
    """Fill ``use`` with the differenced axis-sides ``qa`` (and ``qb`` if >= 0)
    plus the axes that have no accepted neighbour at all; return the count.

    On such an axis the factored form keeps the exact part tau dT0/dx_a of the
    derivative and sets d(tau)/dx_a = 0 (tau is smooth near the source, the
    idea of Fomel, Luo and Zhao 2009). Without it a point whose partner across
    the source plane has the same distance (a source half-way between lattice
    planes, a tie) was updated from fewer axes than its gradient has and came
    out late: 0.25 % in a homogeneous medium, 0.1 % at every later point.
    """
    nu = 0
    use[nu] = qa
    nu += 1
    if qb >= 0:
        use[nu] = qb
        nu += 1
    for a in range(3):
        if 2 * a == qa or 2 * a + 1 == qa or 2 * a == qb or 2 * a + 1 == qb:
            continue
        if kn[2 * a] == 0 and kn[2 * a + 1] == 0 and Af[6 + a] < np.inf:
            use[nu] = 6 + a
            nu += 1
    return nu


@njit(cache=True, inline='always')
def _fastest_cell(cs, cf, ca, a, sa, b, sb, s_mean):
    """The fastest of the octant cells on side ``sa`` of axis ``a`` (and side ``sb`` of
    axis ``b`` unless ``b < 0``): its slowness, factored flag and air flag, and the
    slowness of the fastest of them inside the source's smooth region (inf: none).

    An edge update (one axis) looks at the 4 cells sharing the edge, a face update
    (two axes) at the 2 cells sharing the face (Podvin and Lecomte, 1991). In a
    smooth region (``s_mean > 0``) the mean slowness replaces the fastest one.
    """
    s = np.inf
    s_in = np.inf
    fac = 0
    fa = 0
    for o in range(8):
        if ((o >> (2 - a)) & 1) != sa:
            continue
        if b >= 0 and ((o >> (2 - b)) & 1) != sb:
            continue
        if cs[o] < s:
            s = cs[o]
            fac = cf[o]
            fa = ca[o]
        if cf[o] == 1 and cs[o] < s_in:
            s_in = cs[o]
    if s_mean > 0.0:
        if s < np.inf:
            s = s_mean
        if s_in < np.inf:
            s_in = s_mean
    return s, fac, fa, s_in


@njit(cache=True, inline='always')
def _multi_axis_min(K, A, B, C, add, s, use, keep, nk):
    """Smallest valid root over the 2D and 3D stencils of one coefficient set.

    For a point whose eight cells are all alike (one slowness ``s``), the
    candidates of all 12 face and 8 octant stencils reduce to those built from
    non-dominated sides: a side with a larger or equal ``A`` and a smaller or
    equal ``B`` than the other side of its axis gives, in every stencil, a
    quadratic term at least as large at any time, so the stencil with it has a
    valid root no later (the upwind choice of the Godunov form of the eikonal,
    Sethian and Popovici 1999). The result equals the full enumeration.
    """
    for a in range(3):
        q0 = 2 * a
        q1 = q0 + 1
        b0 = C[q0] if add else B[q0]
        b1 = C[q1] if add else B[q1]
        nk[a] = 0
        if K[q0] == 1:
            keep[a, nk[a]] = q0
            nk[a] += 1
        if K[q1] == 1:
            keep[a, nk[a]] = q1
            nk[a] += 1
        if nk[a] == 2 and A[q0] > 0.0 and A[q1] > 0.0:
            if A[q0] >= A[q1] and b0 <= b1:
                nk[a] = 1
            elif A[q1] >= A[q0] and b1 <= b0:
                keep[a, 0] = q1
                nk[a] = 1
    best = np.inf
    for a in range(3):
        for b in range(a + 1, 3):
            for ia in range(nk[a]):
                for ib in range(nk[b]):
                    use[0] = keep[a, ia]
                    use[1] = keep[b, ib]
                    best = min(best, _solve(A, B, C, add, s, use, 2))
    for i0 in range(nk[0]):
        for i1 in range(nk[1]):
            for i2 in range(nk[2]):
                use[0] = keep[0, i0]
                use[1] = keep[1, i1]
                use[2] = keep[2, i2]
                best = min(best, _solve(A, B, C, add, s, use, 3))
    return best


@njit(cache=True, inline='always')
def _side_coefficients(T, state, fam, m1, m2, a, h, second, coefficients, q):
    """Plain one-sided difference of axis-side ``q`` from the values of family
    ``fam`` (0, 1; 2: the earlier of the two), into ``coefficients = (A, B)``;
    ``second``: second order allowed here. Returns (known, second order used)."""
    A, B = coefficients
    if fam == 2:
        t1 = min(T[2 * m1] if state[2 * m1] == 2 else np.inf, T[2 * m1 + 1] if state[2 * m1 + 1] == 2 else np.inf)
    else:
        t1 = T[2 * m1 + fam] if state[2 * m1 + fam] == 2 else np.inf
    if t1 == np.inf:
        return False, False
    two = False
    t2 = 0.0
    if second:
        if fam == 2:
            t2 = min(T[2 * m2] if state[2 * m2] == 2 else np.inf, T[2 * m2 + 1] if state[2 * m2 + 1] == 2 else np.inf)
        else:
            t2 = T[2 * m2 + fam] if state[2 * m2 + fam] == 2 else np.inf
        two = t2 <= t1
    if two:
        A[q] = 1.5 / h[a]
        B[q] = (2.0 * t1 - 0.5 * t2) / h[a]
    else:
        A[q] = 1.0 / h[a]
        B[q] = t1 / h[a]
    return True, two


@njit(cache=True, _nrt=False)
def _march_loop(cells, points, lattice, source, fast_bodies, settings, heap, scratch):
    """The marching loop of :func:`_march` over arrays it allocated.

    Compiled without numba's reference counting (``_nrt=False``: nothing is
    allocated here): the array arguments of the inlined helpers otherwise
    cost an atomic increment and decrement per call, measured as a third of
    the march. Returns the time up to which the field is final.

    Long because it is the hot loop of the solver, one pass per accepted value:
    its stages (the eight cells around a neighbour, the one-sided differences
    of each family, the stencils, the heap update) share some thirty local
    values, and the helpers it does call are inlined; splitting the rest would
    pass them through tuples on every update for no gain in clarity.

    The arguments are tuples of arrays and numbers (numba passes them as
    plain structures, unpacked once here):

    - ``cells``: ``(cs_pad, cf_pad, ca_pad)``, see :func:`_march`;
    - ``points``: per lattice point ``(smooth, uni, is_target)``: second order
      allowed, eight cells alike, receiver corner (0 no, 1 waited for, 2 reached);
    - ``lattice``: ``(h, strides, dims)``: spacing (m), flat-index strides and
      number of points per axis;
    - ``source``: ``(src, s0, seed_nodes, seed_times, seed_direct)``;
    - ``fast_bodies``: ``(xes, s1s)``, apexes and slownesses of the additive factors;
    - ``settings``: ``(second_order, targets, margin, dominance)``;
    - ``heap``: ``(T, state, hk, hv, hpos)``, times and states per value and the binary heap;
    - ``scratch``: ``((Af, Bf, A1, B1, C1, Am, Bm, Cm), (k0, k1, km, mf), (cs, cf, ca),
      (use, keep, nk, ijk, g))``, see :func:`_march`.
    """
    cs_pad, cf_pad, ca_pad = cells
    smooth, uni, is_target = points
    h, strides, dims = lattice
    npy = dims[1]
    npz = dims[2]
    hx = h[0]
    hy = h[1]
    hz = h[2]
    src, s0, seed_nodes, seed_times, seed_direct = source
    xes, s1s = fast_bodies
    second_order, targets, margin, dominance = settings
    T, state, hk, hv, hpos = heap
    coefficients, side_flags, cell_scratch, index_scratch = scratch
    Af, Bf, A1, B1, C1, Am, Bm, Cm = coefficients
    k0, k1, km, mf = side_flags
    cs, cf, ca = cell_scratch
    use, keep, nk, ijk, g = index_scratch
    size = 0
    # start values are final: a difference stencil next to the source, where
    # the front is a point, only spoils them (measured: second-order plain
    # updates across the source ran 13 % early 1.6 steps from it)
    for q in range(seed_nodes.shape[0]):
        v = 2 * seed_nodes[q] + (0 if seed_direct[q] == 1 else 1)
        if seed_times[q] < T[v]:
            T[v] = seed_times[q]
            if state[v] == 3:
                _heap_sift_up(hk, hv, hpos, hpos[v], T[v], v)
            else:
                state[v] = 3
                _heap_sift_up(hk, hv, hpos, size, T[v], v)
                size += 1

    remaining = 0
    for q in range(targets.shape[0]):
        if is_target[targets[q]] == 0:
            is_target[targets[q]] = 1
            remaining += 1
    t_stop = np.inf

    while size > 0:
        t, v, size = _heap_pop(hk, hv, hpos, size)
        if t > t_stop:
            break
        n = v >> 1
        if remaining > 0 and is_target[n] == 1:
            is_target[n] = 2  # reached: its first family to arrive is its first arrival
            remaining -= 1
            if remaining == 0:
                t_stop = t + margin
        other = v ^ 1
        if state[other] == 2 and T[other] + dominance < t:
            state[v] = 4  # dominated by the other family here: final, not marched on
            continue
        state[v] = 2
        fam = v & 1
        # what this value can change at a neighbour: its own family's
        # candidates, and the earliest-of-both candidates when it is the
        # earlier of the point's two times (the other is not in yet)
        is_min = state[other] != 2 and state[other] != 4
        i0 = n // strides[0]
        j0 = (n // strides[1]) % npy
        kk0 = n % npz
        for ax in range(3):
            for d in (-1, 1):
                ijk[0] = i0
                ijk[1] = j0
                ijk[2] = kk0
                ijk[ax] += d
                if ijk[ax] < 0 or ijk[ax] >= dims[ax]:
                    continue
                m = n + d * strides[ax]
                # skip a neighbour this value cannot change
                if state[2 * m + 1] >= 2 and (fam == 1 or state[2 * m] >= 2):
                    continue
                if fam == 0 and state[2 * m] >= 2 and not is_min:
                    continue
                i, j, k = ijk[0], ijk[1], ijk[2]
                # the 8 cells around the point (padded arrays: no bounds tests);
                # the factored and additive terms are worked out only where a
                # cell around the point can use them
                any_f = False
                any_out = False
                reg = 0
                if uni[m] == 1:
                    c_s = cs_pad[i, j, k]
                    c_f = cf_pad[i, j, k]
                    c_a = ca_pad[i, j, k]
                    for o in range(8):
                        cs[o] = c_s
                        cf[o] = c_f
                        ca[o] = c_a
                    any_f = c_f == 1
                    any_out = c_f == 0
                    reg = c_a
                else:
                    for o in range(8):
                        pi = i + (o >> 2)
                        pj = j + ((o >> 1) & 1)
                        pk = k + (o & 1)
                        cs[o] = cs_pad[pi, pj, pk]
                        cf[o] = cf_pad[pi, pj, pk]
                        ca[o] = ca_pad[pi, pj, pk]
                        if cf[o] == 1:
                            any_f = True
                        elif cs[o] < np.inf:
                            any_out = True
                        if ca[o] != 0 and reg == 0:
                            reg = ca[o]
                has_in = any_f
                any_f = any_f and fam == 0 and state[2 * m] < 2
                # the additive factor of the fast body around the point (its apex
                # and slowness; a point between two bodies takes the first found)
                s1 = s1s[reg - 1] if reg > 0 else 0.0
                use_add = s1 > 0.0
                x0 = i * hx - src[0]
                x1 = j * hy - src[1]
                x2 = k * hz - src[2]
                T0 = 0.0
                if any_f:
                    dist = math.sqrt(x0 * x0 + x1 * x1 + x2 * x2)
                    T0 = s0 * dist
                    if dist > 0.0:
                        g[0] = s0 * x0 / dist
                        g[1] = s0 * x1 / dist
                        g[2] = s0 * x2 / dist
                    else:
                        g[0] = 0.0
                        g[1] = 0.0
                        g[2] = 0.0
                    # virtual axes only in the slab of a tie: the point and its
                    # mirror across the source plane are equally far from the source
                    Af[6] = abs(g[0]) if abs(x0) <= 0.5 * hx * (1.0 + 1e-9) else np.inf
                    Af[7] = abs(g[1]) if abs(x1) <= 0.5 * hy * (1.0 + 1e-9) else np.inf
                    Af[8] = abs(g[2]) if abs(x2) <= 0.5 * hz * (1.0 + 1e-9) else np.inf
                e0 = 0.0
                e1 = 0.0
                e2 = 0.0
                re = 0.0
                if use_add:
                    e0 = i * hx - xes[reg - 1, 0]
                    e1 = j * hy - xes[reg - 1, 1]
                    e2 = k * hz - xes[reg - 1, 2]
                    re = math.sqrt(e0 * e0 + e1 * e1 + e2 * e2)
                need1 = state[2 * m + 1] < 2
                if not (any_f or (need1 and (fam == 1 or (any_out and is_min)))):
                    continue
                # (family 1 from its own values only under cells of the
                # source's region; the earliest of both only under other cells)
                do1 = need1 and fam == 1 and has_in
                dom = need1 and any_out and is_min
                n_known = 0
                for a in range(3):
                    for sd in range(2):
                        q = 2 * a + sd
                        k0[q] = 0
                        k1[q] = 0
                        km[q] = 0
                        mf[q] = 0
                        dd = 2 * sd - 1
                        c1 = ijk[a] + dd
                        if c1 < 0 or c1 >= dims[a]:
                            continue
                        m1 = m + dd * strides[a]
                        if state[2 * m1] != 2 and state[2 * m1 + 1] != 2:
                            continue
                        n_known += 1
                        c2 = c1 + dd
                        m2 = m1 + dd * strides[a]
                        # second order (Sethian and Popovici 1999) when the point
                        # two steps back is known in the same set, earlier, and
                        # all in smooth slowness; first order across sharp contrasts
                        two_ok = c2 >= 0 and c2 < dims[a] and smooth[m] == 1 and smooth[m1] == 1
                        if do1 or dom:
                            two1 = False
                            twom = False
                            if do1:
                                ok, two1 = _side_coefficients(T, state, 1, m1, m2, a, h, second_order and two_ok,
                                                              (A1, B1), q)
                                k1[q] = ok
                            if dom:
                                okm, twom = _side_coefficients(T, state, 2, m1, m2, a, h,
                                                               second_order and two_ok, (Am, Bm), q)
                                km[q] = okm
                                # a 1D update takes the additive factor only from a wave
                                # already in the fast medium (family 1 earliest there), not
                                # from the source's own wave at the fast cells' face: in an
                                # 8 m air-filled cube that ran 1 ns early (0.4 %)
                                mf[q] = state[2 * m1 + 1] == 2 and (
                                    state[2 * m1] != 2 or T[2 * m1 + 1] <= T[2 * m1])
                            if use_add and re > 0.0:
                                # T1 = s1 |x - xe|: differences of T - T1 plus the
                                # exact derivative of T1 (the additive factor)
                                w0 = e0 + (dd * hx if a == 0 else 0.0)
                                w1 = e1 + (dd * hy if a == 1 else 0.0)
                                w2 = e2 + (dd * hz if a == 2 else 0.0)
                                t1n = s1 * math.sqrt(w0 * w0 + w1 * w1 + w2 * w2)
                                ea = e0 if a == 0 else (e1 if a == 1 else e2)
                                g1s = -dd * s1 * ea / re
                                v0 = w0 + (dd * hx if a == 0 else 0.0)
                                v1 = w1 + (dd * hy if a == 1 else 0.0)
                                v2 = w2 + (dd * hz if a == 2 else 0.0)
                                t1nn = s1 * math.sqrt(v0 * v0 + v1 * v1 + v2 * v2)
                                comb2 = (1.5 * s1 * re - 2.0 * t1n + 0.5 * t1nn - h[a] * g1s) / h[a]
                                comb1 = (s1 * re - t1n - h[a] * g1s) / h[a]
                                if k1[q] == 1:
                                    C1[q] = B1[q] + (comb2 if two1 else comb1)
                                if km[q] == 1:
                                    Cm[q] = Bm[q] + (comb2 if twom else comb1)
                            else:
                                C1[q] = B1[q]
                                Cm[q] = Bm[q]
                        if not any_f or state[2 * m1] != 2:
                            continue
                        # family 0, factored form T = T0 tau (Fomel, Luo and Zhao
                        # 2009): d(T0 tau) = tau dT0 (exact) + T0 d(tau) (differenced)
                        k0[q] = 1
                        Tm1 = T[2 * m1]
                        two = second_order and two_ok and state[2 * m2] == 2 and T[2 * m2] <= Tm1
                        T2 = T[2 * m2] if two else 0.0
                        y0 = x0 + (dd * hx if a == 0 else 0.0)
                        y1 = x1 + (dd * hy if a == 1 else 0.0)
                        y2 = x2 + (dd * hz if a == 2 else 0.0)
                        r1 = math.sqrt(y0 * y0 + y1 * y1 + y2 * y2)
                        r2 = 0.0
                        if two:
                            z0 = y0 + (dd * hx if a == 0 else 0.0)
                            z1 = y1 + (dd * hy if a == 1 else 0.0)
                            z2 = y2 + (dd * hz if a == 2 else 0.0)
                            r2 = math.sqrt(z0 * z0 + z1 * z1 + z2 * z2)
                        ga = -g[a] if dd > 0 else g[a]
                        if r1 == 0.0 or (two and r2 == 0.0):
                            # a neighbour is the source, where tau has no limit
                            # (2.6 below a surface source, 1 above): plain form
                            if two:
                                Af[q] = 1.5 / h[a] * T0
                                Bf[q] = (2.0 * Tm1 - 0.5 * T2) / h[a]
                            else:
                                Af[q] = T0 / h[a]
                                Bf[q] = Tm1 / h[a]
                            continue
                        tau1 = Tm1 / (s0 * r1)
                        if two:
                            tau2 = T2 / (s0 * r2)
                            Af[q] = ga + T0 * 1.5 / h[a]
                            Bf[q] = T0 * (2.0 * tau1 - 0.5 * tau2) / h[a]
                        else:
                            Af[q] = ga + T0 / h[a]
                            Bf[q] = T0 * tau1 / h[a]
                if n_known == 0:
                    continue
                tie = False
                if any_f:
                    for a in range(3):
                        if Af[6 + a] < np.inf and k0[2 * a] == 0 and k0[2 * a + 1] == 0:
                            tie = True
                s_mean = -1.0
                if uni[m] == 1:
                    s_mean = cs[0]
                elif smooth[m] == 1:
                    s_mean = 0.0
                    n_in = 0
                    for o in range(8):
                        if cs[o] < np.inf:
                            s_mean += cs[o]
                            n_in += 1
                    s_mean /= n_in
                best0 = np.inf
                best1 = np.inf
                if uni[m] == 1 and not tie:
                    # all eight cells alike: every stencil has the same cell, and
                    # the face and octant stencils reduce to the upwind sides
                    s = cs[0]
                    if cf[0] == 1:
                        for q in range(6):
                            if k0[q] == 1 and Af[q] > 0.0:
                                best0 = min(best0, T0 * (Bf[q] + s) / Af[q])
                            if k1[q] == 1:
                                best1 = min(best1, ((C1[q] if ca[0] != 0 else B1[q]) + s) / A1[q])
                        if any_f:
                            best0 = min(best0, T0 * _multi_axis_min(k0, Af, Bf, Bf, False, s, use, keep, nk))
                        best1 = min(best1, _multi_axis_min(k1, A1, B1, C1, ca[0] != 0, s, use, keep, nk))
                    else:
                        for q in range(6):
                            if km[q] == 1:
                                best1 = min(best1, ((Cm[q] if ca[0] != 0 and mf[q] == 1 else Bm[q]) + s) / Am[q])
                        best1 = min(best1, _multi_axis_min(km, Am, Bm, Cm, ca[0] != 0, s, use, keep, nk))
                    n_known = -1  # done: skip the general stencils below
                if n_known > 0:
                    # 1D along an edge: the fastest of the 4 cells sharing it, 2D in
                    # a face: the faster of its 2 cells, 3D: the octant's own cell.
                    # This is the rule of Podvin and Lecomte (1991) for very
                    # contrasted models: a wave along an interface runs in the faster
                    # medium (the air wave along the ground surface).
                    for a in range(3):
                        for sd in range(2):
                            q = 2 * a + sd
                            if k0[q] == 0 and k1[q] == 0 and km[q] == 0:
                                continue
                            s, fac, fa, s_in = _fastest_cell(cs, cf, ca, a, sd, -1, 0, s_mean)
                            if s == np.inf:
                                continue
                            if k0[q] == 1 and s_in < np.inf:
                                # the source's wave, in the fastest cell of its own region
                                if tie:
                                    nu = _factored_stencil(use, k0, Af, q, -1)
                                    cand = T0 * _solve(Af, Bf, Bf, False, s_in, use, nu)
                                else:
                                    # the common case, a root of a linear equation
                                    cand = T0 * (Bf[q] + s_in) / Af[q] if Af[q] > 0.0 else np.inf
                                best0 = min(best0, cand)
                            if fac == 0 and km[q] == 1:
                                best1 = min(best1, ((Cm[q] if fa != 0 and mf[q] == 1 else Bm[q]) + s) / Am[q])
                            elif fac == 1 and k1[q] == 1:
                                best1 = min(best1, ((C1[q] if fa != 0 else B1[q]) + s) / A1[q])
                    for a in range(3):
                        for b in range(a + 1, 3):
                            for sa in range(2):
                                qa = 2 * a + sa
                                for sb in range(2):
                                    qb = 2 * b + sb
                                    s, fac, fa, s_in = _fastest_cell(cs, cf, ca, a, sa, b, sb, s_mean)
                                    if s == np.inf:
                                        continue
                                    use[0] = qa
                                    use[1] = qb
                                    if k0[qa] == 1 and k0[qb] == 1 and s_in < np.inf:
                                        nu = 2
                                        if tie:
                                            nu = _factored_stencil(use, k0, Af, qa, qb)
                                        best0 = min(best0, T0 * _solve(Af, Bf, Bf, False, s_in, use, nu))
                                        use[0] = qa
                                        use[1] = qb
                                    if fac == 0 and km[qa] == 1 and km[qb] == 1:
                                        add = fa != 0
                                        best1 = min(best1, _solve(Am, Bm, Cm, add, s, use, 2))
                                    elif fac == 1 and k1[qa] == 1 and k1[qb] == 1:
                                        best1 = min(best1, _solve(A1, B1, C1, fa != 0, s, use, 2))
                    for o in range(8):
                        if cs[o] == np.inf:
                            continue
                        use[0] = o >> 2
                        use[1] = 2 + ((o >> 1) & 1)
                        use[2] = 4 + (o & 1)
                        s = cs[o] if s_mean < 0.0 else s_mean
                        if cf[o] == 1 and k0[use[0]] == 1 and k0[use[1]] == 1 and k0[use[2]] == 1:
                            best0 = min(best0, T0 * _solve(Af, Bf, Bf, False, s, use, 3))
                        if cf[o] == 0 and km[use[0]] == 1 and km[use[1]] == 1 and km[use[2]] == 1:
                            add = ca[o] != 0
                            best1 = min(best1, _solve(Am, Bm, Cm, add, s, use, 3))
                        elif cf[o] == 1 and k1[use[0]] == 1 and k1[use[1]] == 1 and k1[use[2]] == 1:
                            best1 = min(best1, _solve(A1, B1, C1, ca[o] != 0, s, use, 3))
                v0_ = 2 * m
                if best0 < T[v0_] and state[v0_] < 2:
                    T[v0_] = best0
                    if state[v0_] == 1:
                        _heap_sift_up(hk, hv, hpos, hpos[v0_], best0, v0_)
                    else:
                        state[v0_] = 1
                        _heap_sift_up(hk, hv, hpos, size, best0, v0_)
                        size += 1
                v1_ = 2 * m + 1
                if best1 < T[v1_] and state[v1_] < 2:
                    T[v1_] = best1
                    if state[v1_] == 1:
                        _heap_sift_up(hk, hv, hpos, hpos[v1_], best1, v1_)
                    else:
                        state[v1_] = 1
                        _heap_sift_up(hk, hv, hpos, size, best1, v1_)
                        size += 1
    return t_stop


@njit(cache=True)
def _march(cells, lattice, source, fast_bodies, smooth, settings):
    """Fast marching over the lattice with two wave families per point.

    Family 0 is the source's own wave in its smooth region (the factored form
    of Fomel, Luo and Zhao 2009); family 1 every wave that crossed a sharp
    contrast: the air wave, head waves, waves through a void (plain form).
    Inside the source's region a stencil uses neighbours of one family only:
    where the refracted air wave overtakes the direct wave a few metres from a
    borehole source the two fronts cross at a kink, and stencils mixing them ran
    up to 1.6 ns early. Where a stencil's governing cell lies outside the
    region, family 1 takes each neighbour's earlier time: that is where the
    source's wave crosses into another medium, and where a wave along the
    interface feeds its head wave back into the source's medium. A point's
    first arrival is the earlier of its two times.

    A family's value more than ``dominance`` ns later than the other family's
    at the same point is not marched on (along its own rays a family's time
    grows at the full slowness, the other's at most as fast, so it stays later
    downstream).

    ``cells = (cs_pad, cf_pad, ca_pad)`` are the lattice cells' slowness,
    factored flag and fast-region flag, padded by one cell (inf / 0) all round:
    cell (I, J, K) sits at [I + 1, J + 1, K + 1] (see :func:`_padded_cells`).
    ``lattice = ((npx, npy, npz), (hx, hy, hz))``: points per axis and spacing
    (m). ``source = (src, s0, seed_nodes, seed_times, seed_direct)``: position
    (m from the lattice origin), slowness of the factored form, start values
    and whether each came by the direct wave. ``fast_bodies = (xes, s1s)``: see
    :func:`_fast_region`. ``smooth``: per lattice point, 1 where second order is
    allowed. ``settings = (second_order, targets, margin, dominance)``: with
    ``targets`` (lattice point numbers), the march stops ``margin`` ns after the
    last of them is reached; later points are set to inf. Returns the
    first-arrival times, the times per family and the time up to which they are
    final (inf: all).
    """
    cs_pad, cf_pad, ca_pad = cells
    (npx, npy, npz), (hx, hy, hz) = lattice
    targets = settings[1]
    n_nodes = npx * npy * npz
    # entry 2 n + f: point n, family f
    T = np.full(2 * n_nodes, np.inf)
    # 0 far, 1 trial, 2 accepted, 3 start, 4 accepted but dominated (not used)
    state = np.zeros(2 * n_nodes, dtype=np.uint8)
    # binary heap with decrease-key: at most one entry per value, so it never
    # grows; np.empty leaves the pages untouched beyond the largest front
    hk = np.empty(2 * n_nodes)
    hv = np.empty(2 * n_nodes, dtype=np.int64)
    hpos = np.empty(2 * n_nodes, dtype=np.int32)
    h = np.array([hx, hy, hz])
    strides = np.array([npy * npz, npz, 1], dtype=np.int64)
    dims = np.array([npx, npy, npz], dtype=np.int64)
    # scratch, allocated once: per axis-side difference coefficients. Family 0
    # in the factored form (Af, Bf; entries 6..8: an axis with no accepted
    # neighbour, where the factored form keeps the exact term tau dT0/dx_a and
    # takes d(tau)/dx_a = 0); family 1 (A1, B1) and the earlier of the two
    # (Am, Bm) in the plain form; C1, Cm the same with the additive factor of
    # the fast-medium wave (T = s1 |x - xe| + u, u differenced), used where the
    # governing cell is in the fast region next to the source.
    Af = np.zeros(9)
    Bf = np.zeros(9)
    A1 = np.empty(6)
    B1 = np.empty(6)
    C1 = np.empty(6)
    Am = np.empty(6)
    Bm = np.empty(6)
    Cm = np.empty(6)
    k0 = np.zeros(6, dtype=np.uint8)
    k1 = np.zeros(6, dtype=np.uint8)
    km = np.zeros(6, dtype=np.uint8)
    mf = np.zeros(6, dtype=np.uint8)
    cs = np.empty(8)
    cf = np.zeros(8, dtype=np.uint8)
    ca = np.zeros(8, dtype=np.uint8)
    use = np.empty(3, dtype=np.int64)
    keep = np.empty((3, 2), dtype=np.int64)
    nk = np.zeros(3, dtype=np.int64)
    ijk = np.empty(3, dtype=np.int64)
    g = np.empty(3)

    uni = _uniform_points(cs_pad, cf_pad, ca_pad, npx, npy, npz)
    is_target = np.zeros(n_nodes if targets.shape[0] > 0 else 0, dtype=np.uint8)

    t_stop = _march_loop(cells, (smooth, uni, is_target), (h, strides, dims), source, fast_bodies, settings,
                         (T, state, hk, hv, hpos),
                         ((Af, Bf, A1, B1, C1, Am, Bm, Cm), (k0, k1, km, mf), (cs, cf, ca), (use, keep, nk, ijk, g)))
    out = np.full(n_nodes, np.inf)
    families = np.full((2, n_nodes), np.inf)
    for n in range(n_nodes):
        for f in range(2):
            if state[2 * n + f] == 2 or state[2 * n + f] == 4:
                families[f, n] = T[2 * n + f]
                if T[2 * n + f] < out[n]:
                    out[n] = T[2 * n + f]
    return out, families, t_stop


@njit(cache=True)
def _uniform_points(cs_pad, cf_pad, ca_pad, npx, npy, npz):
    """1 at lattice points whose eight cells are alike in slowness and flags (and
    inside the box): their stencils all share one cell."""
    uni = np.zeros(npx * npy * npz, dtype=np.uint8)
    for i in range(npx):
        for j in range(npy):
            for k in range(npz):
                c_s = cs_pad[i, j, k]
                if c_s == np.inf:
                    continue
                c_f = cf_pad[i, j, k]
                c_a = ca_pad[i, j, k]
                same = True
                for o in range(1, 8):
                    pi = i + (o >> 2)
                    pj = j + ((o >> 1) & 1)
                    pk = k + (o & 1)
                    if cs_pad[pi, pj, pk] != c_s or cf_pad[pi, pj, pk] != c_f or ca_pad[pi, pj, pk] != c_a:
                        same = False
                        break
                if same:
                    uni[(i * npy + j) * npz + k] = 1
    return uni


@njit(cache=True)
def _straight_time(slow, r, npx, npy, npz, hx, hy, hz, u, v):
    """Time along the straight segment from lattice position u to v.

    Exact path lengths per fine cell (the plane crossings of Siddon 1985). A
    segment lying in a cell face takes the faster of the cells on both sides,
    the rule of Podvin and Lecomte (1991): a wave creeping along a face travels
    in the faster medium, however thin the layer it needs.
    """
    d0 = v[0] - u[0]
    d1 = v[1] - u[1]
    d2 = v[2] - u[2]
    length = math.sqrt((d0 * hx) ** 2 + (d1 * hy) ** 2 + (d2 * hz) ** 2)
    if length == 0.0:
        return 0.0
    cap = 2 + int(abs(d0)) + int(abs(d1)) + int(abs(d2)) + 6
    al = np.empty(cap)
    na = 0
    al[na] = 0.0
    na += 1
    al[na] = 1.0
    na += 1
    for a in range(3):
        ua = u[a]
        da = v[a] - ua
        if abs(da) < 1e-12:
            continue
        lo = min(ua, v[a])
        hi = max(ua, v[a])
        p = math.floor(lo) + 1.0
        while p < hi:
            al[na] = (p - ua) / da
            na += 1
            p += 1.0
    al = np.sort(al[:na])
    lim = (npx - 1, npy - 1, npz - 1)
    total = 0.0
    for q in range(na - 1):
        seg = al[q + 1] - al[q]
        if seg <= 1e-12:
            continue
        am = 0.5 * (al[q] + al[q + 1])
        m0 = u[0] + am * d0
        m1 = u[1] + am * d1
        m2 = u[2] + am * d2
        s_best = np.inf
        # cells holding the midpoint; two along an axis when it lies in a face
        lo0 = int(math.floor(m0))
        lo1 = int(math.floor(m1))
        lo2 = int(math.floor(m2))
        n0 = 1
        n1 = 1
        n2 = 1
        if abs(m0 - round(m0)) < _ON_PLANE_FRACTION:
            lo0 = int(round(m0)) - 1
            n0 = 2
        if abs(m1 - round(m1)) < _ON_PLANE_FRACTION:
            lo1 = int(round(m1)) - 1
            n1 = 2
        if abs(m2 - round(m2)) < _ON_PLANE_FRACTION:
            lo2 = int(round(m2)) - 1
            n2 = 2
        for c0 in range(lo0, lo0 + n0):
            for c1 in range(lo1, lo1 + n1):
                for c2 in range(lo2, lo2 + n2):
                    if c0 >= lim[0] or c1 >= lim[1] or c2 >= lim[2]:
                        continue
                    s_best = min(s_best, _cell_slowness(slow, r, c0, c1, c2))
        total += s_best * seg * length
    return total


@njit(cache=True)
def _ball_seeds(slow, r, npx, npy, npz, hx, hy, hz, u, radius):
    """Straight-ray times to every lattice point within ``radius`` steps."""
    i_lo = max(0, int(math.floor(u[0] - radius)))
    i_hi = min(npx - 1, int(math.ceil(u[0] + radius)))
    j_lo = max(0, int(math.floor(u[1] - radius)))
    j_hi = min(npy - 1, int(math.ceil(u[1] + radius)))
    k_lo = max(0, int(math.floor(u[2] - radius)))
    k_hi = min(npz - 1, int(math.ceil(u[2] + radius)))
    n_max = (i_hi - i_lo + 1) * (j_hi - j_lo + 1) * (k_hi - k_lo + 1)
    nodes = np.empty(n_max, dtype=np.int64)
    times = np.empty(n_max)
    v = np.empty(3)
    n = 0
    for i in range(i_lo, i_hi + 1):
        for j in range(j_lo, j_hi + 1):
            for k in range(k_lo, k_hi + 1):
                # the corners of the cell(s) holding the source always count
                near = abs(i - u[0]) < 1.0 + 1e-9 and abs(j - u[1]) < 1.0 + 1e-9 and abs(k - u[2]) < 1.0 + 1e-9
                if (i - u[0]) ** 2 + (j - u[1]) ** 2 + (k - u[2]) ** 2 > radius * radius and not near:
                    continue
                v[0] = i
                v[1] = j
                v[2] = k
                t = _straight_time(slow, r, npx, npy, npz, hx, hy, hz, u, v)
                if t < np.inf:
                    nodes[n] = (i * npy + j) * npz + k
                    times[n] = t
                    n += 1
    return nodes[:n], times[:n]


# --------------------------------------------------------------------------
# public function
# --------------------------------------------------------------------------

def _check_inputs(grid, slowness_ns_per_m, source_xyz_m, options):
    if not isinstance(grid, Grid):
        raise ValueError(f"grid must be a reconstruct.model.grid.Grid (got {type(grid).__name__})")
    if not isinstance(options, EikonalOptions):
        raise ValueError(f"options must be an EikonalOptions (got {type(options).__name__})")
    s = np.asarray(slowness_ns_per_m, dtype=float)
    if s.shape != tuple(grid.shape):
        raise ValueError(
            f"slowness_ns_per_m has shape {s.shape}, expected grid.shape {tuple(grid.shape)}"
        )
    if not np.all(np.isfinite(s)):
        raise ValueError("slowness_ns_per_m holds NaN or infinite values; give a finite slowness in every cell")
    if np.any(s <= 0):
        raise ValueError("slowness_ns_per_m must be > 0 in every cell (ns/m)")
    p = np.asarray(source_xyz_m, dtype=float)
    if p.shape != (3,):
        raise ValueError(f"source_xyz_m has shape {p.shape}, expected (3,)")
    if not np.all(np.isfinite(p)):
        raise ValueError("source_xyz_m holds NaN or infinite coordinates")
    if not grid.contains(p)[0]:
        raise ValueError(
            f"source_xyz_m {tuple(p)} lies outside the model box "
            f"{tuple(grid.origin_m)} to {tuple(grid.end_m)} m"
        )
    return np.ascontiguousarray(s), p


def _padded_cells(values, r, fill):
    """Values per lattice cell (model cells refined ``r`` times), padded by one
    cell all round with ``fill``: lattice cell (I, J, K) at [I + 1, J + 1, K + 1]."""
    fine = values
    for axis in range(3):
        fine = np.repeat(fine, r, axis=axis)
    out = np.full(tuple(n + 2 for n in fine.shape), fill, dtype=values.dtype)
    out[1:-1, 1:-1, 1:-1] = fine
    return out


def _source_slowness(slow, r, n_lat, u):
    """Slowness of the fastest lattice cell touching the source, for the factor."""
    cand = []
    for a in range(3):
        base = math.floor(u[a])
        opts = {base - 1, base} if u[a] == base else {base}
        cand.append([c for c in opts if 0 <= c <= n_lat[a] - 2] or [min(max(base, 0), n_lat[a] - 2)])
    cells = [(ci // r, cj // r, ck // r) for ci in cand[0] for cj in cand[1] for ck in cand[2]]
    s_min = min(float(slow[c]) for c in cells)
    fastest = [c for c in cells if slow[c] == s_min]
    flat = np.array([np.ravel_multi_index(c, slow.shape) for c in fastest], dtype=np.int64)
    return s_min, flat


def _fast_region(slow, cell, src, s0, ratio, bodies_rule="nearest"):
    """Apexes, slownesses and cells of the additive factors for fast-medium waves.

    A source in rock under a faster medium (air above the ground) sends a
    wave up at the critical angle that runs along the interface at the fast
    speed; on the interface its time is a cone around the point of the
    interface nearest the source (head-wave formula, Telford, Geldart and
    Sheriff 1990). Plain first-order differences of that cone from its apex
    ran up to 1.8 ns late 10-20 m out (the point-source error of fast marching
    over again); differencing only T - s1 |x - xe| removes it.

    Connected bodies of faster cells get a factor each, with its own apex
    ``xe`` (the point of the body nearest the source) and slowness ``s1``,
    chosen by ``bodies_rule`` (see :class:`EikonalOptions` ``fast_bodies``):
    the body nearest the source; also the largest one, the air above the
    ground ("nearest_and_largest"); and also every body with a sharp boundary,
    nearest first, at most 255 ("all"). With the nearest alone, a small void
    nearer the source than the ground surface takes the factor away from the
    air wave, and adding that void made first arrivals up to 4.1 ns later on
    the demo quarry, against Fermat's principle. Each body labels the cells
    reached from its apex cell without a sharp jump and not yet labelled by
    a nearer one.

    Returns the apexes ``xes`` (k, 3) (metres from the lattice origin), the
    slownesses ``s1s`` (k,) (a single zero: no faster medium) and the label of
    every model cell (0: none, i: body i, uint8).
    """
    labels = np.zeros(slow.shape, dtype=np.uint8)
    fast = slow * ratio < s0
    if not fast.any():
        return np.zeros((1, 3)), np.zeros(1), labels
    idx = np.argwhere(fast)
    lo = idx * cell
    # nearest point of each fast cell to the source
    near = np.clip(src, lo, lo + cell)
    d2 = np.sum((near - src) ** 2, axis=1)
    if bodies_rule == "nearest":
        groups = [np.arange(d2.size)]  # the nearest fast cell of all (no labelling needed)
    else:
        bodies, n_bodies = ndimage.label(fast)
        body_of = bodies[tuple(idx.T)]
        nearest = np.full(n_bodies + 1, np.inf)
        np.minimum.at(nearest, body_of, d2)
        first = int(np.argmin(nearest[1:])) + 1
        largest = int(np.argmax(np.bincount(body_of, minlength=n_bodies + 1)[1:])) + 1
        order = [first, largest]
        if bodies_rule == "all":
            order += _sharp_bodies(slow, fast, ratio, bodies, n_bodies, nearest)
        groups = [np.flatnonzero(body_of == body) for body in list(dict.fromkeys(order))[:_MAX_FAST_BODIES]]
    xes, s1s = [], []
    for mine in groups:
        best = mine[d2[mine] <= d2[mine].min() * (1 + 1e-9) + 1e-18]
        q = best[np.argmin(slow[tuple(idx[best].T)])]
        c = idx[q]
        if labels[tuple(c)] != 0:
            continue  # reached from a nearer body's apex without a sharp jump: one medium
        _label_region(slow, np.ravel_multi_index(tuple(c), slow.shape), ratio, labels, len(xes) + 1)
        xes.append(near[q])
        s1s.append(float(slow[tuple(c)]))
    return np.ascontiguousarray(xes, dtype=float), np.asarray(s1s, dtype=float), labels


def _sharp_bodies(slow, fast, ratio, bodies, n_bodies, nearest):
    """Fast bodies with a sharp boundary somewhere (a face neighbour slower by
    more than ``ratio``: an air-filled void), nearest the source first."""
    sharp = np.zeros(slow.shape, dtype=bool)
    for axis in range(3):
        lo_side = [slice(None)] * 3
        hi_side = [slice(None)] * 3
        lo_side[axis] = slice(0, -1)
        hi_side[axis] = slice(1, None)
        lo_side, hi_side = tuple(lo_side), tuple(hi_side)
        sharp[lo_side] |= fast[lo_side] & (slow[hi_side] > ratio * slow[lo_side])
        sharp[hi_side] |= fast[hi_side] & (slow[lo_side] > ratio * slow[hi_side])
    found = np.flatnonzero(np.bincount(bodies[sharp], minlength=n_bodies + 1)[1:]) + 1
    return found[np.argsort(nearest[found], kind="stable")].tolist()


def _corner_targets(points, h, n_lat):
    """Lattice point numbers of the 8 corners of the lattice cell holding each point."""
    upper = np.asarray(n_lat) - 1
    u = np.clip(np.asarray(points, dtype=float) / h, 0.0, upper)
    i0 = np.minimum(np.floor(u).astype(np.int64), np.maximum(upper - 1, 0))
    corners = [i0 + np.array([(o >> 2) & 1, (o >> 1) & 1, o & 1]) for o in range(8)]
    ijk = np.minimum(np.concatenate(corners), upper)
    return np.unique(np.ravel_multi_index(tuple(ijk.T), n_lat)).astype(np.int64)


def _lattice_times(slow, r, cell, src, options, local, targets_m=None):
    """Times (first arrival, and per wave family) on the corner lattice of ``slow``
    refined ``r`` times, source ``src`` (metres from the lattice origin). With ``local``, the start values near the
    source come from a finer solve of a small box around it. With ``targets_m``
    (points, metres from the lattice origin) the march stops once the times
    around them, and the gradients a ray traced back from them needs, are final.
    Returns the times and the time up to which they are final."""
    h = cell / r
    n_lat = tuple(int(n) * r + 1 for n in slow.shape)
    u = src / h
    # a source within a hair of a lattice plane lies on it (surface nodes sit
    # 1 micrometre inside the ground): then both sides count as its cells
    near = np.abs(u - np.round(u)) < _ON_PLANE_FRACTION
    u = np.where(near, np.round(u), u)
    src = u * h
    s0, s0_cells = _source_slowness(slow, r, n_lat, u)
    radius = float(options.source_radius)
    nodes, times = _ball_seeds(slow, r, n_lat[0], n_lat[1], n_lat[2], h[0], h[1], h[2], u, radius)
    seed_direct = np.ones(len(nodes), dtype=np.uint8)
    if local and radius > 0:
        better = _local_seeds(slow, r, cell, src, u, n_lat, options, nodes, times)
        # a start value beaten by the finer solve came by a head wave
        seed_direct = (better >= times * (1 - _HEAD_WAVE_MARGIN)).astype(np.uint8)
        times = better
    cs_pad = _padded_cells(slow, r, np.inf)
    smooth = _smooth_flags(cs_pad, n_lat[0], n_lat[1], n_lat[2], float(options.smooth_contrast))
    if options.factored:
        factor_cells = _factor_region(slow, s0_cells, float(options.smooth_contrast))
    else:
        factor_cells = np.zeros(slow.shape, dtype=np.uint8)
    xes, s1s, fast_cells = _fast_region(slow, cell, src, s0, float(options.smooth_contrast),
                                        bodies_rule=options.fast_bodies)
    if targets_m is None or len(targets_m) == 0:
        targets = np.zeros(0, dtype=np.int64)
    else:
        targets = _corner_targets(targets_m, h, n_lat)
    # A ray traced back from a target steers by central differences around the
    # lattice cells it crosses: points at most (sqrt(3) + 1) steps from a point
    # whose time is below the target's. Four steps at the slowest cell's
    # slowness bound their times from above.
    margin = 4.0 * float(slow.max()) * float(np.max(h))
    cells = (cs_pad, _padded_cells(factor_cells, r, 0), _padded_cells(fast_cells, r, 0))
    lattice = ((n_lat[0], n_lat[1], n_lat[2]), (float(h[0]), float(h[1]), float(h[2])))
    settings = (bool(options.second_order), targets, margin,
                _DOMINANCE_STEPS * float(slow.max()) * float(np.max(h)))
    T, families, t_final = _march(cells, lattice, (src, float(s0), nodes, times, seed_direct), (xes, s1s),
                                  smooth, settings)
    return T.reshape(n_lat), families.reshape((2,) + n_lat), t_final


def _local_seeds(slow, r, cell, src, u, n_lat, options, nodes, times):
    """Better start values in the source ball from a finer solve nearby.

    A source off the lattice planes near a sharp contrast (a borehole node
    0.5 m under the ground surface) sends its head wave up at the critical
    angle, a path the coarse lattice cannot follow: it goes straight up to
    the nearest lattice point instead, and that constant delay (0.3 ns for
    0.5 m) stays in every later time. Solving a box of model cells around the
    source ``source_refine`` times finer shrinks it by that factor.
    """
    k = int(options.source_refine)
    radius = float(options.source_radius)
    c_src = np.floor(u / r).astype(int)
    half = int(math.ceil(radius / r)) + 1
    lo = np.maximum(c_src - half, 0)
    hi = np.minimum(c_src + half + 1, np.asarray(slow.shape))
    crop = np.ascontiguousarray(slow[lo[0]:hi[0], lo[1]:hi[1], lo[2]:hi[2]])
    fine, _, _ = _lattice_times(crop, r * k, cell, src - lo * cell, options, local=False)
    # the coarse lattice points of the ball that the box holds, in fine steps
    ijk = np.stack(np.unravel_index(nodes, n_lat), axis=1) - lo * r
    inside = np.all((ijk >= 0) & (ijk * k < np.asarray(fine.shape)), axis=1)
    better = times.copy()
    f_ijk = ijk[inside] * k
    better[inside] = np.minimum(times[inside], fine[f_ijk[:, 0], f_ijk[:, 1], f_ijk[:, 2]])
    return better


def _air_ceiling_layers(slow, points_z_m, cell_z_m):
    """Number of cell layers (from the bottom) the solve needs when only times at
    ``points_z_m`` (metres above the grid origin) are wanted.

    Above the highest layer that holds a cell slower than the model's fastest
    cell, the model is uniform at the fastest slowness (the air over the
    ground). A first-arrival path between two points below a level H through
    such a region never needs to rise above H: the part above H can be replaced
    by the chord along the plane z = H, shorter and no slower. Two uniform
    layers are kept above the highest point and the highest non-uniform layer:
    the times in them are those of the whole box, and so are the central
    differences rays steer by (with one layer, rays along the ground surface
    came out up to 0.3 m apart).
    """
    s_min = float(slow.min())
    mixed = np.flatnonzero(np.any(slow > s_min, axis=(0, 1)))
    top = int(mixed[-1]) + 1 if mixed.size else 0
    top = max(top, int(np.floor(float(np.max(points_z_m)) / cell_z_m)) + 1)
    return min(top + 2, slow.shape[2])


def travel_time_field(grid: Grid, slowness_ns_per_m, source_xyz_m, *,
                      options: EikonalOptions = EikonalOptions(), receivers_xyz_m=None) -> TimeField:
    """First-arrival travel times from one source over the whole model box.

    Parameters
    ----------
    grid : Grid
        The model grid.
    slowness_ns_per_m : ndarray, shape ``grid.shape``
        Slowness of every cell in ns/m (constant inside a cell).
    source_xyz_m : array_like, shape (3,)
        Source position in metres, anywhere in the box (boundary included).
    options : EikonalOptions, optional
    receivers_xyz_m : array_like, shape (n, 3), optional
        When given, only the times at these points and the rays traced back
        from them are wanted: the march stops once the field around them is
        final, and uniform fastest cells (air) above the highest of them, the
        source and every other kind of cell are left out (see
        :func:`_air_ceiling_layers`). The field then covers less than the box
        and later times are inf; ``final_until_ns`` says up to when it is
        complete. The times at the receivers are the same as without it.

    Returns
    -------
    TimeField
        Times in ns at the lattice ``grid.origin_m + (i, j, k) * cell_m / refine``,
        ``grid.shape * refine + 1`` points (fewer layers in z when cropped): the
        cell corners of the refined grid.

    Raises
    ------
    ValueError
        Naming the argument: wrong shape, NaN, non-positive slowness, a source
        or receiver outside the box.
    """
    slow, p = _check_inputs(grid, slowness_ns_per_m, source_xyz_m, options)
    r = int(options.refine)
    cell = np.asarray(grid.cell_m, dtype=float)
    h = cell / r
    origin = np.asarray(grid.origin_m, dtype=float)
    targets = None
    if receivers_xyz_m is not None:
        targets = np.atleast_2d(np.asarray(receivers_xyz_m, dtype=float))
        if targets.ndim != 2 or targets.shape[1] != 3 or not np.all(np.isfinite(targets)):
            raise ValueError(f"receivers_xyz_m must be finite points of shape (n, 3) (got {targets.shape})")
        outside = ~grid.contains(targets)
        if outside.any():
            raise ValueError(f"receivers_xyz_m: {int(outside.sum())} point(s) lie outside the model box, "
                             f"the first at {tuple(targets[outside][0])}")
        targets = targets - origin
        if targets.size:
            layers = _air_ceiling_layers(slow, np.append(targets[:, 2], p[2] - origin[2]), cell[2])
            slow = np.ascontiguousarray(slow[:, :, :layers])
    T, families, final_until_ns = _lattice_times(slow, r, cell, p - origin, options,
                                                 local=options.source_refine > 1, targets_m=targets)
    return TimeField(
        origin_m=tuple(grid.origin_m),
        spacing_m=tuple(float(v) for v in h),
        times_ns=T,
        source_xyz_m=p.copy(),
        final_until_ns=float(final_until_ns),
        family_times_ns=families,
    )
