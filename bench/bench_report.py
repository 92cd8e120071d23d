"""Benchmark measure report: a room folder of 12 takes of 10 s at 48 kHz.

Run as ``python bench/bench_report.py`` from the repository root. It writes a captures tree of
one room with 12 positions (as bench_batch.py does) and times ``measure report ROOM_FOLDER
--out REPORT.html`` in a fresh process, against the issue's 20 s budget and against a floor
measured in the same run: recovering and analysing the 12 takes alone (what any report of them
must do before drawing). Best of two runs; nothing here is a test.
"""

from __future__ import annotations

import subprocess
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from bench_batch import tree  # noqa: E402

from measure.cli.cmd_attenuation import _from_room_folder  # noqa: E402
from measure.parameters import analyze_ir  # noqa: E402

BUDGET_S = 20.0


def main() -> None:
    root_dir = Path(__file__).resolve().parents[1]
    with tempfile.TemporaryDirectory() as tmp:
        folder = tree(Path(tmp)) / "office"
        t = time.perf_counter()
        got = _from_room_folder(folder, None)
        for h in got["h"]:
            analyze_ir(h, got["fs"])
        t_floor = time.perf_counter() - t
        best = float("inf")
        for _ in range(2):
            out = Path(tmp) / "report.html"
            t = time.perf_counter()
            subprocess.run([sys.executable, "-m", "measure", "report", str(folder), "--out",
                            str(out)], check=True, capture_output=True, cwd=root_dir)
            best = min(best, time.perf_counter() - t)
        size_mb = out.stat().st_size / 1e6
        n = len(got["h"])
    print(f"measure report of a room folder, {n} takes of 10 s at 48 kHz:")
    print(f"  recover + analyse the takes (floor)  {t_floor:6.2f} s")
    print(f"  the report (fresh process)           {best:6.2f} s   budget {BUDGET_S:.0f} s: "
          f"{'within' if best < BUDGET_S else 'OVER'}; ratio to the floor {best / t_floor:.1f}x")
    print(f"  size {size_mb:.1f} MB")


if __name__ == "__main__":
    main()
