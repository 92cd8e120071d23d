"""The compact model through the whole chain of the demo: sweep → virtual take → recovered IR → fit.

The demo building's takes (measure.demo.DEMO_TAKES) carry latency, clock drift, loudspeaker
distortion and background noise, so the fitted response is a recovered one, not the synthetic
room itself; the acceptance criterion of the model must hold there too.
"""

from __future__ import annotations

import numpy as np

from measure.deconvolve import recover_ir
from measure.demo import DEMO_SWEEP, DEMO_TAKES, demo_recording
from measure.model.fit import fit_model
from measure.model.modelfile import MAX_NUMBERS, count_numbers
from measure.sweep import make_sweep

ACCEPTANCE_BANDS = ("125", "250", "500", "1k", "2k", "4k")
ACCEPTANCE_PARAMETERS = ("edt_s", "t30_s", "c80_db")


def test_model_of_the_recovered_demo_responses_meets_the_acceptance():
    # Acceptance: the rendered model's EDT and T30 within 1 JND (5 %) and C80 within 1 JND
    # (1 dB) of the measured IR's (ISO 3382-1:2009 Table A.1 JNDs), 125 Hz-4 kHz, for at least
    # 90 % of the band-parameter cells over the demo rooms together. The takes are the demo's
    # own (measure.demo.demo_recording). A cell the measurement leaves null (the plant room's
    # rumble buries its lowest octaves) has nothing to compare with and is not counted; the
    # ones left are every cell of the quiet rooms and the plant room's from 250 Hz up.
    sweep = make_sweep(DEMO_SWEEP)
    ok = n = unmeasured = 0
    misses = []
    for i, t in enumerate(DEMO_TAKES):
        _, y = demo_recording(i, sweep.program, sweep.fs)
        ir = recover_ir(y, sweep)
        res = fit_model(np.asarray(ir.h[0]), ir.fs)
        # the size budget: a few hundred numbers at most (MAX_NUMBERS)
        assert count_numbers(res.model.to_dict()) <= MAX_NUMBERS
        for c in res.report.cells:
            if c.band in ACCEPTANCE_BANDS and c.parameter in ACCEPTANCE_PARAMETERS:
                if c.measured is None:
                    unmeasured += 1
                    continue
                n += 1
                if c.difference_jnd is not None and abs(c.difference_jnd) <= 1.0:
                    ok += 1
                else:
                    misses.append((t.room.name, c.band, c.parameter, c.difference_jnd))
        # T30 is calibrated band by band: every measured acceptance band within 1 JND
        for band in ACCEPTANCE_BANDS:
            c = res.report.cell(band, "t30_s")
            if c.measured is not None:
                assert c.difference_jnd is not None and abs(c.difference_jnd) <= 1.0, \
                    (t.room.name, c)
    assert n + unmeasured == len(DEMO_TAKES) * len(ACCEPTANCE_BANDS) * len(ACCEPTANCE_PARAMETERS)
    assert unmeasured <= 2  # only the plant room's 125 Hz T30 (and at most one more)
    assert ok / n >= 0.9, f"{ok} of {n} cells within 1 JND; misses: {misses}"
