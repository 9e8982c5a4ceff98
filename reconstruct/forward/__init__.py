"""The forward model: travel times and ray paths through a velocity model.

Straight rays (Siddon path lengths), first-arrival fields by fast marching
(eikonal), bent rays traced back through them, and first-arrival times of many
node pairs on serial, process-pool or Dask workers.
"""

from reconstruct.forward.straight_rays import straight_ray_matrix, ray_lengths_m, ray_coverage
from reconstruct.forward.eikonal import EikonalOptions, travel_time_field
from reconstruct.forward.time_field import TimeField
from reconstruct.forward.ray_tracing import trace_rays, polyline_matrix, ray_time_ns
from reconstruct.forward.first_arrivals import ForwardResult, bent_ray_forward, first_arrival_times, unique_pairs

__all__ = [
    "straight_ray_matrix",
    "ray_lengths_m",
    "ray_coverage",
    "EikonalOptions",
    "travel_time_field",
    "TimeField",
    "trace_rays",
    "polyline_matrix",
    "ray_time_ns",
    "ForwardResult",
    "bent_ray_forward",
    "first_arrival_times",
    "unique_pairs",
]
