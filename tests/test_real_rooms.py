"""Figures measured where users measure: the acceptance matrix of the issue "Real rooms".

Every case is a virtual take (measure.virtual) of a room with a known response, in background
noise of a given level and colour, through one of the sweep designs users choose, with clock
drift, sometimes a small loudspeaker without lows and repeats. For each octave band inside the
sweep (and broadband) and each figure:

* the figure the tool reports (recover_ir, then analyze_ir) must lie within one ISO 3382-1
  JND (Table A.1: EDT and T 5 %, C 1 dB, D50 0.05, Ts 10 ms) of the same figure of the
  noise-free response: the room's true response (with the small loudspeaker: loudspeaker plus
  room) through the band limit of an ideal in-band inverse (tests/_oracle.py);
* a figure the tool leaves null must say why in its band's flags;
* a figure that the oracle's available decay range supports with 10 dB to spare over its
  requirement must be reported: 20 dB for EDT, 35 for T20, 45 for T30 (ISO 3382-1:2009
  5.3.3), 20 for C50, C80, D50 and Ts (measure.decay.ENERGY_RANGE_DB), and whose noise
  scatter (tests/_oracle.figure_scatter, from first principles) would stay within half its
  JND with the noise 10 dB louder (the same 10 dB to spare, i.e. the scatter times
  10^(10/20)); the range rule alone does not see a band's width, and in the narrow low
  octaves noise near it leaves EDT uncertain by several percent (measured: ±3.9 %, errors up
  to 10.7 %, over 12 noise realisations of a 125 Hz octave with a 32 dB range beside a
  direct sound 6 dB above its reverberation).

The oracle's decay range is the level of the noise-free signal part's Schroeder curve (its
backward-summed band energy, re its total) where its 10 ms power first falls to the oracle's
band noise, or where the recording's window ends: the decay the recording lets one see. The
issue that asked for this matrix defined the range as the band's strongest 10 ms over its
noise; with a strong direct sound that peak stands 10-25 dB above the start of the
reverberant decay, and figures reported on it err by up to 20 JND (measured with the range
requirements switched off: T20 at a Schroeder range of 25-30 dB up to 15 JND, T30 at
40-45 dB up to 20 JND, both with a peak-to-noise over 45 dB). Figures null under the peak
definition alone are counted as "withheld_peak_based" and printed, not failed.

The tally (within 1 JND, within ½, outside, null with a reason, withheld though measurable) is
printed. The default run takes 20 cases spread over every level of every condition; set
MEASURE_FULL_MATRIX=1 for 60 (the same generator, more seeds).
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass

import numpy as np
import pytest
from _oracle import (  # noqa: I001
    band_limit,
    deconvolved_windows,
    figure_scatter,
    octave_sos,
    octaves_inside,
)
from scipy.signal import fftconvolve

from measure.decay import ENERGY_RANGE_DB, REQUIRED_RANGE_DB
from measure.deconvolve import ResponseContext, recover_ir
from measure.parameters import analyze_ir
from measure.sweep import SweepSpec, make_sweep
from measure.virtual import (
    OCTAVE_CENTERS_HZ,
    VirtualRoom,
    background_noise,
    loudspeaker_ir,
    room_ir,
    virtual_take,
)

#: ISO 3382-1:2009 Table A.1 JNDs: (kind, size); "rel" is relative to the reference.
JND = {"edt_s": ("rel", 0.05), "t20_s": ("rel", 0.05), "t30_s": ("rel", 0.05),
       "c50_db": ("abs", 1.0), "c80_db": ("abs", 1.0), "d50": ("abs", 0.05),
       "ts_s": ("abs", 0.010)}
NEED_DB = {"edt_s": REQUIRED_RANGE_DB["edt"], "t20_s": REQUIRED_RANGE_DB["t20"],
           "t30_s": REQUIRED_RANGE_DB["t30"], "c50_db": ENERGY_RANGE_DB,
           "c80_db": ENERGY_RANGE_DB, "d50": ENERGY_RANGE_DB, "ts_s": ENERGY_RANGE_DB}
NAMES = {"edt_s": "EDT", "t20_s": "T20", "t30_s": "T30", "c50_db": "C50", "c80_db": "C80",
         "d50": "D50", "ts_s": "Ts"}
SPARE_DB = 10.0
#: Sweep designs (fs, f1, f2): to Nyquist, 20 Hz-20 kHz, 50 Hz-16 kHz at 44.1/48/96 kHz.
DESIGNS = {"A": (48000, 20.0, 24000.0), "B": (48000, 20.0, 20000.0), "C": (48000, 50.0, 16000.0),
           "D": (44100, 20.0, 20000.0), "E": (96000, 20.0, 20000.0), "F": (44100, 20.0, 22050.0)}
#: Octave shape of the rooms' decay times (long lows, short highs), scaled by the case's T.
SHAPE = (1.15, 1.1, 1.05, 1.0, 1.0, 0.95, 0.85, 0.7)


@dataclass(frozen=True)
class Case:
    t_s: float
    drr_db: float
    noise_dbfs: float
    kind: str
    design: str
    drift_ppm: float
    small_loudspeaker: bool
    repeats: int
    seed: int = 0

    @property
    def name(self) -> str:
        return (f"T{self.t_s:g}s-DRR{self.drr_db:+g}-{self.kind}{self.noise_dbfs:g}-"
                f"{self.design}-{self.drift_ppm:+g}ppm-x{self.repeats}"
                f"{'-small' if self.small_loudspeaker else ''}")


CASES = [
    Case(0.3, +6, -90, "white", "A", 0, False, 1),
    Case(0.3, 0, -60, "pink", "B", 50, False, 2),
    Case(0.3, -6, -45, "rumble", "C", -200, True, 1),
    Case(0.3, -12, -30, "white", "D", 200, False, 1),
    Case(1.0, +6, -60, "rumble", "E", 0, False, 1),
    Case(1.0, 0, -45, "white", "B", -50, True, 1),
    Case(1.0, -6, -30, "pink", "A", 200, False, 2),
    Case(1.0, -12, -90, "pink", "F", 0, False, 1),
    Case(2.5, +6, -45, "pink", "D", 0, False, 1),
    Case(2.5, 0, -30, "rumble", "B", 100, False, 1),
    Case(2.5, -6, -60, "white", "C", 0, True, 1),
    Case(2.5, -12, -90, "rumble", "E", -150, False, 1),
    Case(5.0, +6, -30, "white", "B", 0, False, 1),
    Case(5.0, 0, -45, "pink", "A", -100, False, 1),
    Case(5.0, -6, -60, "rumble", "D", 50, True, 1),
    Case(5.0, -12, -30, "pink", "C", 0, False, 1),
    Case(1.5, -3, -40, "white", "B", 0, False, 3),
    Case(0.6, +3, -50, "pink", "E", 35, True, 1),
    Case(3.5, -9, -50, "white", "F", -35, False, 2),
    Case(1.2, -6, -35, "rumble", "A", 0, True, 1),
]
if os.environ.get("MEASURE_FULL_MATRIX"):
    CASES = CASES + [Case(c.t_s, c.drr_db, c.noise_dbfs, c.kind, c.design, c.drift_ppm,
                          c.small_loudspeaker, c.repeats, seed=s) for s in (1, 2) for c in CASES]


def _room(case: Case) -> VirtualRoom:
    rt = tuple(case.t_s * k for k in SHAPE)
    return VirtualRoom("case", OCTAVE_CENTERS_HZ, rt, direct_delay_s=0.011,
                       drr_db=case.drr_db, reflections=((0.0037, 0.35), (0.0093, -0.22)),
                       length_s=2.0 * max(rt) + 0.1, tail_onset_s=0.003)


def _gap_s(case: Case) -> float:
    """A gap the case's decay needs to reach its noise (the expected range, rough: about the
    noise's level below 0 dBFS plus 10 dB, 40-110 dB), within 12 s; where it is still short
    the recovery says so and the oracle's range (limited by the window's end) agrees."""
    expected_db = min(110.0, max(40.0, -case.noise_dbfs + 10.0))
    return min(12.0, max(1.5, 1.1 * case.t_s * max(SHAPE) * expected_db / 60.0 + 0.3))


def _check(got: float, want: float, key: str) -> float:
    """|got − want| in JNDs."""
    kind, size = JND[key]
    return abs(got - want) / (size * abs(want) if kind == "rel" else size)


def run_case(case: Case) -> dict[str, list]:
    fs, f1, f2 = DESIGNS[case.design]
    rng_seed = 1000 * case.seed
    h = room_ir(_room(case), fs, seed=rng_seed + 1)
    if case.small_loudspeaker:
        h = fftconvolve(h, loudspeaker_ir(fs, highpass_hz=250.0, order=2))
    sweep = make_sweep(SweepSpec(fs=fs, f1_hz=f1, f2_hz=f2, duration_s=4.0, gap_s=_gap_s(case),
                                 repeats=case.repeats))
    latency_s = 0.021
    signal = virtual_take(sweep.program, fs, h, latency_s=latency_s, drift_ppm=case.drift_ppm,
                          hd2_percent=0.5, hd3_percent=0.3, extra_s=0.5)
    noise = background_noise(signal.size, fs, level_dbfs=case.noise_dbfs, kind=case.kind,
                             seed=rng_seed + 2)
    ir = recover_ir(signal + noise, sweep)
    got = analyze_ir(ir.h[0], fs, sti=False, context=ir.context(0))
    h_ref, _ = band_limit(h, sweep.x, fs, f1, f2)
    ref = analyze_ir(h_ref, fs, sti=False, context=ResponseContext(f1_hz=f1, f2_hz=f2))
    # the oracle's available range per octave, over the whole window the recording allows
    spec = sweep.spec
    ratio = 1.0 + case.drift_ppm * 1e-6
    starts = [(spec.sweep_start(k) + (0.011 + latency_s) * fs) * ratio
              for k in range(case.repeats)]
    pre = ir.onset_index
    n_win = pre + int(ir.available_s * fs)
    sig_w = deconvolved_windows(signal, sweep.x, fs, f1, f2, starts, n_win, pre)
    noise_w = deconvolved_windows(noise, sweep.x, fs, f1, f2, starts, n_win, pre)
    oracle, peak_based, scatter = {}, {}, {}
    for label, fc in octaves_inside(f1, f2, fs):
        from scipy.signal import sosfilt

        sos = octave_sos(fc, fs)
        s2 = sosfilt(sos, sig_w) ** 2
        n_pow = float(np.mean(sosfilt(sos, noise_w)[int(0.1 * fs):] ** 2))
        m = int(0.01 * fs)
        k = s2.size // m
        blocks = s2[:k * m].reshape(k, m).mean(axis=1)
        i_peak = int(np.argmax(blocks))
        peak_based[label] = 10.0 * math.log10(blocks[i_peak] / n_pow)
        below = np.nonzero(blocks[i_peak:] <= n_pow)[0]
        i_x = (i_peak + int(below[0])) * m if below.size else s2.size - 1
        backward = np.cumsum(s2[::-1])[::-1]
        oracle[label] = 10.0 * math.log10(backward[0] / backward[i_x])
        scatter[label] = figure_scatter(sig_w, n_pow, fs, fc)
    tally: dict[str, list] = {"within_half": [], "within": [], "outside": [],
                              "null_with_reason": [], "null_without_reason": [],
                              "withheld": [], "withheld_peak_based": []}
    ref_bands = {b.label: b for b in ref.bands}
    for b in got.bands:
        if b.label not in oracle:  # outside the sweep: the tool says so (checked below)
            assert all(getattr(b, k) is None for k in JND), (case.name, b.label)
            assert any("outside the sweep" in f for f in b.flags)
            continue
        rb = ref_bands[b.label]
        for key in JND:
            want, have = getattr(rb, key), getattr(b, key)
            where = (case.name, b.label, NAMES[key])
            if have is not None and want is not None:
                err = _check(have, want, key)
                tally["within_half" if err <= 0.5 else "within" if err <= 1 else
                      "outside"].append((*where, round(err, 2), have, want))
            elif have is None:
                said = any(NAMES[key] in f or "cannot be measured" in f for f in b.flags)
                tally["null_with_reason" if said else "null_without_reason"].append(where)
                quiet = scatter[b.label][key] * 10.0 ** (SPARE_DB / 20.0) <= 0.5 * JND[key][1]
                if want is not None and oracle[b.label] >= NEED_DB[key] + SPARE_DB and quiet:
                    tally["withheld"].append((*where, round(oracle[b.label], 1)))
                elif want is not None and peak_based[b.label] >= NEED_DB[key] + SPARE_DB:
                    tally["withheld_peak_based"].append((*where, round(peak_based[b.label], 1)))
    return tally


_TOTALS: dict[str, int] = {}


@pytest.mark.parametrize("case", CASES, ids=lambda c: c.name)
def test_figures_in_real_rooms_are_right_or_honestly_null(case, capsys):
    tally = run_case(case)
    for k, v in tally.items():
        _TOTALS[k] = _TOTALS.get(k, 0) + len(v)
    with capsys.disabled():
        print(f"\n  {case.name}: " + ", ".join(f"{k} {len(v)}" for k, v in tally.items()))
        if len(_TOTALS) and sum(_TOTALS.values()) and case is CASES[-1]:
            print("  matrix tally: " + ", ".join(f"{k} {v}" for k, v in _TOTALS.items()))
    assert not tally["outside"], tally["outside"]
    assert not tally["null_without_reason"], tally["null_without_reason"]
    assert not tally["withheld"], tally["withheld"]
