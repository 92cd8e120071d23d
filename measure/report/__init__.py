"""Plots of a measurement and of a model fit: the package's only importer of matplotlib.

matplotlib is imported inside the functions (object-oriented ``Figure`` API on an Agg canvas,
never pyplot), so importing this package is cheap and works without matplotlib.

Examples
--------
The one-call helpers used by ``measure analyze --plot`` and ``measure fit --plot``::

    from measure.report import write_analysis_plot
    write_analysis_plot("room.png", h, fs, analyze_ir(h, fs), "room, position 1")

The figures of a report page, each with its caption::

    from measure.report import report_figures
    for caption, fig in report_figures(h, fs, analyze_ir(h, fs)):
        ...
"""

from __future__ import annotations

from measure.report.plots import (
    COLOUR_MAP,
    MATPLOTLIB_ADVICE,
    PALETTE,
    REPORT_CAPTIONS,
    USED_TOGETHER,
    check_png_path,
    energy_time_curve,
    first_reflections,
    fit_line,
    magnitude_response_db,
    plot_analysis,
    plot_attenuation,
    plot_clarity,
    plot_comparison,
    plot_decay_times,
    plot_distortion,
    plot_energy_time,
    plot_magnitude,
    plot_model_fit,
    plot_time_frequency,
    report_figures,
    require_matplotlib,
    save_figure,
    write_analysis_plot,
    write_attenuation_plot,
    write_model_plot,
)

__all__ = [
    "COLOUR_MAP",
    "MATPLOTLIB_ADVICE",
    "PALETTE",
    "REPORT_CAPTIONS",
    "USED_TOGETHER",
    "check_png_path",
    "energy_time_curve",
    "first_reflections",
    "fit_line",
    "magnitude_response_db",
    "plot_analysis",
    "plot_attenuation",
    "plot_clarity",
    "plot_comparison",
    "plot_decay_times",
    "plot_distortion",
    "plot_energy_time",
    "plot_magnitude",
    "plot_model_fit",
    "plot_time_frequency",
    "report_figures",
    "require_matplotlib",
    "save_figure",
    "write_analysis_plot",
    "write_attenuation_plot",
    "write_model_plot",
]
