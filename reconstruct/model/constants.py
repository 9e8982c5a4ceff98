"""Physical constants used across voidcube, each defined once (metres and nanoseconds).

The speed of light in vacuum comes from :data:`scipy.constants.c` (CODATA,
exact by the SI definition of the metre: 299 792 458 m/s). Radar waves in air
travel at ``c / sqrt(1.0006)``, 0.03 % slower; voidcube uses ``c`` for air,
well inside pick uncertainty.
"""

import scipy.constants

__all__ = ["SPEED_OF_LIGHT_M_PER_NS", "AIR_VELOCITY_M_PER_NS"]

#: Speed of light in vacuum, m/ns (0.299792458).
SPEED_OF_LIGHT_M_PER_NS = scipy.constants.c * 1e-9

#: Radar velocity in air, m/ns: taken as the speed of light.
AIR_VELOCITY_M_PER_NS = SPEED_OF_LIGHT_M_PER_NS
