"""Wheel-table slip figures: ``TableSlipMonitor.step`` per sample and ``detect_slip_table`` per hour.

Prints, per kind of the tests' invented tables, the CPU time of one streaming step (best of 3
runs; the residuals handed in, as the estimator has them from its drive model) and the batch time over
360,000 samples (1 hour at 100 Hz). The streaming budget of the whole estimator step is 100 us.
Not part of ``make test``.
"""
from __future__ import annotations

import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "test"))
from test_slip_table import DT, KINDS, _make  # noqa: E402  (the tests' drives, one per kind)

from wheel_dr.core.settings import Settings  # noqa: E402
from wheel_dr.core.slip_table import TableSlipMonitor, detect_slip_table  # noqa: E402
from wheel_dr.core.wheels import SampleStatus  # noqa: E402

N_STREAM = 20_000


def main() -> None:
    s = Settings()
    for kind in KINDS:
        travel, body, cov, gyro, model, _ = _make(kind, seconds=N_STREAM * DT, seed=3)
        m = len(travel.dt_s)
        resid = model.residual(travel.joint_travel_m, travel.steer_rad).tolist()
        spin = travel.joint_travel_m.tolist()
        steer = None if travel.steer_rad is None else travel.steer_rad.tolist()
        b = body.tolist()
        c6 = cov[:, [0, 0, 0, 1, 1, 2], [0, 1, 2, 1, 2, 2]].tolist()
        g = gyro.tolist()
        stamps = travel.stamp_ns.tolist()
        mon = TableSlipMonitor(model, s)
        per = float("inf")
        for _ in range(3):                # CPU time of this process, best of 3
            mon.reset()
            t0 = time.process_time()
            for i in range(m):
                mon.step(SampleStatus.GAP if i == 0 else SampleStatus.USED, stamps[i], DT, spin[i],
                         None if steer is None else steer[i], b[i], c6[i], resid[i], g[i])
            per = min(per, (time.process_time() - t0) / m * 1e6)
        reps = 360_000 // m
        tr_long, body_l, cov_l, gyro_l, _, _ = _make(kind, seconds=reps * m * DT, seed=4)
        t0 = time.process_time()
        detect_slip_table(model, tr_long, body_l, cov_l, gyro_l, s)
        batch = time.process_time() - t0
        print(f"{kind:15s} E={int(model.spin.sum())}: streaming step {per:6.1f} us; batch "
              f"{batch * 1e3:7.1f} ms for {len(tr_long.dt_s)} samples (residuals included)")


if __name__ == "__main__":
    main()
