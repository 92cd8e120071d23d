"""``measure analyze INPUT.wav [--sweep SWEEP.wav]``: room figures per band, single numbers, STI."""

from __future__ import annotations

import argparse
from typing import Any

NAME = "analyze"
HELP = "room figures per band (EDT, T20, T30, C50, C80, D50, Ts, DRR) and the STI"
DESCRIPTION = """\
Analyse an impulse response, or a capture when --sweep names the sweep that was played (the
impulse response is then recovered first: latency, clock drift and distortion are removed).

Per octave (or third-octave) band: EDT, T20 and T30 (T20/T30 with their standard uncertainty,
ISO 3382-2 Annex A), C50, C80, D50, centre time Ts, direct-to-reverberant ratio and the
peak-to-noise ratio; then the single numbers over the 500 Hz and 1 kHz octaves
(ISO 3382-1) and the speech transmission index (IEC 60268-16:2020, indirect method).

The STI assumes no background noise unless --speech-spl and --noise-spl give the speech and
background-noise octave levels at the listener (dB SPL, 125 Hz-8 kHz: seven comma-separated
values or one for all). Then the noise lowers the modulation (factor Is/(Is+In)) and the
IEC 60268-16:2020 Annex A auditory masking (slope from the speech level of the octave below)
and absolute reception threshold (46, 27, 12, 6.5, 7.5, 8, 12 dB SPL) are applied, so the
levels must be absolute: e.g. --speech-spl 60 --noise-spl 45.
A figure that cannot be measured honestly is shown as '—' (null in JSON) and a note under
the table says why.

--json prints one JSON object on stdout: sample_rate, bands (center_hz, label, edt_s, t20_s,
t30_s, c50_db, c80_db, d50, ts_s, drr_db, peak_to_noise_db, flags), broadband (same keys),
single_numbers, sti, and for a capture latency_s and drift_ppm; more under "details"."""


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("input", metavar="INPUT.wav",
                   help="an impulse response, or a capture when --sweep is given")
    p.add_argument("--sweep", metavar="SWEEP.wav", default=None,
                   help="the sweep that was played (its .json beside it): INPUT is then a "
                        "capture and its impulse response is recovered first")
    p.add_argument("--bands", choices=("octave", "third"), default="octave",
                   help="octave bands 63 Hz-8 kHz or third-octave bands 50 Hz-10 kHz "
                        "(default octave; the top bands are left out if the sample rate "
                        "cannot carry them)")
    p.add_argument("--channel", type=int, default=1, metavar="N",
                   help="channel of INPUT to analyse, 1-based (default 1)")
    p.add_argument("--speech-spl", metavar="DB[,DB...]", default=None,
                   help="speech octave levels at the listener, dB SPL, for the STI: one value "
                        "for all seven octaves 125 Hz-8 kHz or seven comma-separated values; "
                        "needs --noise-spl")
    p.add_argument("--noise-spl", metavar="DB[,DB...]", default=None,
                   help="background-noise octave levels at the listener, dB SPL (one value or "
                        "seven, as --speech-spl); with both, the STI includes the noise and "
                        "the IEC 60268-16:2020 Annex A auditory masking and reception "
                        "threshold")
    p.add_argument("--json", action="store_true",
                   help="print the figures as one JSON object on stdout")
    p.add_argument("--plot", metavar="FILE.png", default=None,
                   help="also draw the impulse response, each band's decay curve with its "
                        "EDT/T20/T30 fit ranges, and the decay times per band into a PNG "
                        "(needs matplotlib; stdout is unchanged)")


def run(args: argparse.Namespace) -> int:
    from measure import audio_io
    from measure.cli._common import channel_index, info, print_json, warn
    from measure.errors import ParameterError
    from measure.parameters import analyze_ir

    speech_spl = _octave_levels(args.speech_spl, "--speech-spl")
    noise_spl = _octave_levels(args.noise_spl, "--noise-spl")
    if (speech_spl is None) != (noise_spl is None):
        given, missing = (("--speech-spl", "--noise-spl") if noise_spl is None
                          else ("--noise-spl", "--speech-spl"))
        raise ParameterError(f"{given} needs {missing} too: the STI's noise and masking "
                             "corrections use both levels; give both, or neither")
    if args.plot is not None:  # before any work, so nothing is written when it cannot be drawn
        from measure.report import check_png_path, require_matplotlib

        check_png_path(args.plot, option="--plot")
        require_matplotlib()
    audio = audio_io.read_audio(args.input)
    ch = channel_index(args.channel, audio.n_channels, option="--channel", source="INPUT")
    capture = None
    if args.sweep is not None:
        from measure.deconvolve import recover_ir

        sweep = audio_io.read_sweep(args.sweep)
        if audio.fs != sweep.fs:
            raise ParameterError(
                f"the capture is at {audio.fs} Hz but the sweep at {sweep.fs} Hz; record at "
                "the sweep's rate, or make a sweep at the capture's rate")
        capture = recover_ir(audio.x, sweep, channels=[ch])
        for w in capture.warnings:
            warn(w)
        from measure.capture import dc_offset_warning, dc_offsets_dbfs

        if (w := dc_offset_warning(dc_offsets_dbfs(audio.x[ch])[0],
                                   f"channel {ch + 1}")) is not None:
            warn(w)
        h = capture.h[0]
        context = capture.context(0)
    else:
        h = audio.x[ch]
        context = response_context(args.input, h, audio.fs, ch)
    figs = analyze_ir(h, audio.fs, bands=args.bands, speech_spl_db=speech_spl,
                      noise_spl_db=noise_spl, context=context)
    doc = figs.to_dict()
    if capture is not None:
        doc["latency_s"] = capture.latency_s[0]
        doc["drift_ppm"] = capture.drift_ppm
        doc["details"]["capture"] = capture.to_dict()
    if args.plot is not None:
        from pathlib import Path

        from measure.report import write_analysis_plot

        what = "capture" if capture is not None else "impulse response"
        path = write_analysis_plot(args.plot, h, audio.fs, figs,
                                   f"{Path(args.input).name} ({what}, channel {args.channel})")
        info(f"plot written to {path}")
    if args.json:
        print_json(doc)
    else:
        print(format_report(doc, source=str(args.input), channel=args.channel,
                            n_channels=audio.n_channels, n_samples=h.shape[-1],
                            sweep=args.sweep))
    return 0


def response_context(path: str, h, fs: int, channel: int):
    """What an impulse-response file's sidecar says about its measurement (sweep range, a cut
    tail), or None; refuses a file that is a take or a sweep, by its sidecar or its content.

    Raises
    ------
    ParameterError
        If the file is a recording of a sweep (a take) or a sweep file: an impulse response
        must be recovered from it first.
    """
    from measure import audio_io
    from measure.deconvolve import IR_FORMAT, ResponseContext, sweep_recording_evidence
    from measure.errors import ParameterError
    from measure.session import TAKE_FORMAT
    from measure.sweep import SIDECAR_FORMAT

    advice = "give --sweep SWEEP.wav (the sweep that was played) to recover its response first"
    side = audio_io.sidecar_path(path)
    doc = audio_io.read_sidecar(path) or {}
    fmt = doc.get("format") if isinstance(doc, dict) else None
    if fmt == TAKE_FORMAT:
        named = doc.get("sweep_file")
        raise ParameterError(
            f"{path}: this is a recording of a sweep (its sidecar {side.name} says it is a "
            f"take); {advice}" + (f", here {named}" if named else ""))
    if fmt == SIDECAR_FORMAT:
        raise ParameterError(
            f"{path}: this is a sweep file, what is played (its sidecar {side.name} says so), "
            "not a room's response; play it in the room, record it, and analyse the recording "
            "with --sweep")
    evidence = sweep_recording_evidence(h, fs)
    if evidence is not None:
        raise ParameterError(f"{path}: this is a recording of a sweep ({evidence}); {advice}")
    if fmt != IR_FORMAT:
        return None
    chans = doc.get("channels") if isinstance(doc.get("channels"), list) else []
    if channel < len(chans) and isinstance(chans[channel], dict) \
            and isinstance(chans[channel].get("context"), dict):
        return ResponseContext.from_dict(chans[channel]["context"])
    sweep = doc.get("sweep") if isinstance(doc.get("sweep"), dict) else {}
    return ResponseContext.from_dict({"f1_hz": sweep.get("f1_hz"), "f2_hz": sweep.get("f2_hz")})


def _octave_levels(text: str | None, option: str) -> float | list[float] | None:
    """``"60"`` or ``"62,61,58,55,51,47,43"`` -> one level or 7 finite levels in dB SPL."""
    import math

    from measure.errors import ParameterError

    if text is None:
        return None
    parts = [p.strip() for p in text.split(",")]
    try:
        vals = [float(p) for p in parts]
    except ValueError:
        vals = []
    if len(vals) not in (1, 7) or not all(math.isfinite(v) for v in vals):
        raise ParameterError(
            f"{option} {text!r} is not one level or seven comma-separated levels in dB SPL "
            "(octaves 125 Hz-8 kHz), e.g. 60 or 62,61,58,55,51,47,43")
    return vals[0] if len(vals) == 1 else vals


# ---------------------------------------------------------------------------------------------
# Text rendering (no numerics: formatting of the contract document only)

_DASH = "—"


def _num(v: Any, fmt: str, scale: float = 1.0) -> str:
    return _DASH if v is None else format(v * scale, fmt)


def _t_with_u(v: Any, u: Any) -> str:
    if v is None:
        return _DASH
    return f"{v:.2f} ±{u:.2f}" if u is not None else f"{v:.2f}"


def format_report(doc: dict[str, Any], *, source: str, channel: int, n_channels: int,
                  n_samples: int, sweep: str | None) -> str:
    """The human-readable report: header, per-band table, notes, single numbers, STI."""
    fs = doc["sample_rate"]
    det = doc["details"]
    lines = []
    what = f"capture of {sweep}" if sweep else "impulse response"
    lines.append(f"{source}: {what}, channel {channel} of {n_channels}, {fs} Hz, "
                 f"{n_samples / fs:.2f} s")
    if sweep:
        cap = det.get("capture", {})
        lines.append(f"  latency {doc['latency_s'] * 1000:.2f} ms, clock drift "
                     f"{doc['drift_ppm']:+.1f} ppm, {cap.get('n_sweeps_averaged', 1)} sweep(s) "
                     f"averaged, IR peak-to-noise {cap.get('peak_to_noise_db', float('nan')):.0f} dB")
    kind = {"octave": "Octave", "third": "Third-octave"}.get(det["band_kind"], "Custom")
    lines.append(f"{kind} bands (IEC 61260-1 class 1); decay from time-reversed filtering, "
                 f"energy ratios from causal filtering; onset at {det['onset_s'] * 1000:.1f} ms")
    lines.append("")
    head = ("Band", "EDT", "T20", "T30", "C50", "C80", "D50", "Ts", "DRR", "PNR")
    units = ("Hz", "s", "s", "s", "dB", "dB", "", "ms", "dB", "dB")
    rows = []
    details = {d["label"]: d for d in det["bands"]}
    details["broadband"] = det["broadband"]
    for b in doc["bands"] + [doc["broadband"]]:
        d = details.get(b["label"], {})
        rows.append((
            b["label"] if b["label"] != "broadband" else "all",
            _num(b["edt_s"], ".2f"),
            _t_with_u(b["t20_s"], d.get("t20_uncertainty_s")),
            _t_with_u(b["t30_s"], d.get("t30_uncertainty_s")),
            _num(b["c50_db"], "+.1f"),
            _num(b["c80_db"], "+.1f"),
            _num(b["d50"], ".2f"),
            _num(b["ts_s"], ".0f", 1000.0),
            _num(b["drr_db"], "+.1f"),
            _num(b["peak_to_noise_db"], ".0f"),
        ))
    widths = [max(len(head[i]), len(units[i]) + 2, *(len(r[i]) for r in rows))
              for i in range(len(head))]

    def fmt(cells: tuple[str, ...]) -> str:
        return "  " + "  ".join(c.rjust(w) for c, w in zip(cells, widths, strict=True))

    lines.append(fmt(head))
    lines.append(fmt(tuple(f"({u})" if u else "" for u in units)))
    lines.append("  " + "─" * (sum(widths) + 2 * (len(widths) - 1)))
    for r in rows[:-1]:
        lines.append(fmt(r))
    lines.append("  " + "─" * (sum(widths) + 2 * (len(widths) - 1)))
    lines.append(fmt(rows[-1]) + "   (broadband)")
    lines.append("  ± standard uncertainty of T20/T30 from bandwidth and decay time "
                 "(ISO 3382-2 Annex A); PNR peak-to-noise ratio")
    notes = []
    for b in doc["bands"] + [doc["broadband"]]:
        for f in b["flags"]:
            notes.append(f)
    for f in det.get("flags", []):
        notes.append(f)
    if notes:
        lines.append("")
        lines.append("Notes (why a value is '—', and what to watch):")
        lines.extend(f"  - {n}" for n in notes)
    sn = doc["single_numbers"]
    lines.append("")
    lines.append("Single numbers (mean of the 500 Hz and 1 kHz octaves, ISO 3382-1):")
    t_from = f" (from {sn['t_mid_from']})" if sn.get("t_mid_from") else ""
    lines.append(
        f"  T_mid {_num(sn['t_mid_s'], '.2f')} s{t_from}   EDT_mid {_num(sn['edt_mid_s'], '.2f')} s"
        f"   C50 {_num(sn['c50_mid_db'], '+.1f')} dB   C80 {_num(sn['c80_mid_db'], '+.1f')} dB"
        f"   D50 {_num(sn['d50_mid'], '.2f')}   Ts {_num(sn['ts_mid_s'], '.0f', 1000.0)} ms")
    for f in sn.get("flags", []):
        lines.append(f"  - {f}")
    sti = det.get("sti")
    if doc["sti"] is None or sti is None:
        lines.append("STI: —")
    else:
        mti = "  ".join(f"{k} {v:.2f}" for k, v in sti["mti"].items())
        if sti.get("masking_and_threshold"):
            noise = ("with the given speech and noise levels, auditory masking and reception "
                     "threshold")
        elif sti.get("snr_db") is None:
            noise = "no background noise given"
        else:
            noise = "with the given speech-to-noise ratio"
        lines.append(f"STI {doc['sti']:.2f} ({sti['rating']}; IEC 60268-16:2020 indirect "
                     f"method, male weights, {noise})")
        lines.append(f"  MTI per octave: {mti}")
        for f in sti.get("flags", []):
            lines.append(f"  - {f}")
    return "\n".join(lines)
