#!/usr/bin/env python3
"""Benchmark of online self-calibration on wheel tables (``wheel_dr.core.online_table``).

Usage: .venv/bin/python tools/bench_online_table.py [--laps 3] [--kinds mecanum,tricycle]

For each kind, the invented vehicle's simulated drive (``wheel_dr.demo.vehicles.table_scenario``)
goes through the streaming ``Estimator.step`` with ``online_calibration.enabled`` off and on: the
CPU time per step, the added cost per step (averaged over steps that close an interval and steps
that do not), the cost of one interval close (``TableOnlineCalibrator._close``) and of one
``result()`` (what the node's diagnostics read), and the batch ``run`` off and on. Figures are
printed, not asserted.
"""
from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from wheel_dr.core import Settings, run  # noqa: E402
from wheel_dr.core.estimator import Estimator  # noqa: E402
from wheel_dr.demo.vehicles import table_scenario  # noqa: E402
from wheel_dr.sim.table import simulate_table  # noqa: E402


def _settings(model, on: bool) -> Settings:
    g = model.geometry()
    values = {k: list(v) if isinstance(v, tuple) else v for k, v in g.items()}
    values.update({"drive.wheel_joints": list(model.wheel_joints), "drive.steer_joints": list(model.steer_joints),
                   "noise.k_wheels": [float(k) for k in model.k], "noise.steer_sd_rad": model.steer_sd_rad,
                   "online_calibration.enabled": on})
    return Settings.from_flat(values)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--laps", type=int, default=3)
    ap.add_argument("--kinds", default="mecanum,tricycle,swerve")
    args = ap.parse_args()
    for kind in args.kinds.split(","):
        sc = table_scenario(kind, laps=args.laps)
        sim = simulate_table(sc, seed=0)
        names = list(sim.joint_names)
        pos = [[float(v) for v in row] for row in sim.position_rad]
        gyro = [float(v) for v in sim.gyro_z_radps]
        stamps = [int(s) for s in sim.stamp_ns]
        n = len(stamps)
        per = {}
        for on in (False, True):
            est = Estimator(_settings(sc.nominal_table, on))
            t0 = time.process_time()
            for k in range(n):
                est.step(stamps[k], names, pos[k], [], gyro[k])
            per[on] = (time.process_time() - t0) / n * 1e6
            if on:
                cal = est.online_table
                t0 = time.process_time()
                for _ in range(50):
                    cal.result()
                read = (time.process_time() - t0) / 50 * 1e3
                t0 = time.process_time()
                for _ in range(50):
                    cal._row()
                row = (time.process_time() - t0) / 50 * 1e3
        batch = {}
        for on in (False, True):
            s = _settings(sc.nominal_table, on)
            t0 = time.process_time()
            run(sim.joint_samples(), s, gyro_z_radps=sim.gyro_z_radps)
            batch[on] = time.process_time() - t0
        print(f"{kind:9s} {n} samples: streaming step {per[False]:.1f} us off, {per[True]:.1f} us on, added "
              f"{per[True] - per[False]:.1f} us/step (one interval's row {row:.2f} ms, ~10 per second; result() "
              f"{read:.2f} ms); batch run {batch[False] * 1e3:.0f} ms off, {batch[True] * 1e3:.0f} ms on")


if __name__ == "__main__":
    main()
