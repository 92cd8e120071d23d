"""``measure demo``: the whole job on the built-in invented building, no hardware needed."""

from __future__ import annotations

import argparse
from pathlib import Path

NAME = "demo"
HELP = "run the whole job on the built-in demo building (no audio hardware needed)"
DESCRIPTION = """\
Measure the spaces of an invented building with virtual equipment (a laptop playing a sweep,
a USB microphone with its own clock): write the sweep, the raw takes, the recovered impulse
responses, the room figures, the fitted models, the comparisons with each room's model and
description, a distance and direction series in the canteen, the whole level through `measure
batch` and its report, and print a summary (also written to summary.txt). Everything goes
into one folder (measure-demo, or measure-demo-2, ... if it exists; or --out DIR)."""


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("--out", metavar="DIR", default=None,
                   help="folder to write into (default: a new ./measure-demo[-N]); an existing "
                        "folder must be empty unless --force")
    p.add_argument("--force", action="store_true",
                   help="write into a non-empty --out folder, replacing an earlier demo's files")


def _new_folder(out: str | None) -> Path:
    if out is not None:
        return Path(out)
    base = Path("measure-demo")
    if not base.exists():
        return base
    n = 2
    while Path(f"measure-demo-{n}").exists():
        n += 1
    return Path(f"measure-demo-{n}")


def run(args: argparse.Namespace) -> int:
    import numpy as np

    from measure import audio_io, session
    from measure.capture import input_stats
    from measure.cli._common import info
    from measure.cli.cmd_capture import analyse_take
    from measure.deconvolve import recover_ir
    from measure.demo import BUILDING, DEMO_SWEEP, DEMO_TAKES, demo_recording
    from measure.errors import AudioFileError
    from measure.model.fit import model_demo
    from measure.parameters import analyze_ir
    from measure.sweep import make_sweep

    root = _new_folder(args.out)
    if root.is_dir() and any(root.iterdir()) and not args.force:
        raise AudioFileError(f"{root} is not empty: the demo would replace what is in it; give "
                             "a new or empty folder, or --force to replace an earlier demo")
    if root.exists() and not root.is_dir():
        raise AudioFileError(f"{root} is a file; give --out a folder")
    try:
        root.mkdir(parents=True, exist_ok=True)
    except OSError as err:
        raise AudioFileError(f"cannot create the folder {root} ({err.strerror or err}); give "
                             "--out a folder you may write to") from err
    info(f"{BUILDING}: measuring {len(DEMO_TAKES)} spaces with virtual equipment into {root}/")
    sweep = make_sweep(DEMO_SWEEP)
    sweep_wav, _ = audio_io.write_pair(root / "sweeps" / "demo-sweep.wav", sweep.program,
                                       sweep.fs, sweep.sidecar(), subtype="FLOAT")
    sweep_sha256 = audio_io.file_sha256(sweep_wav)  # one file, hashed once for every take
    captures = root / "captures"
    rows = []
    for i, t in enumerate(DEMO_TAKES):
        info(f"  {t.room.name}: recording the take, recovering the response, analysing ...")
        _, y = demo_recording(i, sweep.program, sweep.fs)
        take = session.save_take(captures, t.room.name, t.position, y, sweep.fs, {
            "source": "virtual (measure demo)", "building": BUILDING,
            "description": t.description, "sweep_file": str(sweep_wav),
            "sweep_sha256": sweep_sha256, "distance_m": t.distance_m,
            "virtual_equipment": {"latency_s": t.latency_s, "drift_ppm": t.drift_ppm,
                                  "hd2_percent": t.hd2_percent, "hd3_percent": t.hd3_percent,
                                  "noise_dbfs": t.noise_dbfs, "noise_kind": t.noise_kind,
                                  "input_gain_db": t.gain_db}})
        ir = recover_ir(y, sweep)
        ir_wav = root / "irs" / f"{t.room.name}-{t.position}.wav"
        audio_io.write_ir(ir_wav, ir, sweep=sweep, sources={
            "capture": str(take.wav), "capture_sha256": audio_io.file_sha256(take.wav),
            "sweep": str(sweep_wav), "sweep_sha256": sweep_sha256})
        stem = f"{t.room.name}-{t.position}"
        h = ir.h[0]
        figures = analyze_ir(h, ir.fs, context=ir.context(0))
        doc = figures.to_dict()
        doc.update(latency_s=ir.latency_s[0], drift_ppm=ir.drift_ppm)
        audio_io.write_json(root / "figures" / f"{stem}.json", doc)
        # the take judged as `measure capture` judges one (the verdict goes in its sidecar)
        y2 = y[np.newaxis, :]
        verdict = analyse_take(
            y2, sweep.fs, sweep,
            stats=input_stats(y2, slice(sweep.spec.n_lead // 6, sweep.spec.n_lead)),
            labels=["microphone"], input_channels=[0], loopback=None, n_xruns=0,
            same_device=False, ir=ir, figures=[{"file_channel": 1, **doc}])["verdict"]
        session.update_sidecar(take, verdict=verdict)

        info(f"  {t.room.name}: fitting the compact model, rendering, auralizing ...")
        md = model_demo(h, ir.fs, source={"file": ir_wav.name, "room": t.room.name,
                                          "position": t.position, "building": BUILDING})
        audio_io.write_json(root / "models" / f"{stem}.json", md.result.model.to_dict())
        audio_io.write_audio(root / "models" / f"{stem}-model-ir.wav", md.model_ir, ir.fs)
        if i == 0:
            audio_io.write_audio(root / "listen" / "dry.wav", md.dry, ir.fs)
        audio_io.write_audio(root / "listen" / f"{stem}-measured.wav", md.wet_measured, ir.fs)
        audio_io.write_audio(root / "listen" / f"{stem}-modelled.wav", md.wet_modelled, ir.fs)
        audio_io.write_json(root / "models" / f"{stem}-report.json",
                            {"report": md.result.report.to_dict(), "i3dl2": md.i3dl2.to_dict()})
        modelled = analyze_ir(md.model_ir, ir.fs)
        plots = _plots(root / "plots", stem, h, ir.fs, figures, modelled, md, t)
        comparisons = _comparisons(root, stem, t.room.name, h, ir.fs, figures, md.model_ir,
                                   modelled)
        rows.append((t, ir, doc, md, plots, verdict, comparisons))
    series = _series(root, captures, sweep, sweep_wav, sweep_sha256)
    level = _level(root, captures)
    text = (_summary(rows, root) + "\n\n" + _comparison_summary(rows) + "\n\n" + series
            + "\n\n" + level)
    audio_io.write_text(root / "summary.txt", text + "\n")
    print(text)
    return 0


def _level(root: Path, captures: Path) -> str:
    """The whole captures tree through `measure batch` into results/, and the report of it
    (report.html, with its index of rooms); returns the lines for the summary."""
    import os

    from measure.batch import run_batch
    from measure.cli._common import info, warn
    from measure.errors import MissingDependencyError

    info("  the whole level: `measure batch` over the captures tree, then the report ...")
    result = run_batch(captures, root / "results", jobs=min(2, os.cpu_count() or 1))
    work = result.level["work"]
    lines = [f"The whole level (`measure batch {captures} --out {root / 'results'}`): "
             f"{len(result.level['rooms'])} rooms, {work['recovered']} takes recovered, "
             f"{len(result.level['left_out'])} left out; results/level.json holds each room's "
             "average, model, I3DL2 set, curves and engine-ready files"]
    try:
        from measure.cli.cmd_report import _from_results
        from measure.report.html import render_html, write_html

        path = write_html(root / "report.html",
                          render_html(_from_results(root / "results", True),
                                      title="Larkspur Yard Depot (invented): the demo level"))
        lines.append(f"The report: {path} (one self-contained page with an index of the rooms; "
                     "open it in a browser, print it to PDF)")
    except MissingDependencyError as err:
        warn(f"no report: {err}")
    lines.append(f"This summary is also in {root / 'summary.txt'}.")
    return "\n".join(lines)


def _comparisons(root: Path, stem: str, room: str, h, fs: int, figures, model_ir, modelled
                 ) -> list[tuple[str, dict]]:
    """The measured room against its fitted model and against its room description (and, for
    the office, against the variant with the carpet taken out: an audible difference on
    purpose); each comparison written to comparisons/ as `measure compare --json` writes it."""
    from measure import audio_io
    from measure.compare import compare_sides, side_from_figures
    from measure.parameters import analyze_ir
    from measure.predict import load_room, predict

    measured = side_from_figures(figures, label=f"{stem} (measured)", kind="impulse response",
                                 h=h)
    out = []
    model = side_from_figures(modelled, label=f"{stem} (model)", kind="model", h=model_ir)
    out.append(("its fitted model", compare_sides(measured, model).to_dict()))
    names = [(room, "its room description")]
    if room == "office":
        names.append(("office-no-carpet", "the office with its carpet taken out"))
    for name, what in names:
        path = Path(__file__).resolve().parents[1] / "data" / "rooms" / f"{name}.toml"
        pred = predict(load_room(path), fs)
        side = side_from_figures(analyze_ir(pred.h, fs), label=path.name,
                                 kind="room description", h=pred.h)
        out.append((what, compare_sides(measured, side).to_dict()))
    for what, doc in out:
        tag = what.replace("its ", "").replace(" ", "-")
        audio_io.write_json(root / "comparisons" / f"{stem}-vs-{tag}.json", doc)
    return out


def _comparison_summary(rows) -> str:
    lines = ["Measured against modelled and predicted (`measure compare`): T30 difference per "
             "octave in ISO 3382-1 just-noticeable differences (JND, 5 %), and how many of all "
             "compared figures differ audibly (by more than 1 JND)"]
    for row in rows:
        t, comparisons = row[0], row[6]
        for what, doc in comparisons:
            t30 = " ".join(f"{c['band_hz']} {'—' if c['jnd'] is None else format(c['jnd'], '+.1f')}"
                           for c in doc["cells"] if c["parameter"] == "T30")
            s = doc["summary"]
            lines.append(f"  {t.room.name:<11} vs {what}:")
            lines.append(f"    T30 (JND): {t30};  {s['n_audible']} of {s['n_compared']} "
                         "figures audibly different")
    lines.append("  The office without its carpet is the audible difference shown on purpose: its "
                 "decay is several JNDs longer from 500 Hz up.")
    return "\n".join(lines) + "\n"


def _series(root: Path, captures: Path, sweep, sweep_wav: Path, sweep_sha256: str) -> str:
    """The canteen's distance and angle series: its takes filed as `measure capture` files
    them, the curves fitted from the room folder as `measure attenuation` fits them, its model
    with the measured RoomRolloffFactor; returns the text for the summary."""
    from measure import audio_io, session
    from measure.attenuation import analyze_series
    from measure.cli._common import info, warn
    from measure.cli.cmd_attenuation import _from_room_folder, format_report
    from measure.demo import BUILDING, CANTEEN, DEMO_SERIES, demo_series_recording
    from measure.errors import MissingDependencyError
    from measure.model.fit import fit_with_i3dl2

    info(f"  {CANTEEN.name}: recording {len(DEMO_SERIES)} positions for distance and "
         "direction ...")
    for i, p in enumerate(DEMO_SERIES):
        y = demo_series_recording(i, sweep.program, sweep.fs)
        session.save_take(captures, CANTEEN.name, p.position, y, sweep.fs, {
            "source": "virtual (measure demo)", "building": BUILDING,
            "description": f"canteen, loudspeaker at one end, microphone {p.distance_m:g} m "
                           f"away at {p.angle_deg:g} degrees off its axis",
            "sweep_file": str(sweep_wav), "sweep_sha256": sweep_sha256,
            "distance_m": p.distance_m, "angle_deg": p.angle_deg,
            "temperature_c": CANTEEN.temperature_c,
            "humidity_percent": CANTEEN.humidity_percent})
    info(f"  {CANTEEN.name}: fitting the distance and direction curves ...")
    got = _from_room_folder(captures / CANTEEN.name, None)
    result = analyze_series(got["h"], got["fs"], distances_m=got["distances"],
                            angles_deg=got["angles"], labels=got["labels"], **got["air"])
    doc = result.to_dict(rate=got["fs"])
    audio_io.write_json(root / "attenuation" / f"{CANTEEN.name}.json", doc)
    ref = result.distance.reference
    h_ref = got["h"][got["labels"].index(ref.label)]
    res, _ = fit_with_i3dl2(h_ref, got["fs"], source={"room": CANTEEN.name,
                                                      "position": ref.label,
                                                      "building": BUILDING})
    model = res.model.with_room_rolloff(result.distance.room_law.rolloff_factor)
    audio_io.write_json(root / "models" / f"{CANTEEN.name}-{ref.label}.json", model.to_dict())
    try:
        from measure.report import write_attenuation_plot

        write_attenuation_plot(root / "plots" / f"{CANTEEN.name}-attenuation.png", doc,
                               title=f"{CANTEEN.name}: distance and direction")
    except MissingDependencyError as err:
        warn(f"no attenuation plot: {err}")
    return (f"{CANTEEN.name}: distance and direction (`measure attenuation "
            f"{captures / CANTEEN.name}`)\n" + format_report(doc)
            + f"\n  RoomRolloffFactor {model.i3dl2['values']['RoomRolloffFactor']:.3f} written "
            f"into models/{CANTEEN.name}-{ref.label}.json; curves in attenuation/"
            f"{CANTEEN.name}.json")


def _plots(folder: Path, stem: str, h, fs: int, figures, modelled, md, t) -> bool:
    """The analysis and model-fit figures; skipped with a note when matplotlib is missing."""
    from measure.cli._common import warn
    from measure.errors import MissingDependencyError

    try:
        from measure.report import write_analysis_plot, write_model_plot

        write_analysis_plot(folder / f"{stem}.png", h, fs, figures,
                            title=f"{t.room.name}, {t.position}: measured")
        write_model_plot(folder / f"{stem}-model.png", figures, modelled, md.result.report,
                         title=f"{t.room.name}, {t.position}: measured vs model")
    except MissingDependencyError as err:
        warn(f"no plots: {err}")
        return False
    return True


def _fmt(v, spec: str, unit: str = "") -> str:
    return "—" if v is None else f"{v:{spec}}{unit}"


def _summary(rows, root: Path) -> str:
    from measure.cli._common import signed
    from measure.demo import BUILDING

    head = (f"{'space':<11} {'position':<10} {'T_mid':>6} {'EDT_mid':>7} {'C80':>6} "
            f"{'D50':>5} {'STI':>5} {'PNR':>6} {'drift':>9} {'model':>9} "
            f"{'I3DL2 DecayTime':>15}  verdict")
    lines = [f"{BUILDING} (invented), measured with virtual equipment", "", head,
             "-" * len(head)]
    plotted = False
    notes: list[str] = []
    for t, ir, doc, md, plots, verdict, _ in rows:
        sn = doc.get("single_numbers", {})
        worst = md.result.report.max_abs_jnd()
        worst_t = max((abs(v) for k, v in worst.items()
                       if k in ("edt_s", "t30_s") and v is not None), default=None)
        decay = md.i3dl2.to_dict().get("values", {}).get("DecayTime")
        plotted = plotted or plots
        good = verdict["verdict"] == "good"
        lines.append(
            f"{t.room.name:<11} {t.position:<10} {_fmt(sn.get('t_mid_s'), '6.2f')} "
            f"{_fmt(sn.get('edt_mid_s'), '7.2f')} {_fmt(sn.get('c80_mid_db'), '6.1f')} "
            f"{_fmt(sn.get('d50_mid'), '5.2f')} {_fmt(doc.get('sti'), '5.2f')} "
            f"{ir.peak_to_noise_db[0]:6.1f} {signed(ir.drift_ppm):>5} ppm "
            f"{_fmt(worst_t, '4.1f')} JND {_fmt(decay, '13.2f')} s  "
            f"{'GOOD' if good else 'REDO'}")
        for r in verdict["reasons"]:
            notes.append(f"  {t.room.name}: REDO: {r}")
        missing = [f for b in doc["bands"] for f in b["flags"]
                   if any(w in f for w in ("needs", "left out", "cannot be measured",
                                           "outside the sweep", "weaker"))]
        if missing:
            notes.append(f"  {t.room.name}: what is not measurable, and why:")
            notes.extend(f"    - {f}" for f in missing[:8])
            if len(missing) > 8:
                notes.append(f"    ... {len(missing) - 8} more in figures/"
                             f"{t.room.name}-{t.position}.json")
    lines += ["",
              "T_mid, EDT_mid: seconds, mean of 500 Hz and 1 kHz; C80: dB; PNR: the impulse "
              "response's peak-to-noise ratio, dB;",
              "model: the fitted model's worst EDT/T30 difference from the measurement, in "
              "ISO 3382-1 just-noticeable differences (JND);",
              "verdict: as `measure capture` judges a take (GOOD, or REDO with what to change)."]
    if notes:
        lines += ["", *notes]
    lines += ["",
              f"Look in {root}/:",
              "  sweeps/    what was played (WAV + sidecar)",
              "  captures/  the raw takes and their sidecars (the four rooms' with the verdict), as `measure "
              "capture` files them",
              "  irs/       recovered impulse responses (32-bit float) + latency, drift, distortion",
              "  figures/   per-band room figures (the `measure analyze --json` document)",
              "  models/    compact models (MODEL.json), their renders and fit reports with I3DL2",
              "  listen/    dry.wav, and each space measured vs modelled: compare by ear",
              "  attenuation/  the canteen's distance and direction curves (the `measure "
              "attenuation --json` document)",
              "  comparisons/  each room measured against its model and its room description "
              "(`measure compare --json`)",
              "  results/   the whole level through `measure batch` (level.json, engine-ready "
              "files per room)",
              "  report.html  the report of the level (`measure report`)"]
    if plotted:
        lines.append("  plots/     decay curves per band and measured-vs-model charts (PNG)")
    lines.append(f"Per-band tables: measure analyze {root}/irs/<space>-<position>.wav")
    return "\n".join(lines)
