"""Reports of a build: the profile figure and the self-contained HTML report.

Everything here reads the results dict that becomes results.json (SI floats)::

    {"design": {"name", "description", "file", "sha256"},
     "fluid": {"name", "viscosity", "density", "temperature"},
     "supply": {"mode", "flow", "pressure", ...},
     "totals": {"inlet_pressure", "outlet_pressure", "total_flow", "total_resistance",
                "transit_time"},
     "generations": [{"generation", "role", "count", "width", "depth", "length", "total_area",
                      "flow_per_channel", "mean_velocity", "wall_shear_floor",
                      "wall_shear_mean", "wall_shear_max", "reynolds", "residence_time",
                      "pressure_drop", "pressure_in", "pressure_out"}, ...],  # inlet to outlet
     "checks": [{"name", "status", "value", "limit", "unit", "source", "message"}, ...],
     "fabrication": {"units", "polarity", "mirror", "dxf_version", "layers": [{"name", "depth"}],
                     "grid", "findings": [...]},
     "shear_window": {"cell_type", "min", "max", "source"} or None,
     "units": {...}}
"""

from chipflow.report.figures import PROFILE_PANELS, profile_figure, svg_text
from chipflow.report.html import CAUTIONS, report_html, write_markdown_summary, write_report

__all__ = [
    "profile_figure",
    "svg_text",
    "PROFILE_PANELS",
    "write_report",
    "report_html",
    "write_markdown_summary",
    "CAUTIONS",
]
