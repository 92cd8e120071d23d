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
"""

from __future__ import annotations

import math
import os
from pathlib import Path
from typing import Any

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
]

#: What to do when matplotlib is missing.
MATPLOTLIB_ADVICE = ("install it with `python -m pip install matplotlib`; everything except "
                     "the plots works without it (leave out --plot)")

# Colours: matplotlib's default cycle, fixed per meaning so every panel agrees.
_C_CURVE = "#1f77b4"
_C_EDT = "#2ca02c"
_C_T20 = "#ff7f0e"
_C_T30 = "#d62728"
_C_C80 = "#9467bd"
_C_MODEL = "#17becf"
_C_GREY = "#7f7f7f"

#: (key, name, fit range in dB, colour, line width) of the decay fits drawn on the band panels;
#: the ranges are those of measure.decay.FIT_RANGES_DB (ISO 3382-1 A.2.2, ISO 3382-2 clause 6).
_FITS = (("t30", "T30", _C_T30, 6.0), ("t20", "T20", _C_T20, 3.5), ("edt", "EDT", _C_EDT, 3.5))

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
    ax.plot(t_blocks, _level_db(eb.max(axis=1), peak), color="#b0c4de", lw=0.6,
            label="10 lg h² (peak per 0.5 ms)")
    ax.plot(t_blocks, _level_db(smooth, peak), color=_C_CURVE, lw=1.2,
            label="energy envelope (5 ms average)")
    onset_s = figures.onset_index / fs
    ax.axvline(onset_s, color="k", lw=1.0, ls="--",
               label=f"onset {onset_s * 1000:.1f} ms (−20 dB rule)")
    bb = figures.broadband
    d = bb.decay
    pnr = bb.peak_to_noise_db
    if d.noise_floor_found and pnr is not None:
        ax.axhline(-pnr, color=_C_T30, lw=1.0, ls="--",
                   label=f"noise floor −{pnr:.0f} dB (Lundeby)")
        ax.axvline(onset_s + d.truncation_s, color=_C_GREY, lw=1.0, ls=":",
                   label=f"crosspoint {onset_s + d.truncation_s:.2f} s")
        lo = -(pnr + 15.0)
    else:
        finite = _level_db(smooth, peak)
        lo = float(np.min(finite[finite > -200.0])) - 5.0 if np.any(finite > -200.0) else -100.0
        ax.text(0.99, 0.97, "no noise floor found: the IR ends while still decaying",
                transform=ax.transAxes, ha="right", va="top", fontsize=8, color=_C_GREY)
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
    ax_early.plot(t_ms, _level_db(e[i0:i1], peak), color="#9ecae1", lw=0.5,
                  label="10 lg h²")
    k1 = max(1, int(round(0.001 * fs)))
    ax_early.plot(t_ms, _level_db(np.convolve(e[i0:i1], np.ones(k1) / k1, mode="same"), peak),
                  color=_C_CURVE, lw=1.0, label="1 ms average")
    for te_ms, name in ((50.0, "50 ms"), (80.0, "80 ms")):
        ax_early.axvline(te_ms, color=_C_C80, lw=1.0, ls="--")
        ax_early.text(te_ms, 1.0, f" {name}", color=_C_C80, fontsize=7, va="top",
                      transform=ax_early.get_xaxis_transform())
    ax_early.axvline(0.0, color="k", lw=1.0, ls="--")
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
        ax.plot(idx / fs, curve[idx], color=_C_CURVE if evaluated else _C_GREY, lw=1.0,
                label="Schroeder decay")
    if not evaluated:
        ax.text(0.97, 0.95, "no valid decay\n(plain integral)", transform=ax.transAxes,
                ha="right", va="top", fontsize=7, color=_C_GREY)
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
            ax.axvline(d.truncation_s, color=_C_GREY, lw=1.0, ls=":", label="crosspoint")
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
    series = (("edt_s", None, "EDT", _C_EDT), ("t20_s", "t20_uncertainty_s", "T20", _C_T20),
              ("t30_s", "t30_uncertainty_s", "T30", _C_T30))
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
               error_kw={"ecolor": "k", "elinewidth": 0.8, "capsize": 2.0})
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
_MODEL_PARAMS = (("edt_s", "EDT", "s", _C_EDT), ("t30_s", "T30", "s", _C_T30),
                 ("c80_db", "C80", "dB", _C_C80))


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
    for j, (key, name, unit, colour) in enumerate(_MODEL_PARAMS):
        ax = fig.add_subplot(row[j])
        meas = np.array([_value(report, b, key, "measured") for b in labels])
        mod = np.array([_value(report, b, key, "modelled") for b in labels])
        ax.plot(x, meas, color="k", marker="o", ms=4, lw=1.2, label="measured")
        ax.plot(x, mod, color=colour, marker="s", ms=5, mfc="none", lw=1.2, ls="--",
                label="model")
        _mark_missing(ax, x, meas, "k")
        _mark_missing(ax, x, mod, colour)
        ax.set_xticks(x)
        ax.set_xticklabels(labels, fontsize=8)
        ax.set_xlabel("octave band (Hz)")
        ax.set_ylabel(f"{name} ({unit})")
        ax.set_title(f"{name}: measured and model", fontsize=10, loc="left")
        ax.grid(True, alpha=0.3)
        ax.legend(fontsize=7, loc="best")
    ax_d = fig.add_subplot(_gs(fig, rows[1], 1, 1)[0])
    width = 0.26
    lim = 1.5
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
    ax_d.axhspan(-1.0, 1.0, color=_C_GREY, alpha=0.15, lw=0, label="within ±1 JND")
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
            for bf, colour, lab, ls in ((mb, "k", "measured", "-"),
                                        (model_bands.get(mb.label), _C_MODEL, "model", "--")):
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

_C_DIRECT = _C_CURVE
_C_REVERB = _C_T20
_C_AIR = _C_GREY


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
    ax.plot(dr, -20.0 * np.log10(dr / d_ref), color=_C_GREY, ls=":", lw=1.2,
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
    for i, (band, by_angle) in enumerate(rel.items()):
        xs = np.array([float(k) for k in by_angle])
        order = np.argsort(xs)
        ys = np.array(list(by_angle.values()), dtype=np.float64)[order]
        v = di.get(band)
        ax.plot(xs[order], ys, ls=styles[i % len(styles)], marker="o", ms=3, lw=1.1,
                label=f"{band} Hz (DI {'—' if v is None else f'{v:.1f}'} dB)")
    ax.set_xlabel("angle off the source's axis (°)")
    ax.set_ylabel("level re on axis (dB)")
    ax.set_title("Level per octave band and directivity index", fontsize=10, loc="left")
    ax.grid(True, alpha=0.3)
    ax.legend(fontsize=7, loc="lower left", ncols=2)


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
