"""measure.report: the analysis and model-fit figures, PNG output, --plot, no pyplot state."""

from __future__ import annotations

import dataclasses
import json
import sys

import numpy as np
import pytest

from measure import cli
from measure.audio_io import write_audio
from measure.compare import compare_sides, side_from_figures
from measure.decay import FIT_RANGES_DB
from measure.deconvolve import HarmonicDistortion
from measure.errors import MissingDependencyError, ParameterError
from measure.model.fit import compare_figures
from measure.parameters import analyze_ir
from measure.report import (
    REPORT_CAPTIONS,
    fit_line,
    plot_analysis,
    plot_attenuation,
    plot_clarity,
    plot_comparison,
    plot_decay_times,
    plot_distortion,
    plot_energy_time,
    plot_magnitude,
    plot_model_fit,
    plot_time_frequency,
    report_figures,
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


# ---------------------------------------------------------------------------------------------
# The palette

#: Okabe & Ito (2008), "Color Universal Design (CUD): how to make figures and presentations
#: that are friendly to colorblind people" (jfly.uni-koeln.de/color): the eight colours.
OKABE_ITO = {"#000000", "#e69f00", "#56b4e9", "#009e73", "#f0e442", "#0072b2", "#d55e00",
             "#cc79a7"}


def _relative_luminance(colour: str) -> float:
    """WCAG 2.x relative luminance: sRGB decoded to linear light (IEC 61966-2-1 transfer
    function), weighted with the ITU-R BT.709 coefficients 0.2126, 0.7152, 0.0722."""
    rgb = [int(colour[i:i + 2], 16) / 255.0 for i in (1, 3, 5)]
    lin = [c / 12.92 if c <= 0.04045 else ((c + 0.055) / 1.055) ** 2.4 for c in rgb]
    return 0.2126 * lin[0] + 0.7152 * lin[1] + 0.0722 * lin[2]


def test_relative_luminance_reference_points():
    # WCAG 2.x definition: white 1, black 0; mid grey #777777 is 0.184 (the usual worked
    # example: its contrast ratio on white is 4.48:1 = 1.05/(0.184 + 0.05))
    assert _relative_luminance("#ffffff") == pytest.approx(1.0, abs=1e-12)
    assert _relative_luminance("#000000") == 0.0
    assert (1.05 / (_relative_luminance("#777777") + 0.05)) == pytest.approx(4.48, abs=0.01)


def test_palette_colours_are_colour_blind_safe_and_differ_in_grey():
    from measure.report import PALETTE, USED_TOGETHER

    for key, (colour, ls, marker) in PALETTE.items():
        c = colour.lower()
        # a colour of Okabe & Ito (2008), or a neutral grey (r = g = b: no hue to confuse)
        assert c in OKABE_ITO or c[1:3] == c[3:5] == c[5:7], key
        assert ls in ("-", "--", "-.", ":", "none") and isinstance(marker, str), key
    for group, keys in USED_TOGETHER.items():
        lum = sorted(_relative_luminance(PALETTE[k][0]) for k in keys)
        # common practice for grey-scale legibility: neighbouring entries at least 0.10 apart
        # in relative luminance (WCAG 2.x / BT.709), about 10 CIE L* units in the mid-tones
        assert min(np.diff(lum)) >= 0.10, group
        # and each entry is also told apart by its line style or marker
        styles = [PALETTE[k][1:] for k in keys]
        assert len(set(styles)) == len(styles), group


def test_the_same_quantity_has_the_same_colour_in_every_figure(report_set):
    from matplotlib.colors import to_hex

    from measure.report import PALETTE

    allowed = {c.lower() for c, _, _ in PALETTE.values()}
    for caption, fig in report_set:
        for ax in fig.axes:
            per_band = []
            for ln in ax.get_lines():
                if " Hz (DI " in ln.get_label():  # one line per octave: the colour map
                    per_band.append(_relative_luminance(to_hex(ln.get_color())))
                    continue
                assert to_hex(ln.get_color()) in allowed, (caption, ln.get_label())
            # per-band series step through cividis, whose lightness rises monotonically
            # (Nuñez et al. 2018), so band order reads in grey too
            assert np.all(np.diff(per_band) > 0.02), caption
            for patch in ax.patches:
                assert to_hex(patch.get_facecolor(), keep_alpha=False) in allowed, caption
    # T30 is one colour in the decay panels, the decay-time figure and the model differences
    t30 = PALETTE["t30"][0].lower()
    figs = dict(report_set)
    decay = figs[REPORT_CAPTIONS["decay"]]
    fits = [ln for ax in decay.axes[2:-1] for ln in ax.get_lines()
            if ln.get_label().startswith("T30 fit")]
    assert fits and {to_hex(ln.get_color()) for ln in fits} == {t30}
    times = figs[REPORT_CAPTIONS["decay_times"]].axes[0]
    (t30_bars,) = [c for c in times.containers if c.get_label().startswith("T30")]
    assert to_hex(t30_bars.lines[0].get_color()) == t30


# ---------------------------------------------------------------------------------------------
# The figures of a report page

HARMONICS = (HarmonicDistortion(2, 0.10, -40.0, 1.0),
             HarmonicDistortion(3, 0.15, -50.0, 0.316),
             HarmonicDistortion(4, 0.20, None, None, above_noise=False, noise_percent=0.05),
             HarmonicDistortion(5, 0.25, None, None, above_noise=False))


@pytest.fixture(scope="module")
def comparison_doc(model_case):
    measured, modelled, _ = model_case
    return compare_sides(side_from_figures(measured, label="measured", kind="impulse response"),
                         side_from_figures(modelled, label="model", kind="model")).to_dict()


@pytest.fixture(scope="module")
def report_set(office, model_case, comparison_doc, attenuation_doc):
    h, figs = office
    _, modelled, report = model_case
    ir_details = {"harmonic_distortion": [x.to_dict() for x in HARMONICS]}
    return report_figures(h, FS, figs, modelled=modelled, fit_report=report,
                          comparison=comparison_doc, attenuation=attenuation_doc,
                          ir_details=ir_details)


def test_report_figures_returns_the_captions_for_the_inputs_given(office, report_set):
    h, figs = office
    base = ["energy_time", "decay", "decay_times", "clarity", "magnitude", "time_frequency"]
    assert [c for c, _ in report_set] == [REPORT_CAPTIONS[k] for k in (
        *base, "distortion", "model_fit", "comparison", "attenuation")]
    # each is a Figure with an Agg canvas, and no pyplot state was made
    assert all(type(f.canvas).__name__ == "FigureCanvasAgg" for _, f in report_set)
    # an IR without harmonics adds no distortion figure; the bare call gives the base six
    plain = report_figures(h, FS, figs, ir_details={"harmonic_distortion": []})
    assert [c for c, _ in plain] == [REPORT_CAPTIONS[k] for k in base]
    with pytest.raises(ParameterError, match="fit_report"):
        report_figures(h, FS, figs, modelled=figs)
    with pytest.raises(ParameterError, match="ir_details"):
        report_figures(h, FS, figs, ir_details=3)
    # an attenuation document of single positions (no series) has no figure to add
    assert len(report_figures(h, FS, figs, attenuation={"positions": []})) == len(base)
    _no_new_pyplot_figures()


def test_every_axis_label_names_its_unit(report_set):
    import re

    unit = re.compile(r"\(.+\)$")  # "name (unit)": the unit in parentheses at the end
    n = 0
    for caption, fig in report_set:
        for ax in fig.axes:
            for label in (ax.get_xlabel(), ax.get_ylabel()):
                if label:
                    assert unit.search(label), (caption, label)
                    n += 1
    assert n > 60  # every figure contributes labelled axes


# ---------------------------------------------------------------------------------------------
# plot_energy_time


def test_energy_time_marks_the_direct_sound_reflections_and_noise_floor(office):
    h, figs = office
    fig = plot_energy_time(h, FS, figs)
    ax_h, ax_e, ax_z = fig.axes
    assert ax_e.get_ylabel() == "energy (dB re peak)"
    direct = _line(ax_e, "direct sound")
    # the direct sound is drawn at the ISO 3382-1 A.3.4 onset of the analysis (exact)
    assert direct.get_xdata()[0] == pytest.approx(figs.onset_index / FS, abs=1e-12)
    # Noise floor: the added noise has power 10^(NOISE_DB/10)·max|h_clean|² (how it was made);
    # on the ETC (re its own peak, a 0.5 ms average of h²) it lies at 10 lg(P_noise/peak),
    # within 1 dB (Lundeby's estimate of a stationary mean over > 1 s of noise, as above).
    k = int(round(0.0005 * FS))
    etc_peak = float(np.max(np.convolve(h * h, np.ones(k) / k, mode="same")))
    clean_peak = float(np.max(np.abs(room_ir(OFFICE, FS, seed=1)))) ** 2
    floor = next(ln for ln in ax_e.get_lines() if ln.get_label().startswith("noise floor"))
    want = 10 * np.log10(10 ** (NOISE_DB / 10) * clean_peak / etc_peak)
    assert floor.get_ydata()[0] == pytest.approx(want, abs=1.0)
    # Reflections: at most 5, 2-80 ms after the direct sound, >= -25 dB re direct (the rule).
    refl = next(ln for ln in ax_z.get_lines() if ln.get_label().startswith("first refl"))
    t_ms = np.asarray(refl.get_xdata(), dtype=float)
    lv = np.asarray(refl.get_ydata(), dtype=float)
    d_db = next(ln for ln in ax_z.get_lines()
                if ln.get_label().startswith("direct sound")).get_ydata()[0]
    assert 1 <= t_ms.size <= 5
    assert np.all((t_ms >= 2.0) & (t_ms <= 80.0)) and np.all(lv >= d_db - 25.0)
    # The office's three reflections (measure.virtual: 2.9, 7.1, 12.4 ms after the direct
    # sound, gains 0.42, 0.25, -0.18) are all marked. Times are drawn re the onset, which
    # precedes the true arrival by (arrival - onset); a 0.5 ms average of an impulse plus the
    # diffuse tail peaks within half its window (0.25 ms) of the impulse, plus a sample.
    lead_ms = (OFFICE.direct_delay_s * FS - figs.onset_index) / FS * 1000
    for delay_s, _gain in OFFICE.reflections:
        assert np.min(np.abs(t_ms - (delay_s * 1000 + lead_ms))) <= 0.25 + 1000 / FS, delay_s
    # The strongest reflection (gain 0.42, an impulse of the same shape as the direct sound)
    # sits at 20 lg 0.42 = -7.5 dB re direct; the tail adds < 0.5 dB within its window.
    assert np.max(lv) - d_db == pytest.approx(20 * np.log10(0.42), abs=0.5)
    assert ax_z.get_xlabel() == "time after the direct sound (ms)"
    _no_new_pyplot_figures()


# ---------------------------------------------------------------------------------------------
# plot_decay_times and plot_clarity


def test_decay_times_with_uncertainty_and_gaps(office):
    _, figs = office
    k = [b.label for b in figs.bands].index("1k")
    bands = tuple(dataclasses.replace(b, t30_s=None, t30_uncertainty_s=None)
                  if i == k else b for i, b in enumerate(figs.bands))
    ax = plot_decay_times(dataclasses.replace(figs, bands=bands)).axes[0]
    assert ax.get_ylabel() == "decay time (s)" and ax.get_xlabel() == "octave band (Hz)"
    assert [t.get_text() for t in ax.get_xticklabels()] == [b.label for b in bands]
    # band positions are octaves re 1 kHz: lg(f_m/1 kHz)/0.3 for base-10 midband frequencies
    # (IEC 61260-1), so consecutive octaves are exactly 1 apart (float rounding)
    np.testing.assert_allclose(np.diff(ax.get_xticks()), 1.0, rtol=1e-12)
    bars = {c.get_label().split()[0]: c for c in ax.containers}
    for name, key in (("T20", "t20"), ("T30", "t30")):
        line, _, (segs,) = bars[name].lines
        y = np.asarray(line.get_ydata(), dtype=float)
        want = np.array([np.nan if getattr(b, f"{key}_s") is None else getattr(b, f"{key}_s")
                         for b in bands])
        np.testing.assert_array_equal(y, want)  # the analysis's values as drawn; None -> gap
        half = [0.5 * (s[1][1] - s[0][1]) for s in segs.get_segments() if len(s) == 2]
        u = [getattr(b, f"{key}_uncertainty_s") for b in bands
             if getattr(b, f"{key}_s") is not None]
        # ± the ISO 3382-2 Annex A standard uncertainty of measure.parameters (exact); a null
        # value has no bar
        np.testing.assert_allclose(half, u, rtol=1e-12)
    # the null T30 at 1 kHz: a gap and a cross on the base line at its band (offset +0.08)
    crosses = np.concatenate([np.asarray(ln.get_xdata(), dtype=float) for ln in ax.get_lines()
                              if ln.get_marker() == "x" and len(ln.get_xdata())])
    assert np.any(np.isclose(crosses, ax.get_xticks()[k] + 0.08))


def test_clarity_values_ts_in_ms_and_axes_not_zoomed_below_3_jnd(office):
    _, figs = office
    ax_c, ax_d, ax_t = plot_clarity(figs).axes
    assert (ax_c.get_ylabel(), ax_d.get_ylabel(), ax_t.get_ylabel()) == (
        "clarity (dB)", "D50 (ratio, 0–1)", "Ts (ms)")
    np.testing.assert_allclose(_line(ax_c, "C80").get_ydata(), [b.c80_db for b in figs.bands])
    # Ts is drawn in ms: the seconds of the analysis times 1000 (exact up to rounding)
    np.testing.assert_allclose(_line(ax_t, "Ts").get_ydata(),
                               [b.ts_s * 1000.0 for b in figs.bands], rtol=1e-12)
    # nearly equal values (1 % apart): the axes still span 3 JND (ISO 3382-1 Table A.1:
    # C80 1 dB, D50 0.05, Ts 10 ms), so the 1 % does not fill them
    flat = tuple(dataclasses.replace(b, c50_db=5.0 * (1 + 0.01 * (i % 2)),
                                     c80_db=6.0 * (1 + 0.01 * (i % 2)),
                                     d50=0.5 * (1 + 0.01 * (i % 2)),
                                     ts_s=0.05 * (1 + 0.01 * (i % 2)))
                 for i, b in enumerate(figs.bands))
    ax_c, ax_d, ax_t = plot_clarity(dataclasses.replace(figs, bands=flat)).axes
    for ax, span in ((ax_c, 3.0), (ax_d, 0.15), (ax_t, 30.0)):
        lo, hi = ax.get_ylim()
        assert hi - lo >= span - 1e-12, ax.get_ylabel()


# ---------------------------------------------------------------------------------------------
# plot_magnitude and plot_time_frequency


def test_magnitude_of_a_butterworth_low_pass_is_minus_3_db_at_its_corner():
    from scipy.signal import butter, freqz, sosfilt

    sos = butter(2, 1000.0, btype="low", fs=FS, output="sos")
    x = np.zeros(8192)
    x[0] = 1.0
    h = sosfilt(sos, x)
    ax = plot_magnitude(h, FS, fraction=None).axes[0]
    f, lv = (np.asarray(v, dtype=float) for v in ax.get_lines()[0].get_data())
    assert ax.get_xscale() == "log" and ax.get_xlabel() == "frequency (Hz)"
    assert ax.get_ylabel() == "magnitude (dB re 1)"
    assert [t.get_text() for t in ax.get_xticklabels()] == [
        "31.5", "63", "125", "250", "500", "1k", "2k", "4k", "8k", "16k"]
    # Butterworth: |H(fc)|² = 1/2 exactly at the digital corner of scipy.signal.butter
    # (bilinear transform with pre-warping) -> -3.01 dB; the 8192-sample response has decayed
    # to < 1e-12 and the 96-per-octave grid is linearly interpolated between 5.9 Hz bins:
    # 0.02 dB
    assert np.interp(1000.0, f, lv) == pytest.approx(10 * np.log10(0.5), abs=0.02)
    i = int(np.argmax(lv < 10 * np.log10(0.5)))  # first grid point below -3.01 dB
    f_3db = np.interp(10 * np.log10(0.5), lv[i - 1:i + 1][::-1], f[i - 1:i + 1][::-1])
    assert f_3db == pytest.approx(1000.0, rel=0.005)
    # 1/3-octave power smoothing is the mean of |H|² over [fc 2^-1/6, fc 2^1/6]; reference:
    # scipy.signal.freqz (scipy 1.17) on a fine grid, trapezoidal mean; 0.01 dB (grid spacing)
    ax3 = plot_magnitude(h, FS, fraction=3).axes[0]
    f3, lv3 = (np.asarray(v, dtype=float) for v in ax3.get_lines()[0].get_data())
    band = np.linspace(1000 * 2 ** (-1 / 6), 1000 * 2 ** (1 / 6), 4001)
    _, hf = freqz(*butter(2, 1000.0, btype="low", fs=FS), worN=band, fs=FS)
    p = np.abs(hf) ** 2
    want = 10 * np.log10(np.sum(0.5 * (p[1:] + p[:-1]) * np.diff(band)) / np.ptp(band))
    assert np.interp(1000.0, f3, lv3) == pytest.approx(want, abs=0.01)
    assert "1/3-octave" in ax3.get_title(loc="left")
    with pytest.raises(ParameterError, match="fraction=5"):
        plot_magnitude(h, FS, fraction=5)


def test_time_frequency_picture_decays_at_the_measured_rate(office):
    h, figs = office
    fig = plot_time_frequency(h, FS)
    ax, cax = fig.axes
    (mesh,) = ax.collections
    assert mesh.get_cmap().name == "cividis"  # perceptually uniform, colour-blind-safe
    assert cax.get_ylabel() == "level (dB re maximum)"
    assert ax.get_yscale() == "log" and ax.get_ylabel() == "frequency (Hz)"
    level = np.asarray(mesh.get_array(), dtype=float)
    # dB re the maximum, floored at -80 dB (by construction; exact)
    assert level.max() == 0.0 and level.min() >= -80.0
    xy = mesh.get_coordinates()  # cell corners (shading "nearest": centres in between)
    t = 0.5 * (xy[0, 1:, 0] + xy[0, :-1, 0])
    f = 0.5 * (xy[1:, 0, 1] + xy[:-1, 0, 1])
    level = level.reshape(f.size, t.size)
    b1k = next(b for b in figs.bands if b.label == "1k")
    rows = (f >= b1k.band.f_lo_hz) & (f <= b1k.band.f_hi_hz)
    band_db = 10 * np.log10(np.mean(10 ** (level[rows] / 10), axis=0))
    t0 = figs.onset_index / FS
    sel = (t >= t0 + 0.05) & (t <= t0 + 0.25)
    slope = np.polyfit(t[sel], band_db[sel], 1)[0]
    # An exponential decay falls at -60/T dB/s (definition of T, ISO 3382-1 3.4); a sliding
    # window does not change the rate. 15 %: the 1 kHz octave's own T30 from the analysis is
    # the reference, the band-level fluctuations of noise over 0.2 s set the spread.
    assert -60.0 / slope == pytest.approx(b1k.t30_s, rel=0.15)
    lin = plot_time_frequency(h, FS, frequency_axis="linear").axes[0]
    assert lin.get_yscale() == "linear"
    with pytest.raises(ParameterError, match="frequency_axis"):
        plot_time_frequency(h, FS, frequency_axis="mel")


# ---------------------------------------------------------------------------------------------
# plot_distortion and plot_comparison


def test_distortion_draws_percent_per_harmonic():
    ax = plot_distortion(HARMONICS).axes[0]
    assert ax.get_ylabel() == "harmonic distortion (%)" and ax.get_yscale() == "log"
    assert ax.get_xlabel() == "harmonic (× fundamental frequency)"
    assert [t.get_text() for t in ax.get_xticklabels()] == ["H2", "H3", "H4", "H5"]
    above = _line(ax, "distortion")
    # the recovery's own percentages, at their orders (exact)
    assert list(above.get_xdata()) == [2, 3] and list(above.get_ydata()) == [1.0, 0.316]
    below = _line(ax, "below the noise (< this)")
    assert list(below.get_xdata()) == [4] and list(below.get_ydata()) == [0.05]
    assert list(_line(ax, "not measurable").get_xdata()) == [5]
    # the IR.json form draws the same; one series per channel
    doc = {"channels": [{"capture_channel": 1, "harmonic_distortion":
                         [x.to_dict() for x in HARMONICS]},
                        {"capture_channel": 2, "harmonic_distortion":
                         [x.to_dict() for x in HARMONICS[:2]]}]}
    labels = [ln.get_label() for ln in plot_distortion(doc).axes[0].get_lines()]
    assert "distortion, channel 1" in labels and "distortion, channel 2" in labels
    # an ImpulseResponse of measure.deconvolve and its to_dict() (IR.json) draw the same
    from measure.deconvolve import ImpulseResponse

    ir = ImpulseResponse(h=np.zeros((1, 64)), fs=FS, channels=(0,), onset_index=0,
                         latency_s=(0.0,), drift_ppm=0.0, peak_to_noise_db=(60.0,),
                         noise_dbfs=(-90.0,), harmonics=(HARMONICS,),
                         harmonic_h=np.zeros((1, len(HARMONICS), 64)))
    for src in (ir, ir.to_dict()):
        got = _line(plot_distortion(src).axes[0], "distortion, channel 1")
        assert list(got.get_ydata()) == [1.0, 0.316]
    with pytest.raises(ParameterError, match="no harmonics"):
        plot_distortion([])
    with pytest.raises(ParameterError, match="ImpulseResponse"):
        plot_distortion(3.0)


def test_comparison_shades_one_jnd_and_spans_at_least_two(comparison_doc):
    doc = comparison_doc
    fig = plot_comparison(doc, title="measured vs model")
    by_title = {ax.get_title(loc="left").split(" (")[0]: ax for ax in fig.axes}
    cells = {(c["band_hz"], c["parameter"]): c for c in doc["cells"]}
    bands = list(dict.fromkeys(c["band_hz"] for c in doc["cells"] if c["band_hz"]))
    for name in ("EDT", "T20", "T30", "C50", "C80", "D50", "Ts", "DRR"):
        ax = by_title[name]
        (span,) = [p for p in ax.patches if p.get_label() == "±1 JND"]
        # axhspan draws a rectangle in data y: exactly -1 ... +1 JND
        assert (span.get_y(), span.get_y() + span.get_height()) == (-1.0, 1.0)
        lo, hi = ax.get_ylim()
        assert lo <= -2.0 and hi >= 2.0  # at least ±2 JND, so the JND band is never zoomed
        got = np.asarray(_line(ax, f"{name}: B − A").get_ydata(), dtype=float)
        want = [cells[(b, name)]["jnd"] for b in bands]
        np.testing.assert_array_equal(got, [np.nan if v is None else v for v in want])
        assert ax.get_ylabel() == f"{name}: B − A (JND)"
    # the A and B values; Ts in ms (the document's seconds times 1000)
    ts = by_title["Ts: A and B"]
    assert ts.get_ylabel() == "Ts (ms)"
    np.testing.assert_allclose(_line(ts, "A: measured").get_ydata(),
                               [cells[(b, "Ts")]["a"] * 1000.0 for b in bands], rtol=1e-12)
    assert by_title["T30: A and B"].get_ylabel() == "T30 (s)"
    assert by_title["C80: A and B"].get_ylabel() == "C80 (dB)"
    assert "1 JND = 5 %" in by_title["T30"].get_title(loc="left")  # EDT's 5 %, common practice
    with pytest.raises(ParameterError, match="Comparison.to_dict"):
        plot_comparison({"cells": 3})
    _no_new_pyplot_figures()
