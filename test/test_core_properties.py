"""Property-based checks of the core over every setting and adversarial joint states (hypothesis).

Settings are drawn across each parameter's whole allowed range, end points included; messages
carry NaN, inf, +-1e308, denormals, zero / repeated / backward stamps, huge jumps, names missing,
duplicated, extra, empty or non-ASCII, and arrays whose lengths disagree. Properties:

* ``Estimator.step`` never raises; pose, covariance, twist and twist covariance are always finite;
  both covariances are symmetric and positive semi-definite (a covariance matrix is, by
  definition: common practice, any statistics text);
* ``run`` over the same messages (through ``samples_from_messages``) equals the streaming result:
  every status code, the counters, the slip flags, poses and covariances;
* ``run`` raises only the documented InputError, and only when a configured joint appears in no
  message at all (streaming then reports every sample as a missing joint).

`make test` runs a short derandomised profile; `make fuzz` (WHEEL_DR_FUZZ=1) runs it long.
"""
from __future__ import annotations

import math

import numpy as np
import pytest

hypothesis = pytest.importorskip("hypothesis")
from hypothesis import assume, given, strategies as st  # noqa: E402

from wheel_dr.core import Estimator, InputError, SettingsError, Settings, run  # noqa: E402
from wheel_dr.core.wheels import samples_from_messages  # noqa: E402

LEFT = ("quokka_left_front_wheel_joint", "quokka_left_rear_wheel_joint")
RIGHT = ("quokka_right_front_wheel_joint", "quokka_right_rear_wheel_joint")
OTHER = "quokka_caster_swivel_joint"
ODD_NAMES = ("", "räd_wheel_joint", "左輪", "\x00", OTHER)

ADVERSARIAL = (math.nan, math.inf, -math.inf, 1e308, -1e308, 5e-324, -5e-324, 0.0, -0.0, 1e-300, 3.0e7)


def _number(spec) -> st.SearchStrategy:
    lo, hi = spec.lo, spec.hi
    if spec.kind is int:
        lo_i = int(lo) if lo is not None else -10**6
        hi_i = int(hi) if hi is not None else 10**6
        return st.one_of(st.sampled_from([lo_i, hi_i]), st.integers(lo_i, min(hi_i, lo_i + 5000)),
                         st.integers(lo_i, hi_i))
    lo_f = -1e6 if lo is None else float(lo)
    hi_f = 1e6 if hi is None else float(hi)
    ends = [v for v, open_ in ((lo_f, spec.lo_open), (hi_f, spec.hi_open)) if not open_]
    inner = st.floats(lo_f, hi_f, exclude_min=spec.lo_open, exclude_max=spec.hi_open, allow_nan=False)
    small = st.floats(lo_f, min(hi_f, max(lo_f * 10.0, lo_f + 1e-3)), exclude_min=spec.lo_open,
                      exclude_max=spec.hi_open, allow_nan=False)
    return st.one_of(st.sampled_from(ends), inner, small) if ends else st.one_of(inner, small)


@st.composite
def settings_strategy(draw) -> Settings:
    values: dict = {}
    nl, nr = draw(st.integers(1, 2)), draw(st.integers(1, 2))
    values["wheels.left_joints"] = list(LEFT[:nl])
    values["wheels.right_joints"] = list(RIGHT[:nr])
    for spec in Settings.specs():
        if spec.name in ("wheels.left_joints", "wheels.right_joints") or spec.name.startswith(("frames.", "drive.")):
            continue   # the drive table stays empty: these properties are of the differential core
        if spec.kind is str and not spec.choices:     # free text (a topic name): the default
            continue
        if spec.choices:
            values[spec.name] = draw(st.sampled_from(spec.choices))
        elif spec.kind is bool:
            values[spec.name] = draw(st.booleans())
        elif spec.kind is tuple:
            values[spec.name] = [draw(_number(spec)) for _ in range(spec.length or 1)]
        else:
            values[spec.name] = draw(_number(spec))
    try:
        return Settings.from_flat(values)
    except SettingsError:
        assume(False)
        raise


@st.composite
def messages_strategy(draw, settings: Settings):
    """Joint-state messages (stamp_ns, names, positions, velocities) and per-message gyro values."""
    wanted = list(settings.wheels.left_joints) + list(settings.wheels.right_joints)
    n = draw(st.integers(1, 40))
    base_dt = draw(st.sampled_from([1_000_000, 10_000_000, 100_000_000, 700_000_000]))
    rate = draw(st.floats(-40.0, 40.0, allow_nan=False))      # wheel rate, rad/s (or counts/s)
    spread = draw(st.floats(0.0, 2.0, allow_nan=False))
    bad_rate = draw(st.sampled_from([0.0, 0.1, 0.3, 0.7]))
    stamp = 1_764_000_000_000_000_000
    phase = [0.0] * len(wanted)
    out, gyro = [], []
    pending: tuple[int, float] | None = None      # the second half of an overflowing pair
    for _ in range(n):
        kind = draw(st.sampled_from(["ok"] * 6 + ["stamp", "names", "values", "lengths", "jump", "overflow"])) \
            if draw(st.floats(0.0, 1.0)) < bad_rate else "ok"
        stamp += base_dt if kind != "stamp" else draw(st.sampled_from([0, -base_dt, base_dt * 50, 1]))
        st_ns = stamp
        if kind == "stamp" and draw(st.booleans()):
            st_ns = draw(st.sampled_from([0, -5, 1, 2**63 - 1, 2**63 + 5]))
        for i in range(len(phase)):
            phase[i] += (rate + spread * i) * base_dt * 1e-9
        names = list(wanted) + ([OTHER] if draw(st.booleans()) else [])
        pos = [p * (1.0 + 0.01 * i) for i, p in enumerate(phase)] + ([0.5] if len(names) > len(wanted) else [])
        vel = [rate + spread * i for i in range(len(wanted))] + ([0.0] if len(names) > len(wanted) else [])
        if kind == "names":
            how = draw(st.sampled_from(["missing", "duplicate", "extra", "empty", "odd"]))
            k = draw(st.integers(0, len(names) - 1))
            if how == "missing":
                del names[k], pos[k], vel[k]
            elif how == "duplicate":
                names.append(names[k])
                pos.append(draw(st.sampled_from(ADVERSARIAL)))
                vel.append(pos[-1])
            elif how == "extra":
                names.append(draw(st.sampled_from(ODD_NAMES)))
                pos.append(1.0)
                vel.append(1.0)
            elif how == "empty":
                names, pos, vel = [], [], []
            else:
                names[k] = draw(st.sampled_from(ODD_NAMES))
        elif kind == "values":
            for arr in (pos, vel):
                if arr and draw(st.booleans()):
                    arr[draw(st.integers(0, len(arr) - 1))] = draw(st.sampled_from(ADVERSARIAL))
        elif kind == "lengths":
            how = draw(st.sampled_from(["short_pos", "long_vel", "no_pos", "no_vel", "none"]))
            if how == "short_pos":
                pos = pos[:-1]
            elif how == "long_vel":
                vel = vel + [0.0]
            elif how == "no_pos":
                pos = []
            elif how == "no_vel":
                vel = []
            else:
                pos, vel = [], []
        elif kind == "jump":
            k = draw(st.integers(0, len(wanted) - 1))
            pos[k] += draw(st.sampled_from([1e308, -1e308, 1e6, 3.0, 2.0**63]))
            vel[k] = draw(st.sampled_from([1e308, -1e308, 1e6]))
        elif kind == "overflow":   # +1e308 then -1e308: their difference overflows to inf
            k = draw(st.integers(0, len(wanted) - 1))
            big = draw(st.sampled_from([1e308, -1e308, 1.7e308]))
            pos[k], vel[k] = big, big
            pending = (k, -big)
            out.append((st_ns, names, pos, vel))
            gyro.append(None)
            continue
        if pending is not None and len(pos) == len(wanted) + (len(names) > len(wanted)) and kind == "ok":
            pos[pending[0]] = vel[pending[0]] = pending[1]
        pending = None
        out.append((st_ns, names, pos, vel))
        gyro.append(draw(st.one_of(st.none(), st.sampled_from(ADVERSARIAL + (0.01, -0.4, 99.9, 100.1)),
                                   st.floats(-2.0, 2.0, allow_nan=False))))
    return out, gyro


def _assert_covariance(cov: np.ndarray, what: str) -> None:
    assert np.isfinite(cov).all(), f"{what} not finite: {cov}"
    assert np.array_equal(cov, cov.T) or np.allclose(cov, cov.T, rtol=1e-12, atol=0.0), f"{what} not symmetric"
    scale = max(1.0, float(np.abs(cov).max()))
    assert float(np.linalg.eigvalsh(cov).min()) >= -1e-9 * scale, f"{what} not PSD: {np.linalg.eigvalsh(cov)}"


def _close(a: np.ndarray, b: np.ndarray) -> bool:
    scale = max(1.0, float(np.abs(a).max(initial=0.0)), float(np.abs(b).max(initial=0.0)))
    return bool(np.all(np.abs(a - b) <= 1e-9 * scale))


@st.composite
def case(draw):
    s = draw(settings_strategy())
    msgs, gyro = draw(messages_strategy(s))
    return s, msgs, gyro


@given(case())
def test_step_and_run_stay_finite_and_agree(data) -> None:
    settings, messages, gyro = data
    est = Estimator(settings)
    statuses, rows, flags = [], [], []
    for (stamp, names, pos, vel), g in zip(messages, gyro):
        status = est.step(stamp, names, pos, vel, g)
        statuses.append(int(status))
        for value in (est.x_m, est.y_m, est.theta_rad, est.v_mps, est.w_radps):
            assert math.isfinite(value), (status, est.pose)
        _assert_covariance(est.cov, "pose covariance")
        _assert_covariance(est.twist_cov, "twist covariance")
        if status < 10:
            rows.append((est.x_m, est.y_m, est.theta_rad, est.cov.copy(), est.v_mps, est.w_radps,
                         est.twist_cov.copy()))
            flags.append((est.last_slip.slip, est.last_slip.left, est.last_slip.right, est.last_slip.detector))

    samples = samples_from_messages(messages)
    gz = np.array([math.nan if g is None else g for g in gyro], dtype=np.float64)
    wanted = set(settings.wheels.left_joints) | set(settings.wheels.right_joints)
    if not wanted <= set(samples.names):
        with pytest.raises(InputError):
            run(samples, settings, gyro_z_radps=gz)
        assert all(s in (10, 11, 12, 14) for s in statuses)   # nothing accepted without the joint
        return
    traj = run(samples, settings, gyro_z_radps=gz)
    assert traj.status.tolist() == statuses
    assert traj.counters == est.counters
    assert len(traj) == len(rows)
    if not rows:
        return
    x, y, theta, cov, v, w, tcov = (np.array(c) for c in zip(*rows))
    for name, a, b in (("x", traj.x_m, x), ("y", traj.y_m, y), ("theta", traj.theta_rad, theta),
                       ("v", traj.v_mps, v), ("w", traj.w_radps, w), ("cov", traj.cov, cov),
                       ("twist_cov", traj.twist_cov, tcov)):
        assert np.isfinite(a).all(), name
        assert _close(a, b), f"{name}: batch {a} != streaming {b}"
    for i in range(len(traj)):
        _assert_covariance(traj.cov[i], "batch pose covariance")
    slip = np.array(flags, dtype=np.int64)
    assert np.array_equal(traj.slip.slip.astype(np.int64), slip[:, 0])
    assert np.array_equal(traj.slip.left.astype(np.int64), slip[:, 1])
    assert np.array_equal(traj.slip.right.astype(np.int64), slip[:, 2])
    assert np.array_equal(traj.slip.detector.astype(np.int64), slip[:, 3])
