"""A whole level at once: every take of a captures tree, each room's average, model and curves.

:func:`run_batch` walks a captures tree (``ROOM/POSITION-takeN.wav`` with sidecars, as
``measure capture`` and ``measure import`` file them) and writes a results folder::

    RESULTS_DIR/level.json                         the whole level (LEVEL_FORMAT, documented below)
    RESULTS_DIR/rooms/ROOM/irs/POSITION-takeN.wav  each take's recovered response (+ sidecar)
    RESULTS_DIR/rooms/ROOM/figures/POSITION-takeN.json   its ISO 3382-1 figures
    RESULTS_DIR/rooms/ROOM/average.json            the ISO 3382-2 position average (compare)
    RESULTS_DIR/rooms/ROOM/model.json              the compact model of the best position
    RESULTS_DIR/rooms/ROOM/attenuation.json        distance/direction curves, when the
                                                   sidecars carry a series
    RESULTS_DIR/rooms/ROOM/convolution-ir.wav      for a convolution reverb (measure.export)
    RESULTS_DIR/rooms/ROOM/model-RATE.wav          the model rendered at each engine rate
    RESULTS_DIR/rooms/ROOM/listen/{measured,modelled}.wav   a loudness-matched listening pair

Per take (in a process pool with ``jobs`` > 1): the response is recovered with the sweep the
sidecar names, analysed, and judged. A take is left out of the averages, with the reason, when
its sidecar's verdict says REDO, when its capture clipped, or when it cannot be read or
recovered (reported, the rest completes). Per position the newest take used enters the room's
average; older ones are listed as superseded.

Resumable: each take's figures carry a key, the SHA-256 of its capture, its sidecar, its sweep
file, the settings and the tool version; a rerun whose key matches reuses the figures and the
response and does no recovery work (``level.json``'s ``work`` counts both). A room's model,
exports and renders carry the key of what they were made from.

``level.json`` (format ``measure.level/1``): ``captures`` (the tree read), ``settings``,
``work`` {``recovered``, ``reused``, ``failed``: takes whose recovery failed, remembered by
key so an unchanged rerun does not try again}, ``left_out`` (every take not used, with its reason),
``rooms``: per room ``name``, ``takes`` [{``position``, ``take``, ``wav``, ``used``,
``reason``, ``ir``, ``figures``}], ``average`` (:meth:`measure.compare.RoomSide.to_dict`),
``model`` (path), ``i3dl2`` (the twelve values), ``attenuation`` (the ``measure attenuation``
document or null), ``convolution_ir`` (path and its sidecar), ``renders`` {rate: path},
``listening`` (paths and loudness). Paths are relative to RESULTS_DIR.
"""

from __future__ import annotations

import hashlib
import json
import os
import sys
from collections.abc import Sequence
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass
from pathlib import Path
from typing import Any

__all__ = ["LEVEL_FORMAT", "ENGINE_RATES", "BatchResult", "run_batch", "take_key"]

LEVEL_FORMAT = "measure.level/1"
#: Sample rates the model is rendered at for engines (common practice: 44.1 and 48 kHz).
ENGINE_RATES: tuple[int, ...] = (44100, 48000)


@dataclass(frozen=True, slots=True)
class BatchResult:
    """What :func:`run_batch` did: the level document, and whether every take was used."""

    level: dict[str, Any]
    path: Path

    @property
    def complete(self) -> bool:
        """Every take used and every room's work done."""
        return not self.level["left_out"] and not any(r.get("failed")
                                                       for r in self.level["rooms"])


def _sha(path: Path) -> str:
    """SHA-256 of a file, hashed once per process while its size and time stay the same."""
    from measure.audio_io import file_sha256

    st = os.stat(path)
    key = (str(Path(path).resolve()), st.st_size, st.st_mtime_ns)
    if key not in _SHA_SEEN:
        _SHA_SEEN[key] = file_sha256(path)
    return _SHA_SEEN[key]


_SHA_SEEN: dict[tuple[str, int, int], str] = {}


def take_key(wav: Path, sidecar: Path, sweep: Path | None, settings: dict[str, Any]) -> str:
    """The content key of one take's work: what it was made from, hashed."""
    from measure._version import __version__

    h = hashlib.sha256()
    for part in (_sha(wav), _sha(sidecar), "" if sweep is None else _sha(sweep),
                 json.dumps(settings, sort_keys=True), __version__):
        h.update(part.encode())
        h.update(b"\0")
    return h.hexdigest()


#: What a take's result carries over from its job.
_CARRIED = ("room", "position", "take", "wav", "sidecar", "ir", "figures", "key", "sweep",
            "side")


def _process_take(job: dict[str, Any]) -> dict[str, Any]:
    """Recover, analyse and judge one take (runs in a worker process). Never raises: a failure
    comes back as ``used`` False with the reason."""
    from measure import audio_io, session
    from measure.errors import MeasureError
    from measure.parameters import analyze_ir

    out = {k: job[k] for k in _CARRIED}
    try:
        sweep = audio_io.read_sweep(job["sweep"])
        ir = session.recover_take(audio_io.read_audio(job["root"] / job["wav"]), job["side"],
                                  sweep)
        h = ir.h[0]
        figs = analyze_ir(h, ir.fs, context=ir.context(0))
        doc = figs.to_dict()
        doc.update(latency_s=ir.latency_s[0], drift_ppm=ir.drift_ppm, batch_key=job["key"],
                   peak_to_noise_ir_db=ir.peak_to_noise_db[0], n_clipped=ir.n_clipped,
                   warnings=list(ir.warnings))
        audio_io.write_ir(job["root"] / job["ir"], ir, sweep=sweep,
                          sources={"capture": str((job["root"] / job["wav"]).resolve()),
                                   "batch_key": job["key"]})
        audio_io.write_json(job["root"] / job["figures"], doc)
        out.update(_judge(doc, job["side"]))
    except MeasureError as err:
        out.update(used=False, reason=f"cannot be used: {err}", failed=True)
    except Exception as err:  # a corrupt take must not stop the level  # noqa: BLE001
        out.update(used=False, reason=f"cannot be read or recovered ({type(err).__name__}: "
                                      f"{err})", failed=True)
    if out.get("failed"):  # remembered, so an unchanged rerun does not try again
        audio_io.write_json(job["root"] / job["figures"],
                            {"batch_key": job["key"], "failed": out["reason"]})
    out["recovered"] = not out.get("failed")
    return out


def _judge(doc: dict[str, Any], side: dict[str, Any]) -> dict[str, Any]:
    verdict = (side.get("verdict") or {}) if isinstance(side, dict) else {}
    if verdict.get("verdict", "good") != "good":
        reasons = "; ".join(verdict.get("reasons", [])) or "its sidecar says REDO"
        return {"used": False, "reason": f"marked REDO at capture: {reasons}"}
    if doc.get("n_clipped", 0) > 0:
        return {"used": False, "reason": f"the capture clipped ({doc['n_clipped']} samples at "
                                         "full scale); record it again with less input gain"}
    return {"used": True, "reason": None}


def _reuse(job: dict[str, Any]) -> dict[str, Any] | None:
    """The earlier result of a take whose key has not changed, or None."""
    from measure import audio_io

    fig = job["root"] / job["figures"]
    if not fig.exists():
        return None
    try:
        doc = audio_io.read_json(fig)
    except Exception:  # noqa: BLE001 - an unreadable earlier result is redone
        return None
    if doc.get("batch_key") != job["key"]:
        return None
    out = {k: job[k] for k in _CARRIED}
    if "failed" in doc:
        out.update(used=False, reason=doc["failed"], failed=True, recovered=False)
        return out
    if not (job["root"] / job["ir"]).exists():
        return None
    out.update(_judge(doc, job["side"]), recovered=False)
    return out


def _jobs(captures: Path, root: Path, settings: dict[str, Any]) -> tuple[list[dict[str, Any]],
                                                                          list[dict[str, Any]]]:
    """(jobs, unreadable takes) of every take in the tree."""
    from measure import audio_io, session

    jobs, bad = [], []
    for t in session.list_takes(captures):
        rel = Path("rooms") / t.room
        base = {"room": t.room, "position": t.position, "take": t.number,
                "wav": _relative(t.wav, root), "sidecar": _relative(t.json, root),
                "ir": str(rel / "irs" / f"{t.wav.stem}.wav"),
                "figures": str(rel / "figures" / f"{t.wav.stem}.json"), "key": None,
                "side": {}, "sweep": None}
        try:
            side = audio_io.read_json(t.json)
            audio_io.check_pair(t.wav, side, side=t.json, sha256=_sha(t.wav))
            sweep = session.resolve_sweep(side.get("sweep_file"), t.wav.parent,
                                          sha256=side.get("sweep_sha256"), hash_of=_sha,
                                          take=t.wav.name)
            if sweep is None:
                raise ValueError(f"its sidecar names no sweep file that exists "
                                 f"({side.get('sweep_file')!r})")
            key = take_key(t.wav, t.json, sweep, settings)
        except Exception as err:  # noqa: BLE001 - reported, the rest completes
            bad.append(dict(base, used=False, reason=f"cannot be used: {err}", recovered=False))
            continue
        jobs.append(dict(base, side=side, sweep=str(Path(sweep).resolve()), key=key, root=root))
    return jobs, bad


def _clean_tree(root: Path) -> None:
    """Finish or remove what a killed earlier run left anywhere in the results folder (sets cut
    between renames, temporaries): a rerun may reuse a folder without writing into it."""
    from measure._files import clean_folder

    for folder, _, _ in os.walk(root):
        clean_folder(folder)


def _relative(path: Path, root: Path) -> str:
    """``path`` relative to the results folder (level.json's paths are)."""
    return os.path.relpath(Path(path).resolve(), Path(root).resolve())


def _progress(total: int) -> Any:
    """A progress bar on stderr when it is a terminal (tqdm), else nothing."""
    try:
        from tqdm import tqdm
    except ImportError:  # pragma: no cover - tqdm is a dependency
        return None
    return tqdm(total=total, desc="takes", unit="take", file=sys.stderr,
                disable=not sys.stderr.isatty(), leave=False)


def run_batch(captures: str | os.PathLike[str], out: str | os.PathLike[str], *,
              jobs: int = 1, rates: Sequence[int] = ENGINE_RATES) -> BatchResult:
    """Process a captures tree into ``out`` (module notes).

    Raises
    ------
    ParameterError
        If ``captures`` holds no takes, ``out`` lies inside it, or ``jobs`` < 1.
    """
    from measure import audio_io
    from measure.errors import ParameterError

    captures, root = Path(captures), Path(out)
    if jobs < 1:
        raise ParameterError(f"--jobs {jobs} must be at least 1")
    if not captures.is_dir():
        raise ParameterError(f"{captures} is not a folder; give a captures tree "
                             "(ROOM/POSITION-takeN.wav with sidecars)")
    if root.resolve() == captures.resolve() or captures.resolve() in root.resolve().parents:
        raise ParameterError("the results folder must not lie inside the captures tree; give "
                             "--out elsewhere")
    if root.exists() and not root.is_dir():
        raise ParameterError(f"--out {root} is a file; give a folder for the results")
    # what a take's work depends on (the render rates only touch the rooms' exports)
    settings = {"bands": "octave"}
    todo, results = _jobs(captures, root, settings)
    if not todo and not results:
        raise ParameterError(f"{captures} holds no takes (ROOM/POSITION-takeN.wav with its "
                             ".json); give a captures tree as `measure capture` writes it")
    try:
        root.mkdir(parents=True, exist_ok=True)
    except OSError as err:
        from measure.errors import AudioFileError

        raise AudioFileError(f"cannot create the results folder {root} "
                             f"({err.strerror or err}); give --out a folder you may write to"
                             ) from err
    _clean_tree(root)
    fresh = []
    for job in todo:
        done = _reuse(job)
        if done is None:
            fresh.append(job)
        else:
            results.append(done)
    bar = _progress(len(todo))
    if bar is not None:
        bar.update(len(todo) - len(fresh))

    def finished(r: dict[str, Any]) -> None:
        results.append(r)
        if bar is not None:
            bar.update(1)

    pool = ProcessPoolExecutor(max_workers=jobs) if jobs > 1 else None
    try:
        for r in (pool.map(_process_take, fresh) if pool is not None and len(fresh) > 1
                  else map(_process_take, fresh)):
            finished(r)
        if bar is not None:
            bar.close()
        results.sort(key=lambda r: (r["room"], r["position"], r["take"]))
        rooms = [_room_or_note(root, name, [r for r in results if r["room"] == name], rates,
                               pool) for name in sorted({r["room"] for r in results})]
    finally:
        if pool is not None:
            pool.shutdown()
    level = {
        "format": LEVEL_FORMAT, "captures": _relative(captures, root),
        "settings": dict(settings, rates=list(rates)),
        "work": {"recovered": sum(1 for r in results if r.get("recovered")),
                 "reused": sum(1 for r in results if not r.get("recovered") and r.get("key")
                               and not r.get("failed")),
                 "failed": sum(1 for r in results if r.get("failed"))},
        "left_out": [_take_entry(r) for r in results if not r["used"]],
        "rooms": rooms,
    }
    path = audio_io.write_json(root / "level.json", level)
    return BatchResult(level, path)


def _take_entry(r: dict[str, Any]) -> dict[str, Any]:
    return {"room": r["room"], "position": r["position"], "take": r["take"], "wav": r["wav"],
            "sidecar": r.get("sidecar"), "used": r["used"], "reason": r["reason"],
            "ir": r["ir"] if r.get("key") and not r.get("failed") else None,
            "figures": r["figures"] if r.get("key") and not r.get("failed") else None}


def _room_or_note(root: Path, name: str, takes: list[dict[str, Any]], rates: Sequence[int],
                  pool: ProcessPoolExecutor | None) -> dict[str, Any]:
    """:func:`_room`, or, when the room's own work fails (a model that cannot be fitted, a
    stored response gone bad), its takes with the reason: the rest of the level completes."""
    from measure.errors import MeasureError

    try:
        return _room(root, name, takes, rates, pool)
    except MeasureError as err:
        return {"name": name, "takes": [_take_entry(r) for r in takes], "average": None,
                "model": None, "i3dl2": None, "attenuation": None, "convolution_ir": None,
                "renders": {}, "listening": None, "failed": True,
                "notes": [f"the room's average, model and exports failed: {err}"]}


def _room(root: Path, name: str, takes: list[dict[str, Any]], rates: Sequence[int],
          pool: ProcessPoolExecutor | None = None) -> dict[str, Any]:
    """A room's average, model, curves and exports from its used takes."""
    import numpy as np

    from measure import audio_io
    from measure.compare import average_sides, side_from_dict

    newest: dict[str, dict[str, Any]] = {}
    for r in takes:
        if r["used"] and (r["position"] not in newest or r["take"] > newest[r["position"]]["take"]):
            newest[r["position"]] = r
    for r in takes:
        if r["used"] and newest[r["position"]] is not r:
            r["used"] = False
            r["reason"] = f"superseded by take {newest[r['position']]['take']} of the position"
    entry: dict[str, Any] = {"name": name, "takes": [_take_entry(r) for r in takes],
                             "average": None, "model": None, "i3dl2": None,
                             "attenuation": None, "convolution_ir": None, "renders": {},
                             "listening": None, "notes": []}
    used = sorted(newest.values(), key=lambda r: r["position"])
    if not used:
        entry["notes"].append("no take of this room could be used")
        return entry
    rel = Path("rooms") / name
    hs, sides, docs = [], [], []
    for r in used:  # the figures the take's own analysis wrote: nothing is analysed again
        a = audio_io.read_audio(root / r["ir"])
        h = a.x[0]
        hs.append((h, a.fs))
        docs.append(audio_io.read_json(root / r["figures"]))
        sides.append(side_from_dict(docs[-1], label=r["position"], kind="capture", h=h))
    fs = hs[0][1]
    if len(sides) >= 2:
        avg = average_sides(sides, label=f"{name} ({len(sides)} positions)")
        audio_io.write_json(root / rel / "average.json", avg.to_dict())
        entry["average"] = avg.to_dict()
    else:
        entry["notes"].append("one position only: no ISO 3382-2 position average (it needs "
                              "two source-receiver combinations or more)")
    best = int(np.argmax([d.get("peak_to_noise_ir_db") or -1e9 for d in docs]))
    key = hashlib.sha256(("".join(r["key"] for r in used) + repr(list(rates))).encode()
                         ).hexdigest()
    entry.update(_room_exports(root, rel, name, used[best], hs[best][0], fs, key, rates, pool))
    entry["attenuation"] = _room_attenuation(root, rel, used, hs, fs, entry)
    return entry


def _export_task(task: dict[str, Any]) -> dict[str, Any]:
    """One of a room's exports (runs in a worker process): the convolution response, a
    render at one rate, or the listening pair; returns its part of the room's entry."""
    from measure import audio_io
    from measure.model.modelfile import model_from_dict
    from measure.model.render import auralize, default_seconds, render_model

    root, rel, h, fs = task["root"], task["rel"], task["h"], task["fs"]
    model = model_from_dict(task["model"])
    if task["kind"] == "convolution":
        from measure.export import convolution_ir

        conv = convolution_ir(h, fs, audio_io.read_sweep(task["sweep"]).spec)
        audio_io.write_pair(root / rel / "convolution-ir.wav", conv.h, fs, conv.sidecar(),
                            subtype="FLOAT")
        return {"convolution_ir": {"wav": str(rel / "convolution-ir.wav"), **conv.sidecar()}}
    if task["kind"] == "render":
        rate = task["rate"]
        p = audio_io.write_audio(root / rel / f"model-{rate}.wav",
                                 render_model(model, rate, default_seconds(model)), rate,
                                 subtype="FLOAT")
        return {"renders": {str(rate): str(p.relative_to(root))}}
    from measure.export import loudness_matched
    from measure.model.drysound import dry_demo_sound

    dry = dry_demo_sound(fs)
    pair = loudness_matched(auralize(dry, fs, h),
                            auralize(dry, fs, render_model(model, fs, h.size / fs)), fs)
    listening, pairs = {}, []
    for which, x, stem in (("a", pair.a, "measured"), ("b", pair.b, "modelled")):
        p = root / rel / "listen" / f"{stem}.wav"
        pairs.append((p, x, fs, pair.sidecar(which)))
        listening[stem] = {"wav": str(p.relative_to(root)), **pair.sidecar(which)}
    audio_io.write_pairs(pairs, subtype="FLOAT")  # the two appear together: A and B match
    return {"listening": listening}


def _room_exports(root: Path, rel: Path, name: str, take: dict[str, Any], h: Any, fs: int,
                  key: str, rates: Sequence[int], pool: ProcessPoolExecutor | None
                  ) -> dict[str, Any]:
    """Model, I3DL2 set, convolution response, renders and the listening pair of a room
    (the exports in ``pool`` when there is one), reused when ``key`` matches the earlier
    run's."""
    from measure import audio_io
    from measure.model.fit import fit_with_i3dl2

    model_path = root / rel / "model.json"
    stamp_path = root / rel / "exports.json"
    if model_path.exists() and stamp_path.exists() and \
            audio_io.read_json(stamp_path).get("batch_key") == key:
        return audio_io.read_json(stamp_path)["entry"]
    res, i3 = fit_with_i3dl2(h, fs, source={"room": name, "position": take["position"],
                                            "take": take["take"]})
    audio_io.write_json(model_path, res.model.to_dict())
    entry: dict[str, Any] = {"model": str(rel / "model.json"),
                             "i3dl2": i3.to_dict().get("values"), "renders": {}}
    base = {"root": root, "rel": rel, "h": h, "fs": fs, "model": res.model.to_dict(),
            "sweep": take["sweep"]}
    tasks = [dict(base, kind="convolution"), dict(base, kind="listening")] + \
        [dict(base, kind="render", rate=rate) for rate in rates]
    parts = pool.map(_export_task, tasks) if pool is not None else map(_export_task, tasks)
    for part in parts:
        for k, v in part.items():
            if k == "renders":
                entry["renders"].update(v)
            else:
                entry[k] = v
    audio_io.write_json(stamp_path, {"batch_key": key, "entry": entry})
    return entry


def _room_attenuation(root: Path, rel: Path, used: list[dict[str, Any]], hs: list[Any],
                      fs: int, entry: dict[str, Any]) -> dict[str, Any] | None:
    """The distance/direction curves when the used takes' sidecars carry a series."""
    from measure import audio_io
    from measure.attenuation import analyze_series
    from measure.errors import ParameterError

    def num(v: Any) -> float | None:
        return float(v) if isinstance(v, (int, float)) and not isinstance(v, bool) else None

    sides = [r["side"] for r in used]
    dist = [num(s.get("distance_m")) for s in sides]
    ang = [num(s.get("angle_deg")) for s in sides]
    labelled = [i for i in range(len(used)) if dist[i] is not None or ang[i] is not None]
    if len({(dist[i], ang[i]) for i in labelled}) < 2:
        return None
    try:
        result = analyze_series([hs[i][0] for i in labelled], fs,
                                distances_m=[dist[i] for i in labelled],
                                angles_deg=[ang[i] for i in labelled],
                                labels=[used[i]["position"] for i in labelled])
    except ParameterError as err:
        entry["notes"].append(f"no attenuation curves: {err}")
        return None
    doc = result.to_dict(rate=fs)
    audio_io.write_json(root / rel / "attenuation.json", doc)
    return doc
