"""The catalogue of bad inputs (issue "Never lose a take, never crash on a bad file", item 4).

Each bad input runs through ``python -m measure`` in a subprocess, in a folder of its own that
holds copies of the fixture files, and must end the way a user mistake ends (DESIGN.md,
"Errors and honesty"): exit status 2, exactly one stderr line ``error: ...``, no traceback,
and no file added, removed or changed anywhere in the folder. Beside each entry: where it
comes from, an item of issue "Never lose a take" (tracebacks, absurd sizes, inputs destroyed,
half-written pairs, accepted without a word, messages) or issue "Foundation" (missing or
unreadable file, a capture shorter than the sweep, no sweep found, sample rates that differ,
a sidecar missing or malformed, NaN or Inf samples), or "catalogue" for a neighbour found while
building it.

The second list holds odd but valid inputs that must succeed (exit 0): every WAV sample format,
FLAC, paths with spaces and non-ASCII characters, a real response followed by digital silence.
"""

from __future__ import annotations

import contextlib
import hashlib
import io
import json
import os
import shutil
import subprocess
import sys
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pytest
import soundfile as sf

from measure.cli import main

FS = 48000
ROOT = Path(__file__).resolve().parents[1]

ROOM_TOML = """\
name = "catalogue room"
dimensions_m = [6.0, 4.5, 2.8]
source_m = [1.2, 2.0, 1.5]
receiver_m = [4.6, 2.6, 1.2]

[surfaces]
floor = "uniform"
ceiling = "uniform"
walls = "uniform"

[materials]
uniform = [0.2, 0.2, 0.2, 0.2, 0.2, 0.2, 0.2, 0.2]
"""


# ---------------------------------------------------------------------------------------------
# Fixture files, built once for the module (in process: fast) and copied into each test's folder
# ---------------------------------------------------------------------------------------------
@pytest.fixture(scope="module")
def source_folder(tmp_path_factory) -> Path:
    """s.wav/.json (a 1 s sweep), cap.wav (a virtual take of it in the office), cap2.wav (with
    the sweep on a loopback channel 2), capb.wav (another take), ir.wav (the office's true
    response, no sidecar), irm.wav/.json (recovered by `measure ir`, the sidecar naming its
    hash), model.json (`measure fit`), dry.wav, room.toml, and captures/r/p-take1.wav/.json
    (`measure import`)."""
    from measure.audio_io import read_sweep
    from measure.virtual import DEMO_ROOMS, room_ir, virtual_take

    d = tmp_path_factory.mktemp("catalogue-src")
    here = os.getcwd()
    os.chdir(d)  # the sidecars name their inputs as given: relative, so the copies stay whole
    try:
        with contextlib.redirect_stdout(io.StringIO()), contextlib.redirect_stderr(io.StringIO()):
            assert main(["sweep", "s.wav", "--duration", "1", "--gap", "1.5"]) == 0
            sweep = read_sweep("s.wav")
            h = room_ir(DEMO_ROOMS[1], FS, seed=1)  # the office: 1.5 s
            y = virtual_take(sweep.program, FS, h, latency_s=0.05, noise_dbfs=-80.0, extra_s=0.2)
            sf.write("cap.wav", y, FS, subtype="PCM_24")
            loop = np.zeros_like(y)
            loop[:sweep.program.size] = sweep.program
            sf.write("cap2.wav", np.stack([y, loop], axis=1), FS, subtype="PCM_24")
            yb = virtual_take(sweep.program, FS, h, latency_s=0.08, noise_dbfs=-70.0,
                              extra_s=0.2, seed=5)
            sf.write("capb.wav", yb, FS, subtype="PCM_24")
            sf.write("ir.wav", 0.5 * h / np.max(np.abs(h)), FS, subtype="FLOAT")
            assert main(["ir", "cap.wav", "--sweep", "s.wav", "--out", "irm.wav"]) == 0
            assert main(["fit", "ir.wav", "--out", "model.json"]) == 0
            sf.write("dry.wav", 0.1 * np.sin(2 * np.pi * 440.0 * np.arange(FS // 2) / FS), FS,
                     subtype="FLOAT")
            Path("room.toml").write_text(ROOM_TOML)
            assert main(["import", "cap.wav", "--room", "r", "--position", "p", "--captures",
                         "captures", "--sweep", "s.wav"]) in (0, 1)
    finally:
        os.chdir(here)
    return d


@pytest.fixture
def work(source_folder, tmp_path) -> Path:
    w = tmp_path / "w"
    shutil.copytree(source_folder, w)
    return w


def snapshot(d: Path) -> dict[str, str]:
    """Every file (name and SHA-256 of its bytes) and folder under ``d``."""
    out = {}
    for p in sorted(d.rglob("*")):
        key = p.relative_to(d).as_posix()
        out[key] = "<folder>" if p.is_dir() else hashlib.sha256(p.read_bytes()).hexdigest()
    return out


def run_measure(args: list[str], cwd: Path) -> subprocess.CompletedProcess:
    env = {**os.environ, "MPLBACKEND": "Agg", "PYTHONPATH": str(ROOT)}
    return subprocess.run([sys.executable, "-m", "measure", *args], cwd=cwd, env=env,
                          capture_output=True, text=True, timeout=120)


# ---------------------------------------------------------------------------------------------
# Setup helpers: each makes the bad file in the test's folder before the snapshot
# ---------------------------------------------------------------------------------------------
Setup = Callable[[Path], None]


def wav(name: str, make: Callable[[Path], np.ndarray], fs: int = FS,
        subtype: str = "FLOAT") -> Setup:
    def setup(d: Path) -> None:
        path = d / name
        path.parent.mkdir(parents=True, exist_ok=True)
        sf.write(path, make(d), fs, subtype=subtype)
    return setup


def data(name: str) -> Callable[[Path], np.ndarray]:
    return lambda d: sf.read(d / name, dtype="float64")[0]


def text(name: str, content: str) -> Setup:
    return lambda d: (d / name).write_text(content, encoding="utf-8")


def raw(name: str, content: bytes) -> Setup:
    return lambda d: (d / name).write_bytes(content)


def folder(name: str) -> Setup:
    return lambda d: (d / name).mkdir()


def copy(src: str, dst: str) -> Setup:
    return lambda d: shutil.copyfile(d / src, d / dst)


def halve(src: str, dst: str) -> Setup:
    def setup(d: Path) -> None:
        b = (d / src).read_bytes()
        (d / dst).write_bytes(b[:len(b) // 2])
    return setup


def edit_json(src: str, dst: str, change: Callable[[dict], None]) -> Setup:
    def setup(d: Path) -> None:
        doc = json.loads((d / src).read_text())
        change(doc)
        (d / dst).write_text(json.dumps(doc))
    return setup


def steps(*setups: Setup) -> Setup:
    def setup(d: Path) -> None:
        for s in setups:
            s(d)
    return setup


def _with_nan(x: np.ndarray) -> np.ndarray:
    x = x.copy()
    x[1000] = np.nan
    return x


def _with_inf(x: np.ndarray) -> np.ndarray:
    x = x.copy()
    x[2000] = np.inf
    return x


def _set(path: tuple, value) -> Callable[[dict], None]:
    def change(doc: dict) -> None:
        for k in path[:-1]:
            doc = doc[k]
        doc[path[-1]] = value
    return change


def _other_sweep_take(d: Path) -> np.ndarray:
    from measure.sweep import SweepSpec, make_sweep
    from measure.virtual import DEMO_ROOMS, room_ir, virtual_take

    other = make_sweep(SweepSpec(fs=FS, f1_hz=50.0, f2_hz=16000.0, duration_s=2.0))
    return virtual_take(other.program, FS, room_ir(DEMO_ROOMS[1], FS), latency_s=0.05,
                        noise_dbfs=-80.0, extra_s=0.5)


_RNG_BYTES = np.random.default_rng(12).integers(0, 256, 5000, dtype=np.uint8).tobytes()


@dataclass(frozen=True)
class Bad:
    id: str
    argv: tuple[str, ...]
    source: str
    setup: Setup | None = None
    needle: str | None = None  # a word the error line must hold
    absent: str | None = None  # a word it must not hold
    pending: str | None = None  # the item of issue 12 that others are fixing


R = ("--room", "r", "--position", "p", "--captures", "captures")  # import's filing options
IR = ("ir", "cap.wav", "--sweep", "s.wav", "--out", "o.wav")

CATALOGUE: tuple[Bad, ...] = (
    # --- Foundation: missing or unreadable file ------------------------------------------------
    Bad("ir-missing-capture", ("ir", "nothing.wav", "--sweep", "s.wav", "--out", "o.wav"),
        "Foundation: missing file", needle="does not exist"),
    Bad("ir-missing-sweep", ("ir", "cap.wav", "--sweep", "nothing.wav", "--out", "o.wav"),
        "Foundation: missing file"),
    Bad("ir-text-as-capture", ("ir", "t.wav", "--sweep", "s.wav", "--out", "o.wav"),
        "Foundation: unreadable file", text("t.wav", "not audio")),
    Bad("ir-folder-as-capture", ("ir", "f.wav", "--sweep", "s.wav", "--out", "o.wav"),
        "Foundation: unreadable file", folder("f.wav"), needle="folder"),
    Bad("analyze-missing", ("analyze", "nothing.wav"), "Foundation: missing file"),
    Bad("analyze-empty-wav", ("analyze", "e.wav"), "Foundation: unreadable file",
        wav("e.wav", lambda d: np.zeros(0)), needle="no samples"),
    Bad("fit-missing", ("fit", "nothing.wav", "--out", "m.json"), "Foundation: missing file"),
    Bad("render-missing-model", ("render", "nothing.json", "--out", "r.wav"),
        "Foundation: missing file"),
    Bad("predict-missing-room", ("predict", "nothing.toml"), "Foundation: missing file"),
    Bad("compare-missing-b", ("compare", "ir.wav", "nothing.wav"), "Foundation: missing file"),
    Bad("batch-missing-tree", ("batch", "nothing", "--out", "results"),
        "Foundation: missing file"),
    Bad("report-missing-input", ("report", "nothing.wav", "--out", "r.html"),
        "Foundation: missing file"),
    # --- Foundation: a capture shorter than the sweep, no sweep found -----------------------
    Bad("ir-capture-shorter-than-sweep", ("ir", "short.wav", "--sweep", "s.wav", "--out", "o.wav"),
        "Foundation: a capture shorter than the sweep",
        wav("short.wav", lambda d: np.zeros(FS // 2)), needle="shorter"),
    Bad("ir-noise-only", ("ir", "noise.wav", "--sweep", "s.wav", "--out", "o.wav"),
        "Foundation: no sweep found in it",
        wav("noise.wav", lambda d: 0.01 * np.random.default_rng(0).standard_normal(4 * FS))),
    Bad("ir-another-sweep", ("ir", "other.wav", "--sweep", "s.wav", "--out", "o.wav"),
        "Foundation: no sweep found (a take of another sweep)", wav("other.wav", _other_sweep_take)),
    # --- Never lose a take, tracebacks: a capture of digital silence (math domain error) ------
    Bad("ir-digital-silence", ("ir", "silence.wav", "--sweep", "s.wav", "--out", "o.wav"),
        "Never lose a take, tracebacks: a capture of digital silence",
        wav("silence.wav", lambda d: np.zeros(4 * FS), subtype="PCM_16")),
    Bad("analyze-digital-silence-capture", ("analyze", "silence.wav", "--sweep", "s.wav"),
        "Never lose a take, tracebacks: a capture of digital silence",
        wav("silence.wav", lambda d: np.zeros(4 * FS), subtype="PCM_16")),
    Bad("fit-reversed-response", ("fit", "rev.wav", "--out", "m.json"),
        "Never lose a take, tracebacks: a reversed response in fit (ZeroDivisionError)",
        wav("rev.wav", lambda d: data("ir.wav")(d)[::-1].copy())),
    # --- Foundation: sample rates that differ ------------------------------------------------
    Bad("ir-rate-differs", ("ir", "44k.wav", "--sweep", "s.wav", "--out", "o.wav"),
        "Foundation: sample rates that differ", wav("44k.wav", data("cap.wav"), fs=44100),
        needle="44100 Hz"),
    Bad("analyze-rate-differs", ("analyze", "44k.wav", "--sweep", "s.wav"),
        "Foundation: sample rates that differ", wav("44k.wav", data("cap.wav"), fs=44100)),
    Bad("import-rate-differs", ("import", "44k.wav", *R, "--sweep", "s.wav"),
        "Foundation: sample rates that differ", wav("44k.wav", data("cap.wav"), fs=44100)),
    Bad("auralize-rate-differs", ("auralize", "ir.wav", "dry44.wav", "--out", "w.wav"),
        "Foundation: sample rates that differ", wav("dry44.wav", data("dry.wav"), fs=44100)),
    # --- Foundation: a sidecar missing or malformed ------------------------------------------
    Bad("ir-sweep-without-sidecar", ("ir", "cap.wav", "--sweep", "lonely.wav", "--out", "o.wav"),
        "Foundation: a sidecar missing", copy("s.wav", "lonely.wav")),
    Bad("ir-sweep-sidecar-not-json", IR, "Foundation: a sidecar malformed",
        text("s.json", "{ not json"), needle="not valid JSON"),
    Bad("ir-sweep-sidecar-wrong-content", IR, "Foundation: a sidecar malformed (valid JSON, "
        "not a sweep's)", text("s.json", '{"format": "something else"}')),
    Bad("ir-sweep-sidecar-edited", IR, "Foundation: a sidecar malformed (its f2 edited)",
        edit_json("s.json", "s.json", _set(("sweep", "f2_hz"), 1e9))),
    Bad("compare-take-sidecar-not-json", ("compare", "captures/r/p-take1.wav", "ir.wav"),
        "Foundation: a sidecar malformed (a take's)", text("captures/r/p-take1.json", "{ nope"),
        needle="not valid JSON"),
    Bad("analyze-a-sweep-file", ("analyze", "s.wav"),
        "catalogue: a sweep file given as an impulse response"),
    # --- Foundation: NaN or Inf samples ------------------------------------------------------
    Bad("ir-nan-samples", ("ir", "nan.wav", "--sweep", "s.wav", "--out", "o.wav"),
        "Foundation: NaN samples", wav("nan.wav", lambda d: _with_nan(data("cap.wav")(d))),
        needle="NaN"),
    Bad("analyze-inf-samples", ("analyze", "inf.wav"), "Foundation: Inf samples",
        wav("inf.wav", lambda d: _with_inf(data("ir.wav")(d))), needle="Inf"),
    Bad("auralize-nan-dry", ("auralize", "ir.wav", "nan.wav", "--out", "w.wav"),
        "Foundation: NaN samples", wav("nan.wav", lambda d: _with_nan(data("dry.wav")(d)))),
    # --- Never lose a take, absurd sizes (were memory errors) -------------------------------
    Bad("sweep-duration-1e9", ("sweep", "x.wav", "--duration", "1e9"),
        "Never lose a take, absurd sizes: sweep --duration 1e9", needle="at most"),
    Bad("sweep-repeats-100000", ("sweep", "x.wav", "--repeats", "100000"),
        "Never lose a take, absurd sizes: --repeats 100000", needle="at most"),
    Bad("ir-pre-1e6", (*IR, "--pre", "1e6"), "Never lose a take, absurd sizes: ir --pre 1e6",
        needle="at most"),
    Bad("ir-harmonics-100000", (*IR, "--harmonics", "100000"),
        "Never lose a take, absurd sizes: --harmonics 100000"),
    Bad("fit-order-100000", ("fit", "ir.wav", "--out", "m.json", "--order", "100000"),
        "catalogue: absurd sizes, fit --order"),
    Bad("fit-echoes-100000", ("fit", "ir.wav", "--out", "m.json", "--echoes", "100000"),
        "catalogue: absurd sizes, fit --echoes"),
    Bad("render-rate-1000", ("render", "model.json", "--out", "r.wav", "--rate", "1000"),
        "catalogue: absurd sizes, render --rate"),
    Bad("render-seconds-1e6", ("render", "model.json", "--out", "r.wav", "--seconds", "1e6"),
        "catalogue: absurd sizes, render --seconds"),
    # --- Never lose a take, inputs destroyed ------------------------------------------------
    Bad("ir-out-is-sweep", ("ir", "cap.wav", "--sweep", "s.wav", "--out", "s.wav"),
        "Never lose a take, inputs destroyed: ir --out equal to the sweep",
        needle="would overwrite the input"),
    Bad("ir-out-is-capture", ("ir", "cap.wav", "--sweep", "s.wav", "--out", "cap.wav"),
        "Never lose a take, inputs destroyed", needle="would overwrite the input"),
    Bad("auralize-out-is-dry", ("auralize", "ir.wav", "dry.wav", "--out", "dry.wav"),
        "Never lose a take, inputs destroyed: auralize --out equal to the dry file",
        needle="would overwrite the input"),
    Bad("auralize-out-is-ir", ("auralize", "ir.wav", "dry.wav", "--out", "ir.wav"),
        "Never lose a take, inputs destroyed: auralize --out equal to the IR",
        needle="would overwrite the input"),
    Bad("fit-out-is-ir-sidecar", ("fit", "irm.wav", "--out", "irm.json"),
        "Never lose a take, inputs destroyed: a model over an IR's sidecar",
        needle="would overwrite the input"),
    Bad("render-out-is-model", ("render", "model.json", "--out", "model.json"),
        "Never lose a take, inputs destroyed"),
    Bad("sweep-replaces-a-sweep", ("sweep", "s.wav", "--duration", "3"),
        "Never lose a take, inputs destroyed: sweep silently replaced a sweep takes reference",
        needle="--force"),
    Bad("ir-out-is-a-take", ("ir", "cap.wav", "--sweep", "s.wav", "--out",
                             "captures/r/p-take1.wav"),
        "Never lose a take, inputs are sacred: takes are never overwritten", needle="take"),
    Bad("render-out-is-a-take", ("render", "model.json", "--out", "captures/r/p-take1.wav"),
        "Never lose a take, inputs are sacred: takes are never overwritten", needle="take"),
    Bad("demo-out-not-empty", ("demo", "--out", "captures"),
        "Never lose a take, inputs destroyed: demo --out into an existing folder",
        needle="--force"),
    # --- Never lose a take, half-written pairs ---------------------------------------------
    Bad("ir-sidecar-name-is-a-folder", IR,
        "Never lose a take, half-written pairs: the sidecar's name is a folder", folder("o.json")),
    Bad("analyze-ir-pair-mismatched", ("analyze", "irm.wav"),
        "Never lose a take, all-or-nothing outputs: a mismatched pair is refused on read",
        copy("ir.wav", "irm.wav"), needle="do not belong together"),
    Bad("compare-take-pair-mismatched", ("compare", "captures/r/p-take1.wav", "ir.wav"),
        "Never lose a take, all-or-nothing outputs: a mismatched pair is refused on read",
        copy("capb.wav", "captures/r/p-take1.wav"), needle="do not belong together"),
    # --- Never lose a take, accepted without a word -----------------------------------------
    Bad("analyze-truncated-wav", ("analyze", "half.wav"),
        "Never lose a take, accepted without a word: a truncated WAV (half its bytes)",
        halve("ir.wav", "half.wav")),
    Bad("ir-truncated-capture", ("ir", "half.wav", "--sweep", "s.wav", "--out", "o.wav"),
        "Never lose a take, accepted without a word: a truncated WAV (half its bytes)",
        halve("cap.wav", "half.wav")),
    Bad("ir-loopback-is-the-channel", ("ir", "cap2.wav", "--sweep", "s.wav", "--out", "o.wav",
                                       "--channel", "2", "--loopback-channel", "2"),
        "Never lose a take, accepted without a word: --loopback-channel 2 --channel 2",
        needle="referenced to itself"),
    Bad("import-loopback-is-the-channel", ("import", "cap2.wav", *R, "--sweep", "s.wav",
                                           "--channels", "2", "--loopback-channel", "2"),
        "Never lose a take, accepted without a word: --loopback-channel 2 --channel 2",
        needle="referenced to itself"),
    Bad("capture-loopback-is-the-channel", ("capture", "--sweep", "s.wav", "--room", "r",
                                            "--position", "p", "--input-channels", "2",
                                            "--loopback-channel", "2", "--yes"),
        "Never lose a take, accepted without a word: --loopback-channel 2 --channel 2 "
        "(refused before any device is opened)", needle="referenced to itself"),
    Bad("model-unknown-key", ("render", "m.json", "--out", "r.wav"),
        "Never lose a take, accepted without a word: a model file with unknown keys",
        edit_json("model.json", "m.json", _set(("surprise",), 1)), needle="surprise"),
    Bad("model-order-1e9", ("render", "m.json", "--out", "r.wav"),
        "Never lose a take, accepted without a word: a model with an order of 1e9",
        edit_json("model.json", "m.json", _set(("coloration", "order"), 1e9))),
    Bad("model-echo-at-1e9-s", ("render", "m.json", "--out", "r.wav"),
        "Never lose a take, accepted without a word: a model with an echo at 1e9 s",
        edit_json("model.json", "m.json", _set(("echoes", 0, "delay_s"), 1e9))),
    Bad("model-not-json", ("auralize", "m.json", "dry.wav", "--out", "w.wav"),
        "Foundation: a model file malformed", text("m.json", "[1, 2")),
    Bad("render-seconds-0.001", ("render", "model.json", "--out", "r.wav", "--seconds", "0.001"),
        "Never lose a take, accepted without a word: render --seconds 0.001",
        needle="at least"),
    Bad("auralize-all-zero-ir", ("auralize", "zero.wav", "dry.wav", "--out", "w.wav"),
        "Never lose a take, accepted without a word: an all-zero IR in auralize",
        wav("zero.wav", lambda d: np.zeros(FS))),
    Bad("auralize-silent-dry", ("auralize", "ir.wav", "zero.wav", "--out", "w.wav"),
        "Never lose a take, accepted without a word: a silent dry sound in auralize",
        wav("zero.wav", lambda d: np.zeros(FS))),
    Bad("import-humidity-150", ("import", "cap.wav", *R, "--humidity", "150"),
        "Never lose a take, accepted without a word: import --humidity 150",
        needle="relative humidity"),
    Bad("import-distance-negative", ("import", "cap.wav", *R, "--distance", "-3"),
        "Never lose a take, accepted without a word: import --distance -3", needle="positive"),
    Bad("import-temperature-nan", ("import", "cap.wav", *R, "--temperature", "nan"),
        "Never lose a take, accepted without a word: NaN temperature (stored as null)",
        needle="finite"),
    Bad("import-temperature-absurd", ("import", "cap.wav", *R, "--temperature", "500"),
        "catalogue: a temperature no room has (-50..60 °C, as a room description)"),
    Bad("capture-humidity-150", ("capture", "--sweep", "s.wav", "--room", "r", "--position",
                                 "p", "--humidity", "150", "--yes"),
        "Never lose a take, accepted without a word: --humidity 150 (capture)",
        needle="relative humidity"),
    Bad("capture-angle-inf", ("capture", "--sweep", "s.wav", "--room", "r", "--position", "p",
                              "--angle", "inf", "--yes"),
        "Never lose a take, accepted without a word: NaN/Inf options", needle="finite"),
    Bad("attenuation-humidity-150", ("attenuation", "ir.wav", "--distances", "1",
                                     "--humidity", "150"),
        "Never lose a take, accepted without a word: humidity out of range",
        needle="relative humidity"),
    Bad("compare-fail-above-nan", ("compare", "ir.wav", "ir.wav", "--fail-above", "nan"),
        "Never lose a take, accepted without a word: NaN/Inf options", needle="finite"),
    Bad("auralize-peak-inf", ("auralize", "ir.wav", "dry.wav", "--out", "w.wav", "--peak",
                              "inf"),
        "Never lose a take, accepted without a word: NaN/Inf options", needle="finite"),
    Bad("sweep-duration-nan", ("sweep", "x.wav", "--duration", "nan"),
        "Never lose a take, accepted without a word: NaN/Inf options", needle="finite"),
    Bad("sweep-f2-above-nyquist", ("sweep", "x.wav", "--f2", "30000"),
        "Foundation: f2 above Nyquist", needle="Nyquist"),
    Bad("sweep-f1-above-f2", ("sweep", "x.wav", "--f1", "5000", "--f2", "1000"),
        "Foundation: f1 >= f2"),
    # --- Never lose a take, messages --------------------------------------------------------
    Bad("argparse-type-error", ("sweep", "x.wav", "--duration", "abc"),
        "Never lose a take, messages: argparse type errors printed the usage block",
        needle="measure sweep --help", absent="usage:"),
    Bad("argparse-extra-argument", ("analyze", "ir.wav", "extra.wav"),
        "Never lose a take, messages: extra arguments printed the top-level usage",
        needle="measure analyze --help", absent="usage:"),
    Bad("argparse-unknown-command", ("nosuch",), "Never lose a take, messages",
        needle="invalid choice"),
    Bad("sweep-sidecar-unreadable", ("ir", "cap.wav", "--sweep", "t.wav", "--out", "o.wav"),
        "Never lose a take, messages: an unreadable sidecar was 'not valid JSON (Permission "
        "denied)'", steps(copy("s.wav", "t.wav"), folder("t.json")), needle="cannot be read",
        absent="not valid JSON"),
    Bad("model-decay-1e7-s", ("render", "m.json", "--out", "r.wav"),
        "Never lose a take, messages: a model's decay of 1e7 s was an error about --seconds",
        edit_json("model.json", "m.json", _set(("late", "t60_s", 0), 1e7)), needle="t60",
        absent="--seconds 1"),
    Bad("garbage-mp3", ("analyze", "g.mp3"),
        "Never lose a take, messages: a garbage .mp3 printed four decoder lines",
        raw("g.mp3", _RNG_BYTES)),
    Bad("garbage-wav", ("analyze", "g.wav"), "Never lose a take, messages: a non-audio file",
        raw("g.wav", _RNG_BYTES)),
    Bad("text-as-flac", ("fit", "t.flac", "--out", "m.json"),
        "Never lose a take, messages: a non-audio file renamed .flac", text("t.flac", "hello")),
    Bad("room-toml-binary", ("predict", "b.toml"),
        "Never lose a take, tracebacks: a room description that is not text (UnicodeDecodeError)",
        raw("b.toml", b"\xff\xfe\x00binary")),
    Bad("room-toml-malformed", ("predict", "b.toml"), "catalogue: a room description malformed",
        text("b.toml", "dimensions_m = [6.0, 4.5")),
    Bad("room-toml-unknown-key", ("predict", "b.toml"),
        "catalogue: a room description with an unknown key",
        text("b.toml", ROOM_TOML.replace('name = "catalogue room"',
                                         'name = "x"\ncolour = "blue"'))),
    # --- catalogue: other user mistakes found beside them -----------------------------------
    Bad("ir-out-not-wav", ("ir", "cap.wav", "--sweep", "s.wav", "--out", "o.txt"), "catalogue"),
    Bad("ir-channel-missing", (*IR, "--channel", "5"), "catalogue: a channel that does not exist",
        needle="does not exist"),
    Bad("analyze-channel-missing", ("analyze", "ir.wav", "--channel", "3"),
        "catalogue: a channel that does not exist"),
    Bad("analyze-speech-without-noise", ("analyze", "ir.wav", "--speech-spl", "60"),
        "catalogue: STI levels given by halves"),
    Bad("import-bad-room-label", ("import", "cap.wav", "--room", "../up", "--position", "p"),
        "catalogue: a room name that leaves the captures folder"),
    Bad("attenuation-count-mismatch", ("attenuation", "ir.wav", "--distances", "1,2"),
        "catalogue: one distance per file"),
)


def test_the_catalogue_holds_at_least_45_distinct_bad_inputs():
    # Issue "Never lose a take", item 4: at least 45 distinct bad inputs; the count printed
    ids = [b.id for b in CATALOGUE]
    assert len(set(ids)) == len(ids)
    print(f"\ncatalogue: {len(CATALOGUE)} bad inputs, {len(VALID)} odd but valid inputs")
    assert len(CATALOGUE) >= 45


@pytest.mark.parametrize("bad", [
    pytest.param(b, id=b.id, marks=() if b.pending is None else pytest.mark.xfail(
        strict=True, reason=f"pending: {b.pending}")) for b in CATALOGUE])
def test_each_bad_input_is_one_error_line_exit_2_and_changes_nothing(bad, work):
    if bad.setup is not None:
        bad.setup(work)
    before = snapshot(work)
    r = run_measure(list(bad.argv), work)
    lines = r.stderr.splitlines()
    # DESIGN.md, errors: exit status 2, one line `error: what was wrong; what to do`
    assert r.returncode == 2, (bad.source, r.returncode, r.stderr)
    assert "Traceback" not in r.stderr, r.stderr
    assert len(lines) == 1 and lines[0].startswith("error: "), (bad.source, r.stderr)
    if bad.needle is not None:
        assert bad.needle in lines[0], lines[0]
    if bad.absent is not None:
        assert bad.absent not in lines[0], lines[0]
    # nothing written: no file or folder added, removed or changed
    assert snapshot(work) == before, bad.source


# ---------------------------------------------------------------------------------------------
# Odd but valid: must succeed
# ---------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Good:
    id: str
    argv: tuple[str, ...]
    source: str
    setup: Setup | None = None
    warning: str | None = None  # a warning line that must be printed


def _silence_after(d: Path) -> np.ndarray:
    return np.concatenate([data("ir.wav")(d), np.zeros(FS // 2)])


_ODD_PATH = "salle de réunion ü/réponse 1.wav"  # spaces and non-ASCII characters

VALID: tuple[Good, ...] = (
    # Issue "Never lose a take", item 4: 8/16/24/32-bit, float64, FLAC
    *(Good(f"analyze-{sub.lower()}", ("analyze", f"ir_{sub}.wav"),
           "Never lose a take, item 4: every WAV sample format",
           wav(f"ir_{sub}.wav", data("ir.wav"), subtype=sub))
      for sub in ("PCM_U8", "PCM_16", "PCM_24", "PCM_32", "FLOAT", "DOUBLE")),
    Good("analyze-flac", ("analyze", "ir.flac"), "Never lose a take, item 4: FLAC",
         wav("ir.flac", data("ir.wav"), subtype="PCM_24")),
    Good("ir-flac-capture", ("ir", "cap.flac", "--sweep", "s.wav", "--out", "o.wav"),
         "Never lose a take, item 4: FLAC", wav("cap.flac", data("cap.wav"), subtype="PCM_24")),
    Good("analyze-non-ascii-path", ("analyze", _ODD_PATH),
         "Never lose a take, item 4: non-ASCII paths with spaces", wav(_ODD_PATH, data("ir.wav"))),
    Good("ir-non-ascii-paths", ("ir", "prise ü 1.wav", "--sweep", "s.wav", "--out",
                                "réponse é 1.wav"),
         "Never lose a take, item 4: non-ASCII paths with spaces",
         copy("cap.wav", "prise ü 1.wav")),
    # Issue "Never lose a take", tracebacks: a real response followed by 0.5 s of digital
    # silence, 16- and 32-bit (ZeroDivisionError in the noise-floor search)
    *(Good(f"{cmd}-silence-tail-{bits}", (cmd, f"sil{bits}.wav", *extra),
           "Never lose a take, tracebacks: a response ending in exact digital silence",
           wav(f"sil{bits}.wav", _silence_after, subtype=f"PCM_{bits}"))
      for cmd, extra in (("analyze", ()), ("fit", ("--out", "m.json"))) for bits in (16, 32)),
    Good("analyze-reversed-response", ("analyze", "rev.wav"),
         "Never lose a take, tracebacks: a reversed response (null figures with reasons)",
         wav("rev.wav", lambda d: data("ir.wav")(d)[::-1].copy())),
    # Never lose a take, accepted without a word: a large DC offset is recovered with a warning
    Good("ir-dc-offset", ("ir", "dc.wav", "--sweep", "s.wav", "--out", "o.wav"),
         "Never lose a take, accepted without a word: a capture with a large DC offset",
         wav("dc.wav", lambda d: data("cap.wav")(d) + 0.2, subtype="PCM_24"),
         warning="DC offset"),
    # Foundation: a clipped capture (warn)
    Good("ir-clipped-capture", ("ir", "clip.wav", "--sweep", "s.wav", "--out", "o.wav"),
         "Foundation: a clipped capture (warn)",
         wav("clip.wav", lambda d: np.clip(data("cap.wav")(d) * 50, -1, 1), subtype="PCM_24"),
         warning="clipped"),
)


@pytest.mark.parametrize("good", [pytest.param(g, id=g.id) for g in VALID])
def test_each_odd_but_valid_input_succeeds(good, work):
    if good.setup is not None:
        good.setup(work)
    r = run_measure(list(good.argv), work)
    assert r.returncode == 0, (good.source, r.stderr)
    assert "Traceback" not in r.stderr
    if good.warning is not None:
        assert any(ln.startswith("warning: ") and good.warning in ln
                   for ln in r.stderr.splitlines()), r.stderr
