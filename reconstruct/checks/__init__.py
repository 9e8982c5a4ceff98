"""Checks of the picks before an inversion: reciprocity (blaming the pick that
disagrees with its neighbours), node time-zero offsets, nodes off as a group,
outliers, air-wave arrivals and whether the picks are usable at all.
"""

from reconstruct.checks.picks import (
    PickCheckOptions,
    PickChecks,
    check_picks,
    check_site_picks,
    picks_for_inversion,
    usability_problems,
    usability_cautions,
    verdict,
    kept_by_flags,
    FLAGS,
)

__all__ = [
    "PickCheckOptions",
    "PickChecks",
    "check_picks",
    "check_site_picks",
    "picks_for_inversion",
    "usability_problems",
    "usability_cautions",
    "verdict",
    "kept_by_flags",
    "FLAGS",
]
