"""measure.report: the analysis and model-fit figures, PNG output, --plot, no pyplot state."""

from __future__ import annotations

import dataclasses
import json
import sys

import numpy as np
import pytest

from measure import cli
from measure.audio_io import write_audio
from measure.decay import FIT_RANGES_DB
from measure.errors import MissingDependencyError, ParameterError
from measure.model.fit import compare_figures
from measure.parameters import analyze_ir
from measure.report import (
    fit_line,
    plot_analysis,
    plot_attenuation,
    plot_model_fit,
    save_figure,
    write_analysis_plot,
    write_attenuation_plot,
    write_model_plot,
)
from measure.virtual import DEMO_ROOMS, OCTAVE_CENTERS_HZ, VirtualSpace, positioned_ir, room_ir

FS = 48000
OFFICE = next(r for r in DEMO_ROOMS if r.name == "office")  # the shortest demo room (1.5 s)
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # PNG specification (ISO/IEC 15948) 5.2
NOISE_DB = -75.0  # background noise re the IR peak: gives a noise floor for Lundeby to find
MPL_MODULES = ("matplotlib", "matplotlib.figure", "matplotlib.backends",
               "matplotlib.backends.backend_agg")


def _office_ir(fs: int = FS, seed: int = 1) -> np.ndarray:
    h = room_ir(OFFICE, fs, seed=seed)
    rng = np.random.default_rng(20261202 + seed)
    return h + 10.0 ** (NOISE_DB / 20.0) * np.max(np.abs(h)) * rng.standard_normal(h.size)


@pytest.fixture(scope="module")
def office():
    h = _office_ir()
    return h, analyze_ir(h, FS)


def _texts(ax) -> list[str]:
    return [t.get_text() for t in ax.texts]


def _no_new_pyplot_figures():
    """A check to run after plotting: no pyplot state was created by measure.report."""
    if "matplotlib.pyplot" in sys.modules:  # imported by something else in this process
        assert sys.modules["matplotlib.pyplot"].get_fignums() == []
    else:
        assert "matplotlib.pyplot" not in sys.modules


# ---------------------------------------------------------------------------------------------
# plot_analysis


def test_analysis_figure_has_the_expected_axes_and_labels(office):
    h, figs = office
    fig = plot_analysis(h, FS, figs, title="office (virtual)")
    n_bands = len(figs.bands)
    assert n_bands == 8  # octaves 63 Hz-8 kHz at 48 kHz (measure.bands defaults)
    # whole IR + first 100 ms, one panel per band, the decay-time chart
    assert len(fig.axes) == 2 + n_bands + 1
    ax_ir, ax_early, *panels, ax_t = fig.axes
    assert fig.get_suptitle() == "office (virtual)"
    assert ax_ir.get_xlabel() == "time (s)" and ax_ir.get_ylabel() == "level (dB re peak)"
    assert ax_early.get_xlabel() == "time after onset (ms)"
    assert [ax.get_title(loc="left") for ax in panels] == [b.band.name for b in figs.bands]
    assert panels[0].get_ylabel() == "decay (dB)"
    assert panels[-1].get_xlabel() == "time after onset (s)"
    assert ax_t.get_ylabel() == "decay time (s)" and ax_t.get_xlabel() == "octave band (Hz)"
    # nominal labels, as measure.bands prints them
    assert [t.get_text() for t in ax_t.get_xticklabels()] == [
        "63", "125", "250", "500", "1k", "2k", "4k", "8k"]
    _no_new_pyplot_figures()


def test_onset_and_noise_floor_are_marked_where_the_analysis_put_them(office):
    h, figs = office
    ax_ir = plot_analysis(h, FS, figs).axes[0]
    lines = {ln.get_label(): ln for ln in ax_ir.get_lines()}
    onset = next(ln for lab, ln in lines.items() if lab.startswith("onset"))
    # the vertical line sits at RoomFigures.onset_index / fs (exact: the value is drawn as is)
    assert onset.get_xdata()[0] == pytest.approx(figs.onset_index / FS, rel=0, abs=1e-12)
    bb = figs.broadband
    assert bb.decay.noise_floor_found  # precondition: white noise at -75 dB re peak was added
    floor = next(ln for lab, ln in lines.items() if lab.startswith("noise floor"))
    assert floor.get_ydata()[0] == pytest.approx(-bb.peak_to_noise_db, abs=1e-12)
    # The noise is white with power 10^(NOISE_DB/10)·peak² (derived from how it was made); the
    # broadband peak is the direct sound plus a little noise, so the marked floor lies within
    # 1 dB of NOISE_DB (Lundeby's estimate of a stationary mean power over > 1 s of noise
    # has a spread far below that).
    assert -bb.peak_to_noise_db == pytest.approx(NOISE_DB, abs=1.0)


def test_fit_lines_are_the_regressions_that_gave_the_reported_decay_times(office):
    h, figs = office
    fig = plot_analysis(h, FS, figs)
    panels = fig.axes[2:-1]
    n_checked = 0
    for ax, bf in zip(panels, figs.bands, strict=True):
        drawn = {ln.get_label().split()[0]: ln for ln in ax.get_lines()
                 if " fit " in ln.get_label()}
        for key, name in (("edt", "EDT"), ("t20", "T20"), ("t30", "T30")):
            value = getattr(bf, f"{key}_s")
            if value is None:
                assert name not in drawn, (bf.label, name)
                continue
            t, y = (np.asarray(v, dtype=float) for v in drawn[name].get_data())
            slope = (y[1] - y[0]) / (t[1] - t[0])
            # T = -60/slope (ISO 3382-1 A.2.2); same samples and least squares as
            # measure.decay.fit_decay, so equal up to rounding (1e-9 relative)
            assert -60.0 / slope == pytest.approx(value, rel=1e-9), (bf.label, name)
            # the segment spans the evaluation range: it starts where the curve first reaches
            # the range's upper level (within one sample of the decay)
            hi_db, _ = FIT_RANGES_DB[key]
            curve = np.asarray(bf.decay.edc_db)
            assert t[0] == int(np.argmax(curve <= hi_db)) / FS
            n_checked += 1
    assert n_checked >= 20  # most of the 24 band figures of this room are measurable


def test_fit_line_matches_an_exact_exponential():
    # A Schroeder curve that is exactly linear in dB with T = 1.3 s: the regression recovers
    # the slope -60/T and the intercept 0 dB (analytic; tolerance: float rounding).
    fs = 8000
    t = np.arange(int(2.0 * fs)) / fs
    curve = -60.0 * t / 1.3
    t0, t1, a, b = fit_line(curve, fs, -5.0, -35.0)
    assert -60.0 / b == pytest.approx(1.3, rel=1e-12)
    assert a == pytest.approx(0.0, abs=1e-9)
    # range from the first sample at or below -5 dB to the last at or above -35 dB
    assert t0 == pytest.approx(np.ceil(5.0 / 60.0 * 1.3 * fs) / fs, abs=1.5 / fs)
    assert t1 == pytest.approx(35.0 / 60.0 * 1.3, abs=1.5 / fs)
    assert fit_line(curve[: int(0.3 * fs)], fs, -5.0, -35.0) is None  # range not reached


def test_null_figures_are_gaps_with_a_cross(office):
    h, figs = office
    # make T30 of the 1 kHz band null, as the analysis does when a check fails
    bands = tuple(dataclasses.replace(b, t30_s=None, t30_uncertainty_s=None)
                  if b.label == "1k" else b for b in figs.bands)
    figs2 = dataclasses.replace(figs, bands=bands)
    ax_t = plot_analysis(h, FS, figs2).axes[-1]
    k = [b.label for b in bands].index("1k")
    t30_bars = [c for c in ax_t.containers if c.get_label().startswith("T30")][0]
    n_t30 = sum(b.t30_s is not None for b in bands)
    assert len(t30_bars.patches) == n_t30  # one bar per measured value, none for the null
    crosses = [ln for ln in ax_t.get_lines() if ln.get_marker() == "x" and len(ln.get_xdata())]
    xs = np.concatenate([np.asarray(ln.get_xdata(), dtype=float) for ln in crosses])
    # T30 is the third bar of each group, offset by +width (0.26) from the band's tick
    assert np.any(np.isclose(xs, k + 0.26))
    # and the band panel says it
    panel = plot_analysis(h, FS, figs2).axes[2 + k]
    assert any("T30 —" in s for s in _texts(panel))


def test_uncertainty_is_drawn_as_error_bars(office):
    h, figs = office
    ax_t = plot_analysis(h, FS, figs).axes[-1]
    bars = {c.get_label().split()[0]: c for c in ax_t.containers
            if hasattr(c, "errorbar") and c.errorbar is not None}
    assert set(bars) == {"T20", "T30"}  # EDT has no Annex A uncertainty
    for name, key in (("T20", "t20"), ("T30", "t30")):
        want = [getattr(b, f"{key}_uncertainty_s") for b in figs.bands
                if getattr(b, f"{key}_s") is not None]
        segs = bars[name].errorbar.lines[2][0].get_segments()
        half = [0.5 * (s[1][1] - s[0][1]) for s in segs]
        # error bars are ± the standard uncertainty computed by measure.parameters (exact)
        np.testing.assert_allclose(half, want, rtol=1e-12)


def test_a_band_without_a_valid_decay_shows_its_plain_integral(office):
    h, figs = office
    k = 0
    b = figs.bands[k]
    dead = dataclasses.replace(b.decay, edt_s=None, t20_s=None, t30_s=None,
                               edc_db=np.zeros(0))
    bands = (dataclasses.replace(b, decay=dead, edt_s=None, t20_s=None, t30_s=None,
                                 t20_uncertainty_s=None, t30_uncertainty_s=None),
             *figs.bands[1:])
    panel = plot_analysis(h, FS, dataclasses.replace(figs, bands=bands)).axes[2 + k]
    assert any("no valid decay" in s for s in _texts(panel))
    (line,) = panel.get_lines()  # the recomputed Schroeder integral, and no fit lines
    y = np.asarray(line.get_ydata(), dtype=float)
    assert y[0] == pytest.approx(0.0, abs=1e-12)  # normalised to its start (Schroeder 1965)
    assert np.all(np.diff(y) <= 1e-9)  # a backward integral of h² never rises


def test_third_octave_figure_has_a_panel_per_band():
    h = _office_ir()
    figs = analyze_ir(h, FS, bands="third", sti=False)
    fig = plot_analysis(h, FS, figs)
    assert len(fig.axes) == 2 + len(figs.bands) + 1
    assert fig.axes[-1].get_xlabel() == "third-octave band (Hz)"
    _no_new_pyplot_figures()


def test_plot_analysis_refuses_mismatched_inputs(office):
    h, figs = office
    with pytest.raises(ParameterError, match="computed at 48000 Hz"):
        plot_analysis(h, 44100, figs)
    with pytest.raises(ParameterError, match="RoomFigures"):
        plot_analysis(h, FS, figs.to_dict())


# ---------------------------------------------------------------------------------------------
# plot_model_fit


@pytest.fixture(scope="module")
def model_case(office):
    # A second rendering of the same virtual room stands in for a model: its figures differ
    # a little, band by band, which is what the figure is about (fit_model is tested
    # elsewhere and takes seconds).
    _, measured = office
    modelled = analyze_ir(_office_ir(seed=2), FS, sti=False)
    return measured, modelled, compare_figures(measured, modelled)


def test_model_figure_has_the_expected_axes_and_values(model_case):
    measured, modelled, report = model_case
    fig = plot_model_fit(measured, modelled, report, title="office: model fit")
    n = len(report.bands)
    assert len(fig.axes) == 3 + 1 + n  # EDT, T30, C80; differences; one decay panel per band
    ax_edt, ax_t30, ax_c80, ax_d, *panels = fig.axes
    assert fig.get_suptitle() == "office: model fit"
    assert (ax_edt.get_ylabel(), ax_t30.get_ylabel(), ax_c80.get_ylabel()) == (
        "EDT (s)", "T30 (s)", "C80 (dB)")
    assert ax_d.get_ylabel() == "model − measured (JND)"
    assert [t.get_text() for t in ax_d.get_xticklabels()] == list(report.bands)
    # the lines carry exactly the report's values (None -> NaN gap)
    for ax, key in ((ax_edt, "edt_s"), (ax_t30, "t30_s"), (ax_c80, "c80_db")):
        lines = {ln.get_label(): ln for ln in ax.get_lines()}
        for who in ("measured", "modelled"):
            want = [getattr(report.cell(b, key), who) for b in report.bands]
            got = lines["measured" if who == "measured" else "model"].get_ydata()
            np.testing.assert_array_equal(
                got, np.array([np.nan if v is None else v for v in want], dtype=float))
    # the bars are the report's differences in JNDs
    for c in ax_d.containers:
        key = {"EDT": "edt_s", "T30": "t30_s", "C80": "c80_db"}[c.get_label().split()[0]]
        want = [report.cell(b, key).difference_jnd for b in report.bands]
        got = [p.get_height() for p in c.patches]
        np.testing.assert_allclose(got, [v for v in want if v is not None], rtol=1e-12)
    assert [p.get_title(loc="left") for p in panels] == [b.band.name for b in measured.bands]
    _no_new_pyplot_figures()


def test_model_figure_without_curves(model_case):
    _, _, report = model_case
    fig = plot_model_fit(None, None, report)
    assert len(fig.axes) == 4
    with pytest.raises(ParameterError, match="both"):
        plot_model_fit(model_case[0], None, report)
    with pytest.raises(ParameterError, match="FitReport"):
        plot_model_fit(None, None, report.to_dict())


# ---------------------------------------------------------------------------------------------
# plot_attenuation


@pytest.fixture(scope="module")
def attenuation_doc():
    from measure.attenuation import analyze_series

    room = VirtualSpace("hall", OCTAVE_CENTERS_HZ, (1.4,) * 8, volume_m3=500.0,
                        directivity=(0.0, 0.05, 0.1, 0.2, 0.3, 0.4, 0.45, 0.45), length_s=1.5)
    dist = [1.0, 2.0, 4.0, 8.0, 16.0]
    ang = [0.0, 45.0, 90.0, 135.0, 180.0]
    h = [positioned_ir(room, FS, distance_m=d, seed=i) for i, d in enumerate(dist)]
    h += [positioned_ir(room, FS, distance_m=0.5, angle_deg=a, seed=10 + i)
          for i, a in enumerate(ang)]
    return analyze_series(h, FS, distances_m=dist + [0.5] * 5, angles_deg=[0.0] * 5 + ang
                          ).to_dict()


def _line(ax, label):
    return next(ln for ln in ax.get_lines() if ln.get_label() == label)


def test_attenuation_figure_draws_the_documents_numbers(attenuation_doc):
    doc = attenuation_doc
    fig = plot_attenuation(doc, title="hall")
    gain, drr, lowpass, muffling, octaves = [ax for ax in fig.axes if ax.get_title(loc="left")]
    # The measured points are the document's, at its distances (no re-computation).
    pts = _line(gain, "direct, measured")
    assert list(pts.get_xdata()) == [p["distance_m"] for p in doc["positions"]]
    np.testing.assert_allclose(pts.get_ydata(), [p["gain_db"] for p in doc["positions"]])
    # The free-field reference falls 20·lg 2 = 6.02 dB per doubling (spherical spreading).
    ff = _line(gain, "free field, −6.02 dB per doubling")
    x, y = np.asarray(ff.get_xdata()), np.asarray(ff.get_ydata())
    np.testing.assert_allclose(np.diff(y) / np.diff(np.log2(x)), -20 * np.log10(2), rtol=1e-9)
    # The critical distance is the line crossing 0 dB where the document puts it.
    rc = next(ln for ln in drr.get_lines() if ln.get_label().startswith("critical distance"))
    assert rc.get_xdata()[0] == pytest.approx(doc["critical_distance_m"])
    assert f"{doc['critical_distance_m']:.2f} m" in rc.get_label()
    # Units on every axis, log distance axes.
    for ax in (gain, drr, lowpass):
        assert ax.get_xscale() == "log" and ax.get_xlabel() == "distance (m)"
    for ax in (gain, drr, lowpass, muffling, octaves):
        assert "(" in ax.get_ylabel() and ")" in ax.get_ylabel()
    assert lowpass.get_yscale() == "log" and lowpass.get_ylabel() == "low-pass corner (Hz)"
    # One line per octave in the direction panel, its label carrying the directivity index.
    di = doc["direction"]["directivity_index_db"]
    labels = [ln.get_label() for ln in octaves.get_lines()]
    assert labels == [f"{b} Hz (DI {v:.1f} dB)" for b, v in di.items()]
    _no_new_pyplot_figures()


def test_attenuation_plot_refuses_a_document_without_a_series(attenuation_doc, tmp_path):
    with pytest.raises(ParameterError, match="attenuation"):
        plot_attenuation({"nothing": 1})
    with pytest.raises(ParameterError, match="neither"):
        plot_attenuation({"positions": []})
    _check_png(write_attenuation_plot(tmp_path / "a.png", attenuation_doc))


# ---------------------------------------------------------------------------------------------
# Files


def _check_png(path, *, min_size_px: int = 600):
    from matplotlib.image import imread

    data = path.read_bytes()
    assert data[:8] == PNG_SIGNATURE
    img = imread(path)
    assert img.ndim == 3 and img.shape[2] in (3, 4)
    assert min(img.shape[:2]) >= min_size_px
    assert float(np.std(img[..., :3])) > 0.05  # something is drawn, not a blank page
    return img


def test_save_figure_writes_a_png_atomically(office, tmp_path):
    h, figs = office
    path = write_analysis_plot(tmp_path / "sub" / "office.png", h, FS, figs, "office")
    assert path == tmp_path / "sub" / "office.png"
    _check_png(path)
    assert sorted(p.name for p in path.parent.iterdir()) == ["office.png"]  # no temp left
    with pytest.raises(ParameterError, match=r"\.png"):
        save_figure(plot_analysis(h, FS, figs), tmp_path / "office.jpg")
    assert not (tmp_path / "office.jpg").exists()
    _no_new_pyplot_figures()


def test_write_model_plot(model_case, tmp_path):
    path = write_model_plot(tmp_path / "fit.png", *model_case, "fit")
    _check_png(path)


# ---------------------------------------------------------------------------------------------
# Missing matplotlib


@pytest.fixture
def no_matplotlib(monkeypatch):
    # A None entry in sys.modules makes `import` raise ImportError (Python reference,
    # "The module cache"), as for a missing package.
    for name in MPL_MODULES:
        monkeypatch.setitem(sys.modules, name, None)


def test_missing_matplotlib_is_a_missing_dependency_error(office, no_matplotlib):
    h, figs = office
    with pytest.raises(MissingDependencyError, match="pip install matplotlib"):
        plot_analysis(h, FS, figs)
    with pytest.raises(ImportError):  # also an ImportError for callers who catch that
        plot_analysis(h, FS, figs)


# ---------------------------------------------------------------------------------------------
# The command line


@pytest.fixture
def ir_file(tmp_path):
    path = tmp_path / "office.wav"
    write_audio(path, _office_ir()[np.newaxis, :], FS)
    return path


def _run(capsys, argv):
    code = cli.main(argv)
    out = capsys.readouterr()
    return code, out.out, out.err


@pytest.mark.parametrize("mode", [["--json"], []])
def test_analyze_plot_writes_a_png_and_leaves_stdout_alone(tmp_path, ir_file, capsys,
                                                           monkeypatch, mode):
    monkeypatch.setattr(cli, "COMMANDS", ("measure.cli.cmd_analyze",))
    code, plain, err = _run(capsys, ["analyze", str(ir_file), *mode])
    assert code == 0, err
    png = tmp_path / "plots" / "office.png"
    code, out, err = _run(capsys, ["analyze", str(ir_file), *mode, "--plot", str(png)])
    assert code == 0, err
    assert out == plain  # the JSON contract / text report is unchanged
    if mode:
        json.loads(out)
    assert "plot written" in err
    _check_png(png)
    _no_new_pyplot_figures()


def test_analyze_plot_without_matplotlib_fails_only_when_asked(tmp_path, ir_file, capsys,
                                                               monkeypatch, no_matplotlib):
    monkeypatch.setattr(cli, "COMMANDS", ("measure.cli.cmd_analyze",))
    png = tmp_path / "office.png"
    code, out, err = _run(capsys, ["analyze", str(ir_file), "--json", "--plot", str(png)])
    assert code == 2
    assert out == ""  # nothing printed, nothing written
    assert err.startswith("error: ") and "matplotlib" in err and len(err.splitlines()) == 1
    assert not png.exists()
    code, out, err = _run(capsys, ["analyze", str(ir_file), "--json"])
    assert code == 0, err
    assert json.loads(out)["sample_rate"] == FS


def test_analyze_plot_needs_a_png_name(tmp_path, ir_file, capsys, monkeypatch):
    monkeypatch.setattr(cli, "COMMANDS", ("measure.cli.cmd_analyze",))
    code, out, err = _run(capsys, ["analyze", str(ir_file), "--plot", str(tmp_path / "a.pdf")])
    assert code == 2 and out == ""
    assert err.startswith("error: --plot") and ".png" in err


def test_fit_plot_writes_a_png_and_leaves_the_output_alone(tmp_path, capsys, monkeypatch):
    monkeypatch.setattr(cli, "COMMANDS", ("measure.cli.cmd_fit",))
    fs = 24000  # a lower rate keeps the two fits short; all eight octaves still fit
    ir = tmp_path / "office.wav"
    write_audio(ir, _office_ir(fs)[np.newaxis, :], fs)
    code, plain, err = _run(capsys, ["fit", str(ir), "--out", str(tmp_path / "a.json"),
                                     "--json"])
    assert code == 0, err
    png = tmp_path / "fit.png"
    code, out, err = _run(capsys, ["fit", str(ir), "--out", str(tmp_path / "b.json"), "--json",
                                   "--plot", str(png)])
    assert code == 0, err
    a, b = json.loads(plain), json.loads(out)
    # identical apart from the fit's wall time
    a["report"].pop("fit_seconds")
    b["report"].pop("fit_seconds")
    assert a == b
    assert (tmp_path / "a.json").read_text() == (tmp_path / "b.json").read_text()
    _check_png(png)
    _no_new_pyplot_figures()


def test_fit_plot_without_matplotlib_writes_nothing(tmp_path, capsys, monkeypatch,
                                                    no_matplotlib):
    monkeypatch.setattr(cli, "COMMANDS", ("measure.cli.cmd_fit",))
    ir = tmp_path / "office.wav"
    write_audio(ir, _office_ir(24000)[np.newaxis, :], 24000)
    code, out, err = _run(capsys, ["fit", str(ir), "--out", str(tmp_path / "m.json"),
                                   "--plot", str(tmp_path / "m.png")])
    assert code == 2 and out == ""
    assert err.startswith("error: ") and "matplotlib" in err
    assert not (tmp_path / "m.json").exists() and not (tmp_path / "m.png").exists()
