"""`measure report`: one self-contained, well-formed HTML5 file from an IR, a room folder of
takes and a results folder of `measure batch`; one-line errors that write nothing.

Truths: the figures of measure.parameters.analyze_ir on the same response (the report must show
exactly those, formatted); the sidecar values written by the test itself; the results-folder
layout of the issue ("A whole level at once", item 5); HTML5's void elements (WHATWG HTML
Living Standard, 13.1.2 "Elements": area, base, br, col, embed, hr, img, input, link, meta,
source, track, wbr).
"""

from __future__ import annotations

import argparse
import contextlib
import io
import re
import sys
from html.parser import HTMLParser
from pathlib import Path

import pytest
from _captures import room_folder

from measure import audio_io
from measure.compare import average_sides, side_from_figures
from measure.errors import MeasureError
from measure.intelligibility import rating
from measure.model.fit import fit_with_i3dl2
from measure.parameters import analyze_ir
from measure.virtual import DEMO_ROOMS, OCTAVE_CENTERS_HZ, VirtualRoom, room_ir

FS = 48000
#: HTML5 void elements (WHATWG HTML 13.1.2): no end tag.
VOID = {"area", "base", "br", "col", "embed", "hr", "img", "input", "link", "meta", "source",
        "track", "wbr"}


def _main(argv: list[str]) -> int:
    """`measure report ARGV`: through measure.cli.main once the command is registered, else the
    same catch-and-print of a MeasureError (one line, exit 2) around the command module."""
    from measure import cli

    if "measure.cli.cmd_report" in cli.COMMANDS:
        return cli.main(["report", *argv])
    from measure.cli import cmd_report

    p = argparse.ArgumentParser(prog="measure report")
    cmd_report.add_arguments(p)
    args = p.parse_args(argv)
    try:
        return int(cmd_report.run(args) or 0)
    except MeasureError as err:
        print(f"error: {' '.join(str(err).split())}", file=sys.stderr)
        return 2


def _quiet(argv: list[str]) -> int:
    with contextlib.redirect_stdout(io.StringIO()):
        return _main(argv)


class _Checker(HTMLParser):
    """Collects tags, attributes and text; records every nesting error."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.stack: list[str] = []
        self.errors: list[str] = []
        self.decls: list[str] = []
        self.starts: list[tuple[str, dict[str, str | None]]] = []
        self.title = ""
        self.text: list[str] = []

    def handle_decl(self, decl: str) -> None:
        self.decls.append(decl)

    def handle_starttag(self, tag: str, attrs) -> None:
        self.starts.append((tag, dict(attrs)))
        if tag not in VOID:
            self.stack.append(tag)

    def handle_startendtag(self, tag: str, attrs) -> None:
        self.starts.append((tag, dict(attrs)))
        if tag not in VOID:
            self.errors.append(f"<{tag}/> is not a void element")

    def handle_endtag(self, tag: str) -> None:
        if tag in VOID:
            self.errors.append(f"</{tag}> closes a void element")
        elif not self.stack or self.stack[-1] != tag:
            self.errors.append(f"</{tag}> closes {self.stack[-1:] or 'nothing'}")
        else:
            self.stack.pop()

    def handle_data(self, data: str) -> None:
        if self.stack and self.stack[-1] == "title":
            self.title += data
        self.text.append(data)


def check_document(text: str) -> _Checker:
    """Assert the document is well-formed, self-contained HTML5; return what was parsed."""
    assert text.startswith("<!DOCTYPE html>")
    c = _Checker()
    c.feed(text)
    c.close()
    assert c.decls == ["DOCTYPE html"]
    assert not c.errors, c.errors[:5]
    assert not c.stack, f"unclosed: {c.stack}"
    tags = [t for t, _ in c.starts]
    assert tags[0] == "html" and c.starts[0][1].get("lang")
    assert ("meta", {"charset": "utf-8"}) in c.starts
    assert tags.count("title") == 1 and c.title.strip()
    # self-contained: no network reference, no script, nothing loaded from elsewhere
    low = text.lower()
    assert "http:" not in low and "https:" not in low
    assert "<script" not in low and "<link" not in low and "<iframe" not in low
    assert "@import" not in low and "url(" not in low
    for tag, attrs in c.starts:
        if "href" in attrs:
            assert attrs["href"].startswith("#"), attrs["href"]
        if "src" in attrs or tag == "img":
            assert attrs.get("src", "").startswith("data:image/png;base64,"), tag
            assert not attrs["src"].startswith("//")
    return c


def _rows(text: str, table_class: str = "bands") -> list[dict[str, list[str]]]:
    """Per table of that class: band label → the texts of its number cells."""
    out = []
    for body in re.findall(rf'<table class="{table_class}">(.*?)</table>', text, re.S):
        out.append({m.group(1): re.findall(r'<td class="num">(.*?)</td>', m.group(2))
                    for m in re.finditer(r"<tr><th>([^<]*)</th>(.*?)</tr>", body, re.S)})
    return out


def _room(rt_s: tuple[float, ...], name: str = "r") -> VirtualRoom:
    return VirtualRoom(name, OCTAVE_CENTERS_HZ, rt_s, direct_delay_s=0.01, drr_db=0.0,
                       reflections=((0.006, 0.4),), length_s=1.5)


RT_A = (0.9, 0.85, 0.8, 0.75, 0.7, 0.65, 0.6, 0.5)
RT_B = (0.8, 0.8, 0.75, 0.7, 0.65, 0.6, 0.55, 0.45)


@pytest.fixture(scope="module")
def ir_report(tmp_path_factory) -> tuple[Path, Path, str]:
    """A report of the demo office (DEMO_ROOMS[1], seed 0), with the model fitted."""
    folder = tmp_path_factory.mktemp("rep_ir")
    ir = audio_io.write_audio(folder / "office.wav", room_ir(DEMO_ROOMS[1], FS, seed=0), FS,
                              subtype="FLOAT")
    out = folder / "office.html"
    assert _quiet([str(ir), "--out", str(out)]) == 0
    return ir, out, out.read_text(encoding="utf-8")


@pytest.fixture(scope="module")
def folder_report(tmp_path_factory) -> tuple[Path, str]:
    """A room folder of two takes recorded through the virtual room (tests/_captures.py)."""
    root = tmp_path_factory.mktemp("rep_room")
    # what `measure capture` writes into a take's sidecar (measure/cli/cmd_capture.py)
    common = {"start_utc": "2026-12-01T10:00:00Z", "temperature_c": 21.5,
              "humidity_percent": 40.0,
              "devices": {"input": {"name": "Test interface in", "hostapi": "ALSA"},
                          "output": {"name": "Test interface out", "hostapi": "ALSA"}},
              "sweep": {"level_dbfs": -12.0, "f1_hz": 20.0, "f2_hz": 24000.0,
                        "duration_s": 1.0, "fs": FS}}
    sides = [{**common, "distance_m": 2.0}, {**common, "distance_m": 4.0}]
    folder = room_folder(root, [room_ir(_room(RT_A), FS, seed=1),
                                room_ir(_room(RT_B), FS, seed=2)], sides, FS)
    out = root / "hall.html"
    assert _quiet([str(folder), "--out", str(out), "--no-model"]) == 0
    return folder, out.read_text(encoding="utf-8")


@pytest.fixture(scope="module")
def results_dir(tmp_path_factory) -> Path:
    """A minimal RESULTS_DIR in the documented measure.level/1 layout: room "hall" with two used
    takes and their position average, room "cellar" with one used and one left-out take."""
    root = tmp_path_factory.mktemp("rep_level")
    rooms = []
    for name, rts, used in (("hall", (RT_A, RT_B), (True, True)),
                            ("cellar", (RT_B, RT_A), (True, False))):
        takes, sides = [], []
        for i, (rt, u) in enumerate(zip(rts, used, strict=True)):
            h = room_ir(_room(rt), FS, seed=10 + i)
            ir_rel = f"rooms/{name}/irs/p{i + 1}-take1.wav"
            fig_rel = f"rooms/{name}/figures/p{i + 1}-take1.json"
            audio_io.write_audio(root / ir_rel, h, FS, subtype="FLOAT")
            figures = analyze_ir(h, FS)
            audio_io.write_json(root / fig_rel, figures.to_dict())
            takes.append({"position": f"p{i + 1}", "take": 1, "used": u,
                          "reason": None if u else "clipped: 12 samples at full scale",
                          "ir": ir_rel, "figures": fig_rel})
            if u:
                sides.append(side_from_figures(figures, label=f"p{i + 1}", kind="capture", h=h))
        average = (average_sides(sides, label=name).to_dict() if len(sides) >= 2 else None)
        i3dl2 = None
        if name == "hall":  # a stored model (as `measure fit` writes it); cellar has none
            result, i3 = fit_with_i3dl2(sides[0].h[0], FS)
            audio_io.write_json(root / f"rooms/{name}/model.json", result.model.to_dict())
            i3dl2 = i3.to_dict()["values"]
        rooms.append({"name": name, "takes": takes, "average": average,
                      "model": f"rooms/{name}/model.json", "i3dl2": i3dl2, "attenuation": None,
                      "convolution_ir": f"rooms/{name}/convolution-ir.wav"})
    audio_io.write_json(root / "level.json", {"format": "measure.level/1", "rooms": rooms})
    return root


# ---------------------------------------------------------------------------------------------
# One impulse response


def test_the_report_of_an_ir_is_well_formed_self_contained_html5(ir_report):
    _, _, text = ir_report
    c = check_document(text)
    imgs = [a for t, a in c.starts if t == "img"]
    assert len(imgs) >= 2  # the analysis plot and the model-fit plot at least


def test_the_band_table_holds_the_figures_of_analyze_ir(ir_report):
    ir, _, text = ir_report
    # truth: analyze_ir on the very file the report read (deterministic, so the formatted
    # strings agree exactly); the report prints decay times in s to 2 decimals, Ts in whole ms,
    # C50/C80/DRR in dB to 1 decimal with a sign
    doc = analyze_ir(audio_io.read_audio(ir).x[0], FS).to_dict()
    (table,) = _rows(text)
    for b in doc["bands"]:
        cells = table[b["label"]]
        assert cells[2] == ("—" if b["t30_s"] is None else f"{b['t30_s']:.2f}")
        assert cells[0] == ("—" if b["edt_s"] is None else f"{b['edt_s']:.2f}")
        assert cells[6] == ("—" if b["ts_s"] is None else f"{b['ts_s'] * 1000:.0f}")
        assert cells[4] == ("—" if b["c80_db"] is None else f"{b['c80_db']:+.1f}")
    # every band's flags are written out in words (html-escaped as the report escapes them)
    import html

    for b in doc["bands"] + [doc["broadband"]]:
        for flag in b["flags"]:
            assert html.escape(flag, quote=True) in text


def test_the_single_numbers_and_the_sti_with_its_rating(ir_report):
    ir, _, text = ir_report
    doc = analyze_ir(audio_io.read_audio(ir).x[0], FS).to_dict()
    sti = doc["sti"]  # truth: analyze_ir; rating bands of measure.intelligibility (ISO 9921)
    assert f"{sti:.2f}, {rating(sti)}" in text
    assert f"{doc['single_numbers']['t_mid_s']:.2f} s" in text


def test_the_model_summary_and_comparison(ir_report):
    _, _, text = ir_report
    for k in ("DecayTime", "DecayHFRatio", "ReflectionsDelay", "HFReference"):
        assert f"<th>{k}</th>" in text
    assert "just-noticeable differences" in text
    assert "Comparison: room against model" in text


def test_the_safety_cautions_are_present(ir_report):
    _, _, text = ir_report
    low = text.lower()
    for words in ("hearing", "volume turned low", "loudspeaker", "local rules"):
        assert words in low


def test_the_print_stylesheet(ir_report):
    _, _, text = ir_report
    m = re.search(r"@media print \{(.*?)\n\}", text, re.S)
    assert m, "no print stylesheet"
    css = m.group(1)
    assert re.search(r"section\.room \{[^}]*break-before: page", css)
    assert re.search(r"img \{[^}]*max-width: 100%", css)


# ---------------------------------------------------------------------------------------------
# A room folder of takes


def test_a_room_folder_shows_positions_conditions_and_the_position_average(folder_report):
    folder, text = folder_report
    check_document(text)
    assert "Room: hall" in text
    assert "Position p1, take 1" in text and "Position p2, take 1" in text
    # truth: the sidecars written by the fixture
    assert "21.5 °C" in text and "40 %" in text and "2 m" in text and "4 m" in text
    assert "-12.0 dBFS peak, 20–24000 Hz, 1 s" in text
    assert "Test interface in (ALSA)" in text and "Test interface out (ALSA)" in text
    assert "2026-12-01T10:00:00Z" in text
    assert "Position average (ISO 3382-2)" in text
    assert "survey" in text  # ISO 3382-2 Table 1: two combinations are survey grade
    (avg,) = _rows(text, "average")
    assert all("(n = 2)" in c for c in avg["1k"] if c != "—")


# ---------------------------------------------------------------------------------------------
# A results folder of `measure batch`


def test_a_results_folder_gives_one_section_per_room_with_an_index(results_dir, tmp_path):
    out = tmp_path / "level.html"
    assert _quiet([str(results_dir), "--out", str(out)]) == 0
    text = out.read_text(encoding="utf-8")
    c = check_document(text)
    # hall: the stored model, compared with p1; cellar: none stored, so one is fitted here
    hall, cellar = text.split('id="room-2"')
    assert "(given, compared with position p1)" in hall and "<th>DecayTime</th>" in hall
    assert "(fitted to position p1)" in cellar
    sections = [a for t, a in c.starts if t == "section" and a.get("class") == "room"]
    assert [s["id"] for s in sections] == ["room-1", "room-2"]
    links = [a["href"] for t, a in c.starts if t == "a"]
    assert links == ["#room-1", "#room-2"]
    assert "Room: hall" in text and "Room: cellar" in text
    assert "clipped: 12 samples at full scale" in text
    # the band table shows the stored figures (truth: the figures JSON the fixture wrote)
    doc = audio_io.read_json(results_dir / "rooms/hall/figures/p1-take1.json")
    table = _rows(text)[0]
    for b in doc["bands"]:
        assert table[b["label"]][2] == ("—" if b["t30_s"] is None else f"{b['t30_s']:.2f}")
    # each room after the first starts a printed page
    assert text.index('id="room-2"') > text.index("Room: hall")


# ---------------------------------------------------------------------------------------------
# Bad input: one error line, exit 2, nothing written


@pytest.mark.parametrize("case", ["not_html", "out_is_input", "missing", "text_file",
                                  "wrong_level_format", "out_is_folder"])
def test_bad_input_is_one_error_line_and_writes_nothing(case, ir_report, tmp_path, capsys):
    ir, _, _ = ir_report
    out = tmp_path / "r.html"
    argv = {"not_html": [str(ir), "--out", str(tmp_path / "r.pdf")],
            "out_is_input": [str(ir), "--out", str(ir)],
            "missing": [str(tmp_path / "nope.wav"), "--out", str(out)],
            "text_file": [str(tmp_path / "notes.txt"), "--out", str(out)],
            "wrong_level_format": [str(tmp_path / "res"), "--out", str(out)],
            "out_is_folder": [str(ir), "--out", str(tmp_path / "dir.html")]}[case]
    (tmp_path / "notes.txt").write_text("not audio")
    (tmp_path / "res").mkdir()
    (tmp_path / "res" / "level.json").write_text('{"format": "something/9", "rooms": []}')
    (tmp_path / "dir.html").mkdir()
    before = sorted(p.name for p in tmp_path.iterdir())
    before_ir = ir.read_bytes() if case == "out_is_input" else None
    code = _main(argv)
    _, err = capsys.readouterr()
    assert code == 2
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: "), err
    assert sorted(p.name for p in tmp_path.iterdir()) == before  # nothing, not even a temp
    if before_ir is not None:
        assert ir.read_bytes() == before_ir
