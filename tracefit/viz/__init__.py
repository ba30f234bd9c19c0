"""Figures and the report: overlays, stereograms, rose diagrams, the HTML report.

- :mod:`tracefit.viz.labels` -- how planes, directions and a family's verdict are printed
- :mod:`tracefit.viz.plots` -- matplotlib figures (stereogram, rose diagram, labelled overlay)
- :mod:`tracefit.viz.overlay` -- predicted traces drawn on a picture or canvas (OpenCV)
- :mod:`tracefit.viz.report` -- the self-contained HTML survey report
- :mod:`tracefit.viz.grain_map` -- an orientation map's grains warped onto the micrograph (registration check)

Importing this package stays light: matplotlib is imported only when a figure is made, and
the overlay and report modules (OpenCV, the identify chain) load only when imported by name,
``from tracefit.viz.overlay import draw_predicted``, ``from tracefit.viz.report import write_report``.
"""

from tracefit.viz import grain_map, labels, plots
from tracefit.viz.grain_map import grain_boundaries, registration_figure, write_registration_figure
from tracefit.viz.labels import direction_label, family_label, plane_label
from tracefit.viz.plots import (family_colors, figure_png_bytes, great_circle, line_endpoints, overlay_figure,
                                rose_diagram, save_figure, stereogram, stereogram_for, wulff_project)

# the light modules' public names, each listed once in its own module
__all__ = list(dict.fromkeys(labels.__all__ + plots.__all__ + grain_map.__all__))
