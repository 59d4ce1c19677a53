#!/usr/bin/env python3
"""Benchmark: start-up time of the ``wheel-dr`` command (fresh processes, median of several runs).

Prints the wall time of ``python -c pass`` (the interpreter alone), ``wheel-dr --help``,
``wheel-dr replay --help`` and ``wheel-dr calibrate --help``, and whether numpy / scipy were
imported for ``--help``. Target: ``wheel-dr --help`` under 0.3 s (commands import what they need
when they run). Usage: .venv/bin/python tools/bench_startup.py [--runs 9]
"""
from __future__ import annotations

import argparse
import statistics
import subprocess
import sys
import time
from pathlib import Path

__all__ = ["main"]

EXE = Path(sys.executable).with_name("wheel-dr")


def _median_s(cmd: list[str], runs: int) -> float:
    times = []
    for _ in range(runs):
        t0 = time.perf_counter()
        subprocess.run(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, check=False)
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--runs", type=int, default=9, help="runs per command (default 9)")
    args = ap.parse_args(argv)
    rows = [("python -c pass", [sys.executable, "-c", "pass"]),
            ("wheel-dr --help", [str(EXE), "--help"]),
            ("wheel-dr replay --help", [str(EXE), "replay", "--help"]),
            ("wheel-dr calibrate --help", [str(EXE), "calibrate", "--help"])]
    print(f"start-up, median of {args.runs} fresh processes:")
    for label, cmd in rows:
        print(f"  {label:28s} {_median_s(cmd, args.runs):6.3f} s")
    probe = ("import sys; sys.argv = ['wheel-dr', '--help']\n"
             "from wheel_dr.cli import main\n"
             "try:\n    main(['--help'])\nexcept SystemExit:\n    pass\n"
             "print(sorted(m for m in ('numpy', 'scipy', 'rosbags', 'matplotlib') if m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True).stdout.strip().splitlines()
    print(f"  heavy modules imported by --help: {out[-1] if out else '?'}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
