"""``measure demo``: the whole job on the built-in invented building, no hardware needed."""

from __future__ import annotations

import argparse
from pathlib import Path

NAME = "demo"
HELP = "run the whole job on the built-in demo building (no audio hardware needed)"
DESCRIPTION = """\
Measure the three spaces of an invented building with virtual equipment (a laptop playing a
sweep, a USB microphone with its own clock): write the sweep, the raw takes, the recovered
impulse responses and the room figures, and print a summary. Everything goes into one folder
(measure-demo, or measure-demo-2, ... if it exists; or --out DIR)."""


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("--out", metavar="DIR", default=None,
                   help="folder to write into (default: a new ./measure-demo[-N])")


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
    from measure import audio_io, session
    from measure.cli._common import info
    from measure.deconvolve import recover_ir
    from measure.demo import BUILDING, DEMO_SWEEP, DEMO_TAKES
    from measure.parameters import analyze_ir
    from measure.sweep import make_sweep
    from measure.virtual import room_ir, virtual_take

    root = _new_folder(args.out)
    root.mkdir(parents=True, exist_ok=True)
    info(f"{BUILDING}: measuring {len(DEMO_TAKES)} spaces with virtual equipment into {root}/")
    sweep = make_sweep(DEMO_SWEEP)
    sweep_wav = audio_io.write_audio(root / "sweeps" / "demo-sweep.wav", sweep.program,
                                     sweep.fs, subtype="FLOAT")
    audio_io.write_json(audio_io.sidecar_path(sweep_wav), sweep.sidecar())
    captures = root / "captures"
    rows = []
    for i, t in enumerate(DEMO_TAKES):
        info(f"  {t.room.name}: recording the take, recovering the response, analysing ...")
        h_true = room_ir(t.room, sweep.fs, seed=100 + i)
        y = virtual_take(sweep.program, sweep.fs, h_true, latency_s=t.latency_s,
                         drift_ppm=t.drift_ppm, hd2_percent=t.hd2_percent,
                         hd3_percent=t.hd3_percent, noise_dbfs=t.noise_dbfs, extra_s=0.5,
                         seed=200 + i)
        take = session.save_take(captures, t.room.name, t.position, y, sweep.fs, {
            "source": "virtual (measure demo)", "building": BUILDING,
            "description": t.description, "sweep_file": str(sweep_wav),
            "sweep_sha256": audio_io.file_sha256(sweep_wav), "distance_m": t.distance_m,
            "virtual_equipment": {"latency_s": t.latency_s, "drift_ppm": t.drift_ppm,
                                  "hd2_percent": t.hd2_percent, "hd3_percent": t.hd3_percent,
                                  "noise_dbfs": t.noise_dbfs}})
        ir = recover_ir(y, sweep)
        ir_wav = root / "irs" / f"{t.room.name}-{t.position}.wav"
        audio_io.write_ir(ir_wav, ir, sweep=sweep, sources={
            "capture": str(take.wav), "capture_sha256": audio_io.file_sha256(take.wav),
            "sweep": str(sweep_wav), "sweep_sha256": audio_io.file_sha256(sweep_wav)})
        figures = analyze_ir(ir.h[0], ir.fs)
        doc = figures.to_dict()
        doc.update(latency_s=ir.latency_s[0], drift_ppm=ir.drift_ppm)
        audio_io.write_json(root / "figures" / f"{t.room.name}-{t.position}.json", doc)
        rows.append((t, ir, doc))
    print(_summary(rows, root))
    return 0


def _fmt(v, spec: str, unit: str = "") -> str:
    return "—" if v is None else f"{v:{spec}}{unit}"


def _summary(rows, root: Path) -> str:
    from measure.demo import BUILDING

    head = (f"{'space':<10} {'position':<10} {'T_mid':>7} {'EDT_mid':>8} {'C80':>7} "
            f"{'D50':>5} {'STI':>5} {'PNR':>6} {'drift':>8}")
    lines = [f"{BUILDING} (invented), measured with virtual equipment", "", head,
             "-" * len(head)]
    for t, ir, doc in rows:
        sn = doc.get("single_numbers", {})
        sti = doc.get("sti")
        sti_v = sti
        lines.append(
            f"{t.room.name:<10} {t.position:<10} {_fmt(sn.get('t_mid_s'), '7.2f')} "
            f"{_fmt(sn.get('edt_mid_s'), '8.2f')} {_fmt(sn.get('c80_mid_db'), '7.1f')} "
            f"{_fmt(sn.get('d50_mid'), '5.2f')} {_fmt(sti_v, '5.2f')} "
            f"{ir.peak_to_noise_db[0]:6.1f} {ir.drift_ppm:+7.1f}p")
    lines += ["", "T_mid, EDT_mid in s (mean of 500 Hz and 1 kHz), C80 in dB, PNR = "
              "peak-to-noise in dB, drift in ppm.",
              f"Look in {root}/: sweeps/ (what was played), captures/ (raw takes + sidecars), "
              "irs/ (impulse responses), figures/ (per-band figures as JSON).",
              f"Per-band tables: measure analyze {root}/irs/<space>-<position>.wav"]
    return "\n".join(lines)
