"""Figures and the report: overlays, stereograms, rose diagrams, the HTML report.

Not imported eagerly (matplotlib is heavy): use ``tracefit.viz.plots``, ``tracefit.viz.overlay``
and ``tracefit.viz.report``.
"""
