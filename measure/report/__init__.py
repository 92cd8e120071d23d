"""Plots of a measurement and of a model fit: the package's only importer of matplotlib.

matplotlib is imported inside the functions (object-oriented ``Figure`` API on an Agg canvas,
never pyplot), so importing this package is cheap and works without matplotlib.

Examples
--------
The one-call helpers used by ``measure analyze --plot`` and ``measure fit --plot``::

    from measure.report import write_analysis_plot
    write_analysis_plot("room.png", h, fs, analyze_ir(h, fs), "room, position 1")
"""

from __future__ import annotations

from measure.report.plots import (
    MATPLOTLIB_ADVICE,
    check_png_path,
    fit_line,
    plot_analysis,
    plot_attenuation,
    plot_model_fit,
    require_matplotlib,
    save_figure,
    write_analysis_plot,
    write_attenuation_plot,
    write_model_plot,
)

__all__ = [
    "MATPLOTLIB_ADVICE",
    "check_png_path",
    "fit_line",
    "plot_analysis",
    "plot_attenuation",
    "plot_model_fit",
    "require_matplotlib",
    "save_figure",
    "write_analysis_plot",
    "write_attenuation_plot",
    "write_model_plot",
]
