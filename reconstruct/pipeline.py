"""The processor's job as one library call: pick checks, inversion, bodies, screening.

Every processing rule and default lives here, once, so that the commands
(``voidcube reconstruct invert``, ``voids``, ``report``), the demo and a
notebook get the same answer from the same inputs:

* which flagged picks are kept (:func:`reconstruct.checks.picks.picks_for_inversion`;
  ``keep_flagged`` keeps more), and whether unusable picks are refused;
* robust weighting: the rule of :func:`robust_rule` (below);
* the time-zero model, the regularisation weight (chosen automatically unless
  given), the velocity band: :class:`reconstruct.inverse.solver.InversionOptions`;
* straight or bent rays and the number of bent-ray iterations;
* the detection threshold of the bodies and the screening options.

:func:`process_survey` computes, in memory, and writes nothing;
:func:`write_inversion` and :func:`write_interpretation` write a folder.

Robust weighting rule
---------------------
Straight rays: Huber's loss (iteratively reweighted least squares) against
gross pick errors, because the pick checks flag impossible and air-wave
picks but not a pick that is merely wrong by many sigmas. Bent rays: none,
because each bent-ray step is accepted only if the plain misfit falls, and
reweighting would change the measure the step is judged by. A
``robust`` given in :class:`ProcessingSettings` overrides the rule.

References
----------
.. [1] Huber, P. J. (1964), Robust estimation of a location parameter,
   Annals of Mathematical Statistics 35(1), 73-101.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from reconstruct.checks.picks import (
    check_site_picks,
    kept_by_flags,
    picks_for_inversion,
    reciprocal_confirmed,
    usability_cautions,
    usability_problems,
    verdict,
)
from reconstruct.errors import InputError, is_whole_number
from reconstruct.interpret.bodies import STATUS_RESOLVED, VoidOptions
from reconstruct.interpret.folder import InversionFolder, find_folder_bodies, inversion_from_run
from reconstruct.interpret.screening import ScreeningOptions
from reconstruct.inverse.solver import InversionOptions
from reconstruct.inverse.straight import TomographyRun
from reconstruct.model.constants import AIR_VELOCITY_M_PER_NS
from reconstruct.parallel import Executor

__all__ = ["DEFAULT_BENT_ITERATIONS", "ProcessingSettings", "ProcessingResult", "robust_rule",
           "process_survey", "check_summary", "interpret_inversion", "write_inversion",
           "write_interpretation", "write_processing", "interpretation_parameters"]

#: Bent-ray iterations after the straight-ray start (the demo runs 3 to stay within 5 minutes).
DEFAULT_BENT_ITERATIONS = 6

_RAYS = ("straight", "bent")
_ROBUST = ("none", "huber", "tukey")


def robust_rule(rays: str) -> str:
    """The robust weighting used when none is asked for: 'huber' with straight rays, 'none' with bent."""
    return "huber" if rays == "straight" else "none"


@dataclass(frozen=True)
class ProcessingSettings:
    """Every choice of the processing that the site and the tables do not hold.

    Parameters
    ----------
    rays : {"bent", "straight"}
        Forward model: bent rays through eikonal travel-time fields (air
        included), iterated from the straight-ray model; or straight rays only.
    bent_iterations : int
        Bent-ray iterations after the straight-ray start (:data:`DEFAULT_BENT_ITERATIONS`).
    inversion : InversionOptions
        Velocity band (kept inside the solve), roughness weights, regularisation
        (smooth or compact), regularisation weight (None: chosen by
        the discrepancy principle or the L-curve), time-zero model, LSQR limits.
        Its ``robust`` field is replaced by :attr:`robust` or the rule.
    robust : {"none", "huber", "tukey"} or None
        Robust weighting; None applies :func:`robust_rule`.
    keep_flagged : tuple of str
        Flags whose picks are kept in the inversion instead of being left out.
    invert_unusable : bool
        Invert even when the pick checks find the data unusable.
    snap_tolerance_m : float or None
        Largest shift, metres, when a node is snapped onto the ground (None:
        the larger of 2 m and two cell diagonals).
    keep_rays : bool
        Keep the final bent rays (for ``rays.vtp``); bent rays only.
    find_bodies : bool
        Find and screen the bodies after the inversion.
    refine_bodies : bool
        Fit each body found again, directly to the picks, as a sharp
        ellipsoid with bounds (:mod:`reconstruct.interpret.refine`).
    voids : VoidOptions
        Detection threshold (robust standard deviations of the anomaly, or
        derived from the false-alarm chance).
    screening : ScreeningOptions
        Rock over the voids and wall dip for the screening.
    anisotropy_from_picks : bool
        Take the elliptical anisotropy ratio (beds horizontal) from the pick
        checks' fit (:mod:`reconstruct.checks.anisotropy`) when it is
        measurable, instead of ``inversion.anisotropy_ratio``.
    """

    rays: str = "bent"
    bent_iterations: int = DEFAULT_BENT_ITERATIONS
    inversion: InversionOptions = field(default_factory=InversionOptions)
    robust: str | None = None
    keep_flagged: tuple = ()
    invert_unusable: bool = False
    snap_tolerance_m: float | None = None
    keep_rays: bool = False
    find_bodies: bool = True
    refine_bodies: bool = True
    voids: VoidOptions = field(default_factory=VoidOptions)
    screening: ScreeningOptions = field(default_factory=ScreeningOptions)
    anisotropy_from_picks: bool = False

    def __post_init__(self):
        problems = []
        if self.rays not in _RAYS:
            problems.append(f"rays must be one of {', '.join(_RAYS)} (got {self.rays!r})")
        if not is_whole_number(self.bent_iterations, 1):
            problems.append(f"bent_iterations must be a whole number >= 1 (got {self.bent_iterations!r})")
        if self.robust is not None and self.robust not in _ROBUST:
            problems.append(f"robust must be one of {', '.join(_ROBUST)} (got {self.robust!r})")
        if self.keep_rays and self.rays != "bent":
            problems.append("keep_rays needs bent rays (straight rays are the node-to-node lines)")
        if problems:
            raise InputError(problems, source="processing settings")

    @property
    def robust_weighting(self) -> str:
        """The robust weighting used: the one given, else :func:`robust_rule`."""
        return self.robust or robust_rule(self.rays)

    def inversion_options(self) -> InversionOptions:
        """The options of each regularised solve, robust weighting included."""
        return dataclasses.replace(self.inversion, robust=self.robust_weighting)

    def as_dict(self) -> dict:
        """The settings as plain values, for the manifest."""
        values = dataclasses.asdict(self)
        values["keep_flagged"] = list(self.keep_flagged)
        values["robust_used"] = self.robust_weighting
        return values


@dataclass(frozen=True)
class ProcessingResult:
    """What :func:`process_survey` computed, in memory.

    ``checks`` are the pick checks, ``problems`` their usability findings
    (empty when usable), ``run`` the inversion, and, when bodies were
    searched, ``inversion`` (the cube as the interpretation reads it),
    ``analysis`` (bodies, background, threshold) and ``screening`` (ranked
    entries) and ``detectability`` (weak indications, what each planned
    work's zone could hide). ``node_positions`` says which nodes took their position from
    the deviation survey of their hole (:func:`node_positions_from_surveys`).
    """

    settings: ProcessingSettings
    checks: object
    problems: tuple
    check_summary: dict
    run: TomographyRun
    inversion: InversionFolder | None = None
    analysis: object = None
    screening: tuple | None = None
    detectability: object = None
    node_positions: dict = dataclasses.field(default_factory=dict)

    @property
    def velocity_m_per_ns(self) -> np.ndarray:
        """The velocity cube, shape ``grid.shape``, m/ns."""
        return self.run.result.velocity_m_per_ns.reshape(self.run.grid.shape)


def _say(progress, message: str) -> None:
    if progress is not None:
        progress(message)


def check_summary(checks, problems, chosen_excluded: int, reading_excluded: int, settings) -> dict:
    """The pick-check summary stored in ``summary.json`` under ``pick_checks``."""
    return {"flag_counts": checks.counts(), "left_out": chosen_excluded - reading_excluded,
            "sigma_source": checks.sigma_source, "pick_noise_from_reciprocity_ns": checks.noise_sigma_ns,
            "reciprocal_pairs": checks.n_reciprocal_pairs, "problems": list(problems),
            "inverted_despite_problems": bool(problems), "kept_flags": list(settings.keep_flagged)}


def _anisotropy_settings(settings: ProcessingSettings, picks, checks, placement, progress):
    """With ``anisotropy_from_picks``: the settings with the pick checks' ratio when it is measurable
    (beds horizontal), and the record of the choice."""
    from reconstruct.checks.anisotropy import anisotropy_from_pick_checks

    if not settings.anisotropy_from_picks:
        return settings, None
    record = anisotropy_from_pick_checks(picks, checks, placement.xyz_m, "z")
    if record is None or not record["measurably_anisotropic"]:
        _say(progress, "anisotropy: none measurable in the picks; inverting as isotropic")
        return dataclasses.replace(settings, inversion=dataclasses.replace(
            settings.inversion, anisotropy_ratio=1.0, anisotropy_axis="z")), record
    ratio = float(np.clip(record["ratio"], 0.5, 2.0))
    _say(progress, f"anisotropy from the picks: {record['words']}; inverting with ratio {ratio:.3f}")
    return dataclasses.replace(settings, inversion=dataclasses.replace(
        settings.inversion, anisotropy_ratio=ratio, anisotropy_axis="z")), record


def _checked_picks(site, nodes, picks, settings: ProcessingSettings, progress):
    """Pick checks; refuse unusable data unless ``invert_unusable``; the picks to invert (with the
    checks, their summary and the nodes' placement)."""
    placement, checks = check_site_picks(site, nodes, picks, snap_tolerance_m=settings.snap_tolerance_m)
    problems = tuple(usability_problems(picks, checks))
    if problems and not settings.invert_unusable:
        reasons = "; ".join(p[len(picks.source) + 2:] if p.startswith(picks.source) else p for p in problems)
        raise InputError(f"{picks.source}: picks not usable as they stand: {reasons}. Run 'voidcube reconstruct "
                         "check-picks' to see every flagged pick, or add --invert-unusable to invert anyway")
    keep = tuple(settings.keep_flagged)
    chosen = picks_for_inversion(picks, nodes, checks, rays=settings.rays, keep_flagged=keep)
    counts = checks.counts()
    _say(progress, "pick checks: " + (", ".join(f"{n} {f}" for f, n in counts.items() if n) or "no pick flagged"))
    exempt = reciprocal_confirmed(checks)[kept_by_flags(checks, rays=settings.rays, keep_flagged=keep)]
    summary = check_summary(checks, problems, len(chosen.excluded), len(picks.excluded), settings)
    summary["cautions"] = usability_cautions(picks, checks)
    summary["verdict"] = verdict(problems, summary["cautions"])
    summary["nodes_off_as_group"] = [nodes.ids[k] for k in np.flatnonzero(checks.nodes.off)]
    return checks, problems, chosen, exempt, summary, placement


def _invert(site, nodes, chosen, exempt, settings: ProcessingSettings, executor, progress) -> TomographyRun:
    options = settings.inversion_options()
    if settings.rays == "straight":
        from reconstruct.inverse.straight import straight_ray_tomography

        return straight_ray_tomography(site, nodes, chosen, options, snap_tolerance_m=settings.snap_tolerance_m,
                                       progress=progress, robust_exempt=exempt)
    from reconstruct.inverse.bent import BentOptions, bent_ray_tomography

    bent = BentOptions(max_iterations=settings.bent_iterations, keep_rays=settings.keep_rays)
    return bent_ray_tomography(site, nodes, chosen, options, bent=bent,
                               executor=executor if executor is not None else Executor(kind="serial"),
                               snap_tolerance_m=settings.snap_tolerance_m, progress=progress)


def interpret_inversion(inversion: InversionFolder, settings: ProcessingSettings = ProcessingSettings(),
                        progress=None):
    """Bodies, their fit against the picks, detectability and screening of an inversion.

    ``inversion`` comes from :func:`reconstruct.interpret.folder.inversion_from_run`
    (a result in memory) or :func:`reconstruct.interpret.folder.load_inversion_folder`
    (a folder on disk). The bodies are found in the cube, refined against
    the picks when ``settings.refine_bodies``, then the weak indications and
    the detectability at each planned work are assessed
    (:func:`reconstruct.interpret.detectability.assess_detectability`), and
    bodies and weak indications are ranked together.

    Returns
    -------
    tuple
        ``(analysis, screening entries, detectability)``.
    """
    from reconstruct.interpret.detectability import assess_detectability
    from reconstruct.interpret.screening import screen_voids

    analysis = find_folder_bodies(inversion, settings.voids)
    resolved = sum(b.status == STATUS_RESOLVED for b in analysis.bodies)
    _say(progress, f"bodies: {len(analysis.bodies)} ({resolved} resolved, "
                   f"{len(analysis.bodies) - resolved} unresolved)")
    if settings.refine_bodies and analysis.bodies:
        analysis = _refined(inversion, analysis, progress)
    detectability = assess_detectability(inversion, analysis)
    screening = screen_voids(analysis.bodies, settings.screening, inversion.site.planned_works,
                             detectability.weak_indications)
    return analysis, tuple(screening), detectability


def _refined(inversion: InversionFolder, analysis, progress):
    """The analysis with every body refined against the picks (:mod:`reconstruct.interpret.refine`)."""
    from reconstruct.interpret.refine import RefinementInputs, failed_refinement, refine_bodies

    if inversion.pick_times is None:
        reason = failed_refinement("not refined: the folder holds no residuals.csv and nodes_used.csv")
        bodies = tuple(dataclasses.replace(b, refined=reason) for b in analysis.bodies)
    else:
        velocity = inversion.velocity_m_per_ns
        usable = np.isfinite(velocity) & (velocity > 0)  # air cells as written; else at the speed of light
        inputs = RefinementInputs(
            grid=inversion.grid, slowness_ns_per_m=np.where(usable, 1.0 / np.where(usable, velocity, 1.0),
                                                            1.0 / AIR_VELOCITY_M_PER_NS),
            ground=inversion.ground, background_slowness_ns_per_m=analysis.background_slowness_ns_per_m,
            labels=analysis.labels, picks=inversion.pick_times, surface_elevation_m=inversion.site.ground.elevation_m,
            planned_works=tuple(inversion.site.planned_works))
        bodies = refine_bodies(inputs, analysis.bodies, progress=progress)
    return dataclasses.replace(analysis, bodies=bodies)


def node_positions_from_surveys(site, nodes, progress=None):
    """Nodes placed on the surveyed paths of their holes, and what moved, for ``summary.json``.

    A node with a hole and a depth along it (column ``depth_along_hole_m``)
    in a hole with a deviation survey takes the surveyed position
    (:func:`reconstruct.io.tables.nodes_on_surveyed_holes`); the record lists
    the holes' planned against surveyed positions
    (:func:`reconstruct.io.surveys.hole_deviation_rows`).
    """
    from reconstruct.io.surveys import hole_deviation_rows
    from reconstruct.io.tables import nodes_on_surveyed_holes

    moved_nodes, shift = nodes_on_surveyed_holes(nodes, site.boreholes)
    moved = np.flatnonzero(shift > 0)
    record = {
        "holes_with_survey": hole_deviation_rows(site.boreholes),
        "nodes_from_surveys": int(moved.size),
        "largest_node_shift_m": float(shift.max()) if shift.size else 0.0,
        "moved": [{"node": nodes.ids[k], "hole": nodes.boreholes[k], "shift_m": round(float(shift[k]), 3)}
                  for k in moved],
    }
    if moved.size:
        _say(progress, f"{moved.size} node(s) placed on the surveyed paths of their holes (largest move "
                       f"{shift.max():.2f} m from the node table's position)")
    return moved_nodes, record


def process_survey(site, nodes, picks, settings: ProcessingSettings = ProcessingSettings(), *,
                   executor: Executor | None = None, progress=None) -> ProcessingResult:
    """Pick checks, inversion and, when asked, bodies and screening; nothing written.

    Parameters
    ----------
    site, nodes, picks : loaded inputs
        :class:`reconstruct.io.site.Site`, :class:`reconstruct.io.tables.Nodes`
        and :class:`reconstruct.io.tables.Picks`; never modified.
    settings : ProcessingSettings
    executor : reconstruct.parallel.Executor, optional
        Where the bent-ray travel-time fields are computed (default: serial).
    progress : callable, optional
        ``progress(message)`` with short messages in words; the library never prints.

    Raises
    ------
    InputError
        Unusable picks (unless ``settings.invert_unusable``), an unknown flag
        in ``keep_flagged``, or inputs that do not fit together.
    """
    nodes, positions = node_positions_from_surveys(site, nodes, progress)
    checks, problems, chosen, exempt, summary, placement = _checked_picks(site, nodes, picks, settings, progress)
    settings, anisotropy = _anisotropy_settings(settings, picks, checks, placement, progress)
    if anisotropy is not None:
        summary["anisotropy_from_picks"] = anisotropy
    run = _invert(site, nodes, chosen, exempt, settings, executor, progress)
    result = ProcessingResult(settings=settings, checks=checks, problems=problems, check_summary=summary, run=run,
                              node_positions=positions)
    if not settings.find_bodies:
        return result
    inversion = inversion_from_run(run)
    analysis, screening, detectability = interpret_inversion(inversion, settings, progress)
    return dataclasses.replace(result, inversion=inversion, analysis=analysis, screening=screening,
                               detectability=detectability)


def write_inversion(result: ProcessingResult, out, *, inputs: dict, parameters: dict, started: str,
                    command: str) -> dict:
    """Write the inversion folder (``velocity.vti``, tables, ``summary.json``, ``manifest.json``).

    Returns the summary dictionary (see :func:`reconstruct.report.folders.write_tomography`).
    """
    from reconstruct.report.folders import write_tomography

    return write_tomography(result.run, out, inputs=inputs, parameters=parameters, started=started,
                            command=command, extra_summary={"pick_checks": result.check_summary,
                                                            "node_positions": result.node_positions})


def write_interpretation(inversion: InversionFolder, analysis, screening, settings: ProcessingSettings, *,
                         detectability=None, pictures: bool = True, max_pictures: int = 20, started: str,
                         progress=None) -> dict:
    """Write the void outputs into the inversion folder ``inversion.path`` (written first).

    ``inversion`` is a folder read back or a result in memory whose ``path``
    names the folder; ``detectability`` the third item that
    :func:`interpret_inversion` returns. Returns the content of ``voids.json``
    (see :func:`reconstruct.report.folders.write_void_outputs`).
    """
    from reconstruct.report.folders import write_void_outputs

    return write_void_outputs(inversion, analysis, list(screening), pictures=pictures, max_pictures=max_pictures,
                              parameters=interpretation_parameters(settings, inversion.site_path, pictures,
                                                                   max_pictures),
                              started=started, progress=progress, detectability=detectability)


def write_processing(result: ProcessingResult, out, *, inputs: dict, parameters: dict, started: str, command: str,
                     pictures: bool = True, max_pictures: int = 20, progress=None) -> tuple[dict, dict | None]:
    """Write a whole result into the folder ``out``: the inversion, then the void outputs.

    Returns ``(summary, voids content)``; the second is None when the result
    holds no bodies.
    """
    summary = write_inversion(result, out, inputs=inputs, parameters=parameters, started=started, command=command)
    if result.analysis is None:
        return summary, None
    inversion = dataclasses.replace(result.inversion, path=Path(out),
                                    site_path=Path(inputs.get("site") or result.inversion.site_path))
    content = write_interpretation(inversion, result.analysis, result.screening, result.settings,
                                   detectability=result.detectability, pictures=pictures, max_pictures=max_pictures, started=started, progress=progress)
    return summary, content


def interpretation_parameters(settings: ProcessingSettings, site_path, pictures: bool, max_pictures: int) -> dict:
    """The parameters of the void search recorded in the manifest and ``voids.json``."""
    return {"threshold_sigmas": settings.voids.sigmas, "false_alarm": settings.voids.false_alarm,
            "refine_bodies": settings.refine_bodies,
            "site": str(site_path), "pictures": pictures, "max_pictures": max_pictures,
            "screening": {"specific_gravity": settings.screening.specific_gravity,
                       "wall_dip_deg": settings.screening.dip_deg,
                       "rock_mass_q": settings.screening.rock_mass_q,
                       "hole_standoff_m": settings.screening.hole_standoff_m}}
