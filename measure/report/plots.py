"""Figures of a measurement and of a model fit (matplotlib, object-oriented API, Agg canvas).

This module is the only importer of matplotlib. It uses :class:`matplotlib.figure.Figure` with
an explicit :class:`~matplotlib.backends.backend_agg.FigureCanvasAgg`: no pyplot, no global
figure registry, no change to ``rcParams``. matplotlib is imported inside the functions, so
the rest of the package (and every command without ``--plot``) works without it; when it is
missing, :class:`~measure.errors.MissingDependencyError` says how to install it.

What the figures show
---------------------
:func:`plot_analysis` (one impulse response and its :class:`~measure.parameters.RoomFigures`):

1. top left: the broadband level ``10 lg h²`` re its peak against time (light: the peak of
   each 0.5 ms block; dark: the energy envelope, a 5 ms moving average), with the ISO 3382-1
   A.3.4 onset, the noise floor and the crosspoint found by the Lundeby et al. (1995) search;
   top right: the first 100 ms after the onset, sample by sample, with the 50 ms and 80 ms
   splits of C50/C80 and D50;
2. one small panel per band: the compensated Schroeder decay curve the analysis evaluated
   (``BandFigures.decay.edc_db``, 0 dB at the band's onset), the least-squares lines of EDT
   (0 to −10 dB), T20 (−5 to −25 dB) and T30 (−5 to −35 dB) over the very samples the analysis
   fitted, and the Lundeby crosspoint where a noise floor was found. A band with no valid
   decay shows its plain Schroeder integral (recomputed here with
   :func:`measure.bands.filter_bands` and :func:`measure.decay.schroeder`) in grey;
3. EDT, T20 and T30 per band as bars, T20/T30 with their standard uncertainty
   (ISO 3382-2 Annex A) as error bars; a figure that could not be measured honestly is a gap
   with a cross on the base line.

:func:`plot_model_fit` (a :class:`~measure.model.fit.FitReport`, optionally with the measured
and modelled figures): EDT, T30 and C80 per band, measured against model; their differences in
ISO 3382-1 JNDs with the ±1 JND band shaded; and, when the figures are given, each band's
measured and modelled decay curves overlaid.

The figures of a report page (:func:`report_figures` returns them with their captions):
:func:`plot_energy_time` (the response and its energy-time curve with the direct sound, the
first reflections and the noise floor), :func:`plot_decay_times` (EDT, T20, T30 per band with
the Annex A uncertainty), :func:`plot_clarity` (C50/C80, D50, Ts in ms), :func:`plot_magnitude`
(fractional-octave power-smoothed magnitude), :func:`plot_time_frequency` (spectrogram),
:func:`plot_distortion` (harmonic distortion of a sweep measurement) and
:func:`plot_comparison` (two sides in JNDs, from :meth:`measure.compare.Comparison.to_dict`).

Colours
-------
Every figure draws from one table, :data:`PALETTE`: a colour, line style and marker per
quantity, the colours those of Okabe & Ito [1]_ (or neutral greys), chosen so that the colours
drawn together (:data:`USED_TOGETHER`) differ in relative luminance [2]_ by at least 0.10 and
the figures read in grey-scale print. Pictures and per-band series use the cividis colour map
[3]_. Value axes of quantities with an ISO 3382-1 JND span at least 3 JND (differences at least
±2 JND), so that a small difference does not fill an axis.

References
----------
.. [1] M. Okabe and K. Ito, "Color Universal Design (CUD): how to make figures and presentations
   that are friendly to colorblind people", J*Fly, 2008 (https://jfly.uni-koeln.de/color/).
.. [2] W3C, Web Content Accessibility Guidelines (WCAG) 2.1, definition of "relative
   luminance" (sRGB linearised, weights 0.2126, 0.7152, 0.0722 of ITU-R BT.709).
.. [3] J. R. Nuñez, C. R. Anderton and R. S. Renslow, "Optimizing colormaps with consideration
   for color vision deficiency to enable accurate interpretation of scientific data",
   PLoS ONE 13(7): e0199239, 2018.
"""

from __future__ import annotations

import math
import os
from pathlib import Path
from typing import Any, Literal

import numpy as np

from measure._validate import check_fs, check_signal
from measure.errors import MissingDependencyError, ParameterError

__all__ = [
    "MATPLOTLIB_ADVICE",
    "require_matplotlib",
    "check_png_path",
    "fit_line",
    "plot_analysis",
    "plot_model_fit",
    "save_figure",
    "write_analysis_plot",
    "write_model_plot",
    "plot_attenuation",
    "write_attenuation_plot",
    "PALETTE",
    "USED_TOGETHER",
    "COLOUR_MAP",
    "REPORT_CAPTIONS",
    "energy_time_curve",
    "first_reflections",
    "magnitude_response_db",
    "plot_energy_time",
    "plot_decay_times",
    "plot_clarity",
    "plot_magnitude",
    "plot_time_frequency",
    "plot_distortion",
    "plot_comparison",
    "report_figures",
]

#: What to do when matplotlib is missing.
MATPLOTLIB_ADVICE = ("install it with `python -m pip install matplotlib`; everything except "
                     "the plots works without it (leave out --plot)")

#: One palette for every figure of this module: quantity → (colour, line style, marker).
#: Colours: the qualitative palette of Okabe & Ito (2008) [1]_ (black, blue #0072B2,
#: vermillion #D55E00, bluish green #009E73, reddish purple #CC79A7, sky blue #56B4E9, orange
#: #E69F00), plus neutral greys. The same quantity has the same entry in every figure; quantities
#: that share a colour are never drawn on the same axes. Colours drawn together
#: (:data:`USED_TOGETHER`) differ in relative luminance (WCAG 2.x, ITU-R BT.709 weights on
#: linearised sRGB [2]_) by at least 0.10, so the figures read in grey-scale print; the line
#: style and marker tell them apart as well. Relative luminance of each colour: black 0.000,
#: blue 0.152, vermillion 0.222, bluish green 0.257, reddish purple 0.293, sky blue 0.405,
#: orange 0.416, grey #999999 0.319, grey #C8C8C8 0.578, grey #DDDDDD 0.723.
PALETTE: dict[str, tuple[str, str, str]] = {
    # the measured response and its curves (energy envelope, Schroeder decay)
    "measured": ("#000000", "-", "."),
    "model": ("#D55E00", "--", "s"),
    "room_a": ("#000000", "-", "D"),
    "room_b": ("#56B4E9", "--", "^"),
    "edt": ("#E69F00", ":", "v"),
    "t20": ("#CC79A7", "--", "s"),
    "t30": ("#0072B2", "-", "o"),
    "c50": ("#56B4E9", "--", "^"),
    "c80": ("#009E73", "-", "h"),
    "d50": ("#D55E00", "-", "D"),
    "ts": ("#CC79A7", "-.", "P"),
    "drr": ("#000000", ":", "X"),
    "sti": ("#0072B2", "-", "*"),
    # the direct sound (onset) and the first reflections
    "direct": ("#0072B2", "-.", "^"),
    "reflection": ("#E69F00", "none", "v"),
    # the noise floor and the Lundeby crosspoint
    "noise_floor": ("#C8C8C8", "--", "_"),
    # the raw level trace (10 lg h² sample by sample or per block) behind the curves
    "response": ("#DDDDDD", "-", ""),
    # a band's plain Schroeder integral when no decay was valid; reference lines; JND shading
    "unevaluated": ("#999999", "-", ""),
    "jnd": ("#999999", "-", ""),
    # harmonic distortion (one colour: harmonics are told apart by the axis)
    "distortion": ("#D55E00", "-", "o"),
    # measure attenuation: the direct and reverberant parts, air absorption alone
    "reverberant": ("#E69F00", "--", "s"),
    "air": ("#C8C8C8", ":", ""),
}

#: The palette entries drawn on the same axes (their colours must differ in luminance).
USED_TOGETHER: dict[str, tuple[str, ...]] = {
    "band decay": ("measured", "t30", "t20", "edt", "noise_floor"),
    "decay times": ("edt", "t20", "t30"),
    "energy-time": ("response", "measured", "direct", "reflection", "noise_floor"),
    "early part": ("response", "measured", "direct", "c80", "c50"),
    "clarity": ("c50", "c80"),
    "model fit": ("measured", "model"),
    "model differences": ("edt", "t30", "c80"),
    "comparison": ("room_a", "room_b"),
    "attenuation": ("direct", "reverberant", "air"),
}

#: Colour map of the time-frequency picture and of per-band series: perceptually uniform with
#: monotone lightness, readable with colour-vision deficiencies (Nuñez et al. 2018 [3]_).
COLOUR_MAP = "cividis"


def _c(key: str) -> str:
    return PALETTE[key][0]


def _st(key: str, **kw: Any) -> dict[str, Any]:
    """Plot keywords (colour, line style, marker) of a palette entry, updated by ``kw``."""
    colour, ls, marker = PALETTE[key]
    return {"color": colour, "ls": ls, "marker": marker or "None", **kw}


#: (key, name, colour, line width) of the decay fits drawn on the band panels; the fit ranges
#: are those of measure.decay.FIT_RANGES_DB (ISO 3382-1 A.2.2, ISO 3382-2 clause 6).
_FITS = (("t30", "T30", _c("t30"), 6.0), ("t20", "T20", _c("t20"), 3.5),
         ("edt", "EDT", _c("edt"), 3.5))

_BLOCK_S = 0.0005  # block of the decimated level trace
_SMOOTH_S = 0.005  # moving average of the energy envelope
_EARLY_S = 0.100  # length of the early-part zoom after the onset
_DECAY_FLOOR_DB = -70.0  # bottom of the band-decay panels
_MAX_POINTS = 2500  # points per decay curve drawn (the curves are smooth and monotone)


# ---------------------------------------------------------------------------------------------
# matplotlib access


def require_matplotlib() -> None:
    """Raise :class:`MissingDependencyError` unless matplotlib can be imported.

    Commands call this before any work when a plot is asked for, so that nothing is written
    when the plot cannot be drawn.
    """
    _mpl()


def _mpl() -> tuple[Any, Any]:
    """(Figure, FigureCanvasAgg), imported on first use."""
    try:
        from matplotlib.backends.backend_agg import FigureCanvasAgg
        from matplotlib.figure import Figure
    except ImportError as err:
        raise MissingDependencyError(
            f"plots need the Python package matplotlib, which cannot be imported ({err}); "
            f"{MATPLOTLIB_ADVICE}") from err
    return Figure, FigureCanvasAgg


def _new_figure(width_in: float, height_in: float) -> Any:
    # Fixed margins (set by the callers' grid specs) instead of a layout engine: constrained
    # layout measured every tick label again and cost 0.7 s of a 1.8 s plot.
    figure_cls, canvas_cls = _mpl()
    fig = figure_cls(figsize=(width_in, height_in))
    canvas_cls(fig)  # attaches itself to fig; no pyplot, no global registry
    return fig


def _rows(fig: Any, heights_in: list[float], gaps_in: list[float], *, top_in: float = 0.55,
          bottom_in: float = 0.55) -> list[tuple[float, float]]:
    """Resize ``fig`` to hold rows of the given heights and gaps (inches); their (bottom, top)."""
    total = top_in + bottom_in + sum(heights_in) + sum(gaps_in)
    fig.set_size_inches(fig.get_figwidth(), total)
    out = []
    y = total - top_in
    for i, hgt in enumerate(heights_in):
        out.append(((y - hgt) / total, y / total))
        y -= hgt + (gaps_in[i] if i < len(gaps_in) else 0.0)
    return out


def _gs(fig: Any, row: tuple[float, float], nrows: int, ncols: int, *, hgap_in: float = 0.0,
        wgap_in: float = 0.0, **kw: Any) -> Any:
    """A grid spec filling ``row`` with gaps given in inches (0.75 in left, 0.25 in right)."""
    width = fig.get_figwidth()
    left_in, right_in = 0.75, 0.25
    bottom, top = row
    height = (top - bottom) * fig.get_figheight()

    def space(total: float, n: int, gap: float) -> float:
        return 0.0 if n < 2 else gap / ((total - (n - 1) * gap) / n)

    return fig.add_gridspec(nrows, ncols, left=left_in / width, right=1.0 - right_in / width,
                            bottom=bottom, top=top,
                            wspace=space(width - left_in - right_in, ncols, wgap_in),
                            hspace=space(height, nrows, hgap_in), **kw)


def check_png_path(path: str | os.PathLike[str], *, option: str = "path") -> Path:
    """``path`` as a Path if it names a PNG file, else :class:`ParameterError`."""
    p = Path(path)
    if p.suffix.lower() != ".png":
        raise ParameterError(f"{option} {str(path)!r} must end in .png; name the plot e.g. "
                             "room.png")
    if p.exists() and p.is_dir():
        raise ParameterError(f"{option} {str(path)!r} is a folder; give a file name ending "
                             "in .png")
    return p


def save_figure(fig: Any, path: str | os.PathLike[str], *, dpi: float = 110.0) -> Path:
    """Write ``fig`` as a PNG file atomically (temporary file, fsync, rename).

    Parameters
    ----------
    fig : matplotlib.figure.Figure
    path : str or PathLike
        Must end in ``.png``; missing folders are created.
    dpi : float, > 0
        Pixels per inch.

    Returns
    -------
    Path
        The file written.

    Raises
    ------
    ParameterError
        If ``path`` does not end in ``.png`` or is a folder.
    """
    from measure.audio_io import atomic_writer

    p = check_png_path(path)
    if fig.canvas is None or type(fig.canvas).__name__ == "FigureCanvasBase":
        _, canvas_cls = _mpl()
        canvas_cls(fig)
    with atomic_writer(p, "wb") as fh:
        fig.savefig(fh, format="png", dpi=dpi)
    return p


# ---------------------------------------------------------------------------------------------
# Small numeric helpers for drawing (no new figures are computed here)


def _level_db(e: np.ndarray, ref: float) -> np.ndarray:
    with np.errstate(divide="ignore"):
        return 10.0 * np.log10(np.maximum(e, ref * 1e-30) / ref)


def _decimate(n: int) -> np.ndarray:
    """Indices of at most _MAX_POINTS samples spread over 0..n-1 (always the last one)."""
    if n <= _MAX_POINTS:
        return np.arange(n)
    return np.unique(np.linspace(0, n - 1, _MAX_POINTS).round().astype(np.int64))


def fit_line(curve_db: np.ndarray, fs: int, hi_db: float, lo_db: float, *,
             end_db: float | None = None) -> tuple[float, float, float, float] | None:
    """The regression line the decay analysis fitted between two levels, for drawing.

    Same sample range as :func:`measure.decay.fit_decay`: from the first sample at or below
    ``hi_db`` to the last before the curve falls below ``lo_db`` (or to the end of a truncated
    curve whose compensated end level ``end_db`` is already below ``lo_db``).

    Returns
    -------
    (t0_s, t1_s, a_db, b_db_per_s) or None
        The line ``L(t) = a + b t`` over ``t0 <= t <= t1`` (s from the curve's first sample);
        ``-60/b`` is the decay time. None when the range is not reached.

    See Also
    --------
    measure.decay.decay_line : the regression itself, shared with the analysis.
    """
    from measure.decay import decay_line

    line = decay_line(np.asarray(curve_db, dtype=np.float64), fs, hi_db, lo_db, end_db=end_db)
    if line is None:
        return None
    i0, i1, a, b, _ = line
    return i0 / fs, (i1 - 1) / fs, a, b


def _fmt_s(v: float | None) -> str:
    return "—" if v is None else f"{v:.2f} s"


def _check_title(title: Any) -> str:
    if not isinstance(title, str):
        raise ParameterError(f"title={title!r} must be a string")
    return title


# ---------------------------------------------------------------------------------------------
# The analysis figure


def plot_analysis(h: np.ndarray, fs: int, figures: Any, *, title: str = "") -> Any:
    """Draw an impulse response, its band decays with their fits, and the decay times.

    Parameters
    ----------
    h : ndarray, shape (n,)
        The broadband impulse response that ``figures`` was computed from.
    fs : int, > 0, Hz
    figures : measure.parameters.RoomFigures
        What :func:`measure.parameters.analyze_ir` returned for ``h`` at ``fs``.
    title : str
        Printed above the figure (e.g. the file name and channel).

    Returns
    -------
    matplotlib.figure.Figure
        Axes: two in the top row (whole IR, first 100 ms), one per band, one for the decay
        times; ``fig.axes`` in that order.

    Raises
    ------
    ParameterError
        For a malformed ``h``, or ``figures`` of another sample rate.
    MissingDependencyError
        If matplotlib is not installed.

    Notes
    -----
    The band decay curves start at each band's own onset (for time-reversed filtering a few
    milliseconds before the broadband onset, see :mod:`measure.parameters`), so their time
    axes count from there.
    """
    from measure.parameters import RoomFigures

    h = check_signal(h, "h", ndim=(1,))
    fs = check_fs(fs)
    title = _check_title(title)
    if not isinstance(figures, RoomFigures):
        raise ParameterError("figures must be the RoomFigures that measure.parameters."
                             f"analyze_ir returned, not {type(figures).__name__}")
    if figures.fs != fs:
        raise ParameterError(f"the figures were computed at {figures.fs} Hz but fs={fs}; pass "
                             "the impulse response and sample rate they came from")
    if not 0 <= figures.onset_index < h.shape[0]:
        raise ParameterError(f"the figures' onset (sample {figures.onset_index}) lies outside "
                             f"h ({h.shape[0]} samples); pass the IR they were computed from")

    bands = figures.bands
    n_bands = len(bands)
    ncols = 4 if n_bands <= 8 else 6
    nrows = max(1, math.ceil(n_bands / ncols))
    fig = _new_figure(12.0, 10.0)
    rows = _rows(fig, [3.0, 1.75 * nrows + 0.3 * (nrows - 1), 2.6], [0.85, 0.85])
    top = _gs(fig, rows[0], 1, 2, wgap_in=0.8, width_ratios=[2.6, 1.0])
    ax_ir = fig.add_subplot(top[0])
    ax_early = fig.add_subplot(top[1])
    _draw_ir(ax_ir, ax_early, h, fs, figures)
    if n_bands:
        grid = _gs(fig, rows[1], nrows, ncols, hgap_in=0.3, wgap_in=0.12)
        panels = []
        for i, bf in enumerate(bands):
            share = panels[0] if panels else None
            ax = fig.add_subplot(grid[i // ncols, i % ncols], sharex=share, sharey=share)
            panels.append(ax)
            _draw_band_decay(ax, bf, h, fs, figures.onset_index,
                             left=(i % ncols == 0), bottom=(i // ncols == nrows - 1
                                                             or i + ncols >= n_bands))
        _finish_decay_panels(panels, bands, fs)
        ax_t = fig.add_subplot(_gs(fig, rows[2], 1, 1)[0])
        _draw_decay_times(ax_t, bands, figures.kind)
    if title:
        fig.suptitle(title, fontsize=13, y=1.0 - 0.12 / fig.get_figheight(), va="top")
    return fig


def _draw_ir(ax: Any, ax_early: Any, h: np.ndarray, fs: int, figures: Any) -> None:
    e = h * h
    peak = float(e.max())
    if not (peak > 0):
        raise ParameterError("the impulse response is all zero; nothing to draw")
    block = max(1, int(round(_BLOCK_S * fs)))
    nb = e.shape[0] // block
    eb = e[: nb * block].reshape(nb, block)
    t_blocks = (np.arange(nb) + 0.5) * block / fs
    k = max(1, int(round(_SMOOTH_S / (block / fs))))
    mean = eb.mean(axis=1)
    smooth = np.convolve(mean, np.ones(k) / k, mode="same")
    ax.plot(t_blocks, _level_db(eb.max(axis=1), peak), color=_c("response"), lw=0.6,
            label="10 lg h² (peak per 0.5 ms)")
    ax.plot(t_blocks, _level_db(smooth, peak), color=_c("measured"), lw=1.2,
            label="energy envelope (5 ms average)")
    onset_s = figures.onset_index / fs
    ax.axvline(onset_s, color=_c("direct"), lw=1.2, ls=PALETTE["direct"][1],
               label=f"onset {onset_s * 1000:.1f} ms (−20 dB rule)")
    bb = figures.broadband
    d = bb.decay
    pnr = bb.peak_to_noise_db
    if d.noise_floor_found and pnr is not None:
        ax.axhline(-pnr, color=_c("noise_floor"), lw=1.6, ls=PALETTE["noise_floor"][1],
                   label=f"noise floor −{pnr:.0f} dB (Lundeby)")
        ax.axvline(onset_s + d.truncation_s, color=_c("noise_floor"), lw=1.6, ls=":",
                   label=f"crosspoint {onset_s + d.truncation_s:.2f} s")
        lo = -(pnr + 15.0)
    else:
        finite = _level_db(smooth, peak)
        lo = float(np.min(finite[finite > -200.0])) - 5.0 if np.any(finite > -200.0) else -100.0
        ax.text(0.99, 0.97, "no noise floor found: the IR ends while still decaying",
                transform=ax.transAxes, ha="right", va="top", fontsize=8, color="k")
    ax.set_ylim(max(min(lo, -40.0), -150.0), 5.0)
    ax.set_xlim(0.0, h.shape[0] / fs)
    ax.set_xlabel("time (s)")
    ax.set_ylabel("level (dB re peak)")
    ax.set_title("Broadband impulse response", fontsize=10, loc="left")
    ax.grid(True, alpha=0.3)
    ax.legend(loc="lower left", fontsize=7, framealpha=0.85)

    # early part, sample by sample
    i0 = max(0, figures.onset_index - int(round(0.005 * fs)))
    i1 = min(h.shape[0], figures.onset_index + int(round(_EARLY_S * fs)))
    t_ms = (np.arange(i0, i1) - figures.onset_index) / fs * 1000.0
    ax_early.plot(t_ms, _level_db(e[i0:i1], peak), color=_c("response"), lw=0.5,
                  label="10 lg h²")
    k1 = max(1, int(round(0.001 * fs)))
    ax_early.plot(t_ms, _level_db(np.convolve(e[i0:i1], np.ones(k1) / k1, mode="same"), peak),
                  color=_c("measured"), lw=1.0, label="1 ms average")
    for te_ms, name, key in ((50.0, "50 ms", "c50"), (80.0, "80 ms", "c80")):
        ax_early.axvline(te_ms, color=_c(key), lw=1.2, ls=PALETTE[key][1])
        ax_early.text(te_ms, 1.0, f" {name}", color=_c(key), fontsize=7, va="top",
                      transform=ax_early.get_xaxis_transform())
    ax_early.axvline(0.0, color=_c("direct"), lw=1.2, ls=PALETTE["direct"][1])
    ax_early.set_ylim(-60.0, 5.0)
    ax_early.set_xlim(t_ms[0], t_ms[-1])
    ax_early.set_xlabel("time after onset (ms)")
    ax_early.set_ylabel("level (dB re peak)")
    ax_early.set_title("First 100 ms (C50/C80 splits)", fontsize=10, loc="left")
    ax_early.grid(True, alpha=0.3)
    ax_early.legend(loc="lower left", fontsize=7, framealpha=0.85)


def _band_curve(bf: Any, h: np.ndarray, fs: int, onset: int) -> tuple[np.ndarray, bool]:
    """The band's evaluated decay curve, or (when none was valid) its plain Schroeder integral.

    Returns (curve_db, evaluated).
    """
    curve = np.asarray(bf.decay.edc_db)
    if curve.size:
        return curve, True
    from measure.bands import filter_bands
    from measure.decay import schroeder

    if bf.band is None:
        return np.zeros(0), False
    y = filter_bands(h, fs, (bf.band,), mode="reversed")[0][onset:]
    if not np.any(y):
        return np.zeros(0), False
    return schroeder(y), False


def _draw_band_decay(ax: Any, bf: Any, h: np.ndarray, fs: int, onset: int, *,
                     left: bool, bottom: bool) -> None:
    from measure.decay import FIT_RANGES_DB

    curve, evaluated = _band_curve(bf, h, fs, onset)
    name = bf.band.name if bf.band is not None else "broadband"
    ax.set_title(name, fontsize=9, loc="left", pad=2)
    ax.grid(True, alpha=0.3)
    if curve.size:
        idx = _decimate(curve.size)
        ax.plot(idx / fs, curve[idx], color=_c("measured" if evaluated else "unevaluated"), lw=1.0,
                label="Schroeder decay")
    if not evaluated:
        ax.text(0.97, 0.95, "no valid decay\n(plain integral)", transform=ax.transAxes,
                ha="right", va="top", fontsize=7, color="k")
    else:
        d = bf.decay
        for key, label, colour, lw in _FITS:
            value = getattr(d, f"{key}_s")
            if value is None:
                continue
            hi, lo = FIT_RANGES_DB[key]
            line = fit_line(curve, fs, hi, lo, end_db=-d.decay_range_db
                            if d.decay_range_db is not None else None)
            if line is None:
                continue
            t0, t1, a, b = line
            ax.plot([t0, t1], [a + b * t0, a + b * t1], color=colour, lw=lw, alpha=0.55,
                    solid_capstyle="butt", label=f"{label} fit {hi:g}…{lo:g} dB")
        if d.noise_floor_found:
            ax.axvline(d.truncation_s, color=_c("noise_floor"), lw=1.6, ls=":", label="crosspoint")
    text = "\n".join(f"{label} {_fmt_s(getattr(bf, f'{key}_s'))}"
                     for key, label in (("edt", "EDT"), ("t20", "T20"), ("t30", "T30")))
    ax.text(0.97, 0.62 if not evaluated else 0.95, text, transform=ax.transAxes, ha="right",
            va="top", fontsize=7, family="monospace",
            bbox={"facecolor": "white", "alpha": 0.8, "edgecolor": "none", "pad": 1.5})
    if left:
        ax.set_ylabel("decay (dB)")
    else:
        ax.tick_params(labelleft=False)
    if bottom:
        ax.set_xlabel("time after onset (s)")
    else:
        ax.tick_params(labelbottom=False)
    ax.tick_params(labelsize=7)


def _curve_end_s(curve_db: np.ndarray, fs: int) -> float:
    """Time where a decay curve first falls below the panels' floor (its end if never), s."""
    below = np.nonzero(curve_db < _DECAY_FLOOR_DB)[0]
    return (below[0] if below.size else curve_db.size) / fs


def _finish_decay_panels(panels: list[Any], bands: tuple[Any, ...], fs: int) -> None:
    t_end = max([0.1, *(_curve_end_s(np.asarray(bf.decay.edc_db), fs) for bf in bands)])
    panels[0].set_xlim(0.0, t_end * 1.03)
    panels[0].set_ylim(_DECAY_FLOOR_DB, 3.0)
    found: dict[str, Any] = {}
    for ax in panels:
        for hnd, lab in zip(*ax.get_legend_handles_labels(), strict=True):
            found.setdefault(lab, hnd)
    order = ["Schroeder decay", *(f"{n} fit" for _, n, _, _ in _FITS[::-1]), "crosspoint"]
    labels = sorted(found, key=lambda lab: next(
        (i for i, o in enumerate(order) if lab.startswith(o)), len(order)))
    handles = [found[lab] for lab in labels]
    if handles:
        # lower left is empty in a decay panel (the curve runs from top left to bottom right)
        panels[0].legend(handles, labels, loc="lower left", fontsize=6, framealpha=0.85)


def _draw_decay_times(ax: Any, bands: tuple[Any, ...], kind: str) -> None:
    n = len(bands)
    x = np.arange(n, dtype=np.float64)
    width = 0.26
    series = (("edt_s", None, "EDT", _c("edt")), ("t20_s", "t20_uncertainty_s", "T20", _c("t20")),
              ("t30_s", "t30_uncertainty_s", "T30", _c("t30")))
    top = 0.0
    any_missing = False
    for j, (key, ukey, label, colour) in enumerate(series):
        xs = x + (j - 1) * width
        vals = np.array([np.nan if getattr(b, key) is None else getattr(b, key) for b in bands])
        errs = None
        if ukey is not None:
            errs = np.array([0.0 if getattr(b, ukey) is None else getattr(b, ukey)
                             for b in bands])
        ok = np.isfinite(vals)
        lab = f"{label} ± standard uncertainty" if ukey else f"{label}"
        ax.bar(xs[ok], vals[ok], width=width * 0.95, color=colour, alpha=0.85, label=lab,
               yerr=None if errs is None else errs[ok],
               error_kw={"ecolor": "k", "color": "k", "elinewidth": 0.8, "capsize": 2.0})
        if ok.any():
            top = max(top, float(np.max(vals[ok] + (0.0 if errs is None else errs[ok]))))
        if (~ok).any():
            any_missing = True
            ax.plot(xs[~ok], np.zeros(int((~ok).sum())), ls="none", marker="x", ms=7, mew=1.8,
                    color=colour, clip_on=False)
    if any_missing:
        ax.plot([], [], ls="none", marker="x", color="k", label="not measurable (see notes)")
    ax.set_xticks(x)
    ax.set_xticklabels([b.label for b in bands])
    ax.set_xlim(-0.6, n - 0.4)
    ax.set_ylim(0.0, max(top * 1.15, 0.1))
    what = {"octave": "octave band", "third": "third-octave band"}.get(kind, "band")
    ax.set_xlabel(f"{what} (Hz)")
    ax.set_ylabel("decay time (s)")
    ax.set_title("EDT, T20, T30 per band (error bars: ISO 3382-2 Annex A)", fontsize=10,
                 loc="left")
    ax.grid(True, axis="y", alpha=0.3)
    ax.legend(loc="upper right", fontsize=8, ncols=4, framealpha=0.85)


# ---------------------------------------------------------------------------------------------
# The model-fit figure

#: (report key, name, unit, colour) of the parameters drawn by plot_model_fit.
_MODEL_PARAMS = (("edt_s", "EDT", "s", _c("edt")), ("t30_s", "T30", "s", _c("t30")),
                 ("c80_db", "C80", "dB", _c("c80")))


def plot_model_fit(measured_figures: Any, modelled_figures: Any, report: Any, *,
                   title: str = "") -> Any:
    """Draw how close a fitted compact model comes to the measurement.

    Parameters
    ----------
    measured_figures, modelled_figures : measure.parameters.RoomFigures or None
        The analysis of the measured IR and of the rendered model (as inside
        :func:`measure.model.fit.fit_model`). When both are given, a row of per-band panels
        overlays their decay curves; None leaves that row out.
    report : measure.model.fit.FitReport
        The per-band values and differences drawn (the source of every number shown).
    title : str

    Returns
    -------
    matplotlib.figure.Figure
        Axes: EDT, T30, C80 (measured against model), the differences in JNDs, then one per
        band when the figures are given.

    Raises
    ------
    ParameterError
        If ``report`` is not a FitReport, or only one of the two figures is given.
    MissingDependencyError
        If matplotlib is not installed.
    """
    from measure.model.fit import FitReport
    from measure.parameters import RoomFigures

    title = _check_title(title)
    if not isinstance(report, FitReport):
        raise ParameterError("report must be the FitReport of measure.model.fit, not "
                             f"{type(report).__name__}")
    if (measured_figures is None) != (modelled_figures is None):
        raise ParameterError("give both the measured and the modelled figures, or neither")
    curves = measured_figures is not None
    if curves:
        for what, f in (("measured_figures", measured_figures),
                        ("modelled_figures", modelled_figures)):
            if not isinstance(f, RoomFigures):
                raise ParameterError(f"{what} must be RoomFigures (from analyze_ir), not "
                                     f"{type(f).__name__}")
    labels = list(report.bands)
    jnds = {k: v["value"] for k, v in report.to_dict()["jnd"].items()}
    n = len(labels)
    x = np.arange(n, dtype=np.float64)
    n_curve_rows = 0
    ncols = 4 if n <= 8 else 6
    if curves:
        n_curve_rows = max(1, math.ceil(n / ncols))
    fig = _new_figure(12.0, 10.0)
    heights = [2.8, 2.6] + ([1.75 * n_curve_rows + 0.3 * (n_curve_rows - 1)] if curves else [])
    rows = _rows(fig, heights, [0.85] * (len(heights) - 1))
    row = _gs(fig, rows[0], 1, 3, wgap_in=0.85)
    for j, (key, name, unit, _colour) in enumerate(_MODEL_PARAMS):
        ax = fig.add_subplot(row[j])
        meas = np.array([_value(report, b, key, "measured") for b in labels])
        mod = np.array([_value(report, b, key, "modelled") for b in labels])
        ax.plot(x, meas, **_st("measured", ms=7, lw=1.2, label="measured"))
        ax.plot(x, mod, **_st("model", ms=5, mfc="none", lw=1.2, label="model"))
        _mark_missing(ax, x, meas, _c("measured"))
        _mark_missing(ax, x, mod, _c("model"))
        ax.set_xticks(x)
        ax.set_xticklabels(labels, fontsize=8)
        ax.set_xlabel("octave band (Hz)")
        ax.set_ylabel(f"{name} ({unit})")
        ax.set_title(f"{name}: measured and model", fontsize=10, loc="left")
        ax.grid(True, alpha=0.3)
        ax.legend(fontsize=7, loc="best")
    ax_d = fig.add_subplot(_gs(fig, rows[1], 1, 1)[0])
    width = 0.26
    lim = 2.0  # at least ±2 JND, as plot_comparison: the ±1 JND band never fills the axis
    any_missing = False
    for j, (key, name, unit, colour) in enumerate(_MODEL_PARAMS):
        d = np.array([_value(report, b, key, "difference_jnd") for b in labels])
        xs = x + (j - 1) * width
        ok = np.isfinite(d)
        jnd = jnds[key]
        jtxt = f"{jnd * 100:g} %" if key.endswith("_s") and key != "ts_s" else f"{jnd:g} {unit}"
        ax_d.bar(xs[ok], d[ok], width=width * 0.95, color=colour, alpha=0.85,
                 label=f"{name} (1 JND = {jtxt})")
        if ok.any():
            lim = max(lim, float(np.max(np.abs(d[ok]))) * 1.15)
        if (~ok).any():
            any_missing = True
            ax_d.plot(xs[~ok], np.zeros(int((~ok).sum())), ls="none", marker="x", ms=7,
                      mew=1.8, color=colour)
    ax_d.axhspan(-1.0, 1.0, color=_c("jnd"), alpha=0.2, lw=0, label="within ±1 JND")
    ax_d.axhline(0.0, color="k", lw=0.8)
    if any_missing:
        ax_d.plot([], [], ls="none", marker="x", color="k", label="no value on one side")
    ax_d.set_ylim(-lim, lim * 1.3)  # room for the legend
    ax_d.set_xticks(x)
    ax_d.set_xticklabels(labels)
    ax_d.set_xlim(-0.6, n - 0.4)
    ax_d.set_xlabel("octave band (Hz)")
    ax_d.set_ylabel("model − measured (JND)")
    ax_d.set_title("Difference in just-noticeable differences (ISO 3382-1 Table A.1)",
                   fontsize=10, loc="left")
    ax_d.grid(True, axis="y", alpha=0.3)
    ax_d.legend(fontsize=8, loc="upper right", ncols=5, framealpha=0.85)
    if curves:
        grid = _gs(fig, rows[2], n_curve_rows, ncols, hgap_in=0.3, wgap_in=0.12)
        model_bands = {b.label: b for b in modelled_figures.bands}
        panels: list[Any] = []
        t_end = 0.1
        for i, mb in enumerate(measured_figures.bands):
            share = panels[0] if panels else None
            ax = fig.add_subplot(grid[i // ncols, i % ncols], sharex=share, sharey=share)
            panels.append(ax)
            for bf, colour, lab, ls in ((mb, _c("measured"), "measured", PALETTE["measured"][1]),
                                        (model_bands.get(mb.label), _c("model"), "model",
                                         PALETTE["model"][1])):
                c = np.asarray(bf.decay.edc_db) if bf is not None else np.zeros(0)
                if c.size:
                    idx = _decimate(c.size)
                    ax.plot(idx / measured_figures.fs, c[idx], color=colour, lw=1.1, ls=ls,
                            label=lab)
                    t_end = max(t_end, _curve_end_s(c, measured_figures.fs))
            ax.set_title(mb.band.name if mb.band is not None else mb.label, fontsize=9,
                         loc="left", pad=2)
            ax.grid(True, alpha=0.3)
            ax.tick_params(labelsize=7)
            if i % ncols == 0:
                ax.set_ylabel("decay (dB)")
            else:
                ax.tick_params(labelleft=False)
            if i + ncols >= len(measured_figures.bands):
                ax.set_xlabel("time after onset (s)")
            else:
                ax.tick_params(labelbottom=False)
        if panels:
            panels[0].set_xlim(0.0, t_end * 1.03)
            panels[0].set_ylim(_DECAY_FLOOR_DB, 3.0)
            panels[-1].legend(fontsize=7, loc="upper right")
    if title:
        fig.suptitle(title, fontsize=13, y=1.0 - 0.12 / fig.get_figheight(), va="top")
    return fig


def _value(report: Any, band: str, key: str, what: str) -> float:
    v = getattr(report.cell(band, key), what)
    return np.nan if v is None else float(v)


def _mark_missing(ax: Any, x: np.ndarray, v: np.ndarray, colour: str) -> None:
    bad = ~np.isfinite(v)
    if bad.any():
        ax.plot(x[bad], np.zeros(int(bad.sum())), ls="none", marker="x", ms=7, mew=1.8,
                color=colour, transform=ax.get_xaxis_transform(), clip_on=False)


# ---------------------------------------------------------------------------------------------
# Distance and direction

_C_DIRECT = _c("direct")
_C_REVERB = _c("reverberant")
_C_AIR = _c("air")


def _nums(rows: list[dict[str, Any]], key: str) -> np.ndarray:
    return np.array([np.nan if r.get(key) is None else float(r[key]) for r in rows])


def plot_attenuation(doc: dict[str, Any], *, title: str = "") -> Any:
    """Draw the curves of ``measure attenuation``: the JSON document of
    :meth:`measure.attenuation.Attenuation.to_dict`.

    A distance series gives three panels against distance (log axis): the direct gain with the
    fitted law and the free-field inverse-distance law (−6.02 dB per doubling), and the
    reverberant level; the direct-to-reverberant ratio with its line in lg d, the critical
    distance and the wet fraction; the fitted low-pass corner beside the one ISO 9613-1 air
    absorption alone gives. An angle series gives two: gain and low-pass corner per angle, and
    the level per octave against angle with the directivity index per octave.

    Raises
    ------
    ParameterError
        If ``doc`` holds neither a distance nor an angle series.
    MissingDependencyError
        If matplotlib is not installed.
    """
    title = _check_title(title)
    if not isinstance(doc, dict) or "positions" not in doc:
        raise ParameterError("doc must be the JSON object of measure attenuation")
    distance = doc.get("rolloff_factor") is not None and doc.get("direct_law") is not None
    direction = doc.get("direction")
    if not distance and direction is None:
        raise ParameterError("the document holds neither a distance nor an angle series")
    fig = _new_figure(13.0, 8.0)
    heights = ([3.0] if distance else []) + ([3.0] if direction is not None else [])
    rows = _rows(fig, heights, [0.9] * (len(heights) - 1))
    if distance:
        _draw_distance(fig, _gs(fig, rows[0], 1, 3, wgap_in=1.6), doc)
    if direction is not None:
        _draw_direction(fig, _gs(fig, rows[-1], 1, 2, wgap_in=1.6), direction)
    if title:
        fig.suptitle(title, fontsize=13, y=1.0 - 0.12 / fig.get_figheight(), va="top")
    return fig


def _log_distance_axis(ax: Any, d: np.ndarray) -> None:
    ax.set_xscale("log")
    ax.set_xlim(float(np.min(d)) / 1.25, float(np.max(d)) * 1.25)
    ax.set_xlabel("distance (m)")
    ax.grid(True, which="both", alpha=0.3)


def _draw_distance(fig: Any, row: Any, doc: dict[str, Any]) -> None:
    pos = doc["positions"]
    d = _nums(pos, "distance_m")
    reg = doc["curves"]["regular"]
    dr = _nums(reg, "distance_m")
    d_ref = float(doc["reference_distance_m"])
    law = doc["direct_law"]
    ax = fig.add_subplot(row[0])
    ax.plot(dr, -20.0 * np.log10(dr / d_ref), color=_c("unevaluated"), ls=":", lw=1.2,
            label="free field, −6.02 dB per doubling")
    ax.plot(dr, _nums(reg, "direct_gain_db"), color=_C_DIRECT, ls="-", lw=1.4,
            label=f"direct, {law['better']} law fitted")
    ax.plot(d, _nums(pos, "gain_db"), color=_C_DIRECT, ls="none", marker="o", ms=5,
            label="direct, measured")
    if doc.get("room_law") is not None:
        ax.plot(dr, _nums(reg, "reverberant_gain_db"), color=_C_REVERB, ls="--", lw=1.4,
                label="reverberant, fitted")
        rev = _nums(pos, "reverberant_db")
        ref = next(p for p in pos if p["distance_m"] == d_ref)
        if ref.get("reverberant_db") is not None:
            ax.plot(d, rev - float(ref["reverberant_db"]), color=_C_REVERB, ls="none",
                    marker="s", ms=5, mfc="none", label="reverberant, measured")
    _log_distance_axis(ax, np.concatenate([d, dr]))
    ax.set_ylabel(f"level re {d_ref:g} m (dB)")
    ax.set_title(f"Gain (rolloff factor {doc['rolloff_factor']:.2f})", fontsize=10, loc="left")
    ax.legend(fontsize=7, loc="lower left")
    ax = fig.add_subplot(row[1])
    ax.axhline(0.0, color="k", lw=0.8)
    line = doc.get("drr_line")
    if line is not None:
        ax.plot(dr, line["db_at_1m"] + line["db_per_decade"] * np.log10(dr), color=_C_DIRECT,
                lw=1.4, label="line in lg d")
    ax.plot(d, _nums(pos, "drr_db"), color=_C_DIRECT, ls="none", marker="o", ms=5,
            label="measured")
    rc = doc.get("critical_distance_m")
    if rc is not None:
        ax.axvline(rc, color="k", ls="--", lw=1.0, label=f"critical distance {rc:.2f} m")
    ax.set_ylabel("direct-to-reverberant ratio (dB)")
    ax.set_title("Direct-to-reverberant ratio and wet fraction", fontsize=10, loc="left")
    _log_distance_axis(ax, np.concatenate([d, dr]))
    wet = ax.twinx()
    wet.plot(dr, _nums(reg, "wet_fraction"), color=_C_REVERB, ls="--", lw=1.4)
    wet.set_ylim(0.0, 1.0)
    wet.set_ylabel("wet fraction (reverb send, 0-1)")
    ax.plot([], [], color=_C_REVERB, ls="--", label="wet fraction (right axis)")
    ax.legend(fontsize=7, loc="upper right")
    ax = fig.add_subplot(row[2])
    lp = _nums(pos, "lowpass_hz")
    ok = np.isfinite(lp)
    ax.plot(dr, _nums(reg, "expected_lowpass_hz"), color=_C_AIR, ls=":", lw=1.4,
            label="air absorption alone (ISO 9613-1)")
    ax.plot(d[ok], lp[ok], color=_C_DIRECT, ls="none", marker="o", ms=5, label="fitted")
    if (~ok).any():
        ax.plot(d[~ok], np.zeros(int((~ok).sum())), ls="none", marker="x", ms=7, mew=1.8,
                color=_C_DIRECT, transform=ax.get_xaxis_transform(), clip_on=False,
                label="not identified")
    ax.set_yscale("log")
    ax.set_ylim(1000.0, 24000.0)
    _log_distance_axis(ax, np.concatenate([d, dr]))
    ax.set_ylabel("low-pass corner (Hz)")
    air = doc.get("air", {})
    ax.set_title(f"Low-pass corner ({air.get('temperature_c', 20):g} °C, "
                 f"{air.get('humidity_percent', 50):g} % RH)", fontsize=10, loc="left")
    ax.legend(fontsize=7, loc="lower left")


def _draw_direction(fig: Any, row: Any, direction: dict[str, Any]) -> None:
    rows = direction["angles"]
    a = _nums(rows, "angle_deg")
    ax = fig.add_subplot(row[0])
    ax.plot(a, _nums(rows, "gain_db"), color=_C_DIRECT, marker="o", ms=5, lw=1.2,
            label="gain")
    ax.set_xlabel("angle off the source's axis (°)")
    ax.set_ylabel("gain re on axis (dB)")
    ax.grid(True, alpha=0.3)
    lp_ax = ax.twinx()
    lp = _nums(rows, "lowpass_hz")
    ok = np.isfinite(lp)
    lp_ax.plot(a[ok], lp[ok], color=_C_REVERB, marker="s", ms=5, mfc="none", ls="--", lw=1.2)
    lp_ax.set_yscale("log")
    lp_ax.set_ylim(500.0, 24000.0)
    lp_ax.set_ylabel("low-pass corner (Hz)")
    ax.plot([], [], color=_C_REVERB, marker="s", mfc="none", ls="--",
            label="low-pass corner (right axis; none where not identified)")
    ax.set_title("Muffling per angle", fontsize=10, loc="left")
    ax.legend(fontsize=7, loc="lower left")
    ax = fig.add_subplot(row[1])
    rel = direction["relative_octave_db"]
    di = direction["directivity_index_db"]
    styles = ("-", "--", "-.", ":")
    colours = _band_colours(len(rel))
    for i, (band, by_angle) in enumerate(rel.items()):
        xs = np.array([float(k) for k in by_angle])
        order = np.argsort(xs)
        ys = np.array(list(by_angle.values()), dtype=np.float64)[order]
        v = di.get(band)
        ax.plot(xs[order], ys, ls=styles[i % len(styles)], marker="o", ms=3, lw=1.1,
                color=colours[i], label=f"{band} Hz (DI {'—' if v is None else f'{v:.1f}'} dB)")
    ax.set_xlabel("angle off the source's axis (°)")
    ax.set_ylabel("level re on axis (dB)")
    ax.set_title("Level per octave band and directivity index", fontsize=10, loc="left")
    ax.grid(True, alpha=0.3)
    ax.legend(fontsize=7, loc="lower left", ncols=2)


# ---------------------------------------------------------------------------------------------
# Shared pieces of the report figures

_ETC_WINDOW_S = 0.0005  # moving average of the energy-time curve
_DIRECT_WINDOW_S = 0.002  # the direct sound: the ETC's maximum this long after the onset
_REFLECTION_RANGE_S = (0.002, 0.080)  # first reflections: this long after the direct sound
_REFLECTION_MIN_DB = -25.0  # re the direct sound
_N_REFLECTIONS = 5
_REFLECTION_SPACING_S = 0.0005  # two marked reflections lie at least this far apart
_MAGNITUDE_FRACTIONS = (1, 3, 6, 12, 24, None)
_MAGNITUDE_POINTS_PER_OCTAVE = 96
_TF_FLOOR_DB = -80.0  # bottom of the time-frequency picture, dB re its maximum
_TF_SEGMENT_S = 0.02  # STFT segment (rounded to a power of two in samples)
#: ISO 3382-1:2009 Table A.1 JNDs (C50 borrows C80's, common practice) and the least span of a
#: value axis: 3 JND, so that a difference well inside one JND cannot fill the axis.
_CLARITY_JND = {"c50_db": 1.0, "c80_db": 1.0, "d50": 0.05, "ts_ms": 10.0}
_MIN_SPAN_JND = 3.0
#: (nominal label, exact base-10 centre in Hz) of the octaves labelled on frequency axes
#: (IEC 61260-1 midband frequencies 1000·10^(0.3 k)).
_OCTAVE_TICKS = tuple((lab, 1000.0 * 10.0 ** (0.3 * k)) for k, lab in zip(
    range(-5, 5), ("31.5", "63", "125", "250", "500", "1k", "2k", "4k", "8k", "16k"),
    strict=True))


def _band_colours(n: int) -> list[Any]:
    """``n`` colours of :data:`COLOUR_MAP` at equal steps (monotone lightness, dark first)."""
    from matplotlib import colormaps

    cmap = colormaps[COLOUR_MAP]
    return [cmap(0.85 * i / max(n - 1, 1)) for i in range(n)]


def _check_figures(figures: Any, fs: int, h: np.ndarray | None = None) -> Any:
    from measure.parameters import RoomFigures

    if not isinstance(figures, RoomFigures):
        raise ParameterError("figures must be the RoomFigures that measure.parameters."
                             f"analyze_ir returned, not {type(figures).__name__}")
    if figures.fs != fs:
        raise ParameterError(f"the figures were computed at {figures.fs} Hz but fs={fs}; pass "
                             "the impulse response and sample rate they came from")
    if h is not None and not 0 <= figures.onset_index < h.shape[0]:
        raise ParameterError(f"the figures' onset (sample {figures.onset_index}) lies outside "
                             f"h ({h.shape[0]} samples); pass the IR they were computed from")
    return figures


def _finish(fig: Any, title: str) -> Any:
    if title:
        fig.suptitle(title, fontsize=13, y=1.0 - 0.12 / fig.get_figheight(), va="top")
    return fig


def _band_x(bands: tuple[Any, ...]) -> np.ndarray:
    """Band positions in octaves re 1 kHz: lg(f/1 kHz)/0.3 (base-10 octaves, IEC 61260-1)."""
    return np.array([math.log10(b.band.center_hz / 1000.0) / 0.3 if b.band is not None
                     else float(i) for i, b in enumerate(bands)])


def _band_axis(ax: Any, x: np.ndarray, labels: list[str], kind: str) -> None:
    ax.set_xticks(x)
    ax.set_xticklabels(labels, fontsize=8 if len(labels) <= 12 else 6,
                       rotation=0 if len(labels) <= 12 else 90)
    step = float(np.min(np.diff(x))) if x.size > 1 else 1.0
    ax.set_xlim(float(x[0]) - 0.6 * step, float(x[-1]) + 0.6 * step)
    what = {"octave": "octave band", "third": "third-octave band"}.get(kind, "band")
    ax.set_xlabel(f"{what} (Hz)")
    ax.grid(True, alpha=0.3)


def _values(bands: tuple[Any, ...], key: str, scale: float = 1.0) -> np.ndarray:
    return np.array([np.nan if getattr(b, key) is None else scale * float(getattr(b, key))
                     for b in bands])


def _min_span(ax: Any, values: np.ndarray, span: float, *, lo: float | None = None,
              hi: float | None = None) -> None:
    """Y limits around ``values`` spanning at least ``span`` (clipped to [lo, hi] if given)."""
    ok = values[np.isfinite(values)]
    if ok.size == 0:
        v0, v1 = (lo if lo is not None else 0.0), (lo if lo is not None else 0.0) + span
    else:
        v0, v1 = float(ok.min()), float(ok.max())
        pad = 0.08 * (v1 - v0)
        v0, v1 = v0 - pad, v1 + pad
        if v1 - v0 < span:
            mid = 0.5 * (v0 + v1)
            v0, v1 = mid - 0.5 * span, mid + 0.5 * span
    if lo is not None and v0 < lo:
        v0, v1 = lo, max(v1, lo + span)
    if hi is not None and v1 > hi:
        v0, v1 = min(v0, hi - span), hi
    ax.set_ylim(v0, v1)


def _gaps(ax: Any, x: np.ndarray, v: np.ndarray, colour: str, label: str | None) -> None:
    """A cross on the base line where ``v`` is NaN (a value that could not be measured)."""
    bad = ~np.isfinite(v)
    if bad.any():
        ax.plot(x[bad], np.zeros(int(bad.sum())), ls="none", marker="x", ms=7, mew=1.8,
                color=colour, transform=ax.get_xaxis_transform(), clip_on=False,
                label=label or "_nolegend_")


def _octave_ticks(ax: Any, f_lo_hz: float, f_hi_hz: float, *, axis: str = "x") -> None:
    from matplotlib.ticker import NullFormatter

    ticks = [(lab, f) for lab, f in _OCTAVE_TICKS if f_lo_hz <= f <= f_hi_hz]
    ax_ = ax.xaxis if axis == "x" else ax.yaxis
    ax_.set_ticks([f for _, f in ticks])
    ax_.set_ticklabels([lab for lab, _ in ticks])
    ax_.set_minor_formatter(NullFormatter())


# ---------------------------------------------------------------------------------------------
# Energy-time curve


def energy_time_curve(h: np.ndarray, fs: int) -> np.ndarray:
    """The energy-time curve drawn by :func:`plot_energy_time`: 10 lg of h² averaged, dB re peak.

    Parameters
    ----------
    h : ndarray, shape (n,)
    fs : int, > 0, Hz

    Returns
    -------
    ndarray, shape (n,), dB re the curve's maximum
        ``10 lg(⟨h²⟩ / max⟨h²⟩)`` with ⟨·⟩ a centred moving average over 0.5 ms.

    Raises
    ------
    ParameterError
        For a malformed or all-zero ``h``.
    """
    h = check_signal(h, "h", ndim=(1,))
    fs = check_fs(fs)
    return _etc(h, fs)[0]


def _etc(h: np.ndarray, fs: int) -> tuple[np.ndarray, float]:
    """(ETC in dB re its peak, its peak power)."""
    k = max(1, int(round(_ETC_WINDOW_S * fs)))
    avg = np.convolve(h * h, np.ones(k) / k, mode="same")
    peak = float(avg.max())
    if not (peak > 0):
        raise ParameterError("the impulse response is all zero; nothing to draw")
    return _level_db(avg, peak), peak


def first_reflections(etc_db: np.ndarray, fs: int, onset_index: int
                      ) -> tuple[int, np.ndarray]:
    """The direct sound and the first reflections marked by :func:`plot_energy_time`.

    Parameters
    ----------
    etc_db : ndarray, shape (n,), dB
        An energy-time curve (:func:`energy_time_curve`).
    fs : int, > 0, Hz
    onset_index : int
        The ISO 3382-1 A.3.4 onset (``RoomFigures.onset_index``).

    Returns
    -------
    direct_index : int
        The curve's maximum within 2 ms after the onset: the direct sound.
    reflections : ndarray of int
        Up to 5 local maxima of the curve between 2 ms and 80 ms after the onset, at least
        0.5 ms apart and no more than 25 dB below the direct sound: the strongest, in time order.

    Raises
    ------
    ParameterError
        If the onset lies outside the curve.

    Examples
    --------
    A direct sound at sample 100 and a reflection of half its amplitude 25 ms later:

    >>> fs = 8000
    >>> h = np.zeros(800); h[100] = 1.0; h[300] = 0.5
    >>> etc = energy_time_curve(h, fs)
    >>> first_reflections(etc, fs, 100)
    (100, array([300]))
    >>> round(float(etc[300] - etc[100]), 2)  # 20 lg 0.5
    -6.02
    """
    from scipy.signal import find_peaks

    etc_db = np.asarray(etc_db, dtype=np.float64)
    n = etc_db.shape[0]
    if not 0 <= onset_index < n:
        raise ParameterError(f"onset_index={onset_index} lies outside the curve ({n} samples); "
                             "pass the onset of the response the curve came from")
    i1 = min(n, onset_index + max(1, int(round(_DIRECT_WINDOW_S * fs))))
    direct = onset_index + int(np.argmax(etc_db[onset_index:i1]))
    lo = onset_index + int(round(_REFLECTION_RANGE_S[0] * fs))
    hi = min(n, onset_index + int(round(_REFLECTION_RANGE_S[1] * fs)) + 1)
    if hi - lo < 3:
        return direct, np.zeros(0, dtype=np.int64)
    peaks, props = find_peaks(etc_db[lo:hi], height=etc_db[direct] + _REFLECTION_MIN_DB,
                              distance=max(1, int(round(_REFLECTION_SPACING_S * fs))))
    strongest = peaks[np.argsort(props["peak_heights"])[::-1][:_N_REFLECTIONS]]
    return direct, np.sort(strongest + lo).astype(np.int64)


def plot_energy_time(h: np.ndarray, fs: int, figures: Any, *, title: str = "") -> Any:
    """Draw the response and its energy-time curve with the direct sound, first reflections and
    noise floor marked.

    Parameters
    ----------
    h : ndarray, shape (n,)
        The broadband impulse response ``figures`` was computed from.
    fs : int, > 0, Hz
    figures : measure.parameters.RoomFigures
        What :func:`measure.parameters.analyze_ir` returned for ``h``: the onset and the
        broadband noise floor come from it.
    title : str

    Returns
    -------
    matplotlib.figure.Figure
        Axes, in ``fig.axes`` order: the response (amplitude re its peak) against time; the
        energy-time curve against time with the direct sound and the noise floor; its first
        100 ms after the direct sound with the first reflections.

    Raises
    ------
    ParameterError
        For a malformed ``h``, or ``figures`` of another response or sample rate.
    MissingDependencyError
        If matplotlib is not installed.

    Notes
    -----
    The energy-time curve is ``10 lg⟨h²⟩`` (0.5 ms centred moving average) re its maximum. The
    direct sound is the curve's maximum within 2 ms of the ISO 3382-1 A.3.4 onset; reflections
    are :func:`first_reflections`. The noise floor is the Lundeby estimate of the broadband
    analysis (``figures.broadband``): its peak-to-noise ratio refers to the peak of h², so on
    this curve it sits at ``−PNR + 10 lg(max h² / max⟨h²⟩)`` dB.
    """
    h = check_signal(h, "h", ndim=(1,))
    fs = check_fs(fs)
    title = _check_title(title)
    figures = _check_figures(figures, fs, h)
    etc_db, etc_peak = _etc(h, fs)
    onset = figures.onset_index
    direct, refl = first_reflections(etc_db, fs, onset)
    fig = _new_figure(12.0, 8.0)
    rows = _rows(fig, [2.2, 3.2], [0.8])
    ax_h = fig.add_subplot(_gs(fig, rows[0], 1, 1)[0])
    bottom = _gs(fig, rows[1], 1, 2, wgap_in=0.8, width_ratios=[1.6, 1.0])
    ax_e = fig.add_subplot(bottom[0])
    ax_z = fig.add_subplot(bottom[1])
    t = np.arange(h.shape[0]) / fs
    onset_s = onset / fs
    amp = float(np.max(np.abs(h)))
    blk = max(1, int(round(_BLOCK_S * fs)))
    nbk = h.shape[0] // blk
    hb = h[: nbk * blk].reshape(nbk, blk) / amp
    # per 0.5 ms block the range of h, so that no peak is lost to decimation
    ax_h.fill_between((np.arange(nbk) + 0.5) * blk / fs, hb.min(axis=1), hb.max(axis=1),
                      color=_c("measured"), lw=0.6, label="h (re its peak; range per 0.5 ms)")
    ax_h.axvline(onset_s, **_st("direct", marker="None", lw=1.2,
                                label=f"direct sound {onset_s * 1000:.1f} ms"))
    ax_h.set_xlim(0.0, t[-1])
    ax_h.set_xlabel("time (s)")
    ax_h.set_ylabel("amplitude (re peak)")
    ax_h.set_title("Impulse response", fontsize=10, loc="left")
    ax_h.grid(True, alpha=0.3)
    ax_h.legend(loc="upper right", fontsize=7)

    block = max(1, int(round(_BLOCK_S * fs)))
    nb = h.shape[0] // block
    e_blocks = etc_db[: nb * block].reshape(nb, block).max(axis=1)
    ax_e.plot((np.arange(nb) + 0.5) * block / fs, e_blocks, color=_c("measured"), lw=0.9,
              label="energy-time curve (0.5 ms average)")
    ax_e.axvline(onset_s, **_st("direct", marker="None", lw=1.2, label="direct sound"))
    bb = figures.broadband
    pnr = bb.peak_to_noise_db
    floor_db = None
    if bb.decay.noise_floor_found and pnr is not None:
        floor_db = -pnr + 10.0 * math.log10(float(np.max(h * h)) / etc_peak)
        ax_e.axhline(floor_db, **_st("noise_floor", marker="None", lw=1.6,
                                     label=f"noise floor {floor_db:.0f} dB (Lundeby)"))
        ax_e.axvline(onset_s + bb.decay.truncation_s, color=_c("noise_floor"), ls=":", lw=1.6,
                     label=f"crosspoint {onset_s + bb.decay.truncation_s:.2f} s")
        lo = floor_db - 15.0
    else:
        lo = float(np.min(e_blocks[e_blocks > -200.0])) - 5.0 if np.any(e_blocks > -200.0) \
            else -100.0
        ax_e.text(0.99, 0.97, "no noise floor found: the IR ends while still decaying",
                  transform=ax_e.transAxes, ha="right", va="top", fontsize=8)
    ax_e.set_ylim(max(min(lo, -40.0), -150.0), 5.0)
    ax_e.set_xlim(0.0, t[-1])
    ax_e.set_xlabel("time (s)")
    ax_e.set_ylabel("energy (dB re peak)")
    ax_e.set_title("Energy-time curve", fontsize=10, loc="left")
    ax_e.grid(True, alpha=0.3)
    ax_e.legend(loc="upper right", fontsize=7, framealpha=0.85)

    i0 = max(0, onset - int(round(0.005 * fs)))
    i1 = min(h.shape[0], onset + int(round(_EARLY_S * fs)))
    t_ms = (np.arange(i0, i1) - onset) / fs * 1000.0
    ax_z.plot(t_ms, _level_db(h[i0:i1] ** 2, float(np.max(h * h))) + 10.0 * math.log10(
        float(np.max(h * h)) / etc_peak), color=_c("response"), lw=0.5, label="10 lg h²")
    ax_z.plot(t_ms, etc_db[i0:i1], color=_c("measured"), lw=1.0, label="energy-time curve")
    ax_z.axvline(0.0, **_st("direct", marker="None", lw=1.2))
    ax_z.plot([(direct - onset) / fs * 1000.0], [etc_db[direct]],
              **_st("direct", ls="none", ms=7, label=f"direct sound {etc_db[direct]:.1f} dB"))
    ref_ms = (refl - onset) / fs * 1000.0
    ref_db = etc_db[refl] - etc_db[direct]
    ax_z.plot(ref_ms, etc_db[refl], **_st("reflection", ms=7,
                                           label=f"first reflections (≥ {_REFLECTION_MIN_DB:g} dB "
                                                 "re direct, 2–80 ms)"))
    if refl.size:
        ax_z.text(0.98, 0.97, "reflection  time   level\n" + "\n".join(
            f"{i + 1:>10d}  {tm:4.1f} ms  {lv:5.1f} dB" for i, (tm, lv)
            in enumerate(zip(ref_ms, ref_db, strict=True))), transform=ax_z.transAxes,
            ha="right", va="top", fontsize=6, family="monospace",
            bbox={"facecolor": "white", "alpha": 0.85, "edgecolor": "none", "pad": 1.5})
        for i, (tm, ly) in enumerate(zip(ref_ms, etc_db[refl], strict=True)):
            ax_z.annotate(str(i + 1), (tm, ly), xytext=(0, 7), textcoords="offset points",
                          ha="center", fontsize=6)
    if floor_db is not None:
        ax_z.axhline(floor_db, **_st("noise_floor", marker="None", lw=1.6))
    ax_z.set_xlim(t_ms[0], t_ms[-1])
    ax_z.set_ylim(-60.0, 8.0)
    ax_z.set_xlabel("time after the direct sound (ms)")
    ax_z.set_ylabel("energy (dB re peak)")
    ax_z.set_title("First 100 ms: direct sound and first reflections", fontsize=10, loc="left")
    ax_z.grid(True, alpha=0.3)
    ax_z.legend(loc="lower left", fontsize=6, framealpha=0.85)
    return _finish(fig, title)


# ---------------------------------------------------------------------------------------------
# Decay times and clarity per band


def plot_decay_times(figures: Any, *, title: str = "") -> Any:
    """Draw EDT, T20 and T30 per band, T20/T30 with their standard uncertainty as error bars.

    Parameters
    ----------
    figures : measure.parameters.RoomFigures
    title : str

    Returns
    -------
    matplotlib.figure.Figure
        One axes: a line per decay time against the band (octaves re 1 kHz, labelled with the
        nominal frequencies); a value that could not be measured is a gap in its line with a
        cross on the base line.

    Raises
    ------
    ParameterError
        If ``figures`` is not RoomFigures or holds no bands.
    MissingDependencyError
        If matplotlib is not installed.

    Notes
    -----
    The error bars are ± the standard uncertainty of ISO 3382-2:2008 Annex A computed by
    :mod:`measure.parameters` (``t20_uncertainty_s``, ``t30_uncertainty_s``). The three series
    are offset by ±0.08 octave so that their markers and bars do not hide one another.
    """
    title = _check_title(title)
    figures = _check_figures(figures, getattr(figures, "fs", 0))
    bands = figures.bands
    if not bands:
        raise ParameterError("figures hold no bands; analyse with bands='octave' or 'third'")
    x = _band_x(bands)
    fig = _new_figure(9.0, 4.0)
    ax = fig.add_subplot(_gs(fig, _rows(fig, [3.0], [])[0], 1, 1)[0])
    top = 0.0
    for dx, key, ukey, name in ((-0.08, "edt", None, "EDT"), (0.0, "t20", "t20_uncertainty_s", "T20"),
                                (0.08, "t30", "t30_uncertainty_s", "T30")):
        v = _values(bands, f"{key}_s")
        if ukey is None:
            ax.plot(x + dx, v, **_st(key, ms=5, lw=1.3, label=name))
        else:
            u = _values(bands, ukey)
            ax.errorbar(x + dx, v, yerr=np.where(np.isfinite(u), u, 0.0), capsize=2.5,
                        elinewidth=0.9, **_st(key, ms=5, lw=1.3,
                                              label=f"{name} ± standard uncertainty"))
            v = v + np.where(np.isfinite(u), u, 0.0)
        _gaps(ax, x + dx, _values(bands, f"{key}_s"), _c(key), None)
        if np.isfinite(v).any():
            top = max(top, float(np.nanmax(v)))
    if any(getattr(b, f"{k}_s") is None for b in bands for k in ("edt", "t20", "t30")):
        ax.plot([], [], ls="none", marker="x", color="k", label="not measurable")
    _band_axis(ax, x, [b.label for b in bands], figures.kind)
    ax.set_ylim(0.0, max(top * 1.15, 0.1))
    ax.set_ylabel("decay time (s)")
    ax.set_title("EDT, T20, T30 per band (error bars: ISO 3382-2 Annex A)", fontsize=10,
                 loc="left")
    ax.legend(loc="upper right", fontsize=8, ncols=4, framealpha=0.85)
    return _finish(fig, title)


def plot_clarity(figures: Any, *, title: str = "") -> Any:
    """Draw C50 and C80, D50 and Ts per band.

    Parameters
    ----------
    figures : measure.parameters.RoomFigures
    title : str

    Returns
    -------
    matplotlib.figure.Figure
        Three axes: C50 and C80 (dB); D50 (ratio 0–1); Ts (ms). A value that could not be
        measured is a gap with a cross on the base line.

    Raises
    ------
    ParameterError
        If ``figures`` is not RoomFigures or holds no bands.
    MissingDependencyError
        If matplotlib is not installed.

    Notes
    -----
    No value axis spans less than 3 JNDs of its quantity (ISO 3382-1:2009 Table A.1: 1 dB for
    C80, and for C50 by common practice; 0.05 for D50; 10 ms for Ts), so that a difference far
    below one JND cannot fill an axis.
    """
    title = _check_title(title)
    figures = _check_figures(figures, getattr(figures, "fs", 0))
    bands = figures.bands
    if not bands:
        raise ParameterError("figures hold no bands; analyse with bands='octave' or 'third'")
    x = _band_x(bands)
    labels = [b.label for b in bands]
    fig = _new_figure(13.0, 4.0)
    row = _gs(fig, _rows(fig, [3.0], [])[0], 1, 3, wgap_in=0.85)
    ax_c = fig.add_subplot(row[0])
    both = []
    for key, name in (("c50", "C50"), ("c80", "C80")):
        v = _values(bands, f"{key}_db")
        both.append(v)
        ax_c.plot(x, v, **_st(key, ms=5, lw=1.3, label=name))
        _gaps(ax_c, x, v, _c(key), None)
    _min_span(ax_c, np.concatenate(both), _MIN_SPAN_JND * _CLARITY_JND["c80_db"])
    ax_c.set_ylabel("clarity (dB)")
    ax_c.set_title("C50 and C80", fontsize=10, loc="left")
    ax_c.legend(loc="best", fontsize=8)
    ax_d = fig.add_subplot(row[1])
    v = _values(bands, "d50")
    ax_d.plot(x, v, **_st("d50", ms=5, lw=1.3, label="D50"))
    _gaps(ax_d, x, v, _c("d50"), None)
    _min_span(ax_d, v, _MIN_SPAN_JND * _CLARITY_JND["d50"], lo=0.0, hi=1.0)
    ax_d.set_ylabel("D50 (ratio, 0–1)")
    ax_d.set_title("Definition D50", fontsize=10, loc="left")
    ax_t = fig.add_subplot(row[2])
    v = _values(bands, "ts_s", 1000.0)
    ax_t.plot(x, v, **_st("ts", ms=5, lw=1.3, label="Ts"))
    _gaps(ax_t, x, v, _c("ts"), None)
    _min_span(ax_t, v, _MIN_SPAN_JND * _CLARITY_JND["ts_ms"], lo=0.0)
    ax_t.set_ylabel("Ts (ms)")
    ax_t.set_title("Centre time Ts", fontsize=10, loc="left")
    for ax in (ax_c, ax_d, ax_t):
        _band_axis(ax, x, labels, figures.kind)
    return _finish(fig, title)


# ---------------------------------------------------------------------------------------------
# Spectra


def magnitude_response_db(h: np.ndarray, fs: int, *, fraction: int | None = 3
                          ) -> tuple[np.ndarray, np.ndarray]:
    """The curve drawn by :func:`plot_magnitude`: (f_hz, level_db) on a log-frequency grid.

    Parameters
    ----------
    h : ndarray, shape (n,), n >= 2
    fs : int, > 0, Hz
    fraction : {1, 3, 6, 12, 24} or None
        1/fraction-octave power smoothing; None: the unsmoothed spectrum.

    Returns
    -------
    f_hz : ndarray, Hz
        96 points per octave from max(10 Hz, 2 fs/n) to fs/2.
    level_db : ndarray, dB re 1
        ``10 lg`` of the smoothed |H|² (H the DFT of ``h``, so a unit impulse gives 0 dB).

    Raises
    ------
    ParameterError
        For a malformed ``h`` or a ``fraction`` outside the set.
    """
    from measure.model._smoothing import log_grid_hz, smooth_power

    h = check_signal(h, "h", ndim=(1,))
    fs = check_fs(fs)
    if (isinstance(fraction, bool) or fraction not in _MAGNITUDE_FRACTIONS):
        raise ParameterError(f"fraction={fraction!r} is not one of 1, 3, 6, 12, 24 or None "
                             "(unsmoothed); give e.g. fraction=3 for third-octave smoothing")
    n = h.shape[0]
    if n < 2:
        raise ParameterError(f"h has {n} sample; a spectrum needs at least 2")
    n_fft = 1 << max(1, (n - 1).bit_length())
    f = np.fft.rfftfreq(n_fft, 1.0 / fs)
    power = np.abs(np.fft.rfft(h, n_fft)) ** 2
    grid = log_grid_hz(max(10.0, 2.0 * fs / n_fft), fs / 2.0,
                       n_per_octave=_MAGNITUDE_POINTS_PER_OCTAVE)
    return grid, _level_db(smooth_power(f, power, grid, fraction=fraction), 1.0)


def plot_magnitude(h: np.ndarray, fs: int, *, fraction: int | None = 3, title: str = "") -> Any:
    """Draw the magnitude response on a log-frequency axis, 1/fraction-octave power smoothed.

    Parameters
    ----------
    h : ndarray, shape (n,)
    fs : int, > 0, Hz
    fraction : {1, 3, 6, 12, 24} or None
        1/fraction-octave power smoothing (:func:`measure.model._smoothing.smooth_power`);
        None draws the unsmoothed spectrum.
    title : str

    Returns
    -------
    matplotlib.figure.Figure
        One axes: level (dB re 1) against frequency (Hz, log axis, nominal octave labels).

    Raises
    ------
    ParameterError
        For a malformed ``h`` or a ``fraction`` outside the set.
    MissingDependencyError
        If matplotlib is not installed.

    See Also
    --------
    magnitude_response_db : the curve itself.
    """
    title = _check_title(title)
    f, level = magnitude_response_db(h, fs, fraction=fraction)
    fig = _new_figure(9.0, 4.0)
    ax = fig.add_subplot(_gs(fig, _rows(fig, [3.0], [])[0], 1, 1)[0])
    what = "unsmoothed" if fraction is None else f"1/{fraction}-octave power smoothing"
    ax.plot(f, level, **_st("measured", marker="None", lw=1.2, label=what))
    ax.set_xscale("log")
    ax.set_xlim(float(f[0]), float(f[-1]))
    _octave_ticks(ax, float(f[0]), float(f[-1]))
    top = float(np.max(level))
    ax.set_ylim(max(float(np.min(level)) - 3.0, top - 80.0), top + 5.0)
    ax.set_xlabel("frequency (Hz)")
    ax.set_ylabel("magnitude (dB re 1)")
    ax.set_title(f"Magnitude response ({what})", fontsize=10, loc="left")
    ax.grid(True, which="major", alpha=0.3)
    ax.legend(loc="lower left", fontsize=8)
    return _finish(fig, title)


def plot_time_frequency(h: np.ndarray, fs: int, *,
                        frequency_axis: Literal["log", "linear"] = "log",
                        title: str = "") -> Any:
    """Draw an STFT spectrogram of the response in dB re its maximum, floored at −80 dB.

    Parameters
    ----------
    h : ndarray, shape (n,)
    fs : int, > 0, Hz
    frequency_axis : {"log", "linear"}
    title : str

    Returns
    -------
    matplotlib.figure.Figure
        Two axes: the picture (time in s, frequency in Hz) and its colourbar (dB re maximum).
        Colour map :data:`COLOUR_MAP` (perceptually uniform, colour-blind-safe).

    Raises
    ------
    ParameterError
        For a malformed ``h`` (shorter than one STFT segment) or an unknown
        ``frequency_axis``.
    MissingDependencyError
        If matplotlib is not installed.

    Notes
    -----
    Hann-windowed segments of 2^round(log2(0.02 fs)) samples (1024 at 48 kHz, 21 ms) with
    75 % overlap (:func:`scipy.signal.spectrogram`, power spectrum per segment). Times are the
    segment centres from the start of ``h``.
    """
    from scipy.signal import spectrogram

    h = check_signal(h, "h", ndim=(1,))
    fs = check_fs(fs)
    title = _check_title(title)
    if frequency_axis not in ("log", "linear"):
        raise ParameterError(f"frequency_axis={frequency_axis!r} must be 'log' or 'linear'")
    nper = 1 << max(4, int(round(math.log2(_TF_SEGMENT_S * fs))))
    if h.shape[0] < nper:
        raise ParameterError(f"h has {h.shape[0]} samples, fewer than one STFT segment "
                             f"({nper} at {fs} Hz); give a longer response")
    f, t, sxx = spectrogram(h, fs, window="hann", nperseg=nper, noverlap=3 * nper // 4,
                            scaling="spectrum", mode="psd")
    top = float(sxx.max())
    if not (top > 0):
        raise ParameterError("the impulse response is all zero; nothing to draw")
    level = np.maximum(_level_db(sxx, top), _TF_FLOOR_DB)
    if frequency_axis == "log":
        f, level = f[1:], level[1:]
    fig = _new_figure(10.0, 4.5)
    bottom, top_ = _rows(fig, [3.5], [])[0]
    width = fig.get_figwidth()
    # room on the right for the colourbar's ticks and label
    row = fig.add_gridspec(1, 2, left=0.75 / width, right=1.0 - 0.9 / width, bottom=bottom,
                           top=top_, width_ratios=[40.0, 1.0],
                           wspace=0.15 / ((width - 1.65 - 0.15) / 2.0))
    ax = fig.add_subplot(row[0])
    cax = fig.add_subplot(row[1])
    mesh = ax.pcolormesh(t, f, level, cmap=COLOUR_MAP, vmin=_TF_FLOOR_DB, vmax=0.0,
                         shading="nearest", rasterized=True)
    cbar = fig.colorbar(mesh, cax=cax)
    cbar.set_label("level (dB re maximum)")
    ax.set_yscale(frequency_axis)
    if frequency_axis == "log":
        ax.set_ylim(max(20.0, float(f[0])), fs / 2.0)
        _octave_ticks(ax, max(20.0, float(f[0])), fs / 2.0, axis="y")
    else:
        ax.set_ylim(0.0, fs / 2.0)
    ax.set_xlabel("time (s)")
    ax.set_ylabel("frequency (Hz)")
    ax.set_title(f"Spectrogram ({nper}-sample Hann segments, 75 % overlap; "
                 f"floor {_TF_FLOOR_DB:g} dB)", fontsize=10, loc="left")
    return _finish(fig, title)


# ---------------------------------------------------------------------------------------------
# Harmonic distortion


def _harmonic_rows(hd: Any) -> list[tuple[str, list[dict[str, Any]]]]:
    """(channel label, [HarmonicDistortion.to_dict(), ...]) per channel of ``hd``."""
    from measure.deconvolve import HarmonicDistortion, ImpulseResponse

    if isinstance(hd, ImpulseResponse):
        return [(f"channel {c + 1}", [x.to_dict() for x in hds])
                for c, hds in zip(hd.channels, hd.harmonics, strict=True)]
    if isinstance(hd, dict):
        if isinstance(hd.get("channels"), list) and all(
                isinstance(c, dict) and "harmonic_distortion" in c for c in hd["channels"]):
            return [(f"channel {c.get('capture_channel', i + 1)}", list(c["harmonic_distortion"]))
                    for i, c in enumerate(hd["channels"])]
        if "harmonic_distortion" in hd:
            return [("", list(hd["harmonic_distortion"]))]
    elif isinstance(hd, (list, tuple)):
        return [("", [x.to_dict() if isinstance(x, HarmonicDistortion) else x for x in hd])]
    raise ParameterError("hd must be an ImpulseResponse, its to_dict() (IR.json) or a sequence "
                         f"of HarmonicDistortion, not {type(hd).__name__}")


def plot_distortion(hd: Any, *, title: str = "") -> Any:
    """Draw the harmonic distortion of a sweep measurement, in percent per harmonic.

    Parameters
    ----------
    hd : ImpulseResponse, dict or sequence of HarmonicDistortion
        :class:`measure.deconvolve.ImpulseResponse`, its ``to_dict()`` (the IR.json document;
        one series per channel), or the harmonics of one channel.
    title : str

    Returns
    -------
    matplotlib.figure.Figure
        One axes: distortion (%, log axis) per harmonic order. A harmonic above the noise is a
        filled marker at its level; one below the noise a downward triangle at the level the
        noise alone reads as (the harmonic lies below it); one not measurable a cross on the
        base line.

    Raises
    ------
    ParameterError
        If ``hd`` is none of the above or holds no harmonics.
    MissingDependencyError
        If matplotlib is not installed.

    Notes
    -----
    The figures are broadband (the energy ratio of each harmonic's response to the linear
    response over the excited band, :class:`measure.deconvolve.HarmonicDistortion`); the
    recovery keeps no per-band distortion figures, so none are drawn.
    """
    title = _check_title(title)
    rows = _harmonic_rows(hd)
    for _, hs in rows:
        for x in hs:
            if not isinstance(x, dict) or "order" not in x or "percent" not in x:
                raise ParameterError("each harmonic must be a HarmonicDistortion or its "
                                     "to_dict() (with 'order' and 'percent')")
    if not any(hs for _, hs in rows):
        raise ParameterError("hd holds no harmonics; recover the IR with n_harmonics >= 1 "
                             "(e.g. 4 for orders 2-5)")
    fig = _new_figure(8.0, 4.0)
    ax = fig.add_subplot(_gs(fig, _rows(fig, [3.0], [])[0], 1, 1)[0])
    markers = ("o", "s", "D", "^", "P", "X")
    n = len(rows)
    orders = sorted({int(x["order"]) for _, hs in rows for x in hs})
    shown: list[float] = []
    for k, (label, hs) in enumerate(rows):
        dx = 0.0 if n == 1 else 0.3 * (k / (n - 1) - 0.5)
        suffix = f", {label}" if label else ""
        above = [(x["order"] + dx, x["percent"]) for x in hs
                 if x.get("above_noise", True) and x["percent"] is not None]
        below = [(x["order"] + dx, x["noise_percent"]) for x in hs
                 if not (x.get("above_noise", True) and x["percent"] is not None)
                 and x.get("noise_percent") is not None]
        none = [x["order"] + dx for x in hs
                if not (x.get("above_noise", True) and x["percent"] is not None)
                and x.get("noise_percent") is None]
        if above:
            xs, ys = zip(*above, strict=True)
            ax.plot(xs, ys, **_st("distortion", ls="none", marker=markers[k % 6], ms=7,
                                  label=f"distortion{suffix}"))
            ax.vlines(xs, 1e-6, ys, color=_c("distortion"), lw=1.2)
            shown += list(ys)
        if below:
            xs, ys = zip(*below, strict=True)
            ax.plot(xs, ys, ls="none", marker="v", ms=7, color="k", mfc="none",
                    label=f"below the noise (< this){suffix}")
            shown += list(ys)
        if none:
            ax.plot(none, [0.0] * len(none), ls="none", marker="x", ms=7, mew=1.8, color="k",
                    transform=ax.get_xaxis_transform(), clip_on=False,
                    label=f"not measurable{suffix}")
    ax.set_yscale("log")
    lo, hi = (min(shown), max(shown)) if shown else (0.1, 1.0)
    ax.set_ylim(min(lo / 3.0, 0.01), max(hi * 3.0, 1.0))
    ax.set_xticks(orders)
    ax.set_xticklabels([f"H{o}" for o in orders])
    ax.set_xlim(min(orders) - 0.6, max(orders) + 0.6)
    ax.set_xlabel("harmonic (× fundamental frequency)")
    ax.set_ylabel("harmonic distortion (%)")
    ax.set_title("Harmonic distortion at the sweep's level (broadband)", fontsize=10,
                 loc="left")
    ax.grid(True, which="both", axis="y", alpha=0.3)
    ax.legend(loc="upper right", fontsize=7)
    return _finish(fig, title)


# ---------------------------------------------------------------------------------------------
# Two sides compared

#: compare.PARAMETERS name → (palette key, unit drawn, factor from the document's unit).
_COMPARE_STYLE = {"EDT": ("edt", "s", 1.0), "T20": ("t20", "s", 1.0), "T30": ("t30", "s", 1.0),
                  "C50": ("c50", "dB", 1.0), "C80": ("c80", "dB", 1.0),
                  "D50": ("d50", "ratio, 0–1", 1.0), "Ts": ("ts", "ms", 1000.0),
                  "DRR": ("drr", "dB", 1.0), "STI": ("sti", "0–1", 1.0)}
#: The parameters whose A and B values are drawn by plot_comparison.
_COMPARE_VALUES = ("T30", "EDT", "C80", "Ts")
_COMPARE_MIN_JND = 2.0  # the difference axes span at least ±2 JND
_CELL_KEYS = ("band_hz", "parameter", "a", "b", "difference", "jnd", "verdict")


def _check_comparison(doc: Any) -> list[dict[str, Any]]:
    if not isinstance(doc, dict) or not isinstance(doc.get("cells"), list):
        raise ParameterError("comparison_doc must be the JSON object of "
                             "measure.compare.Comparison.to_dict() (with a list of 'cells')")
    for c in doc["cells"]:
        if not isinstance(c, dict) or any(k not in c for k in _CELL_KEYS):
            raise ParameterError(f"a comparison cell lacks one of {', '.join(_CELL_KEYS)}; "
                                 "pass Comparison.to_dict() unchanged")
        if c["parameter"] not in _COMPARE_STYLE:
            raise ParameterError(f"unknown parameter {c['parameter']!r} in the comparison; "
                                 f"known: {', '.join(_COMPARE_STYLE)}")
    return doc["cells"]


def _jnd_text(doc: dict[str, Any], name: str) -> str:
    j = doc.get("jnd", {}).get(name)
    if not isinstance(j, dict) or j.get("value") is None:
        return ""
    if j.get("kind") == "relative":
        return f"1 JND = {j['value'] * 100:g} %"
    _, unit, k = _COMPARE_STYLE[name]
    unit = "" if unit[0] in "r0" else f" {unit}"  # D50 and STI have none
    return f"1 JND = {j['value'] * k:g}{unit}"


def plot_comparison(comparison_doc: dict[str, Any], *, title: str = "") -> Any:
    """Draw two rooms (or measurement and model) compared in just-noticeable differences.

    Parameters
    ----------
    comparison_doc : dict
        The JSON document of :meth:`measure.compare.Comparison.to_dict`: its ``cells`` (band,
        parameter, values ``a`` and ``b``, ``difference``, ``jnd``, ``verdict``), its ``jnd``
        table and the sides' labels ``a.label``, ``b.label``.
    title : str

    Returns
    -------
    matplotlib.figure.Figure
        Axes, in ``fig.axes`` order: one per band parameter with its difference B − A in JNDs
        per band, the ±1 JND band shaded, the y-axis spanning at least ±2 JND; then the A and
        B values per band of T30, EDT, C80 and Ts (ms), those present. A cell not compared is
        a cross on the zero line.

    Raises
    ------
    ParameterError
        If ``comparison_doc`` is not such a document.
    MissingDependencyError
        If matplotlib is not installed.

    Notes
    -----
    The JNDs are those of the document (ISO 3382-1:2009 Table A.1 and the common-practice
    entries of :data:`measure.compare.PARAMETERS`). The STI, a single figure, is printed in
    the figure's note line.
    """
    title = _check_title(title)
    cells = _check_comparison(comparison_doc)
    band_cells = [c for c in cells if c["band_hz"]]
    if not band_cells:
        raise ParameterError("the comparison holds no per-band cells; nothing to draw")
    bands = list(dict.fromkeys(c["band_hz"] for c in band_cells))
    params = list(dict.fromkeys(c["parameter"] for c in band_cells))
    by = {(c["band_hz"], c["parameter"]): c for c in band_cells}
    x = np.arange(len(bands), dtype=np.float64)
    label_a = str(comparison_doc.get("a", {}).get("label", "A")) or "A"
    label_b = str(comparison_doc.get("b", {}).get("label", "B")) or "B"
    values = [p for p in _COMPARE_VALUES if p in params]
    ncols = 4
    nrows = math.ceil(len(params) / ncols)
    fig = _new_figure(14.0, 8.0)
    heights = [2.3] * nrows + ([2.6] if values else [])
    rows = _rows(fig, heights, [0.85] * (len(heights) - 1), top_in=0.9)

    def num(c: dict[str, Any] | None, key: str, k: float = 1.0) -> float:
        v = None if c is None else c.get(key)
        return np.nan if v is None else k * float(v)

    for i, name in enumerate(params):
        if i % ncols == 0:
            grid = _gs(fig, rows[i // ncols], 1, ncols, wgap_in=0.75)
        ax = fig.add_subplot(grid[i % ncols])
        key = _COMPARE_STYLE[name][0]
        d = np.array([num(by.get((b, name)), "jnd") for b in bands])
        ax.axhspan(-1.0, 1.0, color=_c("jnd"), alpha=0.25, lw=0, label="±1 JND")
        ax.axhline(0.0, color="k", lw=0.8)
        ax.plot(x, d, **_st(key, ms=5, lw=1.2, label=f"{name}: B − A"))
        bad = ~np.isfinite(d)
        if bad.any():
            ax.plot(x[bad], np.zeros(int(bad.sum())), ls="none", marker="x", ms=7, mew=1.8,
                    color="k", label="not compared")
        lim = max(_COMPARE_MIN_JND, 1.15 * float(np.nanmax(np.abs(d)))
                  if np.isfinite(d).any() else 0.0)
        ax.set_ylim(-lim, lim)
        ax.set_xticks(x)
        ax.set_xticklabels(bands, fontsize=8)
        ax.set_xlim(-0.5, len(bands) - 0.5)
        ax.set_xlabel("octave band (Hz)")
        ax.set_ylabel(f"{name}: B − A (JND)")
        jt = _jnd_text(comparison_doc, name)
        ax.set_title(f"{name}" + (f" ({jt})" if jt else ""), fontsize=10, loc="left")
        ax.grid(True, alpha=0.3)
        ax.legend(fontsize=6, loc="upper right", framealpha=0.85)
    if values:
        grid = _gs(fig, rows[-1], 1, len(values), wgap_in=0.75)
        for j, name in enumerate(values):
            ax = fig.add_subplot(grid[j])
            _, unit, k = _COMPARE_STYLE[name]
            va = np.array([num(by.get((b, name)), "a", k) for b in bands])
            vb = np.array([num(by.get((b, name)), "b", k) for b in bands])
            ax.plot(x, va, **_st("room_a", ms=5, lw=1.2, label=f"A: {label_a}"))
            ax.plot(x, vb, **_st("room_b", ms=5, lw=1.2, mfc="none", label=f"B: {label_b}"))
            _gaps(ax, x, va, _c("room_a"), None)
            _gaps(ax, x, vb, _c("room_b"), None)
            ax.set_xticks(x)
            ax.set_xticklabels(bands, fontsize=8)
            ax.set_xlim(-0.5, len(bands) - 0.5)
            ax.set_xlabel("octave band (Hz)")
            ax.set_ylabel(f"{name} ({unit})")
            ax.set_title(f"{name}: A and B", fontsize=10, loc="left")
            ax.grid(True, alpha=0.3)
            ax.legend(fontsize=6, loc="best")
    sti = next((c for c in cells if c["parameter"] == "STI" and not c["band_hz"]), None)
    if sti is not None and (sti["a"] is not None or sti["b"] is not None):
        a, b, nj = sti["a"], sti["b"], sti["jnd"]
        note = ("STI: " + ("—" if a is None else f"A {a:.2f}") + ", "
                + ("—" if b is None else f"B {b:.2f}")
                + ("" if nj is None else f", {nj:+.1f} JND ({sti['verdict']})"))
        fig.text(0.75 / fig.get_figwidth(), 1.0 - 0.42 / fig.get_figheight(), note,
                 fontsize=9, va="top")
    return _finish(fig, title)


# ---------------------------------------------------------------------------------------------
# The figures of a report page

#: Caption of each figure :func:`report_figures` can return, in the order it returns them.
REPORT_CAPTIONS: dict[str, str] = {
    "energy_time": "Impulse response and energy-time curve: direct sound, first reflections, "
                   "noise floor",
    "decay": "Band decay curves with the EDT, T20 and T30 fits",
    "decay_times": "Decay times per band, T20 and T30 with their standard uncertainty",
    "clarity": "Clarity C50 and C80, definition D50 and centre time Ts per band",
    "magnitude": "Magnitude response, 1/3-octave power smoothing",
    "time_frequency": "Time-frequency picture of the decay (spectrogram)",
    "distortion": "Harmonic distortion per harmonic",
    "model_fit": "Measurement against the fitted model, in JNDs",
    "comparison": "Comparison of the two sides, in JNDs",
    "attenuation": "Attenuation with distance and direction",
}


def _has_harmonics(ir_details: Any) -> bool:
    try:
        return any(hs for _, hs in _harmonic_rows(ir_details))
    except ParameterError:
        raise ParameterError("ir_details must be the ImpulseResponse of measure.deconvolve or "
                             f"its to_dict(), not {type(ir_details).__name__}") from None


def report_figures(h: np.ndarray, fs: int, figures: Any, *, modelled: Any = None,
                   fit_report: Any = None, comparison: Any = None, attenuation: Any = None,
                   ir_details: Any = None) -> list[tuple[str, Any]]:
    """The figures of a report page for one room, each with its caption.

    Parameters
    ----------
    h : ndarray, shape (n,)
        The broadband impulse response ``figures`` was computed from.
    fs : int, > 0, Hz
    figures : measure.parameters.RoomFigures
    modelled : measure.parameters.RoomFigures, optional
        The analysis of the rendered model; needs ``fit_report``.
    fit_report : measure.model.fit.FitReport, optional
        Adds the model-fit figure (with the decay curves overlaid when ``modelled`` is given).
    comparison : measure.compare.Comparison or dict, optional
        The comparison, or its ``to_dict()``: adds :func:`plot_comparison`.
    attenuation : dict, optional
        The document of ``measure attenuation``: adds :func:`plot_attenuation` when it holds a
        distance or an angle series (a document of single positions has nothing to draw).
    ir_details : measure.deconvolve.ImpulseResponse or dict, optional
        The recovery, or its ``to_dict()``: adds :func:`plot_distortion` when it holds
        harmonic distortion figures.

    Returns
    -------
    list of (str, matplotlib.figure.Figure)
        (caption, figure) in the order of :data:`REPORT_CAPTIONS`: energy-time, decay curves
        (:func:`plot_analysis`), decay times, clarity, magnitude, time–frequency, then the
        optional ones that were asked for.

    Raises
    ------
    ParameterError
        For malformed inputs, ``modelled`` without ``fit_report``, or ``ir_details`` of the
        wrong type.
    MissingDependencyError
        If matplotlib is not installed.
    """
    from measure.compare import Comparison

    h = check_signal(h, "h", ndim=(1,))
    fs = check_fs(fs)
    _check_figures(figures, fs, h)
    if modelled is not None and fit_report is None:
        raise ParameterError("modelled figures were given without fit_report; pass the "
                             "FitReport of the fit too, or leave modelled out")
    if isinstance(comparison, Comparison):
        comparison = comparison.to_dict()
    if comparison is not None:
        _check_comparison(comparison)
    if attenuation is not None and not isinstance(attenuation, dict):
        raise ParameterError("attenuation must be the JSON object of measure attenuation, not "
                             f"{type(attenuation).__name__}")
    distortion = ir_details is not None and _has_harmonics(ir_details)
    cap = REPORT_CAPTIONS
    out = [(cap["energy_time"], plot_energy_time(h, fs, figures)),
           (cap["decay"], plot_analysis(h, fs, figures)),
           (cap["decay_times"], plot_decay_times(figures)),
           (cap["clarity"], plot_clarity(figures)),
           (cap["magnitude"], plot_magnitude(h, fs, fraction=3)),
           (cap["time_frequency"], plot_time_frequency(h, fs))]
    if distortion:
        out.append((cap["distortion"], plot_distortion(ir_details)))
    if fit_report is not None:
        out.append((cap["model_fit"], plot_model_fit(
            figures if modelled is not None else None, modelled, fit_report)))
    if comparison is not None:
        out.append((cap["comparison"], plot_comparison(comparison)))
    if isinstance(attenuation, dict) and (attenuation.get("direction") is not None
                                          or attenuation.get("rolloff_factor") is not None):
        out.append((cap["attenuation"], plot_attenuation(attenuation)))
    return out


# ---------------------------------------------------------------------------------------------
# One-call helpers


def write_analysis_plot(path: str | os.PathLike[str], h: np.ndarray, fs: int, figures: Any,
                        title: str = "") -> Path:
    """:func:`plot_analysis` and :func:`save_figure` in one call; returns the PNG's path."""
    check_png_path(path)
    return save_figure(plot_analysis(h, fs, figures, title=title), path)


def write_model_plot(path: str | os.PathLike[str], measured: Any, modelled: Any, report: Any,
                     title: str = "") -> Path:
    """:func:`plot_model_fit` and :func:`save_figure` in one call; returns the PNG's path."""
    check_png_path(path)
    return save_figure(plot_model_fit(measured, modelled, report, title=title), path)


def write_attenuation_plot(path: str | os.PathLike[str], doc: dict[str, Any],
                           title: str = "") -> Path:
    """:func:`plot_attenuation` and :func:`save_figure` in one call; returns the PNG's path."""
    check_png_path(path)
    return save_figure(plot_attenuation(doc, title=title), path)
