"""Bad inputs and extreme settings the core must survive: named reproducers of past failures.

* Readings whose difference overflows (+1e308 then -1e308) with wrapping angles or a rolling tick
  counter: the wrapped difference is NaN, which must restart the chain (a jump), never be
  integrated (IEEE 754: inf - inf and a remainder of inf are NaN; NaN compares false).
* Every numeric parameter at both ends of its allowed range runs without raising and gives
  finite results; values a real base cannot have are refused with one sentence.
* Batch and streaming use one status rule for arrays left empty (sensor_msgs/JointState: an
  unused field is an empty array).
"""
from __future__ import annotations

import math
import warnings

import numpy as np
import pytest

from wheel_dr.core import Estimator, SampleStatus, Settings, SettingsError, run
from wheel_dr.core.slip import SlipMonitor
from wheel_dr.core.wheels import samples_from_messages

NAMES = ["left_wheel_joint", "right_wheel_joint"]


def _drive(n: int = 300, dt_ns: int = 10_000_000):
    """A gentle left turn at 100 Hz (the Quokka cart's demo speeds, invented)."""
    t = np.arange(n) * dt_ns * 1e-9
    left, right = 4.0 * t, 4.4 * t
    return [(1_000_000_000 + k * dt_ns, NAMES, [float(left[k]), float(right[k])],
             [4.0, 4.4]) for k in range(n)]


@pytest.mark.parametrize("flat", [{"wheels.wrap_angle": True},
                                  {"wheels.source": "ticks", "wheels.counter_bits": 16},
                                  {"wheels.source": "ticks", "wheels.counter_bits": 64}])
def test_overflowing_difference_restarts_the_chain(flat: dict) -> None:
    settings = Settings.from_flat(flat)
    msgs = [(10_000_000 * k, NAMES, p, []) for k, p in
            enumerate(([0.0, 0.0], [1e308, 0.0], [-1e308, 0.0], [-1e308, 0.0], [-1e308, 0.001]), 1)]
    est = Estimator(settings)
    statuses = [est.step(*m) for m in msgs]
    assert statuses[1] == SampleStatus.JUMP and statuses[2] == SampleStatus.JUMP
    assert all(math.isfinite(v) for v in (*est.pose, est.v_mps, est.w_radps))
    assert np.isfinite(est.cov).all() and np.isfinite(est.twist_cov).all()
    with warnings.catch_warnings():
        warnings.simplefilter("error")     # no RuntimeWarning from the batch form either
        traj = run(samples_from_messages(msgs), settings)
    assert traj.status.tolist() == [int(s) for s in statuses]
    assert np.isfinite(traj.x_m).all() and np.isfinite(traj.cov).all()


def _extreme_settings():
    """(name, value) for both ends of every numeric parameter's range."""
    for spec in Settings.specs():
        if spec.kind not in (int, float) or spec.choices or spec.name.startswith("frames."):
            continue
        for end, is_open in ((spec.lo, spec.lo_open), (spec.hi, spec.hi_open)):
            if end is not None and not is_open:
                yield spec.name, end


@pytest.mark.parametrize("name,value", list(_extreme_settings()))
def test_every_range_end_runs_finite(name: str, value: float) -> None:
    base = {"slip.long_window_s": 0.0} if name == "slip.window_s" else {}
    if name == "slip.long_window_s" and value > 0:
        base = {"slip.window_s": 0.1}
    settings = Settings.from_flat({**base, name: value, "slip.response": "inflate"})
    msgs = _drive()
    gyro = [0.3 if k % 50 else math.nan for k in range(len(msgs))]
    est = Estimator(settings)
    for m, g in zip(msgs, gyro):
        est.step(*m, g)
        assert math.isfinite(est.x_m) and np.isfinite(est.cov).all() and np.isfinite(est.twist_cov).all()
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        traj = run(samples_from_messages(msgs), settings, gyro_z_radps=np.array(gyro))
    assert traj.counters == est.counters
    assert abs(traj.x_m[-1] - est.x_m) <= 1e-9 * max(1.0, abs(est.x_m))


@pytest.mark.parametrize("flat,what", [
    ({"slip.window_s": 1e-10}, "slip.window_s"),
    ({"wheels.ticks_per_revolution": 1e-200, "wheels.gear_ratio": 1e-200}, "wheels.ticks_per_revolution"),
    ({"wheels.track_width": 1e-170}, "wheels.track_width"),
    ({"slip.gyro_noise_radps": 1e-170}, "slip.gyro_noise_radps"),
    ({"slip.long_window_s": 0.05, "slip.window_s": 0.1}, "slip.long_window_s"),
])
def test_settings_a_real_base_cannot_have_are_refused(flat: dict, what: str) -> None:
    with pytest.raises(SettingsError) as info:
        Settings.from_flat(flat)
    text = str(info.value)
    assert what in text and text.count(". ") == 0 and text.endswith(".")   # one sentence naming the fix


def test_slip_monitor_with_the_shortest_window() -> None:
    """The window always holds its own sample: no IndexError at slip.window_s = its lower end."""
    settings = Settings.from_flat({"slip.window_s": Settings.spec("slip.window_s").lo, "slip.long_window_s": 0.0})
    assert SlipMonitor(settings)._k.window_ns >= 1
    est = Estimator(settings)
    for m in _drive(50, 2_000_000):
        assert est.step(*m, 0.1) < 10
    assert est.counters["used"] == 49


@pytest.mark.parametrize("source,empty", [("position", "positions"), ("velocity", "velocities"),
                                          ("position", "velocities"), ("position", "both")])
def test_empty_arrays_get_one_status_in_batch_and_streaming(source: str, empty: str) -> None:
    settings = Settings.from_flat({"wheels.source": source})
    msgs = _drive(20)
    k = 10
    stamp, names, pos, vel = msgs[k]
    if empty in ("positions", "both"):
        pos = []
    if empty in ("velocities", "both"):
        vel = []
    msgs[k] = (stamp, names, pos, vel)
    est = Estimator(settings)
    statuses = [int(est.step(*m)) for m in msgs]
    traj = run(samples_from_messages(msgs), settings)
    assert traj.status.tolist() == statuses
    needed_empty = empty == "both" or (empty == "positions") == (source == "position")
    expected = (SampleStatus.MALFORMED if empty == "both" else
                SampleStatus.NON_FINITE if needed_empty else SampleStatus.USED)
    assert statuses[k] == expected
