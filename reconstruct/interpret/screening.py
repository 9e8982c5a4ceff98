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

Cautious figures
----------------
When a body has been refined against the picks (``body.refined``), the
screening uses the cautious end of each 95 % interval: the thinnest
plausible roof (``low95``) and the widest plausible span, width and length
(``high95``). A slow body's extent is only a lower bound (its ``high95`` is
infinite): its fitted value is used and the figures are said to be "at
least". Without a fit the cube's figures are used and the table says that
no bounds are available.

Crown factor of safety
----------------------
With ``Q`` given, the factor of safety is ``FoS = S_c / C_s`` and its
acceptance class is read from Carter's (2014) table for surface crown
pillars (:data:`CROWN_CLASSES`, entered from memory). With ``Q`` unknown the
factor of safety cannot be given; the scaled span is shown alone.

Blast holes
-----------
A blast pattern whose holes are known (``PlannedWork.holes``,
``hole_depth_m``, ``subdrill_m``) is checked hole by hole: the distance
from each hole's charged column (collar to ``hole_depth_m``) and from its
subdrill zone (``hole_depth_m`` to ``hole_depth_m + subdrill_m``) to the
body. The body is the box of its cells, grown to its cautious extent when
refined. Holes that meet it or come within ``hole_standoff_m`` are listed.

Ranking
-------
Bodies and indications are ranked together by consequence
(:data:`RANKING_RULE`).

References
----------
Carter, T. G. (1992). A new approach to surface crown pillar design.
    Proc. 16th Canadian Rock Mechanics Symposium, Sudbury, 75-83 (from memory).
Carter, T. G. (2014). Guidelines for use of the Scaled Span Method for surface
    crown pillar assessment (title as given in the project's REFERENCES.md;
    the publication details are not checked). Its table of acceptance classes
    A-G (factor of safety, probability of failure, design life, public
    access) is entered here from memory.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, fields
from types import SimpleNamespace

import numpy as np

from reconstruct.errors import InputError
from reconstruct.interpret.bodies import FILL_AIR, STATUS_RESOLVED, body_tier

__all__ = [
    "SCREENING_NOTE",
    "RANKING_RULE",
    "RANKING_BAND_M",
    "CrownClass",
    "CROWN_CLASSES",
    "ScreeningOptions",
    "ScreeningEntry",
    "scaled_span_m",
    "critical_span_m",
    "crown_factor_of_safety",
    "crown_class",
    "hole_distances_m",
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

#: Width of the distance bands of the ranking, m: bodies whose cautious distances to planned works
#: fall in the same band are ranked by their roofs. The project's choice (no published source): a
#: body's edge is uncertain by a cell or more, so a metre or two should not decide the order.
RANKING_BAND_M = 5.0

#: Status of a weak indication in the screening (a body's is ``resolved`` or ``unresolved``).
STATUS_WEAK = "weak"

#: The ranking rule in words, as the reports print it.
RANKING_RULE = (
    "Bodies and indications are ranked together by consequence, rank 1 to look at first: "
    f"(1) by the cautious distance to the nearest planned work, in bands of {RANKING_BAND_M:g} m "
    "(a body that a blast hole meets, or that lies under a planned work with no rock between, counts "
    "as 0 m; a body far from every work, or on a site without planned works, comes after those near "
    "one); (2) within a band, by the cautious roof thickness, thinnest first; (3) then by the crown "
    "factor of safety, lowest first (the largest scaled span first when the rock mass quality Q is "
    "not known); (4) then by volume, largest first. Cautious figures are the thinnest roof and widest "
    "span of the 95 % bounds when the body was fitted to the picks, else the figures cut from the cube."
)


@dataclass(frozen=True)
class CrownClass:
    """One acceptance class of Carter's (2014) table for surface crown pillars (from memory).

    ``fos_low <= FoS < fos_high``; the other fields are the table's words.
    """

    letter: str
    fos_low: float
    fos_high: float
    failure_probability: str
    design_life: str
    public_access: str

    def words(self) -> str:
        return (f"class {self.letter} (Carter 2014, entered from memory): probability of failure "
                f"{self.failure_probability}, design life {self.design_life}, public access "
                f"{self.public_access}")


#: Carter's (2014) acceptance classes for surface crown pillars. ENTERED FROM MEMORY, not checked
#: against the paper: the factor-of-safety ranges, probabilities of failure, longest design lives
#: and public access of each class as remembered; check them before relying on them.
CROWN_CLASSES = (
    CrownClass("A", 0.0, 0.5, "50-100 %", "effectively none", "forbidden"),
    CrownClass("B", 0.5, 1.0, "20-50 %", "very, very short term (under about 0.5 year)", "forcibly prevented"),
    CrownClass("C", 1.0, 1.3, "10-20 %", "very short term (about 1 year)", "actively prevented"),
    CrownClass("D", 1.3, 1.5, "5-10 %", "short term (2-5 years)", "prevented"),
    CrownClass("E", 1.5, 1.8, "1.5-5 %", "medium term (10-20 years)", "discouraged"),
    CrownClass("F", 1.8, 2.0, "0.5-1.5 %", "long term (50-100 years)", "allowed"),
    CrownClass("G", 2.0, math.inf, "under 0.5 %", "very long term (over 100 years)", "free"),
)


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
        Barton's Q of the crown; when given, the critical span, the factor
        of safety and its acceptance class are computed.
    hole_standoff_m : float
        A blast hole whose charged column or subdrill zone comes this close
        to a body (m) is listed with the body; default 3 m, about one burden
        of a quarry bench blast (common practice, no published source).
    """

    specific_gravity: float = 2.7
    dip_deg: float = 0.0
    rock_mass_q: float | None = None
    hole_standoff_m: float = 3.0

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
        if not (isinstance(self.hole_standoff_m, (int, float)) and math.isfinite(self.hole_standoff_m)
                and self.hole_standoff_m >= 0.0):
            problems.append(f"hole_standoff_m must be a number of metres >= 0 (got {self.hole_standoff_m!r})")
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


def crown_factor_of_safety(critical_span: float, scaled_span: float) -> float:
    """Crown factor of safety ``FoS = S_c / C_s`` (Carter 2014, from memory); 0 for an infinite ``C_s``.

    Parameters
    ----------
    critical_span : float
        Critical scaled span ``S_c``, m.
    scaled_span : float
        Scaled span ``C_s``, m, > 0 (``inf`` when no rock is left over the opening).
    """
    if not scaled_span > 0:
        raise ValueError("scaled_span must be > 0")
    return 0.0 if math.isinf(scaled_span) else critical_span / scaled_span


def crown_class(factor_of_safety: float) -> CrownClass:
    """The acceptance class of :data:`CROWN_CLASSES` holding ``factor_of_safety`` (lower bound inclusive)."""
    if not factor_of_safety >= 0:
        raise ValueError("factor_of_safety must be >= 0")
    for entry in CROWN_CLASSES:
        if entry.fos_low <= factor_of_safety < entry.fos_high:
            return entry
    return CROWN_CLASSES[-1]  # inf


def hole_distances_m(box_lo_m, box_hi_m, xy_m, z_top_m, z_bottom_m) -> np.ndarray:
    """Shortest distance between vertical segments and an axis-aligned box, m (0 where they meet).

    Parameters
    ----------
    box_lo_m, box_hi_m : array_like (3,)
        Opposite corners of the box, m.
    xy_m : array_like (n, 2)
        Plan positions of the segments, m.
    z_top_m, z_bottom_m : array_like (n,)
        Elevations of their upper and lower ends, m.

    Returns
    -------
    numpy.ndarray (n,)
        Exact: the plan gap to the box's footprint and the vertical gap
        between the segment's and the box's elevation ranges, added in
        quadrature.
    """
    lo, hi = np.asarray(box_lo_m, dtype=float), np.asarray(box_hi_m, dtype=float)
    xy = np.atleast_2d(np.asarray(xy_m, dtype=float))
    top, bottom = np.asarray(z_top_m, dtype=float), np.asarray(z_bottom_m, dtype=float)
    plan = np.maximum(np.maximum(lo[:2] - xy, xy - hi[:2]), 0.0)
    vertical = np.maximum(np.maximum(lo[2] - top, bottom - hi[2]), 0.0)
    return np.sqrt((plan**2).sum(axis=1) + vertical**2)


@dataclass(frozen=True)
class ScreeningEntry:
    """One ranked line of the screening; lengths in m, None where there is no planned work.

    ``roof_thickness_m`` ... ``length_m`` are the best estimates (the fit's
    values when refined, else the cube's); the ``cautious_*`` figures are
    those the scaled span, the ranking and the hole check use, and
    ``bounds`` says where they come from. A body has a ``body_id``; a weak
    indication (below the detection threshold) an ``indication_id``, status
    ``weak`` and, as its cautious extent, the resolution ("up to about").
    """

    rank: int
    body_id: int | None
    indication_id: int | None
    tier: str
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
    bounds: str
    cautious_roof_m: float
    cautious_span_m: float
    cautious_width_m: float
    cautious_length_m: float
    extent_at_least: bool
    scaled_span_m: float
    critical_span_m: float | None
    crown_fos: float | None
    crown_class: str | None
    crown_assessment: str
    standoff_m: float | None
    cautious_standoff_m: float | None
    nearest_work: str | None
    holes_met: str
    nearest_hole_m: float | None
    concerns: int
    reasons: str


def _finite(value):
    return value is not None and math.isfinite(value)


def _wide(estimate):
    """The widest plausible figure (``high95``), or the value when the interval is open ("at least")."""
    high = estimate.cautious_high()
    return (high, False) if math.isfinite(high) else (estimate.value, True)


def _thin(estimate):
    """The thinnest plausible figure (``low95``), never below 0; 0 when no lower bound is known."""
    low = estimate.cautious_low()
    return max(low, 0.0) if math.isfinite(low) else 0.0


def _weak_as_body(w):
    """A weak indication in the shape the screening reads: its extent taken up to the resolution
    (its true size cannot be measured), its roof at the top of its cells, no fit."""
    extent = max(w.span_m, w.resolution_m)
    return SimpleNamespace(
        body_id=None, indication_id=w.indication_id, tier=w.tier, status=STATUS_WEAK, fill=w.fill,
        confidence="low", refined=None, volume_m3=w.volume_m3, bbox_min_m=w.bbox_min_m, bbox_max_m=w.bbox_max_m,
        roof_thickness_m=w.roof_depth_m, roof_below_work_m=w.roof_below_work_m,
        roof_below_work_name=w.roof_below_work_name, span_m=extent, width_m=extent, length_m=extent,
        standoff_m=w.standoff_m, nearest_work=w.nearest_work, strength=w.strength_noise_floors)


def _no_bounds_words(b, fit) -> str:
    """Why a row carries no bounds, in words."""
    if b.status == STATUS_WEAK:
        return "none: a weak indication's size cannot be measured (taken up to the resolution)"
    if fit is None:
        return "none available: figures cut from the cube"
    return "none available (the fit against the picks did not converge): figures cut from the cube"


def _figures(b) -> dict:
    """Best and cautious sizes of a body: the fit's 95 % bounds when refined, else the cube's figures."""
    r = b.refined
    if r is None or not getattr(r, "converged", True):
        below = b.roof_below_work_m if _finite(b.roof_below_work_m) else None
        standoff = b.standoff_m if _finite(b.standoff_m) else None
        return dict(roof=b.roof_thickness_m, below=below, below_name=b.roof_below_work_name if below is not None
                    else None, span=b.span_m, width=b.width_m, length=b.length_m, volume=b.volume_m3,
                    standoff=standoff, c_roof=b.roof_thickness_m, c_below=below, c_span=b.span_m,
                    c_width=b.width_m, c_length=b.length_m, c_standoff=standoff, at_least=False,
                    bounds=_no_bounds_words(b, r))
    below_name = min(r.roof_below_work_m, key=lambda k: r.roof_below_work_m[k].cautious_low(), default=None)
    below = r.roof_below_work_m[below_name] if below_name is not None else None
    (c_span, open_span), (c_width, open_width), (c_length, open_length) = (
        _wide(r.span_m), _wide(r.width_m), _wide(r.length_m))
    at_least = bool(r.lower_bound or open_span or open_width or open_length)
    standoff = r.standoff_m.value if _finite(r.standoff_m.value) else None
    c_standoff = max(r.standoff_m.cautious_low(), 0.0) if standoff is not None else None
    if c_standoff is not None and not math.isfinite(c_standoff):
        c_standoff = 0.0
    bounds = "95 % bounds of the fit against the picks"
    if at_least:
        bounds += "; the extent is only a lower bound (slow body): at least"
    return dict(roof=r.roof_thickness_m.value, below=below.value if below is not None else None,
                below_name=below_name, span=r.span_m.value, width=r.width_m.value, length=r.length_m.value,
                volume=r.volume_m3.value, standoff=standoff, c_roof=_thin(r.roof_thickness_m),
                c_below=_thin(below) if below is not None else None, c_span=c_span, c_width=c_width,
                c_length=c_length, c_standoff=c_standoff, at_least=at_least, bounds=bounds)


def _body_box_m(b, fig):
    """The box of the body's cells, grown to its cautious span and roof, m."""
    lo, hi = np.array(b.bbox_min_m, dtype=float), np.array(b.bbox_max_m, dtype=float)
    grow = max(fig["c_span"] - b.span_m, 0.0) / 2.0
    lo[:2] -= grow
    hi[:2] += grow
    hi[2] += max(b.roof_thickness_m - fig["c_roof"], 0.0)
    return lo, hi


def _holes_met(b, fig, planned_works, standoff_m: float):
    """Holes whose charged column or subdrill zone come near a body.

    Returns ``(text, nearest distance m or None, the nearest hole's name, any met)``.
    """
    lo, hi = _body_box_m(b, fig)
    near, nearest, nearest_name, met = [], None, None, False
    for work in planned_works:
        if not work.has_holes:
            continue
        columns = work.hole_columns_m()
        xy = np.array([h.collar_m[:2] for h in work.holes], dtype=float)
        charge = hole_distances_m(lo, hi, xy, columns[:, 0], columns[:, 1])
        sub = (hole_distances_m(lo, hi, xy, columns[:, 1], columns[:, 2]) if work.subdrill_m > 0
               else np.full(len(xy), np.inf))
        for hole, dc, ds in zip(work.holes, charge, sub):
            d = min(dc, ds)
            if nearest is None or d < nearest:
                nearest, nearest_name = d, f"{hole.id} ({work.name})"
            if d > standoff_m:
                continue
            part = "charged column" if dc <= ds else "subdrill zone"
            meets = d <= 1e-9
            met = met or meets
            near.append((d, f"{hole.id} ({work.name}): {part} " + ("meets it" if meets else f"{d:.1f} m from it")))
    near.sort(key=lambda item: item[0])
    return "; ".join(text for _, text in near), nearest, nearest_name, met


def _crown_words(cs, sc, fos, cls, options, at_least) -> str:
    """The crown check in words: factor of safety and class, or why there is none."""
    shown = "infinite (no rock left over it)" if math.isinf(cs) else f"{cs:.1f} m"
    if at_least:
        shown = "at least " + shown
    if sc is None:
        return (f"factor of safety cannot be given: the rock mass quality Q is not known (give it to have "
                f"one); scaled span {shown} only")
    bound = "at most " if at_least else ""
    return (f"factor of safety {bound}{fos:.2f} (critical span {sc:.1f} m for Q = {options.rock_mass_q:g} "
            f"over scaled span {shown}); {cls.words()}")


def _reasons(b, fig, cs, sc, thickness, options, holes) -> tuple[list, int]:
    """Plain-language reasons for a body's place and the number of concerns."""
    kind = ("air-filled (faster than the rock)" if b.fill == FILL_AIR
            else "water- or clay-filled (slower than the rock)")
    size = "at least " if fig["at_least"] else "about "
    reasons = [f"{kind} body of {size}{fig['volume']:.0f} m³ whose roof lies {fig['roof']:.1f} m "
               f"below the ground surface, {fig['width']:.1f} m wide and {fig['length']:.1f} m long"]
    concerns = 0
    width = fig["c_width"]
    if thickness <= 0:
        concerns += 2
        reasons.append("it reaches the ground surface or a planned work")
    elif width > 0 and thickness / width < THIN_ROOF_RATIO:
        concerns += 1
        reasons.append(f"its roof ({thickness:.1f} m) is thinner than the body is wide")
    if sc is not None and cs > sc:
        concerns += 1
        reasons.append(f"scaled span {cs:.1f} m exceeds the critical span {sc:.1f} m for Q = "
                       f"{options.rock_mass_q:g}")
    if fig["c_below"] is not None:
        concerns += 1
        reasons.append(f"it lies under '{fig['below_name']}', {max(fig['c_below'], 0):.1f} m "
                       "below the planned work")
    elif fig["c_standoff"] is not None and fig["c_standoff"] < CLOSE_STANDOFF_SPANS * fig["c_span"]:
        concerns += 1
        reasons.append(f"it is {fig['c_standoff']:.1f} m from '{b.nearest_work}', closer than its own span")
    holes_text, nearest_hole, nearest_name, _ = holes
    if holes_text:
        concerns += 1
        reasons.append(f"blast holes within {options.hole_standoff_m:g} m: {holes_text}")
    elif nearest_hole is not None and nearest_hole < CLOSE_STANDOFF_SPANS * fig["c_span"]:
        concerns += 1
        reasons.append(f"blast hole {nearest_name} comes within {nearest_hole:.1f} m of it, closer than its own "
                       "span")
    if b.status == STATUS_WEAK:
        reasons[0] = (f"weak indication: {kind.split(' (')[0]} anomaly of {b.strength:.1f} noise floors, below the "
                      f"detection threshold, roof {fig['roof']:.1f} m below the ground surface, up to about "
                      f"{fig['width']:.0f} m across (its size cannot be measured)")
        reasons.append("it may be noise or a body the data see only faintly: check it if near works")
    elif b.status != STATUS_RESOLVED:
        reasons.append("below the resolution at its depth: confirm or rule out by drilling if near works")
    reasons.append(f"confidence {b.confidence}; sizes: {fig['bounds']}")
    return reasons, concerns


def _screen_one(b, options: ScreeningOptions, planned_works) -> dict:
    """One body's screening row (without its rank) and its ranking key."""
    fig = _figures(b)
    # no rock left (a hole reaching below the roof gives a negative gap) is a roof of 0 m
    thickness = max(fig["c_roof"] if fig["c_below"] is None else min(fig["c_roof"], fig["c_below"]), 0.0)
    width = max(fig["c_width"], 1e-9)
    cs = scaled_span_m(width, thickness, max(fig["c_length"], width), options.specific_gravity, options.dip_deg)
    sc = critical_span_m(options.rock_mass_q) if options.rock_mass_q is not None else None
    fos = crown_factor_of_safety(sc, cs) if sc is not None else None
    cls = crown_class(fos) if fos is not None else None
    holes = _holes_met(b, fig, planned_works, options.hole_standoff_m)
    holes_text, nearest_hole, _, met = holes
    reasons, concerns = _reasons(b, fig, cs, sc, thickness, options, holes)
    crown = _crown_words(cs, sc, fos, cls, options, fig["at_least"])
    reasons.insert(-1, crown if sc is not None else "factor of safety not given (Q not known)")
    distance = fig["c_standoff"] if fig["c_standoff"] is not None else math.inf
    if met or (fig["c_below"] is not None and fig["c_below"] <= 0):
        distance = 0.0
    best_thin = fig["roof"] if fig["below"] is None else min(fig["roof"], fig["below"])
    row = dict(
        body_id=b.body_id, indication_id=getattr(b, "indication_id", None),
        tier=getattr(b, "tier", None) or body_tier(b.status), status=b.status, fill=b.fill, confidence=b.confidence,
        roof_thickness_m=fig["roof"], roof_below_work_m=fig["below"], thinnest_roof_m=best_thin,
        span_m=fig["span"], width_m=fig["width"], length_m=fig["length"],
        thinnest_roof_to_width=best_thin / fig["width"] if fig["width"] > 0 else math.inf,
        bounds=fig["bounds"], cautious_roof_m=thickness, cautious_span_m=fig["c_span"],
        cautious_width_m=fig["c_width"], cautious_length_m=fig["c_length"], extent_at_least=fig["at_least"],
        scaled_span_m=cs, critical_span_m=sc, crown_fos=fos, crown_class=cls.letter if cls else None,
        crown_assessment=crown,
        standoff_m=fig["standoff"], cautious_standoff_m=fig["c_standoff"], nearest_work=b.nearest_work,
        holes_met=holes_text, nearest_hole_m=nearest_hole, concerns=concerns, reasons="; ".join(reasons))
    band = math.floor(distance / RANKING_BAND_M) if math.isfinite(distance) else math.inf
    key = (band, thickness, -cs, -fig["volume"], b.body_id is None, b.body_id or getattr(b, "indication_id", 0))
    return row, key


def screen_voids(bodies, options: ScreeningOptions = ScreeningOptions(), planned_works=(),
                 weak_indications=()) -> list[ScreeningEntry]:
    """Rank bodies and indications together by consequence, with plain-language reasons.

    Parameters
    ----------
    bodies : sequence of VoidBody
        Voids and indications alike (any status); a body's ``refined`` fit,
        when present, supplies the cautious figures.
    options : ScreeningOptions
    planned_works : sequence of reconstruct.io.site.PlannedWork
        Checked hole by hole where a blast pattern's holes are known.
    weak_indications : sequence of reconstruct.interpret.detectability.WeakIndication
        Ranked among the bodies by the same rule, their extent taken up to
        the resolution at their depth.

    Returns
    -------
    list of ScreeningEntry
        In the order of :data:`RANKING_RULE`, ranks from 1. The roof that
        counts, ``cautious_roof_m``, is the thinner of the cautious roof
        thickness (rock to the ground surface) and the cautious rock between
        a planned work over the body and its roof; it is the ``T`` of the
        scaled span.
    """
    subjects = list(bodies) + [_weak_as_body(w) for w in weak_indications]
    rows = sorted((_screen_one(b, options, planned_works) for b in subjects), key=lambda pair: pair[1])
    return [ScreeningEntry(rank=i, **row) for i, (row, _) in enumerate(rows, start=1)]


#: Columns of ``screening.csv`` (the same keys in ``voids.json``, ``screening.ranked``).
SCREENING_COLUMNS = tuple(f.name for f in fields(ScreeningEntry))
