"""``measure report``: one self-contained HTML file of a room, a room folder or a whole level."""

from __future__ import annotations

import argparse
from pathlib import Path
from typing import Any

NAME = "report"
HELP = "one self-contained HTML report (figures, conditions, model, plots) that prints to PDF"
DESCRIPTION = """\
Write everything measured into ONE HTML file that opens offline in any browser and prints to
PDF cleanly (one room per page run): the room's name and positions; the measurement conditions
the take sidecars record (date, devices, sweep and input levels, temperature, humidity,
distance, angle, the take's verdict); per position the ISO 3382-1 figures per octave band (EDT,
T20, T30, C50, C80, D50, Ts in ms, DRR) with each band's flags in words, the single numbers and
the STI with its rating; for two positions or more the ISO 3382-2 position average (mean,
spread, count, grade); a compact model (fitted here, or the one `measure batch` stored) with
its I3DL2 values and worst differences in JNDs, and the room compared with it; the plots; and
the safety cautions for loud sweeps.

INPUT is one of: an impulse response (WAV); a take of `measure capture` or `measure import`
(its sidecar names the sweep, or give --sweep); a room folder of captures (the newest good take
of each position); or a results folder written by `measure batch` (it holds level.json): then
the file has an index of the rooms at the top and one section per room.

The images are embedded (PNG data URIs) and the style is inline: the file makes no network
request and needs no script. It is written atomically; on bad input nothing is written and the
exit status is 2."""

def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("input", metavar="INPUT",
                   help="IR.wav, CAPTURE.wav (with --sweep if its sidecar names none), a room "
                        "folder of captures, or a results folder of `measure batch`")
    p.add_argument("--out", metavar="REPORT.html", required=True,
                   help="the HTML file to write (must end in .html; never one of the inputs)")
    p.add_argument("--sweep", metavar="SWEEP.wav", default=None,
                   help="the sweep played for takes whose sidecar names none that exists")
    p.add_argument("--title", default=None,
                   help="the report's title (default: from the room or the number of rooms)")
    p.add_argument("--no-model", action="store_true",
                   help="leave out the model fit (faster; no model summary, no comparison)")


def _audio_kind(path: Path) -> bool:
    return path.suffix.lower() in (".wav", ".flac", ".aif", ".aiff")


def _from_audio(path: Path, sweep: str | None, fit: bool) -> Any:
    from measure import audio_io
    from measure.cli.cmd_compare import _measured
    from measure.report.html import room_section

    h, fs, kind = _measured(path, sweep)
    doc = audio_io.read_sidecar(path)
    room = str(doc.get("room")) if doc and doc.get("room") else path.stem
    label = str(doc.get("position")) if doc and doc.get("position") else path.stem
    take = doc.get("take") if doc and isinstance(doc.get("take"), int) else None
    return room_section(room, [h], fs, labels=[label], sidecars=[doc], takes=[take], fit=fit,
                        source=f"{kind} {path.name}")


def _from_room_folder(folder: Path, sweep: str | None, fit: bool) -> Any:
    from measure import session
    from measure.cli.cmd_attenuation import _from_room_folder as recover
    from measure.report.html import room_section

    got = recover(folder, sweep)
    by_label = {t.position: (t, side) for t, side in session.latest_takes(folder)}
    sidecars = [by_label[lab][1] if lab in by_label else None for lab in got["labels"]]
    takes = [by_label[lab][0].number if lab in by_label else None for lab in got["labels"]]
    return room_section(folder.name, got["h"], got["fs"], labels=got["labels"],
                        sidecars=sidecars, takes=takes, fit=fit,
                        source=f"room folder {folder}")


def _from_results(root: Path, fit: bool) -> list[Any]:
    """One section per room of a results folder (``level.json``, measure.level/1)."""
    from measure import audio_io
    from measure.batch import LEVEL_FORMAT
    from measure.errors import AudioFileError
    from measure.report.html import room_section

    level = audio_io.read_json(root / "level.json", what="level file")
    if not isinstance(level, dict) or level.get("format") != LEVEL_FORMAT:
        got = level.get("format") if isinstance(level, dict) else None
        raise AudioFileError(f"{root / 'level.json'} has format {got!r}, not {LEVEL_FORMAT!r}; "
                             "give a results folder written by `measure batch`")
    rooms = level.get("rooms")
    if not isinstance(rooms, list) or not rooms:
        raise AudioFileError(f"{root / 'level.json'} lists no rooms; run `measure batch` on a "
                             "captures tree with takes")
    sections = []
    for room in rooms:
        if not isinstance(room, dict) or not isinstance(room.get("takes"), list):
            raise AudioFileError(f"{root / 'level.json'}: a room entry has no takes list; run "
                                 "`measure batch` again")
        name = str(room.get("name") or "room")
        hs, labels, sidecars, takes, used, reasons, docs = [], [], [], [], [], [], []
        fs = None
        for t in room["takes"]:
            if not isinstance(t, dict):
                raise AudioFileError(f"{root / 'level.json'}: room {name!r} has a take entry "
                                     "that is not an object; run `measure batch` again")
            is_used = bool(t.get("used", True))
            h = side = doc = None
            ir = root / t["ir"] if isinstance(t.get("ir"), str) and t["ir"] else None
            if ir is not None and ir.exists():
                audio = audio_io.read_audio(ir)
                if fs not in (None, audio.fs):
                    raise AudioFileError(f"{ir} is at {audio.fs} Hz but the room's other "
                                         f"responses at {fs} Hz; run `measure batch` again")
                fs, h = audio.fs, audio.x[0]
                side = audio_io.read_sidecar(ir)
            elif is_used:
                raise AudioFileError(f"room {name!r}: the response {ir} of a used take is "
                                     "missing; run `measure batch` again")
            take_side = root / t["sidecar"] if isinstance(t.get("sidecar"), str) else None
            if take_side is not None and take_side.exists():  # the conditions at capture
                side = audio_io.read_json(take_side)
            fig = root / t["figures"] if isinstance(t.get("figures"), str) and t["figures"] \
                else None
            if fig is not None and fig.exists():
                doc = audio_io.read_json(fig, what="figures file")
            hs.append(h)
            labels.append(str(t.get("position", "?")))
            sidecars.append(side)
            takes.append(t.get("take") if isinstance(t.get("take"), int) else None)
            used.append(is_used and h is not None)
            reasons.append(t.get("reason"))
            docs.append(doc if isinstance(doc, dict) else None)
        fs = 0 if fs is None else fs  # a room with no response: listed with its reasons
        model = None
        if isinstance(room.get("model"), str) and (root / room["model"]).exists():
            from measure.model.modelfile import model_from_dict

            model = model_from_dict(audio_io.read_json(root / room["model"], what="model file"))
        average = room.get("average") if isinstance(room.get("average"), dict) else None
        attenuation = room.get("attenuation") if isinstance(room.get("attenuation"),
                                                            dict) else None
        i3dl2 = room.get("i3dl2") if isinstance(room.get("i3dl2"), dict) else None
        sections.append(room_section(name, hs, fs, labels=labels, sidecars=sidecars,
                                     takes=takes, used=used, reasons=reasons, figures_docs=docs,
                                     average=average, model=model, i3dl2=i3dl2,
                                     attenuation=attenuation, fit=fit,
                                     source=f"results folder {root}, room {name}"))
    return sections


def run(args: argparse.Namespace) -> int:
    from measure.errors import ParameterError
    from measure.report import require_matplotlib
    from measure.report.html import check_html_path, render_html, write_html

    out = check_html_path(args.out, option="--out")
    src = Path(args.input)
    if not src.exists():
        raise ParameterError(f"{src} does not exist; give an IR, a take, a room folder or a "
                             "results folder")
    inputs = [src] + ([Path(args.sweep)] if args.sweep else [])
    if src.is_dir() and (src / "level.json").exists():
        inputs.append(src / "level.json")
    for p in inputs:
        if out.resolve() == p.resolve():
            raise ParameterError(f"--out {args.out} is the input {p}; write the report to a new "
                                 "file, e.g. report.html")
    if not src.is_dir() and not _audio_kind(src):
        raise ParameterError(f"{src}: not a kind report knows (an IR or take WAV, a room folder "
                             "or a results folder with level.json); give one of those")
    require_matplotlib()
    fit = not args.no_model
    if src.is_dir() and (src / "level.json").exists():
        if args.sweep:
            raise ParameterError("a results folder holds its responses already; leave out "
                                 "--sweep")
        sections = _from_results(src, fit)
    elif src.is_dir():
        sections = [_from_room_folder(src, args.sweep, fit)]
    else:
        sections = [_from_audio(src, args.sweep, fit)]
    path = write_html(out, render_html(sections, title=args.title))
    n_img = sum(len(s.images) for s in sections)
    print(f"wrote {path} ({len(sections)} room{'s' if len(sections) != 1 else ''}, "
          f"{sum(len(s.positions) for s in sections)} positions, {n_img} plots, "
          f"{path.stat().st_size / 1e6:.1f} MB)")
    return 0
