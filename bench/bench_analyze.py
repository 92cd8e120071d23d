"""Benchmark ``measure analyze`` of a 10 s capture at 48 kHz into third-octave bands.

Run as ``python bench/bench_analyze.py`` from the repository root. It prints two ratios:

1. ``measure analyze CAPTURE.wav --sweep SWEEP.wav --bands third --json`` as a whole process,
   against the irreducible work as a whole process measured in the same run: start Python,
   import numpy/scipy/soundfile, read both files, one FFT convolution of the capture with the
   inverse sweep, zero-phase (``sosfiltfilt``) third-octave filtering of a 3 s IR, and the
   Schroeder sums of every band. Target: at most 2.
2. ``measure --help`` wall time against its 0.5 s budget (lazy imports). Target: at most 1.

Each timing is the best of several runs (the machine is shared), measured with the same
interpreter. Nothing here is a test; it only prints.
"""

from __future__ import annotations

import math
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
FS = 48000
N_RUNS = 5

#: The irreducible work, as a function: run in a fresh process (FLOOR_SCRIPT) and in this one.
FLOOR_SRC = r"""
import json
import numpy as np
import soundfile as sf
from scipy.fft import irfft, next_fast_len, rfft
from scipy.signal import butter, sosfiltfilt
from measure.sweep import inverse_spectrum, spec_from_dict


def floor(capture, sweep_wav, sweep_json):
    y, fs = sf.read(capture, dtype="float64", always_2d=True)
    sf.read(sweep_wav, dtype="float64", always_2d=True)
    with open(sweep_json) as fh:
        spec = spec_from_dict(json.load(fh))
    n = next_fast_len(y.shape[0] + spec.n_sweep)
    h = irfft(rfft(y[:, 0], n) * inverse_spectrum(spec, n), n)
    ir = h[spec.n_lead: spec.n_lead + 3 * fs]
    g = 10 ** 0.3
    total = 0.0
    for x10 in range(-13, 11):  # third octaves 50 Hz ... 10 kHz
        fm = 1000 * 10 ** (x10 / 10)
        sos = butter(3, [fm / g ** (1 / 6), fm * g ** (1 / 6)], "bandpass", fs=fs,
                     output="sos")
        yb = sosfiltfilt(sos, ir)
        total += float(np.cumsum((yb * yb)[::-1])[-1])
    return total
"""
FLOOR_SCRIPT = FLOOR_SRC + "\nimport sys\nprint(floor(*sys.argv[1:4]))\n"


def _best_of(cmd: list[str], n: int, env: dict[str, str]) -> float:
    best = math.inf
    for _ in range(n):
        t0 = time.perf_counter()
        subprocess.run(cmd, cwd=ROOT, env=env, check=True, stdout=subprocess.DEVNULL,
                       stderr=subprocess.DEVNULL)
        best = min(best, time.perf_counter() - t0)
    return best


def _make_inputs(folder: Path) -> tuple[Path, Path]:
    import numpy as np

    from measure.audio_io import write_audio, write_json
    from measure.sweep import SweepSpec, make_sweep

    # 0.5 s lead-in + 7 s sweep + 2.5 s gap = 10 s at 48 kHz
    spec = SweepSpec(fs=FS, f1_hz=20.0, f2_hz=FS / 2, duration_s=7.0, repeats=1, gap_s=2.5,
                     lead_in_s=0.5, level_dbfs=-12.0)
    sweep = make_sweep(spec)
    sweep_wav = folder / "sweep.wav"
    write_audio(sweep_wav, sweep.program, FS, subtype="FLOAT")
    write_json(folder / "sweep.json", sweep.sidecar())
    # a room: direct sound, then decaying noise with T = 1.2 s, noise 70 dB below
    rng = np.random.default_rng(1)
    t = np.arange(int(2.0 * FS)) / FS
    h = np.zeros(t.size + 240)
    h[120] = 0.5
    h[360:] += 0.01 * rng.standard_normal(t.size - 120) * np.exp(-6.9078 * t[:-120] / 1.2)
    from scipy.signal import fftconvolve

    y = fftconvolve(sweep.program, h)[: sweep.program.size]
    y = np.roll(y, 960)  # 20 ms of latency
    y += 10 ** (-80 / 20) * rng.standard_normal(y.size)
    assert np.max(np.abs(y)) < 0.9  # no clipping
    capture = folder / "capture.wav"
    write_audio(capture, y, FS, subtype="FLOAT")
    return capture, sweep_wav


def _in_process(capture: Path, sweep_wav: Path) -> tuple[float, float]:
    """The same two jobs inside this process, imports already done (best of N_RUNS)."""
    from measure import audio_io
    from measure.deconvolve import recover_ir
    from measure.parameters import analyze_ir

    ns: dict = {}
    exec(FLOOR_SRC, ns)  # the very function the FLOOR_SCRIPT process runs

    def floor() -> None:
        ns["floor"](str(capture), str(sweep_wav), str(sweep_wav.with_suffix(".json")))

    def analyze() -> None:
        audio = audio_io.read_audio(capture)
        sweep = audio_io.read_sweep(sweep_wav)
        ir = recover_ir(audio.x, sweep, channels=[0])
        audio_io.dumps(analyze_ir(ir.h[0], audio.fs, bands="third").to_dict())

    t_f = t_a = math.inf
    for _ in range(N_RUNS):
        t0 = time.perf_counter()
        floor()
        t_f = min(t_f, time.perf_counter() - t0)
        t0 = time.perf_counter()
        analyze()
        t_a = min(t_a, time.perf_counter() - t0)
    return t_f, t_a


def main() -> int:
    sys.path.insert(0, str(ROOT))
    env = dict(os.environ)
    env["PYTHONPATH"] = str(ROOT) + os.pathsep + env.get("PYTHONPATH", "")
    py = sys.executable
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        capture, sweep_wav = _make_inputs(folder)
        floor = [py, "-c", FLOOR_SCRIPT, str(capture), str(sweep_wav), str(folder / "sweep.json")]
        analyze = [py, "-m", "measure", "analyze", str(capture), "--sweep", str(sweep_wav),
                   "--bands", "third", "--json"]
        helpcmd = [py, "-m", "measure", "--help"]
        # interleave so both see the same machine load
        t_floor = t_analyze = math.inf
        for _ in range(N_RUNS):
            t_floor = min(t_floor, _best_of(floor, 1, env))
            t_analyze = min(t_analyze, _best_of(analyze, 1, env))
        t_help = _best_of(helpcmd, N_RUNS, env)
        t_floor_in, t_analyze_in = _in_process(capture, sweep_wav)
    print(f"irreducible work, whole process : {t_floor:.3f} s")
    print(f"measure analyze, whole process  : {t_analyze:.3f} s")
    print(f"ratio analyze / irreducible     : {t_analyze / t_floor:.2f}  (target <= 2)")
    print(f"(for information, inside one process after the imports: irreducible "
          f"{t_floor_in:.3f} s, analyze {t_analyze_in:.3f} s, ratio "
          f"{t_analyze_in / t_floor_in:.2f})")
    print(f"measure --help                  : {t_help:.3f} s")
    print(f"ratio --help / 0.5 s budget     : {t_help / 0.5:.2f}  (target <= 1)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
