"""Screening of the bodies: roof thickness, span and stand-off against planned works.

A SCREENING AID, NOT A DESIGN. It ranks the bodies found in the cube so that a
person knows which to look at first; the decision belongs to the site's
geotechnical engineer, after probe drilling.

Scaled span
-----------
Written from memory of Carter (1992) and Carter (2014); check the formula
against the papers before relying on it. For a crown of rock of thickness
``T`` (m) over an opening of span ``S`` (m, across the opening) and strike
length ``L`` (m, along it), with rock of specific gravity ``gamma`` and
walls dipping at ``theta`` degrees:

    C_s = S * sqrt(gamma / (T * (1 + S_R) * (1 - 0.4 cos(theta)))),  S_R = S / L

A larger ``C_s`` is a less stable crown. Carter relates it to a critical span
from the rock mass quality ``Q`` (Barton's Q-system), ``S_c = 3.3 Q^0.43
sinh^0.0016(Q)`` (also from memory of Carter 1992 / 2014); the critical span
is used only when the user gives ``Q``. Voids seen by radar are not the
steep-walled stopes the method was built on, so the dip defaults to 0
degrees, which gives the largest ``C_s`` (the cautious choice).

Names (docs/glossary.md)
------------------------
``roof_thickness_m`` is the rock between the top of the body and the ground
surface, ``roof_below_work_m`` the rock between it and a planned work above
it; the thinner of the two, ``thinnest_roof_m``, is the ``T`` of the scaled
span. ``span_m`` is the body's largest horizontal width; the scaled span
takes ``width_m`` (across its principal plan axis) as ``S`` and
``length_m`` (along it) as ``L``. ``standoff_m`` is its distance to the
nearest planned work.

References
----------
Carter, T. G. (1992). A new approach to surface crown pillar design.
    Proc. 16th Canadian Rock Mechanics Symposium, Sudbury, 75-83 (from memory).
Carter, T. G. (2014). Guidelines for use of the Scaled Span Method for surface
    crown pillar assessment (title as given in the project's REFERENCES.md;
    the publication details are not checked).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from reconstruct.errors import InputError
from reconstruct.interpret.bodies import FILL_AIR, STATUS_RESOLVED

__all__ = [
    "SCREENING_NOTE",
    "ScreeningOptions",
    "ScreeningEntry",
    "scaled_span_m",
    "critical_span_m",
    "screen_voids",
    "SCREENING_COLUMNS",
]

SCREENING_NOTE = (
    "Screening aid, not a design: the ranking tells which indications to check "
    "first. Confirm by probe drilling and have the site's geotechnical engineer "
    "assess every void near people, plant or planned works."
)

#: Roof-thickness-to-width ratio under which a roof is called thin. Rule of thumb:
#: a roof thinner than the opening it spans needs a look (common practice, no
#: published source).
THIN_ROOF_RATIO = 1.0

#: A body nearer to a planned work than its own span (largest horizontal width) is called close
#: (common practice, no published source).
CLOSE_STANDOFF_SPANS = 1.0


@dataclass(frozen=True)
class ScreeningOptions:
    """Settings of the screening.

    Parameters
    ----------
    specific_gravity : float
        Specific gravity of the rock over the voids (density in t/m^3);
        default 2.7, about that of calcite and of most limestones (common
        practice, no published source).
    dip_deg : float
        Dip of the walls of the opening, degrees, 0..90; default 0 (cautious).
    rock_mass_q : float or None
        Barton's Q of the crown; when given, the critical span is computed.
    """

    specific_gravity: float = 2.7
    dip_deg: float = 0.0
    rock_mass_q: float | None = None

    def __post_init__(self):
        problems = []
        if not (isinstance(self.specific_gravity, (int, float)) and math.isfinite(self.specific_gravity)
                and 1.0 <= self.specific_gravity <= 5.0):
            problems.append(f"specific_gravity must be between 1 and 5 (got {self.specific_gravity!r})")
        if not (isinstance(self.dip_deg, (int, float)) and 0.0 <= self.dip_deg <= 90.0):
            problems.append(f"dip_deg must be between 0 and 90 degrees (got {self.dip_deg!r})")
        if self.rock_mass_q is not None and not (
                isinstance(self.rock_mass_q, (int, float)) and math.isfinite(self.rock_mass_q)
                and 0.001 <= self.rock_mass_q <= 1000.0):
            problems.append(f"rock_mass_q must be between 0.001 and 1000 (Q-system range; got "
                            f"{self.rock_mass_q!r})")
        if problems:
            raise InputError(problems)


def scaled_span_m(span_m, thickness_m, strike_length_m, specific_gravity=2.7, dip_deg=0.0) -> float:
    """Scaled crown span ``C_s`` in metres (Carter 1992, 2014; formula from memory).

    Parameters
    ----------
    span_m : float
        Span ``S`` across the opening, m, > 0.
    thickness_m : float
        Rock thickness ``T`` over the opening, m; 0 or less gives ``inf``.
    strike_length_m : float
        Length ``L`` along the opening, m, >= span.
    specific_gravity : float
    dip_deg : float

    Returns
    -------
    float
        ``S * sqrt(gamma / (T (1 + S/L) (1 - 0.4 cos theta)))``.
    """
    if span_m <= 0 or strike_length_m <= 0:
        raise ValueError("span_m and strike_length_m must be > 0")
    if thickness_m <= 0:
        return math.inf
    ratio = min(span_m / strike_length_m, 1.0)
    wall = 1.0 - 0.4 * math.cos(math.radians(dip_deg))
    return span_m * math.sqrt(specific_gravity / (thickness_m * (1.0 + ratio) * wall))


def critical_span_m(rock_mass_q: float) -> float:
    """Critical scaled span ``S_c = 3.3 Q^0.43 sinh^0.0016(Q)`` in metres (Carter; from memory)."""
    if rock_mass_q <= 0:
        raise ValueError("rock_mass_q must be > 0")
    return 3.3 * rock_mass_q**0.43 * math.sinh(rock_mass_q) ** 0.0016


@dataclass(frozen=True)
class ScreeningEntry:
    """One ranked line of the screening; lengths in m, None where there is no planned work."""

    rank: int
    body_id: int
    status: str
    fill: str
    confidence: str
    roof_thickness_m: float
    roof_below_work_m: float | None
    thinnest_roof_m: float
    span_m: float
    width_m: float
    length_m: float
    thinnest_roof_to_width: float
    scaled_span_m: float
    critical_span_m: float | None
    standoff_m: float | None
    nearest_work: str | None
    concerns: int
    reasons: str


def _finite(value):
    return value is not None and math.isfinite(value)


def screen_voids(bodies, options: ScreeningOptions = ScreeningOptions()) -> list[ScreeningEntry]:
    """Rank bodies by concern, with plain-language reasons.

    Order: resolved bodies (voids) before unresolved ones (indications);
    then the number of concerns (roof thinner than the body is wide, scaled
    span above the critical span when Q is given, close to or under a planned
    work, body reaching the surface or the work); then the scaled span
    (largest first).

    The roof that counts, ``thinnest_roof_m``, is the thinner of the roof
    thickness (rock to the ground surface) and the rock between a planned
    work over the body and its roof.
    """
    drafts = []
    for b in bodies:
        thickness = b.roof_thickness_m
        under_work = _finite(b.roof_below_work_m)
        if under_work:
            thickness = min(thickness, b.roof_below_work_m)
        cs = scaled_span_m(b.width_m, thickness, max(b.length_m, b.width_m),
                           options.specific_gravity, options.dip_deg)
        sc = critical_span_m(options.rock_mass_q) if options.rock_mass_q is not None else None
        width = b.width_m
        ratio = thickness / width if width > 0 else math.inf
        reasons, concerns = [], 0
        kind = ("air-filled (faster than the rock)" if b.fill == FILL_AIR
                else "water- or clay-filled (slower than the rock)")
        where = (f"{kind} body of about {b.volume_m3:.0f} m³ whose roof lies {b.roof_thickness_m:.1f} m "
                 f"below the ground surface, {width:.1f} m wide and {b.length_m:.1f} m long")
        reasons.append(where)
        if thickness <= 0:
            concerns += 2
            reasons.append("it reaches the ground surface or a planned work")
        elif ratio < THIN_ROOF_RATIO:
            concerns += 1
            reasons.append(f"its roof ({thickness:.1f} m) is thinner than the body is wide")
        if sc is not None and cs > sc:
            concerns += 1
            reasons.append(f"scaled span {cs:.1f} m exceeds the critical span {sc:.1f} m for Q = "
                           f"{options.rock_mass_q:g}")
        if under_work:
            concerns += 1
            reasons.append(f"it lies under '{b.roof_below_work_name}', {max(b.roof_below_work_m, 0):.1f} m "
                           "below the planned work")
        elif _finite(b.standoff_m) and b.standoff_m < CLOSE_STANDOFF_SPANS * b.span_m:
            concerns += 1
            reasons.append(f"it is {b.standoff_m:.1f} m from '{b.nearest_work}', closer than "
                           "its own span")
        if b.status != STATUS_RESOLVED:
            reasons.append("below the resolution at its depth: confirm or rule out by drilling if "
                           "near works")
        reasons.append(f"confidence {b.confidence}")
        drafts.append(dict(
            body_id=b.body_id, status=b.status, fill=b.fill, confidence=b.confidence,
            roof_thickness_m=b.roof_thickness_m,
            roof_below_work_m=b.roof_below_work_m if under_work else None, thinnest_roof_m=thickness,
            span_m=b.span_m, width_m=width, length_m=b.length_m, thinnest_roof_to_width=ratio,
            scaled_span_m=cs, critical_span_m=sc,
            standoff_m=b.standoff_m if _finite(b.standoff_m) else None,
            nearest_work=b.nearest_work, concerns=concerns, reasons="; ".join(reasons)))
    drafts.sort(key=lambda d: (d["status"] != STATUS_RESOLVED, -d["concerns"], -d["scaled_span_m"], d["body_id"]))
    return [ScreeningEntry(rank=i, **d) for i, d in enumerate(drafts, start=1)]


#: Columns of ``screening.csv`` (the same keys in ``voids.json``, ``screening.ranked``).
SCREENING_COLUMNS = ("rank", "body_id", "status", "fill", "confidence", "roof_thickness_m", "roof_below_work_m",
                     "thinnest_roof_m", "span_m", "width_m", "length_m", "thinnest_roof_to_width",
                     "scaled_span_m", "critical_span_m", "standoff_m", "nearest_work", "concerns", "reasons")
