"""Link budget of a transmitter-receiver pair: is the first arrival heard?

For every pair of nodes the margin in dB is

.. math::

    M = P_{sys} - L_{spread}(r) - \\alpha_{dB} \\, r_{ground}
        - L_{pattern,a} - L_{pattern,b} - n_{near} L_{near} - n_{cross} L_{cross}

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
    Borehole antennas are short dipoles along the hole: the radiated power goes
    as ``sin^2(theta)`` with ``theta`` the angle between the hole axis and the
    direction to the other node (Balanis 2016, the infinitesimal dipole), so
    ``L = -20 log10(sin theta)`` dB, 0 dB broadside, with a null (capped at
    :data:`PATTERN_NULL_DB`) along the axis. Surface and face nodes are
    dipoles lying on the ground, on the boundary between the rock (refractive
    index ``n = c / v``) and the air: their pattern is that of a horizontal
    dipole on a dielectric half-space (Engheta, Papas & Elachi 1982; Smith
    1984), obtained here by reciprocity from the Fresnel transmission
    coefficients. For a far point at angle ``theta1`` from the normal in the
    medium of index ``n1`` (the rock below, or the air above), with ``n2`` the
    other medium and ``cos theta2 = sqrt(1 - (n1 / n2)^2 sin^2 theta1)``
    (imaginary past the critical angle), the field relative to the same
    dipole inside the homogeneous medium is

    - TE (the plane across the dipole): ``2 n1 cos theta1 / (n1 cos theta1 + n2 cos theta2)``;
    - TM (the plane of the dipole): ``2 n1 cos theta1 cos theta2 / (n2 cos theta1 + n1 cos theta2)``.

    The dipole's azimuth on the ground is not known, so the power is the mean
    of the two, ``(|TE|^2 + |TM|^2) / 2`` (the average over azimuth). In the
    rock this gives ``(2 n / (1 + n))^2`` (+3.2 dB in limestone) straight
    down, a peak near the critical angle, and a null along the ground surface
    in the far field. Near the surface the loss of each such end is bounded by
    the ground wave, whose amplitude falls as ``1 / r^2`` (Annan 1973):
    ``10 log10(2 pi r / lambda)`` dB per end (:func:`ground_wave_loss_db`),
    an order-of-magnitude bound. A face node sees its face as an
    infinite plane; at the toe of a face the corner is not modelled. Without
    the sites' ground normals (``normals=None``) non-borehole nodes count as
    isotropic.
``n_near L_near``
    Each surface or face node at the ends of the pair adds
    ``site.radar.near_surface_loss_db`` (default 0 dB): weathered, broken or
    wet rock under the node and imperfect contact. Measure it on site by
    comparing a surface-to-hole pair with a hole-to-hole pair of the same
    length and angle.
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
computed :func:`link_range_m`. A second rule, attributed to Annan (from
memory; a rule of thumb, not a bound), puts the range in metres at roughly
35 divided by the conductivity in mS/m in low-loss rock
(:func:`conductivity_rule_range_m`); the planner warns when a layout relies
on heard pairs longer than it (:func:`range_check`).

References
----------
Friis, H. T. (1946). A note on a simple transmission formula. Proceedings of
    the IRE, 34(5), 254-256. https://doi.org/10.1109/JRPROC.1946.234568
Davis, J. L., & Annan, A. P. (1989). Ground-penetrating radar for
    high-resolution mapping of soil and rock stratigraphy. Geophysical
    Prospecting, 37(5), 531-551.
Telford, W. M., Geldart, L. P., & Sheriff, R. E. (1990). Applied Geophysics,
    2nd ed., Cambridge University Press (head wave along an interface).
Balanis, C. A. (2016). Antenna Theory: Analysis and Design, 4th ed., Wiley,
    chapter 4 (infinitesimal dipole: power pattern sin^2 theta; from memory).
Annan, A. P. (1973). Radio interferometry depth sounding: part I,
    theoretical discussion. Geophysics, 38(3), 557-580 (fields of a dipole on
    a dielectric half-space, the ground wave; from memory).
Engheta, N., Papas, C. H., & Elachi, C. (1982). Radiation patterns of
    interfacial dipole antennas. Radio Science, 17(6), 1557-1566 (from memory).
Smith, G. S. (1984). Directive properties of antennas for transmission into a
    material half-space. IEEE Transactions on Antennas and Propagation, 32(3),
    232-246 (from memory).
Annan, A. P. (2009). Electromagnetic principles of ground penetrating radar,
    in Jol, H. M. (ed.), Ground Penetrating Radar: Theory and Applications,
    Elsevier (antennas on the ground; from memory).
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
    "half_space_pattern_loss_db",
    "ground_wave_loss_db",
    "ground_normals",
    "interface_loss_db",
    "link_budget_for_site",
    "link_range_m",
    "rule_of_thumb_range_m",
    "CONDUCTIVITY_RULE_M_MS_PER_M",
    "conductivity_rule_range_m",
    "range_check",
    "antenna_axes",
    "straight_line_air_path",
    "air_wave_arrives_first",
    "PairLinks",
    "pair_links",
    "site_pair_links",
]

#: dB per neper for amplitudes: 20 log10(e).
DB_PER_NEPER = 20.0 / math.log(10.0)

#: The low-loss constant: dB/m per (mS/m) times sqrt(K), Z0 / 2 * 1e-3 * 8.686 = 1.636.
LOW_LOSS_DB_PER_M = 0.5 * math.sqrt(scipy.constants.mu_0 / scipy.constants.epsilon_0) * 1e-3 * DB_PER_NEPER

#: Loss in dB given along a dipole's axis (the true null is infinitely deep).
PATTERN_NULL_DB = 60.0

#: The rule of thumb attributed to Annan: range in metres about this over the
#: conductivity in mS/m in low-loss rock (from memory; a rule of thumb, not a bound).
CONDUCTIVITY_RULE_M_MS_PER_M = 35.0

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


def _unit_rows(vectors, direction):
    """``(missing, vectors, direction)``: rows of NaN in ``vectors`` marked missing (and zeroed),
    both arrays scaled to unit length row by row."""
    v = np.asarray(vectors, dtype=float)
    d = np.asarray(direction, dtype=float)
    missing = np.isnan(v).any(axis=-1)
    v = np.where(missing[..., None], 0.0, v)
    v = v / np.maximum(np.linalg.norm(v, axis=-1, keepdims=True), 1e-300)
    return missing, v, d / np.maximum(np.linalg.norm(d, axis=-1, keepdims=True), 1e-300)


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
    isotropic, a_unit, d_unit = _unit_rows(axis, direction)
    cos_theta = np.clip(np.abs(np.sum(a_unit * d_unit, axis=-1)), 0.0, 1.0)
    sin_theta = np.sqrt(1.0 - cos_theta**2)
    floor = 10.0 ** (-PATTERN_NULL_DB / 20.0)
    loss = -20.0 * np.log10(np.maximum(sin_theta, floor))
    return np.where(isotropic, 0.0, loss)


def half_space_pattern_loss_db(normal, direction, refractive_index: float):
    """Loss of a dipole lying on the ground towards ``direction``, in dB (azimuth-averaged).

    Parameters
    ----------
    normal : array, shape (n, 3)
        Outward normal of the ground at each antenna (pointing into the air,
        any length); rows of NaN mean an antenna not on the ground (0 dB).
    direction : array, shape (n, 3)
        Directions to the other node (any length, non-zero).
    refractive_index : float
        ``n = sqrt(K) = c / v`` of the rock (>= 1).

    Returns
    -------
    numpy.ndarray, shape (n,)
        ``-10 log10((|TE|^2 + |TM|^2) / 2)`` with the transmission factors of
        the module notes, relative to the same dipole broadside inside the
        medium the direction points into; negative where the ground focuses
        the energy (a gain), capped at :data:`PATTERN_NULL_DB` (along the
        ground surface, where the far field vanishes).

    Notes
    -----
    With ``n = 1`` (no boundary) TE is 1 and TM is ``cos theta1``: the
    free-space short dipole, whose power goes as the squared sine of the
    angle to its axis (Balanis 2016).

    References
    ----------
    Engheta, Papas & Elachi (1982); Smith (1984); module notes.
    """
    n_rock = float(refractive_index)
    if not (math.isfinite(n_rock) and n_rock >= 1.0):
        raise ValueError(f"refractive_index must be a finite number >= 1 (got {refractive_index!r})")
    flat, nrm, d_unit = _unit_rows(normal, direction)
    up = np.sum(nrm * d_unit, axis=-1)  # > 0: towards the air
    cos1 = np.clip(np.abs(up), 0.0, 1.0)
    n1 = np.where(up > 0, 1.0, n_rock)  # the medium the far point lies in
    n2 = np.where(up > 0, n_rock, 1.0)
    cos2 = np.sqrt((1.0 - (n1 / n2) ** 2 * (1.0 - cos1**2)).astype(complex))
    with np.errstate(invalid="ignore", divide="ignore"):
        te = 2.0 * n1 * cos1 / (n1 * cos1 + n2 * cos2)
        tm = 2.0 * n1 * cos1 * cos2 / (n2 * cos1 + n1 * cos2)
    power = np.nan_to_num(0.5 * (np.abs(te) ** 2 + np.abs(tm) ** 2))
    floor = 10.0 ** (-PATTERN_NULL_DB / 10.0)
    loss = np.minimum(-10.0 * np.log10(np.maximum(power, floor)), PATTERN_NULL_DB)
    return np.where(flat, 0.0, loss)


def ground_wave_loss_db(distance_m, wavelength):
    """Largest pattern loss of a node on the ground at ``distance_m``: ``10 log10(k r)`` dB, >= 0.

    Along the surface the far field of a dipole on the ground vanishes, but
    the ground wave remains, its amplitude falling as ``1 / r^2`` rather than
    ``1 / r`` (Annan 1973; from memory). Relative to the space wave that is a
    further ``20 log10(k r)`` dB over the path, ``k = 2 pi / lambda`` in the
    rock, shared here between the two ends: an order-of-magnitude bound (the
    factor in front depends on the rock and is not modelled), which keeps
    short surface-to-surface pairs heard, as they are on site.
    """
    r = np.asarray(distance_m, dtype=float)
    lam = _positive("wavelength", wavelength)
    out = 10.0 * np.log10(np.maximum(2.0 * math.pi * r / lam, 1.0))
    return out if out.ndim else float(out)


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
    near_surface_loss_db : float
        Loss at each surface or face node (default 0).
    conductivity_ms_per_m : float
        Rock conductivity, for the rule of thumb of :func:`conductivity_rule_range_m`
        (default 0: no rule).
    """

    system_performance_db: float
    attenuation_db_per_m: float
    wavelength_m: float
    interface_loss_db: float
    velocity_m_per_ns: float
    attenuation_low_loss_db_per_m: float
    near_surface_loss_db: float = 0.0
    conductivity_ms_per_m: float = 0.0

    @property
    def refractive_index(self) -> float:
        """``n = c / v`` of the rock (at least 1)."""
        return max(1.0, SPEED_OF_LIGHT_M_PER_NS / self.velocity_m_per_ns)

    def __post_init__(self):
        for name in ("system_performance_db", "wavelength_m", "velocity_m_per_ns"):
            value = getattr(self, name)
            if not (math.isfinite(value) and value > 0):
                raise InputError(f"link budget: {name} must be a finite number > 0 (got {value!r})")
        for name in ("attenuation_db_per_m", "interface_loss_db", "attenuation_low_loss_db_per_m",
                     "near_surface_loss_db", "conductivity_ms_per_m"):
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
        near_surface_loss_db=float(site.radar.near_surface_loss_db),
        conductivity_ms_per_m=float(rock.conductivity_ms_per_m),
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


def conductivity_rule_range_m(conductivity_ms_per_m) -> float:
    """Range by the rule of thumb attributed to Annan: ``35 / sigma[mS/m]`` metres.

    For low-loss rock; from memory, a rule of thumb and not a bound. Infinite
    for a conductivity of 0 (the rule says nothing there).
    """
    sigma = float(conductivity_ms_per_m)
    if not (math.isfinite(sigma) and sigma >= 0):
        raise ValueError(f"conductivity_ms_per_m must be a finite number >= 0 (got {conductivity_ms_per_m!r})")
    return math.inf if sigma == 0 else CONDUCTIVITY_RULE_M_MS_PER_M / sigma


#: Share of the heard pairs beyond the rule of thumb from which a layout is said to rely on them.
RELIES_ON_SHARE = 0.10


def range_check(length_m, heard, conductivity_ms_per_m) -> dict:
    """Heard pairs against the range of :func:`conductivity_rule_range_m`.

    Parameters
    ----------
    length_m : array, shape (n_pairs,)
        Pair lengths, metres.
    heard : array of bool, shape (n_pairs,)
    conductivity_ms_per_m : float

    Returns
    -------
    dict
        ``rule_range_m`` (None without conductivity), ``heard_beyond_rule``,
        ``share_of_heard_beyond_rule`` (0..1), ``heard_length_m_percentiles``
        (50 and 95, None without heard pairs), ``warning`` (a sentence, or None
        when fewer than :data:`RELIES_ON_SHARE` of the heard pairs lie beyond
        the rule) and ``note`` (where the rule comes from).
    """
    length = np.asarray(length_m, dtype=float)
    heard = np.asarray(heard, dtype=bool)
    rule = conductivity_rule_range_m(conductivity_ms_per_m)
    heard_length = length[heard]
    beyond = int(np.sum(heard_length > rule))
    share = beyond / heard_length.size if heard_length.size else 0.0
    warning = None
    if share >= RELIES_ON_SHARE:
        warning = (f"{beyond} of the {heard_length.size} heard pairs ({100 * share:.0f} %) are longer than the "
                   f"{rule:.0f} m of the rule of thumb (35 / conductivity in mS/m): the link budget may "
                   "overpromise them. Check the range on site with a test shot before relying on this "
                   "layout, or plan shorter pairs (more holes, closer nodes)")
    return {
        "rule_range_m": None if math.isinf(rule) else rule,
        "heard_beyond_rule": beyond,
        "share_of_heard_beyond_rule": share,
        "heard_length_m_percentiles": ({str(p): float(np.percentile(heard_length, p)) for p in (50, 95)}
                                       if heard_length.size else None),
        "warning": warning,
        "note": ("range in metres about 35 divided by the conductivity in mS/m in low-loss rock: a rule of "
                 "thumb attributed to Annan (from memory), not a bound; a warning is given when at least "
                 f"{100 * RELIES_ON_SHARE:.0f} % of the heard pairs are longer"),
    }


def ground_normals(site: Site, nodes: Nodes, *, step_m: float = 0.5, reach_m: float = 1.0) -> np.ndarray:
    """Outward ground normal at every surface or face node, shape (n, 3); NaN rows for the others.

    Surface nodes (kind ``surface``, or no kind, no hole and within 0.5 m of
    the ground) take the normal of the ground surface from central differences
    ``step_m`` either side (straight up where the surface is undefined there).
    Face nodes take the horizontal direction towards the air: the mean of the
    sixteen compass directions in which the ground ``reach_m`` away lies more
    than 0.25 m below the node (straight up when there is none).
    """
    xyz = np.asarray(nodes.xyz_m, dtype=float)
    elevation = site.ground.elevation_m
    normals = np.full((len(xyz), 3), np.nan)
    ground_z = elevation(xyz[:, 0], xyz[:, 1])
    angles = np.radians(np.arange(16) * 22.5)
    compass = np.column_stack([np.cos(angles), np.sin(angles)])
    for k, (kind, hole) in enumerate(zip(nodes.kinds, nodes.boreholes)):
        if hole is not None or kind == "borehole":
            continue
        x, y, z = xyz[k]
        if kind is None and not (np.isfinite(ground_z[k]) and abs(z - ground_z[k]) <= 0.5):
            continue
        normal = np.array([0.0, 0.0, 1.0])
        if kind == "face":
            around = elevation(x + reach_m * compass[:, 0], y + reach_m * compass[:, 1])
            open_side = compass[np.nan_to_num(around, nan=np.inf) < z - 0.25]
            if open_side.size and np.linalg.norm(open_side.mean(axis=0)) > 1e-9:
                normal = np.append(open_side.mean(axis=0), 0.0)
        else:
            offsets = np.array([[step_m, 0.0], [-step_m, 0.0], [0.0, step_m], [0.0, -step_m]])
            z4 = elevation(x + offsets[:, 0], y + offsets[:, 1])
            if np.all(np.isfinite(z4)):
                gx, gy = (z4[0] - z4[1]) / (2 * step_m), (z4[2] - z4[3]) / (2 * step_m)
                normal = np.array([-gx, -gy, 1.0])
        normals[k] = normal / np.linalg.norm(normal)
    return normals


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
    near_surface_db: np.ndarray
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


def pair_links(site: Site, budget: LinkBudget, xyz_m, axes, a, b, *, normals=None, step_m: float | None = None,
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
    normals : array, shape (n_nodes, 3), optional
        Outward ground normals of the nodes lying on the ground
        (:func:`ground_normals`), NaN rows for the others: their half-space
        pattern and the near-surface loss. None: such nodes count as isotropic
        and without near-surface loss.
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
    near_surface = np.zeros(a.size)
    if normals is not None:
        normals = np.asarray(normals, dtype=float)
        n_rock = budget.refractive_index
        # each end looks towards the other: a down the line, b back up it; near the
        # surface the far-field null gives way to the ground wave (see ground_wave_loss_db)
        ground_wave = ground_wave_loss_db(length, budget.wavelength_m)
        pattern = (pattern + np.minimum(half_space_pattern_loss_db(normals[a], d, n_rock), ground_wave)
                   + np.minimum(half_space_pattern_loss_db(normals[b], -d, n_rock), ground_wave))
        on_ground = np.isfinite(normals).all(axis=1)
        near_surface = budget.near_surface_loss_db * (on_ground[a].astype(float) + on_ground[b])
    crossing = crossings * budget.interface_loss_db
    margin = budget.system_performance_db - spreading - attenuation - pattern - near_surface - crossing
    horizontal = np.hypot(d[:, 0], d[:, 1])
    azimuth = np.degrees(np.arctan2(d[:, 0], d[:, 1])) % 180.0
    inclination = np.degrees(np.arctan2(d[:, 2], horizontal))
    air_first = air_wave_arrives_first(site.ground.elevation_m, pa, pb, budget.velocity_m_per_ns)
    return PairLinks(a=a, b=b, length_m=length, spreading_db=spreading, attenuation_db=attenuation,
                     pattern_db=pattern, near_surface_db=near_surface, crossing_db=crossing, margin_db=margin,
                     air_length_m=air_length, crossings=crossings, air_wave_first=air_first,
                     azimuth_deg=azimuth, inclination_deg=inclination)


def site_pair_links(site: Site, budget: LinkBudget, nodes: Nodes, a, b, *, progress=None) -> PairLinks:
    """:func:`pair_links` for a node table: borehole dipoles along their holes
    (:func:`antenna_axes`), surface and face nodes on the ground (:func:`ground_normals`)."""
    return pair_links(site, budget, nodes.xyz_m, antenna_axes(site, nodes), a, b,
                      normals=ground_normals(site, nodes), progress=progress)
