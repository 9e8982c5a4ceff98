"""Link budget of a transmitter-receiver pair: is the first arrival heard?

For every pair of nodes the margin in dB is

.. math::

    M = P_{sys} - L_{spread}(r) - \\alpha_{dB} \\, r_{ground}
        - L_{pattern,a} - L_{pattern,b} - n_{cross} L_{cross}

and the pair is *heard* when ``M >= 0``. The terms:

``P_sys``
    The system performance in dB (``site.radar.system_performance_db``): the
    largest loss between the transmitter's output and the smallest pickable
    signal at the receiver, antenna gains included.
``L_spread = 20 log10(4 pi r / lambda)``
    Geometric spreading between two antennas a distance ``r`` apart, the
    free-space loss of the Friis transmission equation (Friis 1946) with the
    wavelength ``lambda`` in the rock. Isotropic gains are folded into
    ``P_sys``. Inside ``r < lambda / (4 pi)`` (the near field, where the
    equation does not hold) the loss is taken as 0 dB.
``alpha_dB r_ground``
    Attenuation along the part of the straight line that lies in the ground.
    ``alpha`` comes from the exact complex wavenumber of a conductive
    dielectric, ``k = sqrt(omega^2 mu0 eps - j omega mu0 sigma) = beta -
    j alpha``, converted to dB with ``20 log10(e) = 8.686`` dB per neper. In
    low-loss rock (``sigma << omega eps``) this tends to
    ``alpha_dB = Z0 sigma / (2 sqrt(K)) * 8.686 = 1.636 sigma[mS/m] / sqrt(K)``
    dB/m (:func:`attenuation_low_loss_db_per_m`, kept as a documented
    approximation; the often quoted 1.69 is about 3 % high). The
    approximation fails in conductive ground such as sea water.
``L_pattern``
    Borehole antennas are dipoles along the hole: the radiated power goes as
    ``sin^2(theta)`` with ``theta`` the angle between the hole axis and the
    direction to the other node, so ``L = -20 log10(sin theta)`` dB, with a
    null (capped at :data:`PATTERN_NULL_DB`) along the axis. Surface and face
    nodes are taken as isotropic (their antenna orientation is not known).
``n_cross L_cross``
    The number of times the straight line crosses the air-ground boundary
    times the loss per crossing: ``site.radar.air_ground_loss_db`` or, when
    not given, the power transmission loss at normal incidence from air into
    rock, ``-10 log10(4 n / (1 + n)^2)`` with ``n = sqrt(K)`` (Fresnel
    equations). Nodes count as in the ground, so the line from a node on a
    lower bench up through the air into the face of the next bench crosses
    twice.

Pairs whose straight line leaves the ground, and pairs for which the wave
refracted along the ground surface through the air (the air wave) arrives
before the direct wave, are flagged: their first arrival may be the air
wave, not a ray through the rock.

Penetration by rule of thumb: in resistive, low-loss rock radar reaches of
the order of ten to fifteen wavelengths (common practice, no published
source); :func:`rule_of_thumb_range_m` gives it for comparison with the
computed :func:`link_range_m`.

References
----------
Friis, H. T. (1946). A note on a simple transmission formula. Proceedings of
    the IRE, 34(5), 254-256. https://doi.org/10.1109/JRPROC.1946.234568
Davis, J. L., & Annan, A. P. (1989). Ground-penetrating radar for
    high-resolution mapping of soil and rock stratigraphy. Geophysical
    Prospecting, 37(5), 531-551.
Telford, W. M., Geldart, L. P., & Sheriff, R. E. (1990). Applied Geophysics,
    2nd ed., Cambridge University Press (head wave along an interface).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import scipy.constants
from scipy.optimize import brentq

from reconstruct.errors import InputError
from reconstruct.model.resolution import wavelength_m
from reconstruct.model.constants import SPEED_OF_LIGHT_M_PER_NS
from reconstruct.io.site import Site
from reconstruct.io.tables import Nodes

__all__ = [
    "DB_PER_NEPER",
    "LOW_LOSS_DB_PER_M",
    "PATTERN_NULL_DB",
    "LinkBudget",
    "complex_wavenumber_per_m",
    "attenuation_db_per_m",
    "attenuation_low_loss_db_per_m",
    "phase_velocity_m_per_ns",
    "spreading_loss_db",
    "dipole_pattern_loss_db",
    "interface_loss_db",
    "link_budget_for_site",
    "link_range_m",
    "rule_of_thumb_range_m",
    "antenna_axes",
    "straight_line_air_path",
    "air_wave_arrives_first",
    "PairLinks",
    "pair_links",
]

#: dB per neper for amplitudes: 20 log10(e).
DB_PER_NEPER = 20.0 / math.log(10.0)

#: The low-loss constant: dB/m per (mS/m) times sqrt(K), Z0 / 2 * 1e-3 * 8.686 = 1.636.
LOW_LOSS_DB_PER_M = 0.5 * math.sqrt(scipy.constants.mu_0 / scipy.constants.epsilon_0) * 1e-3 * DB_PER_NEPER

#: Loss in dB given along a dipole's axis (the true null is infinitely deep).
PATTERN_NULL_DB = 60.0

# samples near a node are counted as ground: nodes are coupled to the ground
_NODE_COUPLING_M = 0.5
# a sample counts as air only this far above the ground surface (rounding)
_AIR_TOLERANCE_M = 0.01
# largest number of line samples handled at once (memory of the air check)
_SAMPLES_PER_CHUNK = 2_000_000


def _positive(name, value):
    a = np.asarray(value, dtype=float)
    if np.any(~np.isfinite(a)) or np.any(a <= 0):
        raise ValueError(f"{name} must be finite and > 0")
    return a


def complex_wavenumber_per_m(frequency_mhz, relative_permittivity, conductivity_ms_per_m):
    """Phase and attenuation constants ``(beta, alpha)`` in rad/m and Np/m.

    Parameters
    ----------
    frequency_mhz : float or array
        Frequency in MHz (> 0).
    relative_permittivity : float or array
        Relative permittivity K (>= 1).
    conductivity_ms_per_m : float or array
        Conductivity in mS/m (>= 0).

    Returns
    -------
    beta, alpha : numpy.ndarray or float
        ``k = sqrt(omega^2 mu0 eps0 K - j omega mu0 sigma) = beta - j alpha``.

    Notes
    -----
    Exact for a homogeneous medium with frequency-independent K and sigma and
    the magnetic permeability of vacuum.
    """
    f = _positive("frequency_mhz", frequency_mhz)
    k_rel = np.asarray(relative_permittivity, dtype=float)
    sigma = np.asarray(conductivity_ms_per_m, dtype=float)
    if np.any(~np.isfinite(k_rel)) or np.any(k_rel < 1):
        raise ValueError("relative_permittivity must be finite and >= 1")
    if np.any(~np.isfinite(sigma)) or np.any(sigma < 0):
        raise ValueError("conductivity_ms_per_m must be finite and >= 0")
    omega = 2.0 * math.pi * f * 1e6
    mu0, eps0 = scipy.constants.mu_0, scipy.constants.epsilon_0
    k = np.sqrt(omega**2 * mu0 * eps0 * k_rel - 1j * omega * mu0 * sigma * 1e-3)
    beta, alpha = k.real, -k.imag
    if beta.ndim == 0:
        return float(beta), float(alpha)
    return beta, alpha


def attenuation_db_per_m(frequency_mhz, relative_permittivity, conductivity_ms_per_m):
    """Exact attenuation in dB/m from the complex wavenumber (see the module notes)."""
    _, alpha = complex_wavenumber_per_m(frequency_mhz, relative_permittivity, conductivity_ms_per_m)
    return DB_PER_NEPER * alpha


def attenuation_low_loss_db_per_m(relative_permittivity, conductivity_ms_per_m):
    """Low-loss attenuation ``1.636 sigma / sqrt(K)`` in dB/m (sigma in mS/m).

    Valid only where ``sigma << omega eps`` (resistive rock); it overestimates
    the exact value slightly there and fails badly in sea water.
    """
    k_rel = np.asarray(relative_permittivity, dtype=float)
    sigma = np.asarray(conductivity_ms_per_m, dtype=float)
    out = LOW_LOSS_DB_PER_M * sigma / np.sqrt(k_rel)
    return out if out.ndim else float(out)


def phase_velocity_m_per_ns(frequency_mhz, relative_permittivity, conductivity_ms_per_m):
    """Exact phase velocity ``omega / beta`` in m/ns."""
    beta, _ = complex_wavenumber_per_m(frequency_mhz, relative_permittivity, conductivity_ms_per_m)
    out = 2.0 * math.pi * np.asarray(frequency_mhz, dtype=float) * 1e6 / np.asarray(beta) * 1e-9
    return out if out.ndim else float(out)


def spreading_loss_db(distance_m, wavelength):
    """Free-space loss ``20 log10(4 pi r / lambda)`` in dB (Friis 1946), >= 0.

    Parameters
    ----------
    distance_m : float or array
        Antenna separation in metres (>= 0).
    wavelength : float or array
        Wavelength in metres in the medium (> 0).
    """
    r = np.asarray(distance_m, dtype=float)
    lam = _positive("wavelength", wavelength)
    ratio = np.maximum(4.0 * math.pi * r / lam, 1.0)  # near field: no loss, not a gain
    out = 20.0 * np.log10(ratio)
    return out if out.ndim else float(out)


def dipole_pattern_loss_db(axis, direction):
    """Loss of a dipole along ``axis`` towards ``direction``, ``-20 log10(sin theta)`` dB.

    Parameters
    ----------
    axis : array, shape (n, 3)
        Dipole axes (any length); rows of NaN mean an isotropic antenna (0 dB).
    direction : array, shape (n, 3)
        Directions to the other node (any length, non-zero).

    Returns
    -------
    numpy.ndarray, shape (n,)
        Loss in dB, between 0 (broadside) and :data:`PATTERN_NULL_DB` (along the axis).
    """
    a = np.asarray(axis, dtype=float)
    d = np.asarray(direction, dtype=float)
    isotropic = np.isnan(a).any(axis=-1)
    a_unit = np.where(isotropic[..., None], 0.0, a)
    a_unit = a_unit / np.maximum(np.linalg.norm(a_unit, axis=-1, keepdims=True), 1e-300)
    d_unit = d / np.maximum(np.linalg.norm(d, axis=-1, keepdims=True), 1e-300)
    cos_theta = np.clip(np.abs(np.sum(a_unit * d_unit, axis=-1)), 0.0, 1.0)
    sin_theta = np.sqrt(1.0 - cos_theta**2)
    floor = 10.0 ** (-PATTERN_NULL_DB / 20.0)
    loss = -20.0 * np.log10(np.maximum(sin_theta, floor))
    return np.where(isotropic, 0.0, loss)


def interface_loss_db(relative_permittivity):
    """Power transmission loss at normal incidence between air and rock, dB.

    ``-10 log10(4 n / (1 + n)^2)`` with ``n = sqrt(K)`` (Fresnel equations;
    the same either way through the boundary).
    """
    n = np.sqrt(np.asarray(relative_permittivity, dtype=float))
    out = -10.0 * np.log10(4.0 * n / (1.0 + n) ** 2)
    return out if out.ndim else float(out)


@dataclass(frozen=True)
class LinkBudget:
    """Settings of the link budget, all in the units named.

    Parameters
    ----------
    system_performance_db : float
    attenuation_db_per_m : float
        Exact attenuation of the rock.
    wavelength_m : float
        Wavelength in the rock at the antenna frequency.
    interface_loss_db : float
        Loss per crossing of the air-ground boundary.
    velocity_m_per_ns : float
        Rock velocity (for the air-wave check).
    attenuation_low_loss_db_per_m : float
        The low-loss approximation, for reports.
    """

    system_performance_db: float
    attenuation_db_per_m: float
    wavelength_m: float
    interface_loss_db: float
    velocity_m_per_ns: float
    attenuation_low_loss_db_per_m: float

    def __post_init__(self):
        for name in ("system_performance_db", "wavelength_m", "velocity_m_per_ns"):
            value = getattr(self, name)
            if not (math.isfinite(value) and value > 0):
                raise InputError(f"link budget: {name} must be a finite number > 0 (got {value!r})")
        for name in ("attenuation_db_per_m", "interface_loss_db", "attenuation_low_loss_db_per_m"):
            value = getattr(self, name)
            if not (math.isfinite(value) and value >= 0):
                raise InputError(f"link budget: {name} must be a finite number >= 0 (got {value!r})")


def link_budget_for_site(site: Site, *, system_performance_db: float | None = None) -> LinkBudget:
    """The link budget of a site's rock and radar settings.

    ``system_performance_db`` overrides ``site.radar.system_performance_db``.
    """
    if system_performance_db is not None and not (math.isfinite(system_performance_db) and system_performance_db > 0):
        raise InputError(f"--system-performance must be a number > 0 in dB (got {system_performance_db!r}); "
                         "leave it out to use radar.system_performance_db of the site")
    rock = site.rock
    loss = site.radar.air_ground_loss_db
    return LinkBudget(
        system_performance_db=float(system_performance_db if system_performance_db is not None
                                    else site.radar.system_performance_db),
        attenuation_db_per_m=float(attenuation_db_per_m(rock.antenna_frequency_mhz, rock.relative_permittivity,
                                                        rock.conductivity_ms_per_m)),
        wavelength_m=float(wavelength_m(rock.velocity_m_per_ns, rock.antenna_frequency_mhz)),
        interface_loss_db=float(interface_loss_db(rock.relative_permittivity) if loss is None else loss),
        velocity_m_per_ns=float(rock.velocity_m_per_ns),
        attenuation_low_loss_db_per_m=float(attenuation_low_loss_db_per_m(rock.relative_permittivity,
                                                                          rock.conductivity_ms_per_m)),
    )


def link_range_m(budget: LinkBudget) -> float:
    """Largest distance in metres at which two isotropic nodes in the rock hear each other.

    The root of ``P_sys = 20 log10(4 pi r / lambda) + alpha r`` (no pattern,
    no crossing), found with :func:`scipy.optimize.brentq`.
    """
    lam = budget.wavelength_m
    # where spreading alone uses up the whole budget
    r_spread = lam / (4.0 * math.pi) * 10.0 ** (budget.system_performance_db / 20.0)
    if budget.attenuation_db_per_m == 0.0:
        return r_spread
    r_near = lam / (4.0 * math.pi)

    def margin(r):
        return budget.system_performance_db - spreading_loss_db(r, lam) - budget.attenuation_db_per_m * r

    if margin(r_near) <= 0:
        return r_near
    return float(brentq(margin, r_near, r_spread, xtol=1e-6))


def rule_of_thumb_range_m(wavelength) -> tuple[float, float]:
    """Ten to fifteen wavelengths: penetration in resistive rock (common practice)."""
    lam = float(_positive("wavelength", wavelength))
    return 10.0 * lam, 15.0 * lam


def antenna_axes(site: Site, nodes: Nodes) -> np.ndarray:
    """Dipole axis of every node, shape (n, 3); NaN rows for isotropic nodes.

    A node with a ``borehole`` id takes the direction of that hole of the site.

    Raises
    ------
    InputError
        A borehole id not in the site, or a node of kind ``borehole`` without
        an id, naming the node table's line.
    """
    holes = {h.id: h for h in site.boreholes}
    axes = np.full((len(nodes), 3), np.nan)
    problems = []
    for k, (kind, hole_id) in enumerate(zip(nodes.kinds, nodes.boreholes)):
        where = f"{nodes.source} line {int(nodes.lines[k])}"
        if hole_id is not None:
            if hole_id not in holes:
                known = ", ".join(sorted(holes)) or "none"
                problems.append(f"{where}: node '{nodes.ids[k]}' names borehole '{hole_id}', which is not "
                                f"in the site description (boreholes there: {known}); fix the borehole "
                                "column or add the hole to the site")
                continue
            hole = holes[hole_id]
            # along the hole where the node sits: the surveyed path's direction there, when surveyed
            axes[k] = (hole.direction() if hole.survey is None
                       else hole.direction_at(hole.depth_nearest_m(nodes.xyz_m[k])[0]))
        elif kind == "borehole":
            problems.append(f"{where}: node '{nodes.ids[k]}' is of kind borehole but its borehole column "
                            "is blank; give the id of its hole so its antenna axis is known")
    if problems:
        raise InputError(problems)
    return axes


def straight_line_air_path(ground_elevation_m, a_xyz_m, b_xyz_m, *, step_m: float, progress=None):
    """Length in air and number of air-ground crossings of straight lines.

    Parameters
    ----------
    ground_elevation_m : callable
        ``f(x_m, y_m) -> z_m`` (the site's ground surface).
    a_xyz_m, b_xyz_m : array, shape (n, 3)
        Line ends in metres.
    step_m : float
        Sampling step along the lines (> 0), metres.
    progress : callable, optional
        ``progress(done, total)`` after each batch of lines.

    Returns
    -------
    air_length_m : numpy.ndarray, shape (n,)
    crossings : numpy.ndarray of int, shape (n,)

    Notes
    -----
    A sample is in air when it lies more than 1 cm above the ground surface.
    Samples within 0.5 m of either end count as ground: nodes are coupled to
    the ground, and a node a few centimetres above the surface must not add
    crossings. Where the surface is undefined (NaN) the sample counts as ground.
    """
    a = np.asarray(a_xyz_m, dtype=float).reshape(-1, 3)
    b = np.asarray(b_xyz_m, dtype=float).reshape(-1, 3)
    step = float(_positive("step_m", step_m))
    length = np.linalg.norm(b - a, axis=1)
    n_samples = np.maximum(np.ceil(length / step).astype(np.int64), 1) + 1
    air_length = np.zeros(len(a))
    crossings = np.zeros(len(a), dtype=np.int64)
    ends = np.cumsum(n_samples)
    start = 0
    while start < len(a):
        offset = ends[start - 1] if start else 0
        stop = max(int(np.searchsorted(ends, offset + _SAMPLES_PER_CHUNK, side="right")), start + 1)
        counts = n_samples[start:stop]
        pair = np.repeat(np.arange(start, stop), counts)
        first = np.repeat(np.cumsum(counts) - counts, counts)
        k = np.arange(pair.size) - first
        t = k / (n_samples[pair] - 1)
        points = a[pair] + t[:, None] * (b[pair] - a[pair])
        surface = ground_elevation_m(points[:, 0], points[:, 1])
        s = t * length[pair]
        near_node = (s < _NODE_COUPLING_M) | (s > length[pair] - _NODE_COUPLING_M)
        in_air = (points[:, 2] > surface + _AIR_TOLERANCE_M) & ~near_node
        in_air &= ~np.isnan(surface)
        seg = length[pair] / (n_samples[pair] - 1)
        air_length[start:stop] = np.bincount(pair - start, weights=in_air * seg, minlength=stop - start)
        change = np.zeros(pair.size, dtype=bool)
        change[1:] = (in_air[1:] != in_air[:-1]) & (pair[1:] == pair[:-1])
        crossings[start:stop] = np.bincount(pair - start, weights=change, minlength=stop - start).astype(np.int64)
        start = stop
        if progress:
            progress(start, len(a))
    return np.minimum(air_length, length), crossings


def air_wave_arrives_first(ground_elevation_m, a_xyz_m, b_xyz_m, velocity_m_per_ns: float) -> np.ndarray:
    """True where the refracted air wave beats the direct wave through the rock.

    The air wave travels up from each node to the surface at the critical
    angle, along the surface at ``c`` and down again:
    ``t = x / c + (h_a + h_b) sqrt(1 / v^2 - 1 / c^2)``, valid once
    ``x >= (h_a + h_b) tan(theta_c)`` with ``sin(theta_c) = v / c``; ``x`` is
    the horizontal offset and ``h`` each node's depth below the ground surface
    above it (a flat surface is assumed between them). It is compared with the
    direct time ``r / v`` (head-wave formula, e.g. Telford, Geldart & Sheriff 1990).
    """
    a = np.asarray(a_xyz_m, dtype=float).reshape(-1, 3)
    b = np.asarray(b_xyz_m, dtype=float).reshape(-1, 3)
    v = float(velocity_m_per_ns)
    c = SPEED_OF_LIGHT_M_PER_NS
    if v >= c:
        return np.zeros(len(a), dtype=bool)
    depth_a = np.nan_to_num(np.maximum(ground_elevation_m(a[:, 0], a[:, 1]) - a[:, 2], 0.0))
    depth_b = np.nan_to_num(np.maximum(ground_elevation_m(b[:, 0], b[:, 1]) - b[:, 2], 0.0))
    offset = np.hypot(b[:, 0] - a[:, 0], b[:, 1] - a[:, 1])
    depth_sum = depth_a + depth_b
    exists = offset >= depth_sum * v / math.sqrt(c * c - v * v)
    t_air = offset / c + depth_sum * math.sqrt(1.0 / v**2 - 1.0 / c**2)
    t_direct = np.linalg.norm(b - a, axis=1) / v
    return exists & (t_air < t_direct) & (offset > 0)


@dataclass(frozen=True)
class PairLinks:
    """Link budget of node pairs ``(a[i], b[i])``; arrays of shape (n_pairs,).

    Lengths in metres, losses and margins in dB, angles in degrees
    (``azimuth_deg`` clockwise from north, 0..180 for an undirected pair;
    ``inclination_deg`` above horizontal from a to b, -90..90).
    """

    a: np.ndarray
    b: np.ndarray
    length_m: np.ndarray
    spreading_db: np.ndarray
    attenuation_db: np.ndarray
    pattern_db: np.ndarray
    crossing_db: np.ndarray
    margin_db: np.ndarray
    air_length_m: np.ndarray
    crossings: np.ndarray
    air_wave_first: np.ndarray
    azimuth_deg: np.ndarray
    inclination_deg: np.ndarray

    @property
    def heard(self) -> np.ndarray:
        """Margin >= 0 dB."""
        return self.margin_db >= 0.0

    @property
    def air_flag(self) -> np.ndarray:
        """The straight line runs through air, or the air wave arrives first."""
        return (self.air_length_m > 0) | self.air_wave_first


def pair_links(site: Site, budget: LinkBudget, xyz_m, axes, a, b, *, step_m: float | None = None,
               progress=None) -> PairLinks:
    """Link budget of every pair ``(a[i], b[i])`` of nodes at ``xyz_m``.

    Parameters
    ----------
    site : Site
        For the ground surface.
    budget : LinkBudget
    xyz_m : array, shape (n_nodes, 3)
        Node positions in metres.
    axes : array, shape (n_nodes, 3)
        Dipole axes (:func:`antenna_axes`), NaN rows for isotropic nodes.
    a, b : array of int, shape (n_pairs,)
        Node indices of the pairs.
    step_m : float, optional
        Sampling step of the air check; default half the smallest cell size.
    progress : callable, optional
        ``progress(done, total)`` as the air check goes through the pairs.
    """
    xyz = np.asarray(xyz_m, dtype=float)
    a, b = np.asarray(a, dtype=np.int64), np.asarray(b, dtype=np.int64)
    if step_m is None:
        step_m = 0.5 * min(site.model.cell_m)
    pa, pb = xyz[a], xyz[b]
    d = pb - pa
    length = np.linalg.norm(d, axis=1)
    air_length, crossings = straight_line_air_path(site.ground.elevation_m, pa, pb, step_m=step_m,
                                                   progress=progress)
    spreading = spreading_loss_db(length, budget.wavelength_m)
    attenuation = budget.attenuation_db_per_m * (length - air_length)
    axes = np.asarray(axes, dtype=float)
    pattern = dipole_pattern_loss_db(axes[a], d) + dipole_pattern_loss_db(axes[b], d)
    crossing = crossings * budget.interface_loss_db
    margin = budget.system_performance_db - spreading - attenuation - pattern - crossing
    horizontal = np.hypot(d[:, 0], d[:, 1])
    azimuth = np.degrees(np.arctan2(d[:, 0], d[:, 1])) % 180.0
    inclination = np.degrees(np.arctan2(d[:, 2], horizontal))
    air_first = air_wave_arrives_first(site.ground.elevation_m, pa, pb, budget.velocity_m_per_ns)
    return PairLinks(a, b, length, spreading, attenuation, pattern, crossing, margin, air_length,
                     crossings, air_first, azimuth, inclination)
