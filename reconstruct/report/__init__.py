"""What people read: pictures (isosurfaces, slices, off-screen renders), the
pick-checks page, the void report with its interactive 3D view
(:mod:`reconstruct.report.scene_3d`), and writing results into output folders.

The only layer of ``reconstruct`` that draws (matplotlib, pyvista, plotly).
"""

from reconstruct.report.html import CAUTIONS, html_document
from reconstruct.report.pick_checks import write_pick_checks
from reconstruct.report.void_report import build_report_html, write_report
from reconstruct.report.folders import write_tomography, write_void_outputs

__all__ = [
    "CAUTIONS",
    "html_document",
    "write_pick_checks",
    "build_report_html",
    "write_report",
    "write_tomography",
    "write_void_outputs",
]
