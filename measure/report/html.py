"""The self-contained HTML report of ``measure report``: one file, no network, prints to PDF.

A report is one HTML5 document: inline CSS (a screen style and an ``@media print`` style with a
page break before every room after the first), every plot embedded as a base64 PNG data URI, no
script and no reference to anything outside the file, so it opens the same way offline, in a
mail client or years later, and a browser's "print to PDF" gives one room per page run.

It is made in two steps, both here:

1. :func:`room_section` turns what was measured in one room (one impulse response per position,
   with the take sidecars where they exist) into a :class:`RoomSection`: per position the
   ISO 3382-1 figures of :func:`measure.parameters.analyze_ir` and the measurement conditions,
   the ISO 3382-2 position average (:func:`measure.compare.average_sides`) when there are two
   positions or more, a compact model (:func:`measure.model.fit.fit_with_i3dl2`, or a given one
   rendered and re-analysed) with its I3DL2 values and worst differences in JNDs, the
   comparison of the room with its model (:func:`measure.compare.compare_sides`), and the plots
   (:func:`_figures`, the one place that chooses them).
2. :func:`render_html` writes the sections into the document, with an index of the rooms and
   the safety cautions; :func:`write_html` writes it atomically.

Every number shown is formatted from the result documents (``to_dict()``) of the stages, never
recomputed here; a figure that could not be measured honestly is shown as "—" with its flags
in words.
"""

from __future__ import annotations

import base64
import html
import io
import math
import os
from collections.abc import Sequence
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import numpy as np

from measure.errors import ParameterError

__all__ = [
    "SAFETY_CAUTIONS",
    "BAND_COLUMNS",
    "RoomSection",
    "check_html_path",
    "conditions",
    "format_value",
    "room_section",
    "render_html",
    "write_html",
]

#: The cautions printed at the top of every report (the substance of the README's
#: "Safety first", reworded).
SAFETY_CAUTIONS: tuple[str, ...] = (
    "A measuring sweep is a loud tone that glides through the whole audible range; protect "
    "your hearing whenever you are close to a loudspeaker that plays one.",
    "Begin every session with the amplifier or monitor volume turned low and raise it in small "
    "steps; never begin at full volume.",
    "A long, steady tone at high level can burn out a loudspeaker, the tweeter first: use no "
    "more level than a clean result needs.",
    "Keep people and animals out of the room while the sweep plays, and respect the local "
    "rules on noise and working hours.",
)

#: (key in a band document, column heading, unit shown) of the band table, in order.
BAND_COLUMNS: tuple[tuple[str, str, str], ...] = (
    ("edt_s", "EDT", "s"),
    ("t20_s", "T20", "s"),
    ("t30_s", "T30", "s"),
    ("c50_db", "C50", "dB"),
    ("c80_db", "C80", "dB"),
    ("d50", "D50", ""),
    ("ts_s", "Ts", "ms"),
    ("drr_db", "DRR", "dB"),
)

#: Resolution of the embedded plots, dots per inch (the figures are 10–13 in wide, so the
#: images are 1100–1400 px: sharp on paper at the page width, a few hundred kB each).
PNG_DPI = 110.0

_DASH = "—"

_CSS = """\
:root { color-scheme: light; }
body { font-family: system-ui, sans-serif; font-size: 15px; line-height: 1.45; color: #1b1b1b;
       background: #fff; margin: 0 auto; max-width: 70em; padding: 1.5em; }
h1 { font-size: 1.7em; margin: 0 0 0.3em; }
h2 { font-size: 1.35em; margin: 1.6em 0 0.4em; border-bottom: 2px solid #36a; }
h3 { font-size: 1.1em; margin: 1.2em 0 0.3em; }
p.meta { color: #555; margin: 0 0 1em; }
nav.index ol { columns: 2; margin: 0.3em 0 1em; }
aside.safety { border: 2px solid #b60; background: #fff6e8; padding: 0.6em 1em;
               margin: 1em 0; }
aside.safety h2 { border: none; margin: 0 0 0.3em; font-size: 1.15em; color: #8a3b00; }
table { border-collapse: collapse; margin: 0.4em 0 1em; width: 100%; }
th, td { border: 1px solid #bbb; padding: 0.2em 0.45em; vertical-align: top;
         overflow-wrap: anywhere; }
th { background: #eef2f8; text-align: left; }
td.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
td.flags { font-size: 0.88em; color: #333; }
table.bands tbody th, table.average tbody th { white-space: nowrap; }
table.kv { width: auto; }
table.kv th { font-weight: normal; color: #444; }
figure { margin: 1em 0; }
figure img { display: block; max-width: 100%; height: auto; }
figcaption { font-size: 0.9em; color: #444; margin-top: 0.3em; }
.verdict { font-weight: bold; }
ul.notes { font-size: 0.9em; color: #333; }
@page { size: A4; margin: 14mm; }
@media print {
  body { max-width: none; padding: 0; font-size: 10pt; }
  section.room { break-before: page; page-break-before: always; }
  nav.index, aside.safety { break-inside: avoid; page-break-inside: avoid; }
  figure, tr, table.kv { break-inside: avoid; page-break-inside: avoid; }
  h2, h3 { break-after: avoid; page-break-after: avoid; }
  figure img { max-width: 100%; width: 100%; height: auto; }
  table { font-size: 8.5pt; }
  td.flags { font-size: 7.5pt; }
  a { color: inherit; text-decoration: none; }
}
"""


@dataclass(frozen=True, slots=True, eq=False)
class RoomSection:
    """Everything the report shows of one room (plain documents, ready to format).

    Attributes
    ----------
    name : str
        The room's name (its folder's name, or the file's stem).
    source : str
        What it was made from ("room folder captures/hall", "impulse response hall.wav", ...).
    fs : int, Hz
    positions : tuple of dict
        One per position: ``label``, ``take`` (int or None), ``used`` (bool), ``reason``
        (str or None), ``conditions`` (list of (name, text) pairs from the sidecar) and
        ``figures`` (the :meth:`measure.parameters.RoomFigures.to_dict` document, or None).
    average : dict or None
        :meth:`measure.compare.RoomSide.to_dict` of the ISO 3382-2 position average.
    model : dict or None
        ``i3dl2`` (the twelve values), ``units``, ``clamped``, ``notes``, ``max_abs_jnd``
        (per parameter key, from :meth:`measure.model.fit.FitReport.max_abs_jnd`),
        ``lsd_db``, ``fitted_to`` (the position label) and ``how`` ("fitted" or "given").
    comparison : dict or None
        :meth:`measure.compare.Comparison.to_dict` of the room (its average, else its first
        position) against the model.
    attenuation : dict or None
        The JSON document of ``measure attenuation``, when one was given.
    images : tuple of (str, bytes)
        (caption, PNG) of each plot, in order.
    notes : tuple of str
    """

    name: str
    source: str
    fs: int
    positions: tuple[dict[str, Any], ...]
    average: dict[str, Any] | None = None
    model: dict[str, Any] | None = None
    comparison: dict[str, Any] | None = None
    attenuation: dict[str, Any] | None = None
    images: tuple[tuple[str, bytes], ...] = ()
    notes: tuple[str, ...] = ()


# ---------------------------------------------------------------------------------------------
# Building a section


def check_html_path(path: str | os.PathLike[str], *, option: str = "--out") -> Path:
    """Return ``path`` as a Path if it can name the report file, else raise.

    Raises
    ------
    ParameterError
        If it does not end in ``.html`` or names an existing folder.
    """
    p = Path(path)
    if p.suffix.lower() != ".html":
        raise ParameterError(f"{option} {str(path)!r} must end in .html (the report is one HTML "
                             "file); give e.g. report.html")
    if p.is_dir():
        raise ParameterError(f"{option} {str(path)!r} is a folder; give a file name such as "
                             f"{p / 'report.html'}")
    return p


def _figures(h: np.ndarray, fs: int, figures: Any, *, modelled: Any = None,
             fit_report: Any = None, comparison: Any = None, attenuation: Any = None,
             dpi: float = PNG_DPI) -> list[tuple[str, bytes]]:
    """The plots of one room as (caption, PNG bytes), chosen by
    :func:`measure.report.plots.report_figures`."""
    from measure.report import plots

    pairs = list(plots.report_figures(h, fs, figures, modelled=modelled, fit_report=fit_report,
                                      comparison=comparison, attenuation=attenuation))
    out = []
    for caption, fig in pairs:
        buf = io.BytesIO()
        fig.savefig(buf, format="png", dpi=dpi)
        out.append((str(caption), buf.getvalue()))
    return out


def _num(v: Any) -> float | None:
    if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
        return None
    return float(v)


def _deep(doc: Any, key: str) -> Any:
    """``doc[key]``, else the first value under that key in a nested dict (two levels)."""
    if not isinstance(doc, dict):
        return None
    if doc.get(key) is not None:
        return doc[key]
    for v in doc.values():
        if isinstance(v, dict):
            if v.get(key) is not None:
                return v[key]
            for w in v.values():
                if isinstance(w, dict) and w.get(key) is not None:
                    return w[key]
    return None


def conditions(sidecar: dict[str, Any] | None) -> list[tuple[str, str]]:
    """The measurement conditions a take's (or an IR's) sidecar records, as (name, text).

    Reads what ``measure capture`` and ``measure import`` write (start time, devices or
    recorder and player, sweep level, input peak and noise, the level check, temperature,
    humidity, distance, angle, the take's verdict, notes); an IR sidecar's ``sources`` are
    searched too. Only what is known is listed.
    """
    if not isinstance(sidecar, dict) or not sidecar:
        return []
    out: list[tuple[str, str]] = []
    date = _deep(sidecar, "start_utc") or _deep(sidecar, "source_mtime_utc")
    if date:
        out.append(("date (UTC)", str(date)))
    devices = _deep(sidecar, "devices")
    if isinstance(devices, dict):
        for role in ("input", "output"):
            dev = devices.get(role)
            if isinstance(dev, dict) and dev.get("name"):
                api = f" ({dev['hostapi']})" if dev.get("hostapi") else ""
                out.append((f"{role} device", f"{dev['name']}{api}"))
    for key, name in (("recorder", "recorder"), ("player", "player")):
        if _deep(sidecar, key):
            out.append((name, str(_deep(sidecar, key))))
    sweep = _deep(sidecar, "sweep")
    if isinstance(sweep, dict):
        parts = []
        if _num(sweep.get("level_dbfs")) is not None:
            parts.append(f"{sweep['level_dbfs']:.1f} dBFS peak")
        if _num(sweep.get("f1_hz")) is not None and _num(sweep.get("f2_hz")) is not None:
            parts.append(f"{sweep['f1_hz']:g}–{sweep['f2_hz']:g} Hz")
        if _num(sweep.get("duration_s")) is not None:
            parts.append(f"{sweep['duration_s']:g} s")
        if _num(sweep.get("fs")) is not None:
            parts.append(f"{sweep['fs']:g} Hz")
        if parts:
            out.append(("sweep", ", ".join(parts)))
    inputs = _deep(sidecar, "input")
    if isinstance(inputs, list):
        for ch in inputs:
            if isinstance(ch, dict) and _num(ch.get("peak_dbfs")) is not None:
                noise = _num(ch.get("noise_rms_dbfs"))
                text = f"peak {ch['peak_dbfs']:.1f} dBFS" + (
                    f", background noise {noise:.1f} dBFS RMS" if noise is not None else "")
                if ch.get("n_clipped"):
                    text += f", {ch['n_clipped']} samples clipped"
                out.append((f"input channel {ch.get('file_channel', '?')}", text))
    level = _deep(sidecar, "level_check")
    if isinstance(level, dict) and _num(level.get("step_reached_db")) is not None:
        out.append(("level check", f"stopped at {level['step_reached_db']:+.1f} dB" +
                    ("" if level.get("ok", True) else " (not passed)")))
    for key, name, unit in (("temperature_c", "temperature", "°C"),
                            ("humidity_percent", "relative humidity", "%"),
                            ("distance_m", "source–microphone distance", "m"),
                            ("angle_deg", "angle off the source's axis", "°")):
        v = _num(_deep(sidecar, key))
        if v is not None:
            out.append((name, f"{v:g} {unit}"))
    verdict = _deep(sidecar, "verdict")
    if isinstance(verdict, dict) and verdict.get("verdict"):
        why = "; ".join(str(r) for r in verdict.get("reasons") or [])
        out.append(("take verdict", str(verdict["verdict"]) + (f" ({why})" if why else "")))
    if _deep(sidecar, "notes") and isinstance(_deep(sidecar, "notes"), str):
        out.append(("notes", str(_deep(sidecar, "notes"))))
    return out


def _i3dl2_values(doc: Any) -> dict[str, float] | None:
    from measure.model.i3dl2 import I3DL2_RANGES

    for cand in (doc, doc.get("values") if isinstance(doc, dict) else None):
        if isinstance(cand, dict) and set(I3DL2_RANGES) <= set(cand):
            return {k: float(cand[k]) for k in I3DL2_RANGES}
    return None


def room_section(name: str, responses: Sequence[np.ndarray | None], fs: int, *,
                 labels: Sequence[str], sidecars: Sequence[dict[str, Any] | None] | None = None,
                 takes: Sequence[int | None] | None = None,
                 used: Sequence[bool] | None = None,
                 reasons: Sequence[str | None] | None = None,
                 figures_docs: Sequence[dict[str, Any] | None] | None = None,
                 average: dict[str, Any] | None = None, model: Any = None,
                 i3dl2: dict[str, Any] | None = None, attenuation: dict[str, Any] | None = None,
                 fit: bool = True, source: str = "", dpi: float = PNG_DPI) -> RoomSection:
    """Analyse one room's responses and gather everything its report section shows.

    Parameters
    ----------
    name : str
        The room's name.
    responses : sequence of ndarray, shape (n,), or None
        One broadband impulse response per position (None for a position whose response is
        not available, e.g. a take left out).
    fs : int, > 0, Hz
        Sample rate of every response.
    labels : sequence of str
        Position names, one per response.
    sidecars : sequence of dict or None, optional
        The take's (or IR's) sidecar per position, for the measurement conditions.
    takes, used, reasons : sequences, optional
        Take number, whether the position enters the average (default True for every
        position with a response) and why not.
    figures_docs : sequence of dict or None, optional
        Figures already computed (``RoomFigures.to_dict()``, as ``measure batch`` stores them);
        a position without one is analysed here.
    average : dict, optional
        A position average already computed (``RoomSide.to_dict()``); else it is computed from
        the used positions when there are two or more.
    model : measure.model.modelfile.RoomModel, optional
        A model already fitted: it is rendered at ``fs``, analysed and compared with the first
        used position instead of fitting a new one.
    i3dl2 : dict, optional
        Its I3DL2 values (the twelve properties, or an ``I3dl2Set.to_dict()``).
    attenuation : dict, optional
        A ``measure attenuation`` document to show and plot.
    fit : bool
        Fit a model when none is given (the slowest step: about 1–5 s per room).
    source : str
        What the section was made from, shown under its heading.

    Returns
    -------
    RoomSection

    Raises
    ------
    ParameterError
        If the sequences differ in length, or no position has a response.
    MissingDependencyError
        If matplotlib is not installed.
    """
    from measure._validate import check_fs
    from measure.compare import average_sides, compare_sides, side_from_figures
    from measure.parameters import analyze_ir

    fs = check_fs(fs)
    n = len(responses)
    opt = {"labels": labels, "sidecars": sidecars, "takes": takes, "used": used,
           "reasons": reasons, "figures_docs": figures_docs}
    for key, seq in opt.items():
        if seq is not None and len(seq) != n:
            raise ParameterError(f"{key} has {len(seq)} entries for {n} responses; give one per "
                                 "position")
    sidecars = sidecars if sidecars is not None else [None] * n
    takes = takes if takes is not None else [None] * n
    reasons = reasons if reasons is not None else [None] * n
    figures_docs = figures_docs if figures_docs is not None else [None] * n
    used = used if used is not None else [h is not None for h in responses]
    analysed: list[Any] = [None] * n
    positions = []
    for i in range(n):
        doc = figures_docs[i]
        h = responses[i]
        if h is not None and (doc is None or used[i]):
            analysed[i] = analyze_ir(np.asarray(h, dtype=np.float64), fs)
            doc = doc if doc is not None else analysed[i].to_dict()
        positions.append({"label": str(labels[i]), "take": takes[i], "used": bool(used[i]),
                          "reason": reasons[i], "conditions": conditions(sidecars[i]),
                          "figures": doc})
    usable = [i for i in range(n) if used[i] and analysed[i] is not None]
    if not usable:  # listed with the reasons, so the level's report still has every room
        return RoomSection(name, source, fs, tuple(positions), None, None, None, attenuation,
                           (), ("no position of this room has a usable impulse response; the "
                                "takes and why they were left out are listed below",))
    first = usable[0]
    sides = [side_from_figures(analysed[i], label=str(labels[i]), kind="capture",
                               h=responses[i]) for i in usable]
    notes: list[str] = []
    ref_side = sides[0]
    if len(sides) >= 2:
        ref_side = average_sides(sides, label=f"{name} ({len(sides)} positions)")
        average = average if average is not None else ref_side.to_dict()
    h0, fig0 = np.asarray(responses[first], dtype=np.float64), analysed[first]

    model_doc = None
    fit_report = modelled = None
    if model is not None:
        from measure.model.fit import compare_figures
        from measure.model.render import default_seconds, render_model

        hm = render_model(model, fs, max(default_seconds(model), h0.size / fs))
        modelled = analyze_ir(hm, fs)
        fit_report = compare_figures(fig0, modelled)
        values = _i3dl2_values(i3dl2) or _i3dl2_values(getattr(model, "i3dl2", None))
        i3_doc = {"values": values, "clamped": {}, "notes": []}
        if isinstance(i3dl2, dict) and isinstance(i3dl2.get("notes"), list):
            i3_doc.update(clamped=i3dl2.get("clamped") or {}, notes=i3dl2["notes"])
        how = "given"
    elif fit:
        from measure.model.fit import fit_with_i3dl2

        result, i3 = fit_with_i3dl2(h0, fs)
        fit_report, modelled, hm = result.report, result.modelled, None
        i3_doc = i3.to_dict()
        how = "fitted"
    if fit_report is not None:
        from measure.model.i3dl2 import I3DL2_RANGES

        model_doc = {"i3dl2": i3_doc.get("values"),
                     "units": {k: u for k, (_, _, u) in I3DL2_RANGES.items()},
                     "clamped": dict(i3_doc.get("clamped") or {}),
                     "notes": list(i3_doc.get("notes") or []),
                     "max_abs_jnd": fit_report.max_abs_jnd(), "lsd_db": fit_report.lsd_db,
                     "fitted_to": str(labels[first]), "how": how}
    comparison = cmp_obj = None
    if modelled is not None:
        model_side = side_from_figures(modelled, label="the compact model", kind="model",
                                       h=hm)
        cmp_obj = compare_sides(ref_side, model_side)
        comparison = cmp_obj.to_dict()
    if len(sides) < 2:
        notes.append("one position only: no ISO 3382-2 position average (it needs two source-"
                     "receiver combinations or more)")
    images = _figures(h0, fs, fig0, modelled=modelled, fit_report=fit_report,
                      comparison=cmp_obj, attenuation=attenuation, dpi=dpi)
    return RoomSection(name=str(name), source=source, fs=fs, positions=tuple(positions),
                       average=average, model=model_doc, comparison=comparison,
                       attenuation=attenuation, images=tuple(images), notes=tuple(notes))


# ---------------------------------------------------------------------------------------------
# Formatting


def format_value(v: Any, key: str) -> str:
    """A figure as the report prints it: decay times in s (2 decimals), levels in dB
    (1 decimal, signed), D50 and the STI (2 decimals), Ts in ms (whole); "—" for None."""
    v = _num(v)
    if v is None:
        return _DASH
    if key in ("edt_s", "t20_s", "t30_s", "t_mid_s", "t20_mid_s", "t30_mid_s", "edt_mid_s"):
        return f"{v:.2f}"
    if key in ("ts_s", "ts_mid_s"):
        return f"{v * 1000:.0f}"
    if key in ("d50", "d50_mid", "sti"):
        return f"{v:.2f}"
    return f"{v:+.1f}"


def _e(text: Any) -> str:
    return html.escape(str(text), quote=True)


def _flags(flags: Sequence[str]) -> str:
    if not flags:
        return "none"
    return "<br>".join(_e(f) for f in flags)


def _band_table(doc: dict[str, Any]) -> list[str]:
    head = "".join(f"<th>{n}{f' ({u})' if u else ''}</th>" for _, n, u in BAND_COLUMNS)
    rows = ['<table class="bands">', f"<thead><tr><th>band (Hz)</th>{head}<th>flags</th>"
            "</tr></thead>", "<tbody>"]
    for b in list(doc.get("bands") or []) + [doc.get("broadband") or {}]:
        if not b:
            continue
        cells = "".join(f'<td class="num">{format_value(b.get(k), k)}</td>'
                        for k, _, _ in BAND_COLUMNS)
        rows.append(f"<tr><th>{_e(b.get('label', ''))}</th>{cells}"
                    f'<td class="flags">{_flags(b.get("flags") or [])}</td></tr>')
    rows += ["</tbody>", "</table>"]
    return rows


def _single_numbers(doc: dict[str, Any]) -> list[str]:
    from measure.intelligibility import rating

    sn = doc.get("single_numbers") or {}
    t_from = sn.get("t_mid_from")
    items = [(f"T<sub>mid</sub> (from {_e(t_from)}, 500 Hz and 1 kHz)" if t_from else
              "T<sub>mid</sub> (500 Hz and 1 kHz)", format_value(sn.get("t_mid_s"), "t_mid_s"),
              "s"),
             ("EDT<sub>mid</sub>", format_value(sn.get("edt_mid_s"), "edt_s"), "s"),
             ("C50<sub>mid</sub>", format_value(sn.get("c50_mid_db"), "c50_db"), "dB"),
             ("C80<sub>mid</sub>", format_value(sn.get("c80_mid_db"), "c80_db"), "dB"),
             ("D50<sub>mid</sub>", format_value(sn.get("d50_mid"), "d50"), ""),
             ("Ts<sub>mid</sub>", format_value(sn.get("ts_mid_s"), "ts_s"), "ms")]
    sti = _num(doc.get("sti"))
    items.append(("STI (IEC 60268-16, no background noise)",
                  _DASH if sti is None else f"{sti:.2f}, {rating(sti)}", ""))
    rows = ['<table class="kv">', "<tbody>"]
    for name, val, unit in items:
        shown = val if val == _DASH or not unit else f"{val} {unit}"
        rows.append(f'<tr><th>{name}</th><td class="num">{_e(shown)}</td></tr>')
    rows += ["</tbody>", "</table>"]
    flags = list(sn.get("flags") or []) + list((doc.get("details") or {}).get("flags") or [])
    if flags:
        rows.append('<ul class="notes">' + "".join(f"<li>{_e(f)}</li>" for f in flags)
                    + "</ul>")
    return rows


def _kv_table(pairs: Sequence[tuple[str, str]]) -> list[str]:
    rows = ['<table class="kv">', "<tbody>"]
    rows += [f"<tr><th>{_e(k)}</th><td>{_e(v)}</td></tr>" for k, v in pairs]
    rows += ["</tbody>", "</table>"]
    return rows


def _average_table(avg: dict[str, Any]) -> list[str]:
    head = "".join(f"<th>{n}{f' ({u})' if u else ''}</th>" for _, n, u in BAND_COLUMNS)
    rows = ['<table class="average">', f"<thead><tr><th>band (Hz)</th>{head}</tr></thead>",
            "<tbody>"]
    for band, vals in (avg.get("bands") or {}).items():
        cells = []
        for k, _, _ in BAND_COLUMNS:
            v = format_value(vals.get(k), k)
            sd = (vals.get("spread") or {}).get(k)
            cnt = (vals.get("count") or {}).get(k)
            sd_txt = "" if _num(sd) is None else f" ± {format_value(sd, k).lstrip('+')}"
            cnt_txt = "" if cnt is None else f" (n = {cnt})"
            cells.append(f'<td class="num">{_e(v + sd_txt + cnt_txt)}</td>')
        rows.append(f"<tr><th>{_e(band)}</th>{''.join(cells)}</tr>")
    rows += ["</tbody>", "</table>"]
    sti = _num(avg.get("sti"))
    grade = avg.get("grade")
    n_pos = avg.get("n_positions")
    rows.append(f"<p>Positions: {_e(n_pos if n_pos is not None else '?')}; grade by their "
                f"number (ISO 3382-2 Table 1): <span class=\"verdict\">"
                f"{_e(grade or 'below survey')}</span>; mean STI "
                f"{_DASH if sti is None else f'{sti:.2f}'}. Each cell: mean ± standard deviation "
                "over positions (n = positions with a value).</p>")
    if avg.get("notes"):
        rows.append('<ul class="notes">' + "".join(f"<li>{_e(t)}</li>" for t in avg["notes"])
                    + "</ul>")
    return rows


_JND_NAMES = {"edt_s": "EDT", "t20_s": "T20", "t30_s": "T30", "c50_db": "C50",
              "c80_db": "C80", "d50": "D50", "ts_s": "Ts"}


def _model_block(m: dict[str, Any]) -> list[str]:
    how = "fitted to" if m.get("how") == "fitted" else "given, compared with"
    out = [f"<p>A compact model ({how} position {_e(m.get('fitted_to', ''))}), as an I3DL2 "
           "listener reverb set:</p>", '<table class="kv">', "<tbody>"]
    units = m.get("units") or {}
    for k, v in (m.get("i3dl2") or {}).items():
        unit = units.get(k, "")
        txt = f"{v:.0f}" if unit in ("mB", "%", "Hz") else f"{v:.3f}"
        if k in (m.get("clamped") or {}):
            txt += f" (clamped to the range; wanted {m['clamped'][k]:.4g})"
        out.append(f'<tr><th>{_e(k)}</th><td class="num">{_e(txt)}'
                   f"{' ' + _e(unit) if unit else ''}</td></tr>")
    out += ["</tbody>", "</table>"]
    worst = m.get("max_abs_jnd") or {}
    parts = []
    for k, v in worst.items():
        name = _JND_NAMES.get(k, k)
        if _num(v) is None:
            parts.append(f"{name} {_DASH}")
        else:
            parts.append(f"{name} {v:.2f}" + (" (audible)" if v > 1.0 else ""))
    if parts:
        out.append("<p>Worst difference between model and measurement over the bands, in "
                   "ISO 3382-1 just-noticeable differences: " + _e(", ".join(parts)) + ".</p>")
    if _num(m.get("lsd_db")) is not None:
        out.append(f"<p>Coloration fit: log-spectral distance {m['lsd_db']:.2f} dB.</p>")
    if m.get("notes"):
        out.append('<ul class="notes">' + "".join(f"<li>{_e(t)}</li>" for t in m["notes"])
                   + "</ul>")
    return out


def _comparison_block(c: dict[str, Any]) -> list[str]:
    s = c.get("summary") or {}
    out = [f"<p>{_e(c['a'].get('label', 'A'))} against {_e(c['b'].get('label', 'B'))}: "
           f"<span class=\"verdict\">{_e(s.get('verdict', ''))}</span>.</p>"]
    flagged = [x for x in c.get("cells") or [] if x.get("verdict") == "audible difference"]
    if flagged:
        out += ["<table>", "<thead><tr><th>band (Hz)</th><th>figure</th><th>room</th>"
                "<th>model</th><th>difference (JND)</th><th>verdict</th></tr></thead>",
                "<tbody>"]
        keys = {"EDT": "edt_s", "T20": "t20_s", "T30": "t30_s", "C50": "c50_db",
                "C80": "c80_db", "D50": "d50", "Ts": "ts_s", "DRR": "drr_db", "STI": "sti"}
        for x in flagged:
            k = keys.get(x["parameter"], "")
            jnd = _num(x.get("jnd"))
            out.append(f"<tr><td>{_e(x.get('band_hz') or 'all')}</td><td>{_e(x['parameter'])}"
                       f'</td><td class="num">{format_value(x.get("a"), k)}</td>'
                       f'<td class="num">{format_value(x.get("b"), k)}</td>'
                       f'<td class="num">{_DASH if jnd is None else f"{jnd:+.1f}"}</td>'
                       f"<td>{_e(x['verdict'])}</td></tr>")
        out += ["</tbody>", "</table>"]
    return out


def _attenuation_block(doc: dict[str, Any]) -> list[str]:
    pairs = []
    for key, name, fmt in (("rolloff_factor", "rolloff factor (direct sound)", "{:.3f}"),
                           ("room_rolloff_factor", "RoomRolloffFactor", "{:.3f}"),
                           ("reference_distance_m", "reference distance", "{:g} m"),
                           ("critical_distance_m", "critical distance", "{:.2f} m")):
        if _num(doc.get(key)) is not None:
            pairs.append((name, fmt.format(doc[key])))
    if not pairs:
        return ["<p>The attenuation document holds no distance series.</p>"]
    return _kv_table(pairs)


def _section(sec: RoomSection, anchor: str) -> list[str]:
    out = [f'<section class="room" id="{anchor}">', f"<h2>Room: {_e(sec.name)}</h2>"]
    labels = ", ".join(p["label"] for p in sec.positions)
    rate = f"{sec.fs} Hz; " if sec.fs else ""
    out.append(f'<p class="meta">{_e(sec.source)}{"; " if sec.source else ""}{rate}'
               f"positions: {_e(labels)}</p>")
    for t in sec.notes:
        out.append(f'<p class="meta">{_e(t)}</p>')
    for p in sec.positions:
        take = f", take {p['take']}" if p.get("take") is not None else ""
        out.append(f"<h3>Position {_e(p['label'])}{_e(take)}</h3>")
        if not p.get("used", True):
            out.append(f"<p>Not used in the average: {_e(p.get('reason') or 'no reason given')}"
                       ".</p>")
        out.append("<p><strong>Measurement conditions.</strong></p>")
        if p["conditions"]:
            out += _kv_table(p["conditions"])
        else:
            out.append("<p>Not recorded (no sidecar with the conditions).</p>")
        doc = p.get("figures")
        if doc:
            out.append("<p><strong>ISO 3382-1 figures per octave band.</strong> A dash marks a "
                       "figure that could not be measured honestly; the flags say why.</p>")
            out += _band_table(doc)
            out.append("<p><strong>Single numbers and speech intelligibility.</strong></p>")
            out += _single_numbers(doc)
    if sec.average is not None:
        out.append("<h3>Position average (ISO 3382-2)</h3>")
        out += _average_table(sec.average)
    if sec.model is not None:
        out.append("<h3>Model</h3>")
        out += _model_block(sec.model)
    if sec.comparison is not None:
        out.append("<h3>Comparison: room against model</h3>")
        out += _comparison_block(sec.comparison)
    if sec.attenuation is not None:
        out.append("<h3>Attenuation</h3>")
        out += _attenuation_block(sec.attenuation)
    if sec.images:
        out.append("<h3>Plots</h3>")
    for caption, png in sec.images:
        data = base64.b64encode(png).decode("ascii")
        out.append(f'<figure><img src="data:image/png;base64,{data}" alt="{_e(caption)}">'
                   f"<figcaption>{_e(caption)}</figcaption></figure>")
    out.append("</section>")
    return out


def render_html(sections: Sequence[RoomSection], *, title: str | None = None,
                generated_utc: str | None = None) -> str:
    """The whole report as one self-contained HTML5 document.

    Parameters
    ----------
    sections : sequence of RoomSection
        One per room, in the order shown.
    title : str, optional
        The document's title (default: "Room acoustics report: " and the room's name, or the
        number of rooms).
    generated_utc : str, optional
        When it was made, shown under the title (default: now, to the second).

    Returns
    -------
    str
        The document: ``<!DOCTYPE html>``, inline CSS with an ``@media print`` style, images
        as ``data:image/png;base64,`` URIs, no script and no external reference.

    Raises
    ------
    ParameterError
        If ``sections`` is empty.
    """
    from measure._version import __version__

    if not sections:
        raise ParameterError("a report needs at least one room; give an IR, a take, a room "
                             "folder or a results folder")
    if title is None:
        title = ("Room acoustics report: " + sections[0].name if len(sections) == 1 else
                 f"Room acoustics report: {len(sections)} rooms")
    when = generated_utc or datetime.now(UTC).strftime("%Y-%m-%d %H:%M:%S UTC")
    out = ["<!DOCTYPE html>", '<html lang="en">', "<head>", '<meta charset="utf-8">',
           '<meta name="viewport" content="width=device-width, initial-scale=1">',
           f"<title>{_e(title)}</title>", "<style>", _CSS, "</style>", "</head>", "<body>",
           "<header>", f"<h1>{_e(title)}</h1>",
           f'<p class="meta">Made by measure {_e(__version__)} on {_e(when)}.</p>',
           "</header>"]
    anchors = [f"room-{i + 1}" for i in range(len(sections))]
    out += ['<nav class="index">', "<h2>Rooms</h2>", "<ol>"]
    out += [f'<li><a href="#{a}">{_e(s.name)}</a> ({len(s.positions)} position'
            f"{'s' if len(s.positions) != 1 else ''})</li>" for a, s in zip(anchors, sections,
                                                                            strict=True)]
    out += ["</ol>", "</nav>"]
    out += ['<aside class="safety">', "<h2>Safety: loud sweeps</h2>", "<ul>"]
    out += [f"<li>{_e(t)}</li>" for t in SAFETY_CAUTIONS]
    out += ["</ul>", "</aside>", "<main>"]
    for a, s in zip(anchors, sections, strict=True):
        out += _section(s, a)
    out += ["</main>", "</body>", "</html>", ""]
    return "\n".join(out)


def write_html(path: str | os.PathLike[str], document: str) -> Path:
    """Write ``document`` to ``path`` atomically (a temporary file in the same folder, then a
    rename), as UTF-8.

    Raises
    ------
    ParameterError
        If ``path`` does not end in .html.
    AudioFileError
        If the folder cannot be written.
    """
    from measure.audio_io import atomic_writer

    p = check_html_path(path)
    with atomic_writer(p, "wb") as fh:
        fh.write(document.encode("utf-8"))
    return p
