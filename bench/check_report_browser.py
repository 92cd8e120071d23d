"""Check that a `measure report` file renders and prints in a real browser (headless Chromium).

Run as ``python bench/check_report_browser.py [--optional] [--keep DIR]`` from the repository
root. It:

1. makes an impulse response of a virtual room (:data:`measure.virtual.DEMO_ROOMS`, the office,
   seed 0) and writes its report with ``measure report IR.wav --out REPORT.html`` (the command
   module itself, so the check works before the command is registered);
2. loads the file in ``chromium --headless --disable-gpu --no-sandbox`` three times, each in a
   fresh profile and with the network disabled for the page (``--host-resolver-rules`` maps
   every host to nothing, so any stray network reference would fail to load and be logged):

   - ``--dump-dom``: the DOM after loading must hold every room section and as many ``<img>``
     elements as the file, and no ``src`` or ``href`` other than a PNG data URI or an anchor
     (headless Chromium does not log a failed image load, so this is checked in the DOM; the
     decoded images are not checked pixel by pixel);
   - ``--screenshot``: a PNG of the first 1280 × 2400 CSS pixels must be written;
   - ``--print-to-pdf`` (no header and footer): a PDF must be written and hold at least one page
     (the ``/Type /Page`` objects are counted; Chromium's PDF writer does not hide them in
     compressed object streams);

3. every run has ``--enable-logging=stderr --v=0``: Chromium then writes each console message
   of the page as a line with ``CONSOLE`` in it, and a resource that fails to load as
   ``Failed to load resource`` or ``net::ERR_``. The report has no script, so ANY such line is
   an error here (stricter than looking for the "error" level, whose spelling differs between
   Chromium versions). The dbus and GPU noise headless Chromium prints in a container is not
   about the page and is ignored.

It prints what it checked and how long each step took, and exits 1 on any failure. A missing
Chromium is a failure, unless ``--optional`` is given: then it says so and exits 0.
"""

from __future__ import annotations

import argparse
import re
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

FS = 48000
CANDIDATES = ("chromium", "chromium-browser", "google-chrome", "google-chrome-stable")
TIMEOUT_S = 180.0
#: Lines of Chromium's log that are about the page: its console and failed loads.
PAGE_PROBLEM = re.compile(r"CONSOLE|Failed to load resource|net::ERR_")
#: A src or href in the rendered DOM that points outside the file.
EXTERNAL = re.compile(r'(?:src|href)="(?!data:image/png;base64,|#)([^"]*)"')
PAGE_OBJECT = re.compile(rb"/Type\s*/Page(?![A-Za-z])")


def _chromium(explicit: str | None) -> str | None:
    if explicit:
        return explicit if Path(explicit).exists() or shutil.which(explicit) else None
    for name in CANDIDATES:
        found = shutil.which(name)
        if found:
            return found
    return None


def _make_report(folder: Path) -> tuple[Path, float]:
    import argparse as ap
    import contextlib
    import io

    from measure import audio_io
    from measure.cli import cmd_report
    from measure.virtual import DEMO_ROOMS, room_ir

    ir = audio_io.write_audio(folder / "office.wav", room_ir(DEMO_ROOMS[1], FS, seed=0), FS,
                              subtype="FLOAT")
    out = folder / "office.html"
    p = ap.ArgumentParser()
    cmd_report.add_arguments(p)
    t = time.perf_counter()
    with contextlib.redirect_stdout(io.StringIO()):
        code = cmd_report.run(p.parse_args([str(ir), "--out", str(out)]))
    dt = time.perf_counter() - t
    if code != 0:
        raise SystemExit(f"FAIL: measure report exited {code}")
    return out, dt


def _run(chromium: str, page: Path, extra: list[str], profile: Path) -> tuple[str, str, float]:
    cmd = [chromium, "--headless", "--disable-gpu", "--no-sandbox", "--enable-logging=stderr",
           "--v=0", f"--user-data-dir={profile}", "--no-first-run", "--disable-extensions",
           "--host-resolver-rules=MAP * ~NOTFOUND", *extra, page.resolve().as_uri()]
    t = time.perf_counter()
    try:
        done = subprocess.run(cmd, capture_output=True, text=True, timeout=TIMEOUT_S)
    except subprocess.TimeoutExpired as err:
        raise SystemExit(f"FAIL: chromium did not finish within {TIMEOUT_S:.0f} s "
                         f"({' '.join(extra)})") from err
    return done.stdout, done.stderr, time.perf_counter() - t


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--optional", action="store_true",
                    help="skip (exit 0) when no Chromium is installed, instead of failing")
    ap.add_argument("--chromium", default=None, help="the browser to run (default: the first "
                    "of " + ", ".join(CANDIDATES) + " on PATH)")
    ap.add_argument("--keep", metavar="DIR", default=None,
                    help="write the report, screenshot and PDF here (default: a temporary "
                         "folder, removed afterwards)")
    args = ap.parse_args()
    chromium = _chromium(args.chromium)
    if chromium is None:
        msg = ("no Chromium found (" + (args.chromium or ", ".join(CANDIDATES)) + "); install "
               "it, e.g. `apt-get install chromium` on Debian")
        if args.optional:
            print(f"SKIP: {msg}; --optional given, so this is not a failure")
            return 0
        print(f"FAIL: {msg}")
        return 1
    version = subprocess.run([chromium, "--version"], capture_output=True, text=True,
                             timeout=60).stdout.strip()
    print(f"browser: {chromium} ({version or 'version unknown'})")
    with tempfile.TemporaryDirectory(prefix="report-browser-") as tmp:
        folder = Path(args.keep) if args.keep else Path(tmp)
        folder.mkdir(parents=True, exist_ok=True)
        failures: list[str] = []
        page, t_report = _make_report(folder)
        text = page.read_text(encoding="utf-8")
        n_img = text.count("<img ")
        n_sec = text.count('<section class="room"')
        print(f"report: {page} ({page.stat().st_size / 1e6:.2f} MB, {n_sec} room section(s), "
              f"{n_img} images) made in {t_report:.2f} s")

        logs: list[str] = []
        dom, err, t_dom = _run(chromium, page, ["--dump-dom"], Path(tmp) / "p1")
        logs.append(err)
        got_img = dom.count("<img ")
        got_sec = dom.count('<section class="room"')
        external = EXTERNAL.findall(dom)
        ok = got_img == n_img and got_sec == n_sec and "</html>" in dom and not external
        print(f"dump-dom: {got_sec} section(s), {got_img} images in the rendered DOM "
              f"({'ok' if ok else 'MISMATCH'}) in {t_dom:.2f} s")
        if external:
            print(f"  references outside the file: {external[:5]}")
        if not ok:
            failures.append(f"the rendered DOM holds {got_sec} sections and {got_img} images "
                            f"(the file {n_sec} and {n_img}) and {len(external)} references "
                            "outside the file")

        shot = folder / "office.png"
        _, err, t_shot = _run(chromium, page, [f"--screenshot={shot}", "--window-size=1280,2400",
                                               "--hide-scrollbars"], Path(tmp) / "p2")
        logs.append(err)
        ok = shot.exists() and shot.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
        print(f"screenshot: {shot} ({shot.stat().st_size if shot.exists() else 0} bytes, "
              f"{'ok' if ok else 'MISSING'}) in {t_shot:.2f} s")
        if not ok:
            failures.append("no PNG screenshot was written")

        pdf = folder / "office.pdf"
        _, err, t_pdf = _run(chromium, page, [f"--print-to-pdf={pdf}", "--no-pdf-header-footer"],
                             Path(tmp) / "p3")
        logs.append(err)
        data = pdf.read_bytes() if pdf.exists() else b""
        n_pages = len(PAGE_OBJECT.findall(data))
        ok = data.startswith(b"%PDF") and n_pages > 0
        print(f"pdf: {pdf} ({len(data)} bytes, {n_pages} page(s), {'ok' if ok else 'EMPTY'}) "
              f"in {t_pdf:.2f} s")
        if not ok:
            failures.append("the PDF has no pages" if data else "no PDF was written")

        problems = [ln.strip() for log in logs for ln in log.splitlines()
                    if PAGE_PROBLEM.search(ln)]
        print(f"console: {len(problems)} console message(s) or failed load(s) in the logs of "
              f"the three runs (the report has no script, so any is an error)")
        for ln in problems[:10]:
            print(f"  {ln}")
        if problems:
            failures.append(f"{len(problems)} console messages or failed loads")
        total = t_report + t_dom + t_shot + t_pdf
        print(f"total: {total:.2f} s")
        if failures:
            print("FAIL: " + "; ".join(failures))
            return 1
        print("OK: the report renders, screenshots and prints to PDF in headless Chromium")
        return 0


if __name__ == "__main__":
    raise SystemExit(main())
