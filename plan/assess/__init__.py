"""Assessing a layout: ray coverage and resolution per cell, and recovery tests
(a checkerboard and inserted voids inverted with the real inversion).
"""

from plan.assess.coverage import Coverage, CoverageStandard, compute_coverage
from plan.assess.recovery import RecoveryOptions, RecoveryResult, run_recovery_tests

__all__ = [
    "Coverage",
    "CoverageStandard",
    "compute_coverage",
    "RecoveryOptions",
    "RecoveryResult",
    "run_recovery_tests",
]
