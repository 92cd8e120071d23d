"""Fuzzing the pure stages (issue 12, item 5): odd inputs give a MeasureError or honest figures.

Every test feeds one pure function random but realistic-to-hostile input: lengths from one
sample up, levels from 1e-30 to 1e3, the usual sample rates, digital silence, DC, denormals
(1e-310), reversed responses, responses ending in digital silence, and for the loaders random
JSON and mutations of a valid document. The property is the issue's: the function either
raises the project's own :class:`measure.errors.MeasureError` or returns a result in which
every number is finite (walked through dataclass fields, dicts, tuples and arrays), and a
figure that is None comes with a flag saying why.

Examples per function: ``MEASURE_FUZZ_EXAMPLES`` (default 25, derandomised so the default run
is repeatable). The slow run, at least 1000 per function with fresh random examples::

    MEASURE_FUZZ_EXAMPLES=1000 python -m pytest -q -p no:cacheprovider -m slow tests/test_fuzz.py

(all tests here carry the ``slow`` marker; the default run deselects nothing.)
"""

from __future__ import annotations

import copy
import dataclasses
import json
import math
import os
import types

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from measure.errors import MeasureError

pytestmark = pytest.mark.slow

N_EXAMPLES = int(os.environ.get("MEASURE_FUZZ_EXAMPLES", "25"))
#: Repeatable default run; the slow run draws fresh examples each time.
SETTINGS = settings(max_examples=N_EXAMPLES, deadline=None, derandomize=N_EXAMPLES <= 100,
                    database=None, print_blob=True)
#: For the stages whose single example can take a second (the model fit re-renders and
#: re-analyses its model four times): hypothesis's too_slow check counts the time to *draw*
#: inputs, which is small here, but data generation of the arrays below is not the cost, so
#: the check only fires on the function under test being slow, which is expected.
SLOW_SETTINGS = settings(SETTINGS, suppress_health_check=[HealthCheck.too_slow])

RATES = (8000, 22050, 44100, 48000, 96000)
KINDS = ("zeros", "dc", "impulse", "decay", "decay_then_silence", "decay_16bit_then_silence",
         "reversed_decay", "noise", "denormal", "sine", "square")


# -- the property -------------------------------------------------------------------------------

def assert_finite(obj, path: str = "result", seen: set | None = None) -> None:
    """Every number reachable from ``obj`` is finite (None, text and bools pass)."""
    seen = set() if seen is None else seen
    if obj is None or isinstance(obj, (str, bytes, bool, np.bool_)):
        return
    if isinstance(obj, (int, np.integer)):
        return
    if isinstance(obj, (float, np.floating, complex, np.complexfloating)):
        assert np.isfinite(obj), f"{path} = {obj!r} is not finite"
        return
    if id(obj) in seen:
        return
    seen.add(id(obj))
    if isinstance(obj, np.ndarray):
        if obj.dtype.kind in "fc":
            bad = ~np.isfinite(obj)
            assert not np.any(bad), (f"{path} holds {int(np.count_nonzero(bad))} non-finite "
                                     f"values, e.g. {obj[bad].ravel()[:3]}")
        elif obj.dtype.kind == "O":
            for i, v in enumerate(obj.ravel()):
                assert_finite(v, f"{path}[{i}]", seen)
        return
    if isinstance(obj, (dict, types.MappingProxyType)):
        for k, v in obj.items():
            assert_finite(v, f"{path}[{k!r}]", seen)
        return
    if isinstance(obj, (list, tuple)):
        for i, v in enumerate(obj):
            assert_finite(v, f"{path}[{i}]", seen)
        return
    if dataclasses.is_dataclass(obj):
        for f in dataclasses.fields(obj):
            assert_finite(getattr(obj, f.name), f"{path}.{f.name}", seen)
        return
    raise AssertionError(f"{path}: the walker does not know {type(obj).__name__}")


def assert_none_is_flagged(fig, names: tuple[str, ...], where: str) -> None:
    """A figure that is None carries at least one flag (the reason)."""
    missing = [n for n in names if getattr(fig, n) is None]
    if missing:
        assert fig.flags, f"{where}: {missing} are None without a flag saying why"


def run_or_measure_error(fn, *args, **kwargs):
    """fn's result, or None when it raised a MeasureError (anything else propagates)."""
    try:
        return fn(*args, **kwargs)
    except MeasureError as err:
        msg = str(err)
        assert msg and "\n" not in msg, f"MeasureError message must be one line: {msg!r}"
        return None


# -- inputs ------------------------------------------------------------------------------------

def make_signal(kind: str, n: int, fs: int, level: float, t60_s: float, seed: int) -> np.ndarray:
    """One test signal of ``n`` samples (see KINDS), every value finite."""
    rng = np.random.default_rng(seed)
    t = np.arange(n) / fs
    pre = int(rng.integers(0, max(1, n // 10)))
    decay = np.zeros(n)
    tail = rng.standard_normal(n - pre) * np.exp(-3.0 * math.log(10.0) * t[: n - pre] / t60_s)
    decay[pre:] = tail
    if n > pre:
        decay[pre] = 1.0 + abs(decay[pre])
    floor = 10.0 ** rng.uniform(-9.0, -1.0)
    decay = decay + floor * rng.standard_normal(n)
    if kind == "zeros":
        x = np.zeros(n)
    elif kind == "dc":
        x = np.full(n, 1.0)
    elif kind == "impulse":
        x = np.zeros(n)
        x[int(rng.integers(0, n))] = 1.0
    elif kind == "decay":
        x = decay
    elif kind == "decay_then_silence":
        x = decay.copy()
        x[int(rng.uniform(0.1, 0.9) * n):] = 0.0
    elif kind == "decay_16bit_then_silence":
        # as read from a 16-bit WAV: quantised to 1/32768 of full scale (so the quiet tail is
        # exact zeros), then digital silence for the last third
        x = np.round(decay / np.max(np.abs(decay)) * 0.5 * 32768.0) / 32768.0
        x[2 * n // 3:] = 0.0
        return x
    elif kind == "reversed_decay":
        x = decay[::-1].copy()
    elif kind == "noise":
        x = rng.standard_normal(n)
    elif kind == "denormal":
        return decay / np.max(np.abs(decay)) * 1e-310 if np.any(decay) else decay
    elif kind == "sine":
        x = np.sin(2.0 * math.pi * rng.uniform(20.0, 0.5 * fs) * t)
    else:  # a full-scale square wave: clipped, DC-free
        x = np.sign(np.sin(2.0 * math.pi * rng.uniform(20.0, 2000.0) * t) + 1e-9)
    peak = float(np.max(np.abs(x))) if n else 0.0
    return x * (level / peak) if peak > 0 else x


@st.composite
def responses(draw, *, max_s: float = 0.6, rates: tuple[int, ...] = RATES,
              kinds: tuple[str, ...] = KINDS):
    """(h, fs, description) of an impulse-response-like signal.

    Hypothesis picks the rate, the kind and the length class; the length within its class,
    the level (log-uniform 1e-30 to 1e3) and the decay time come from a seeded generator, so
    they spread evenly instead of crowding at the bounds as drawn integers do.
    """
    fs = draw(st.sampled_from(rates))
    kind = draw(st.sampled_from(kinds))
    size = draw(st.sampled_from(("tiny", "short", "long", "long", "long")))
    seed = draw(st.integers(0, 2 ** 32 - 1))
    rng = np.random.default_rng(seed)
    n_max = int(max_s * fs)
    n = int({"tiny": lambda: rng.integers(1, 65),
             "short": lambda: rng.integers(65, max(66, int(0.1 * fs))),
             "long": lambda: rng.integers(min(int(0.1 * fs), n_max), n_max + 1)}[size]())
    level = 10.0 ** rng.uniform(-30.0, 3.0)
    t60 = 10.0 ** rng.uniform(-2.0, 0.6)
    h = make_signal(kind, n, fs, level, t60, seed)
    return h, fs, f"{kind} n={n} fs={fs} level={level:.3g} t60={t60:.3g} seed={seed}"


# -- recovery ----------------------------------------------------------------------------------

@st.composite
def recordings(draw):
    """(y, sweep): a short sweep file played through a response, or junk of sweep length."""
    from measure.sweep import SweepSpec, make_sweep

    fs = draw(st.sampled_from(RATES))
    duration = draw(st.floats(0.05, 0.4))
    f1 = draw(st.floats(20.0, 200.0))
    f2 = draw(st.sampled_from((0.5 * fs, 0.45 * fs, min(8000.0, 0.4 * fs))))
    repeats = draw(st.integers(1, 3))
    gap = draw(st.floats(0.05, 0.3))
    spec = SweepSpec(fs=fs, f1_hz=f1, f2_hz=f2, duration_s=duration, repeats=repeats,
                     gap_s=gap, lead_in_s=0.05, fade_in_s=min(0.01, duration / 4))
    sweep = make_sweep(spec)
    h, _, desc = draw(responses(max_s=0.2, rates=(fs,)))
    how = draw(st.sampled_from(("through", "junk", "short", "through+silence")))
    p = sweep.program
    if how == "through":
        y = np.convolve(p, h)[: p.size + fs // 10]
    elif how == "through+silence":
        y = np.concatenate((np.convolve(p, h)[: p.size], np.zeros(fs // 4)))
    elif how == "junk":
        y = np.resize(h, p.size + fs // 10) if h.size else np.zeros(p.size)
    else:
        y = np.convolve(p, h)[: int(draw(st.integers(1, max(1, spec.n_sweep))))]
    return y, sweep, f"{how} {desc} sweep {duration:.3g} s {f1:.3g}-{f2:.3g} Hz x{repeats}"


@SLOW_SETTINGS
@given(recordings())
def test_recover_ir(case):
    from measure.deconvolve import recover_ir

    y, sweep, _ = case
    ir = run_or_measure_error(recover_ir, y, sweep)
    if ir is not None:
        assert_finite(ir)


# -- bands -------------------------------------------------------------------------------------

@SETTINGS
@given(responses(max_s=0.3), st.sampled_from(("octave", "third")),
       st.sampled_from((None, 10.0, 31.5, 63.0, 1000.0)),
       st.sampled_from((None, 500.0, 8000.0, 20000.0, 50000.0)),
       st.sampled_from(("causal", "reversed")))
def test_bands(case, kind, f_lo, f_hi, mode):
    from measure.bands import filter_bands, make_bands

    h, fs, _ = case
    bands = run_or_measure_error(make_bands, fs, kind, f_lo, f_hi)
    if bands is None:
        return
    assert_finite(bands)
    y = run_or_measure_error(filter_bands, h, fs, bands, mode=mode)
    if y is not None:
        assert y.shape == (len(bands), h.size)
        assert_finite(y)


# -- decay -------------------------------------------------------------------------------------

@SETTINGS
@given(responses())
def test_schroeder_and_lundeby(case):
    from measure.decay import lundeby, onset_index, schroeder

    h, fs, _ = case
    onset = run_or_measure_error(onset_index, h, fs)
    if onset is not None:
        assert 0 <= onset < h.size
    curve = run_or_measure_error(schroeder, h)
    if curve is not None:
        # documented: -inf dB where the remaining energy is exactly zero (digital silence);
        # never NaN or +inf, 0 dB at the start, never rising
        assert curve[0] == 0.0
        assert not np.any(np.isnan(curve)) and not np.any(curve == np.inf)
        assert np.all(curve[1:] <= curve[:-1] + 1e-9)
    nf = run_or_measure_error(lundeby, h, fs)
    if nf is not None:
        assert_finite(nf)
        assert 0 <= nf.truncation_index <= h.size
        if not nf.ok:
            assert nf.reason, "a noise floor that is not ok must say why"


@SETTINGS
@given(responses(), st.sampled_from(("causal", "reversed")))
def test_analyze_decay(case, mode):
    from measure.decay import analyze_decay

    h, fs, _ = case
    d = run_or_measure_error(analyze_decay, h, fs, filter_mode=mode)
    if d is not None:
        assert_finite(d)
        assert_none_is_flagged(d, ("edt_s", "t20_s", "t30_s"), "decay")


# -- parameters and STI ------------------------------------------------------------------------

@SLOW_SETTINGS
@given(responses(), st.booleans(), st.sampled_from(("octave", "third")))
def test_analyze_ir(case, sti, bands):
    from measure.parameters import analyze_ir

    h, fs, _ = case
    r = run_or_measure_error(analyze_ir, h, fs, sti=sti, bands=bands)
    if r is None:
        return
    assert_finite(r)
    assert_finite(r.to_dict(), "to_dict()")
    json.dumps(r.to_dict(), allow_nan=False)
    for b in (*r.bands, r.broadband):
        assert_none_is_flagged(b, ("edt_s", "t20_s", "t30_s", "c50_db", "c80_db", "d50",
                                   "ts_s"), f"band {b.label}")
    if sti and r.sti is None:
        assert r.flags, "an STI asked for and not given must carry a flag saying why"


@SETTINGS
@given(responses(rates=(8000, 22050, 32000, 44100, 48000, 96000)))
def test_sti_from_ir(case):
    from measure.intelligibility import sti_from_ir

    h, fs, _ = case
    r = run_or_measure_error(sti_from_ir, h, fs)
    if r is not None:
        assert_finite(r)
        assert 0.0 <= r.sti <= 1.0
        json.dumps(r.to_dict(), allow_nan=False)


# -- model fit ---------------------------------------------------------------------------------

#: Most random signals have no decay to fit (a FitError at once); decays are drawn more often
#: so that about half the examples reach the whole fit.
FIT_KINDS = KINDS + ("decay", "decay_then_silence", "decay_16bit_then_silence") * 3


@SLOW_SETTINGS
@given(responses(max_s=0.25, rates=(8000, 22050, 44100, 48000), kinds=FIT_KINDS))
def test_fit_model(case):
    from measure.model.fit import fit_model
    from measure.model.modelfile import model_from_dict

    h, fs, _ = case
    res = run_or_measure_error(fit_model, h, fs)
    if res is None:
        return
    assert_finite(res.model.to_dict(), "model")
    assert_finite(res.report.to_dict(), "report")
    # what the fit writes, the loader takes back unchanged
    doc = json.loads(json.dumps(res.model.to_dict(), allow_nan=False))
    assert model_from_dict(doc).to_dict() == doc


# -- model load --------------------------------------------------------------------------------

JSON_SCALARS = st.one_of(
    st.none(), st.booleans(), st.integers(-10 ** 30, 10 ** 30), st.just(10 ** 400),
    st.floats(allow_nan=True, allow_infinity=True), st.text(max_size=8),
    st.sampled_from((0, 1, -1, 0.5, 1e9, -1e9, 1e-310, 48000, 1e7, 120.0, 3)))
JSON_VALUES = st.recursive(
    JSON_SCALARS,
    lambda children: st.one_of(st.lists(children, max_size=6),
                               st.dictionaries(st.text(max_size=8), children, max_size=6)),
    max_leaves=20)


def _valid_model_doc() -> dict:
    from measure.model.coloration import fit_coloration
    from measure.model.late import LateReverb, nominal_delays_s
    from measure.model.modelfile import RoomModel

    fs = 48000
    x = np.zeros(1024)
    x[10] = 1.0
    x[11] = 0.5
    col = fit_coloration(x, fs, order=3)
    centers = (125.0, 250.0, 500.0, 1000.0, 2000.0, 4000.0)
    t60 = (0.6, 0.55, 0.5, 0.45, 0.4, 0.3)
    late = LateReverb(centers, t60, tuple(-20.0 for _ in centers), 0.01, 0.005,
                      nominal_delays_s(max(t60)),
                      tuple((0.0025, 0.02, 0.05) for _ in centers),
                      tuple((3.0, -1.0) for _ in centers), diffuse_from_s=0.0025)
    m = RoomModel(fit_fs=fs, direct_delay_s=0.004, direct_gain=1.0, coloration=col,
                  echoes=((0.003, 0.3), (0.007, -0.2)), late=late, mixing_time_s=0.015,
                  source={"file": "fuzz"})
    return json.loads(json.dumps(m.to_dict()))


VALID_MODEL = _valid_model_doc()


def _paths(doc, prefix=()):
    """Every path into a JSON document (dict keys and list indices)."""
    yield prefix
    if isinstance(doc, dict):
        for k, v in doc.items():
            yield from _paths(v, (*prefix, k))
    elif isinstance(doc, list):
        for i, v in enumerate(doc):
            yield from _paths(v, (*prefix, i))


MODEL_PATHS = [p for p in _paths(VALID_MODEL) if p]


@st.composite
def mutated(draw, valid: dict, paths: list):
    """A valid document with one to three paths replaced, deleted or given a new sibling."""
    doc = copy.deepcopy(valid)
    for _ in range(draw(st.integers(1, 3))):
        path = draw(st.sampled_from(paths))
        parent = doc
        try:
            for k in path[:-1]:
                parent = parent[k]
            key = path[-1]
            parent[key]  # the path may have gone with an earlier mutation
        except (KeyError, IndexError, TypeError):
            continue
        how = draw(st.sampled_from(("replace", "replace", "scale", "delete", "add")))
        if how == "replace":
            parent[key] = draw(JSON_VALUES)
        elif how == "scale" and isinstance(parent[key], (int, float)) \
                and not isinstance(parent[key], bool) and abs(parent[key]) < 1e300:
            parent[key] = parent[key] * draw(st.sampled_from((-1, 0, 1e-9, 1e9, 1e300, 2.5)))
        elif how == "delete":
            del parent[key]
        elif isinstance(parent, dict):
            parent[draw(st.text(max_size=8))] = draw(JSON_VALUES)
        else:
            parent.append(draw(JSON_VALUES))
    return doc


def _check_model_load(doc) -> None:
    from measure.model.modelfile import model_from_dict
    from measure.model.render import default_seconds, render_model

    m = run_or_measure_error(model_from_dict, doc)
    if m is None:
        return
    assert_finite(m.to_dict(), "model")
    seconds = default_seconds(m)
    assert 0 < seconds <= 120.0, f"a model that loads must render by default (got {seconds} s)"
    # a short rendering at the fitting rate and another: finite samples, or a MeasureError
    for fs in (m.fit_fs, 44100):
        h = run_or_measure_error(render_model, m, fs, 0.02)
        if h is not None:
            assert_finite(h, f"rendering at {fs} Hz")


@SETTINGS
@given(JSON_VALUES)
def test_model_load_random_json(doc):
    _check_model_load(doc)


@SETTINGS
@given(st.fixed_dictionaries({"format": st.just("measure.room-model"), "version": st.just(1)},
                             optional={k: JSON_VALUES for k in VALID_MODEL
                                       if k not in ("format", "version")}))
def test_model_load_random_model_shaped_json(doc):
    _check_model_load(doc)


@SLOW_SETTINGS
@given(mutated(VALID_MODEL, MODEL_PATHS))
def test_model_load_mutations(doc):
    _check_model_load(doc)


# -- room description load ---------------------------------------------------------------------

VALID_ROOM = {
    "name": "fuzz", "description": "a box", "dimensions_m": [5.0, 4.0, 3.0],
    "source_m": [1.0, 1.0, 1.5], "receiver_m": [4.0, 3.0, 1.5], "temperature_c": 20.0,
    "humidity_percent": 50.0,
    "surfaces": {"floor": "wood_floor_on_joists", "ceiling": [0.1, 0.2, 0.3, 0.4, 0.5, 0.6],
                 "walls": "concrete_block_painted", "wall_x0": "panel"},
    "materials": {"panel": [0.3, 0.4, 0.5, 0.6, 0.6, 0.6, 0.6, 0.6]},
    "extra": [{"name": "seats", "area_m2": [1.0, 2.0, 3.0, 3.0, 3.0, 3.0]},
              {"name": "rug", "material": "panel", "surface_m2": 4.0}],
}
ROOM_PATHS = [p for p in _paths(VALID_ROOM) if p]


def _check_room_load(doc) -> None:
    from measure.predict import predict, room_from_dict

    room = run_or_measure_error(room_from_dict, doc)
    if room is None:
        return
    assert_finite(room.to_dict(), "room")
    p = run_or_measure_error(predict, room, 24000, max_order=2, length_s=0.05)
    if p is not None:
        assert_finite(p.to_dict(), "prediction")
        assert_finite(p.h, "prediction.h")


@SETTINGS
@given(JSON_VALUES)
def test_room_load_random_json(doc):
    _check_room_load(doc)


@SETTINGS
@given(mutated(VALID_ROOM, ROOM_PATHS))
def test_room_load_mutations(doc):
    _check_room_load(doc)
