"""The small invented site that the command-line and pipeline tests share."""

SITE_YAML = """\
# invented test site
name: test box
model:
  origin_m: [0, 0, 0]
  size_m: [20, 10, 20]
  cell_m: {cell}
ground:
  flat_elevation_m: 18
rock:
  velocity_m_per_ns: 0.12
  conductivity_ms_per_m: 1.0
  antenna_frequency_mhz: 100
boreholes:
  - {{id: BH1, collar_m: [4, 5, 18], azimuth_deg: 0, dip_deg: 90, length_m: 16}}
  - {{id: BH2, collar_m: [16, 5, 18], azimuth_deg: 0, dip_deg: 90, length_m: 16}}
"""
