"""Checks of the picks before an inversion: reciprocity, node clock offsets,
outliers, air-wave arrivals and whether the picks are usable at all.
"""

from reconstruct.checks.picks import (
    QCOptions,
    PickChecks,
    check_picks,
    check_site_picks,
    picks_for_inversion,
    usability_problems,
    kept_by_flags,
    FLAGS,
)

__all__ = [
    "QCOptions",
    "PickChecks",
    "check_picks",
    "check_site_picks",
    "picks_for_inversion",
    "usability_problems",
    "kept_by_flags",
    "FLAGS",
]
