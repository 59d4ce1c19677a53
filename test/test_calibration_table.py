"""Calibration of wheel-table bases against ground truth: known geometry recovered per kind.

The simulated drives are built outside the fit: a route of body twists (vx, vy, wz) is turned into
wheel travel and steering readings by the TRUE table's inverse (``WheelTable.inverse``, the rolling
and sliding equations of Siegwart, Nourbakhsh & Scaramuzza 2011, sec. 3.2), and the truth is the
twist route integrated with the SE(2) exponential (``integrate_body`` 'exact'; Sola, Deray &
Atchuthan 2018, eq. 156). The encoders report the travel at the CONFIGURED radius (encoder angle
times the nominal radius) plus per-wheel noise of variance k |s| (the per-wheel model, Siegwart
et al. 2011, sec. 5.2.4); the steering readings carry white noise; the truth carries noise too.
The fit is least squares on segment-relative motion (Antonelli, Chiaverini & Fusco, IEEE T-RO
21(5), 2005, from memory; closed stretches of a drive as the test of odometry after Borenstein &
Feng 1996). Tolerances are the issue's: radius 0.1 %, lengths 0.3 %, steering offsets 0.002 rad.
"""
from __future__ import annotations

import math
import subprocess
import sys
from dataclasses import dataclass

import numpy as np
import pytest
from scipy.linalg import null_space

from wheel_dr.analysis.calibration_table import (CalibrationError, ExcitationError, KIND_ADVICE, TruthError,
                                                 calibrate_table, offset_modes, table_figures, table_parameters)
from wheel_dr.core.drive import WheelTable, integrate_body
from wheel_dr.core.wheels import Travel

K_WHEEL_M = 3e-6          # variance of a wheel's travel per metre (as test_calibration.py: a cart on a smooth floor)
STEER_SD_RAD = 0.003      # steering reading noise (invented)
TRUTH_SD = (5e-4, 5e-4)   # truth noise per pose: 0.5 mm, 0.5 mrad (motion-capture class; invented)
RADIUS_TOL, LENGTH_TOL, OFFSET_TOL = 1e-3, 3e-3, 0.002     # the tolerances
PI4 = math.pi / 4


def tables(kind: str) -> tuple[WheelTable, WheelTable]:
    """(configured, true) tables of invented demo vehicles; the true ones differ from the drawing."""
    noise = dict(k_wheels=K_WHEEL_M, steer_sd_rad=STEER_SD_RAD)
    if kind == "tricycle":      # the invented "Wombat" tug: driven, steered front wheel
        conf = dict(wheel_joints=["drive", "", ""], steer_joints=["steer", "", ""], wheel_x=[0.9, -0.2, -0.2],
                    wheel_y=[0.0, 0.3, -0.3], wheel_radius=[0.12, 0.1, 0.1])
        true = dict(conf, wheel_x=[0.88, -0.2, -0.2], wheel_radius=[0.1212, 0.1, 0.1], steer_offset=[0.015, 0, 0])
    elif kind == "ackermann":   # rear encoders, two steered front wheels
        conf = dict(wheel_joints=["rl", "rr", "", ""], steer_joints=["", "", "sfl", "sfr"], wheel_x=[0, 0, 1.2, 1.2],
                    wheel_y=[0.35, -0.35, 0.35, -0.35], wheel_radius=[0.15] * 4)
        true = dict(conf, wheel_x=[0, 0, 1.18, 1.18], wheel_radius=[0.1512, 0.1488, 0.15, 0.15],
                    steer_offset=[0, 0, 0.01, -0.008])
    elif kind == "mecanum":     # rollers in the usual X pattern (arm a + b)
        conf = dict(wheel_joints=["fl", "fr", "rl", "rr"], wheel_x=[0.25, 0.25, -0.25, -0.25],
                    wheel_y=[0.2, -0.2, 0.2, -0.2], wheel_radius=[0.05] * 4, roller_angle=[PI4, -PI4, -PI4, PI4])
        true = dict(conf, wheel_x=[0.26, 0.26, -0.26, -0.26], wheel_y=[0.205, -0.205, 0.205, -0.205],
                    wheel_radius=[0.0495] * 4)
    elif kind == "omni":        # three wheels 120 deg apart, rolling tangentially
        ang = np.array([0.0, 2 * math.pi / 3, 4 * math.pi / 3])
        conf = dict(wheel_joints=["a", "b", "c"], wheel_x=list(0.2 * np.cos(ang)), wheel_y=list(0.2 * np.sin(ang)),
                    wheel_radius=[0.04] * 3, mount_angle=list(ang + math.pi / 2), roller_angle=[math.pi / 2] * 3)
        true = dict(conf, wheel_x=list(0.204 * np.cos(ang)), wheel_y=list(0.204 * np.sin(ang)),
                    wheel_radius=[0.0404] * 3)
    else:                       # four swerve modules in a square
        conf = dict(wheel_joints=["w0", "w1", "w2", "w3"], steer_joints=["s0", "s1", "s2", "s3"],
                    wheel_x=[0.3, 0.3, -0.3, -0.3], wheel_y=[0.3, -0.3, 0.3, -0.3], wheel_radius=[0.05] * 4)
        true = dict(conf, wheel_radius=[0.0503] * 4, steer_offset=[0.01, -0.012, 0.005, 0.02])
    return WheelTable(kind, **conf, **noise), WheelTable(kind, **true, **noise)


def route(kind: str, rng: np.random.Generator, duration_s: float, rear_x: float, legs: str = "full"):
    """Body twists (vx, vy, wz) as a function of time: legs of 3-6 s with 1 s ramps between them.
    Car-like bases keep the rear axle free of sideways motion (vy = -wz x_rear, the sliding
    constraint of the fixed wheels)."""
    durations, twists = [], []
    while sum(durations) < duration_s:
        durations.append(rng.uniform(3.0, 6.0))
        if kind in ("tricycle", "ackermann"):
            v = rng.choice([0.8, 0.6, -0.5])
            curv = 0.0 if legs == "straight" else rng.choice([0, 0, 0.1, -0.1, 0.3, -0.3, 0.8, -0.8, 1.3, -1.3])
            twists.append((v, -v * curv * rear_x, v * curv))
        elif legs == "forward":
            twists.append((rng.choice([0.5, -0.5]), 0.0, 0.0))
        else:
            v = 0.5
            twists.append([(v, 0, 0), (-v, 0, 0), (0, v * rng.choice([-1, 1]), 0), (0, 0, rng.choice([-0.8, 0.8])),
                           (0.7 * v, 0.7 * v * rng.choice([-1, 1]), 0),
                           (v, rng.uniform(-0.3, 0.3), rng.choice([-0.5, 0.5]))][rng.integers(6)])
    starts = np.concatenate(([0.0], np.cumsum(durations)))
    tw = np.asarray(twists, dtype=np.float64)

    def at(t: np.ndarray) -> np.ndarray:
        k = np.clip(np.searchsorted(starts, t, side="right") - 1, 0, len(tw) - 1)
        f = np.clip(t - starts[k], 0.0, 1.0)[:, None]
        return tw[np.maximum(k - 1, 0)] + f * (tw[k] - tw[np.maximum(k - 1, 0)])
    return at


@dataclass
class Drive:
    conf: WheelTable
    true: WheelTable
    travel: Travel
    truth_t_s: np.ndarray
    truth: np.ndarray
    exact_truth: np.ndarray
    position_rad: np.ndarray       # joint positions per sample (spin angles, then steering readings)


def simulate(kind: str, seed: int = 1, duration_s: float = 600.0, dt_s: float = 0.1, legs: str = "full",
             noise: bool = True, readings: bool = False) -> Drive:
    """A drive of ``kind``. Each step's twist is held constant (the mid-step twist of the route) and
    the steering of the step is the true inverse's; with ``readings`` the steering joints are read
    at the samples instead (the route's steering there) and a step uses the mean of its two readings,
    as the wheel travel does (the shared contract), the motion being what the true table makes of
    the true travel and that steering (one degree of freedom: exact for a tricycle)."""
    conf, true = tables(kind)
    rng = np.random.default_rng(seed)
    rear_x = float(np.mean(true.x[~true.steered])) if kind in ("tricycle", "ackermann") else 0.0
    at = route(kind, rng, duration_s, rear_x, legs)
    m = int(round(duration_s / dt_s))
    tw = at((np.arange(m) - 0.5) * dt_s)           # step k runs from sample k-1 to sample k
    spin, steer = true.inverse(tw, np.full(m, dt_s))
    body = tw * dt_s
    read = steer
    if readings and steer is not None:
        read = true.inverse(at(np.arange(m) * dt_s), np.full(m, dt_s))[1]
        steer = read.copy()
        steer[1:] = 0.5 * (read[1:] + read[:-1])
        body = true.increment(spin, steer)
    body[0] = 0.0                     # the first sample starts the chain
    x, y, th, _ = integrate_body(body, "exact")
    exact = np.column_stack([x, y, th])
    if noise:
        spin = spin + rng.normal(size=spin.shape) * np.sqrt(K_WHEEL_M * np.abs(spin))
    angle = spin / true.radius[true.spin]                 # what the encoder turns through
    travel_m = angle * conf.radius[conf.spin]              # read at the configured radius
    travel_m[0] = 0.0
    if steer is not None and noise:
        read = read + rng.normal(size=read.shape) * STEER_SD_RAD
        steer = steer + rng.normal(size=steer.shape) * STEER_SD_RAD
    stamp = 1_700_000_000 * 10**9 + np.arange(m, dtype=np.int64) * int(round(dt_s * 1e9))
    restart = np.zeros(m, dtype=bool)
    restart[0] = True
    dt = np.full(m, dt_s)
    dt[0] = 0.0
    zeros = np.zeros(m)
    travel = Travel(np.arange(m), stamp, dt, zeros, zeros, restart, np.zeros(m, dtype=np.int8), travel_m, steer)
    truth = exact + (rng.normal(size=exact.shape) * [TRUTH_SD[0], TRUTH_SD[0], TRUTH_SD[1]] if noise else 0.0)
    pos = np.cumsum(angle, axis=0)
    if read is not None:
        pos = np.hstack([pos, read])
    return Drive(conf, true, travel, stamp * 1e-9, truth, exact, pos)


def fit(d: Drive, **kw):
    return calibrate_table(d.conf, d.travel, d.truth_t_s, d.truth, truth_sd=TRUTH_SD, **kw)


@pytest.mark.parametrize("kind", ["tricycle", "ackermann", "mecanum", "omni", "swerve"])
def test_recovers_known_geometry_per_kind(kind: str) -> None:
    """Each kind's parameters come back within the issue's tolerances from a noisy ten-minute drive,
    every other entry of the arrays is left exactly as configured, and the errors are within five
    of the reported standard errors (s^2 (J^T J)^-1, the Gauss-Newton covariance of least squares:
    common practice)."""
    d = simulate(kind)
    res = fit(d)
    conf, true = d.conf, d.true
    got = res.model
    # whitened by the true noise, the residuals have unit variance (chi-square of ~3S dof; common practice)
    assert 0.5 < res.residual_variance < 2.0
    enc = true.spin
    np.testing.assert_allclose(got.radius[enc], true.radius[enc], rtol=RADIUS_TOL)
    fitted = {p.name: (v, se) for p, v, se in zip(res.parameters, res.values, res.std_error)}
    if kind in ("tricycle", "ackermann"):
        ste = true.steered
        np.testing.assert_allclose(got.x[ste], true.x[ste], rtol=LENGTH_TOL)         # the wheelbase
        np.testing.assert_allclose(got.offset[ste], true.offset[ste], atol=OFFSET_TOL)
        np.testing.assert_array_equal(got.x[~ste], conf.x[~ste])                      # fixed axle untouched
        np.testing.assert_array_equal(got.radius[~enc], conf.radius[~enc])
        truths = dict(zip((p.name for p in res.parameters),
                          [*true.radius[enc], true.x[ste][0], *true.offset[ste]]))
    elif kind == "mecanum":
        # only half-length + half-width is observable; both arrays scaled, their ratio kept
        a_b = float(np.mean(np.abs(true.x)) + np.mean(np.abs(true.y)))
        assert fitted["drive.half_length+half_width"][0] == pytest.approx(a_b, rel=LENGTH_TOL)
        np.testing.assert_allclose(got.x / got.y, conf.x / conf.y, rtol=1e-12)
        truths = {res.names[0]: true.radius[0], "drive.half_length+half_width": a_b}
    elif kind == "omni":
        dist = float(np.mean(np.hypot(true.x, true.y)))
        assert fitted["drive.wheel_distance"][0] == pytest.approx(dist, rel=LENGTH_TOL)
        np.testing.assert_allclose(np.hypot(got.x, got.y), np.hypot(true.x, true.y), rtol=LENGTH_TOL)
        np.testing.assert_allclose(np.arctan2(got.y, got.x), np.arctan2(conf.y, conf.x), atol=1e-12)
        truths = {res.names[0]: true.radius[0], "drive.wheel_distance": dist}
    else:
        # swerve: offset patterns summing to zero with zero moment about the centre do not show in
        # the motion (first order; derived in offset_modes). The fit recovers the true offsets'
        # projection off that null space, computed here independently with scipy.linalg.null_space.
        ste = true.steered
        unseen = null_space(np.vstack([np.ones(4), true.x[ste], true.y[ste]]))
        assert unseen.shape == (4, 1)
        seen_part = true.offset - unseen @ (unseen.T @ true.offset)
        np.testing.assert_allclose(got.offset, seen_part, atol=OFFSET_TOL)
        assert any("cannot be seen in the motion" in n for n in res.notes)
        truths = {res.names[0]: true.radius[0], **{f"drive.steer_offset[{i}]": seen_part[i] for i in range(4)}}
    for name, want in truths.items():
        value, se = fitted[name]
        assert abs(value - want) <= 5.0 * se + 1e-12, (name, value, want, se)
    # only the fitted arrays are reported as changed, and the file values keep unfitted entries exactly
    fv = res.file_values()
    for key, vals in fv.items():
        for v, c, g in zip(vals, res.configured[key], res.arrays[key]):
            assert v == c or abs(v - g) < 1e-6
    # the fit improved the odometry: drift over segments (Geiger et al. 2012 style) after < before
    assert res.after[0].drift_pct < res.before[0].drift_pct


def test_noise_free_drive_is_recovered_exactly() -> None:
    """Without any noise the truth is the table's own kinematics, so the fit lands on the true
    geometry to round-off (the exact scheme is the SE(2) exponential of each step)."""
    d = simulate("omni", duration_s=240.0, noise=False)
    res = calibrate_table(d.conf, d.travel, d.truth_t_s, d.exact_truth)
    assert res.model.radius[0] == pytest.approx(d.true.radius[0], rel=1e-7)
    np.testing.assert_allclose(res.model.x, d.true.x, atol=1e-7)
    np.testing.assert_allclose(res.model.y, d.true.y, atol=1e-7)


@pytest.mark.parametrize("kind, legs, advice", [
    ("tricycle", "straight", "turn both ways at several steering angles"),
    ("mecanum", "forward", "drive sideways both ways and rotate in place"),
    ("swerve", "forward", "modules at several angles"),
])
def test_drive_without_excitation_is_refused_with_the_kinds_advice(kind: str, legs: str, advice: str) -> None:
    """A drive that cannot determine the geometry (straight only; forward and back only) is refused
    in one sentence naming what to drive for that kind (common practice: turns fix a wheelbase,
    sideways motion and rotation the arms of a mecanum base, module angles a swerve's offsets)."""
    d = simulate(kind, duration_s=240.0, legs=legs)
    with pytest.raises(ExcitationError) as exc:
        fit(d)
    msg = str(exc.value)
    assert advice in msg and KIND_ADVICE[kind] in msg
    assert msg.count("\n") == 0 and msg.endswith("then calibrate again.")


def test_mecanum_names_the_observable_sum() -> None:
    """The mecanum parameter is half-length + half-width, and the output says that only the sum is
    observable (with rollers at +-pi/4 the turning arm of every wheel is a + b: Siegwart et al. 2011,
    sec. 3.2, from memory)."""
    conf, _ = tables("mecanum")
    names = [p.name for p in table_parameters(conf)]
    assert names == ["drive.wheel_radius[0,1,2,3]", "drive.half_length+half_width"]
    res = fit(simulate("mecanum", duration_s=300.0))
    assert any("only half-length + half-width is observable" in n for n in res.notes)
    # rollers mirrored (the other pattern): the arm is |a - b|, and the output says so
    mirrored = WheelTable("mecanum", conf.wheel_joints, conf.x, conf.y, conf.radius, roller_angle=-conf.roller)
    assert table_parameters(mirrored)[-1].name == "drive.half_length-half_width"
    assert table_parameters(mirrored)[-1].start == pytest.approx(0.05)


def test_swerve_offset_modes_are_the_derived_null_space() -> None:
    """The unseen offset combinations are those with sum e_i = 0 and sum e_i p_i = 0: for a square of
    four modules, front-left and rear-right against front-right and rear-left (scipy.linalg.null_space)."""
    conf, _ = tables("swerve")
    seen, unseen = offset_modes(conf)
    ref = null_space(np.vstack([np.ones(4), conf.x, conf.y]))
    assert seen.shape == (4, 3) and unseen.shape == (4, 1)
    assert abs(float(ref[:, 0] @ unseen[:, 0])) == pytest.approx(1.0)
    np.testing.assert_allclose(np.abs(unseen[:, 0]), 0.5)


def test_truth_frame_does_not_matter_and_drives_are_fitted_jointly() -> None:
    """Only segment-relative motion is compared, so a truth expressed in a frame rotated and shifted
    from odom gives the same fit (relative motion is invariant under a common SE(2) transform:
    Sola et al. 2018, sec. IV); a second drive adds its segments to the same fit."""
    a, b = simulate("omni", seed=4, duration_s=180.0), simulate("omni", seed=5, duration_s=180.0)
    plain = fit(a)
    c, s_ = math.cos(0.7), math.sin(0.7)
    moved = np.column_stack([3.0 + c * a.truth[:, 0] - s_ * a.truth[:, 1], -2.0 + s_ * a.truth[:, 0] + c * a.truth[:, 1],
                             a.truth[:, 2] + 0.7])
    turned = calibrate_table(a.conf, a.travel, a.truth_t_s, moved, truth_sd=TRUTH_SD)
    np.testing.assert_allclose(turned.values, plain.values, rtol=1e-8)
    both = calibrate_table(a.conf, a.travel, a.truth_t_s, a.truth, truth_sd=TRUTH_SD,
                           more_runs=[(b.travel, b.truth_t_s, b.truth)])
    alone = fit(b)
    assert both.n_segments + both.n_outliers == plain.n_segments + plain.n_outliers + alone.n_segments + alone.n_outliers
    assert len(both.before) == 2
    assert both.std_error[0] < plain.std_error[0]          # more data, a tighter fit
    # a drive the fit did not see is better after than before (the held-out check)
    before, after = table_figures(a.conf, plain, b.travel, b.truth_t_s, b.truth)
    assert after.drift_pct < 0.5 * before.drift_pct and after.ate_m < before.ate_m


def test_truth_glitch_is_set_aside() -> None:
    """A stretch where the truth jumps by 5 cm (a tracking glitch) makes the segments that end or
    start there outliers: they are set aside (chi-square(3) 99.9 % quantile from scipy) and said."""
    d = simulate("mecanum", seed=6, duration_s=300.0)
    d.truth[1500:1560, 0] += 0.05                 # six seconds of a shifted truth
    res = fit(d)
    assert res.n_outliers >= 1 and any("set aside as outliers" in n for n in res.notes)
    assert res.model.radius[0] == pytest.approx(d.true.radius[0], rel=RADIUS_TOL)


def test_bad_input_is_one_sentence() -> None:
    """Travel that does not fit the table and a truth from another time are refused in one sentence."""
    d = simulate("tricycle", duration_s=60.0)
    wrong = Travel(d.travel.index, d.travel.stamp_ns, d.travel.dt_s, d.travel.ds_left_m, d.travel.ds_right_m,
                   d.travel.restart, d.travel.status, np.zeros((len(d.truth_t_s), 2)), d.travel.steer_rad)
    with pytest.raises(CalibrationError, match="drive.wheel_joints"):
        calibrate_table(d.conf, wrong, d.truth_t_s, d.truth)
    with pytest.raises(TruthError, match="does not overlap the joint states in time") as exc:
        calibrate_table(d.conf, d.travel, d.truth_t_s + 1e5, d.truth)
    assert "\n" not in str(exc.value)


# ------------------------------------------------------------------------------------------------
# the command on a real bag
# ------------------------------------------------------------------------------------------------
TRICYCLE_START = """\
# the invented Wombat tug: values from the drawing
/**:
  ros__parameters:
    drive:
      kind: tricycle
      wheel_joints: [drive, '', '']          # front drive wheel only
      steer_joints: [steer, '', '']
      wheel_x: [0.9, -0.2, -0.2]             # m, drawing
      wheel_y: [0.0, 0.3, -0.3]
      wheel_radius: [0.12, 0.10, 0.10]       # m, drawing
      steer_offset: [0.0, 0.0, 0.0]
    integration: exact
    noise:
      k_wheels: [1.0e-05]
      steer_sd_rad: 0.003
"""


@dataclass
class BagDrive:
    """The fields of a drive that ``wheel_dr.bags.write_bag`` writes (joint states and ground truth)."""

    stamp_ns: np.ndarray
    joint_names: tuple[str, ...]
    position_rad: np.ndarray
    velocity_radps: np.ndarray
    true_x_m: np.ndarray
    true_y_m: np.ndarray
    true_theta_rad: np.ndarray
    true_v_mps: np.ndarray
    true_w_radps: np.ndarray
    cmd_v_mps: None = None


def _cli(*args: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "wheel_dr.cli", "calibrate", *args], capture_output=True,
                          text=True, timeout=180)


def test_calibrate_command_on_a_tricycle_bag(tmp_path) -> None:
    """`wheel-dr calibrate` with drive.kind tricycle: reads a real bag (rosbags), fits, and writes the
    file with only the fitted entries of the drive arrays changed; a differential-only option is refused
    in one sentence with exit 2 and nothing written."""
    from wheel_dr.bags import write_bag
    from wheel_dr.params import parse_params_text

    d = simulate("tricycle", seed=3, duration_s=480.0, readings=True)
    m = len(d.truth_t_s)
    bag = write_bag(BagDrive(d.travel.stamp_ns, ("drive", "steer"), d.position_rad, np.zeros((m, 2)),
                             d.truth[:, 0], d.truth[:, 1], d.truth[:, 2], np.zeros(m), np.zeros(m)),
                    tmp_path / "wombat", fmt="mcap", truth_stride=1, imu=False, description=False, slip=False,
                    cmd=False)
    start = tmp_path / "start.yaml"
    start.write_text(TRICYCLE_START, encoding="utf-8")
    out = tmp_path / "tuned.yaml"
    proc = _cli(str(bag), "--truth", "/ground_truth", "--params", str(start), "--write", str(out),
                "--truth-sd", "0.0005,0.0005", "--holdout", str(bag))
    assert proc.returncode == 0, proc.stderr
    assert "drive.wheel_radius[0]" in proc.stdout and "drive.steer_offset[0]" in proc.stdout
    # the same bag as held-out gives the fitted bag's figures again
    fitted_rows = proc.stdout.split("Fitted bags (before -> after):")[1].split("Held-out bags")
    assert fitted_rows[0].splitlines()[2].split() == fitted_rows[1].splitlines()[2].split()
    flat = parse_params_text(out.read_text(encoding="utf-8"))
    radius, x, off = flat["drive.wheel_radius"], flat["drive.wheel_x"], flat["drive.steer_offset"]
    assert radius[0] == pytest.approx(d.true.radius[0], rel=RADIUS_TOL)
    assert x[0] == pytest.approx(d.true.x[0], rel=LENGTH_TOL)
    assert off[0] == pytest.approx(d.true.offset[0], abs=OFFSET_TOL)
    assert list(radius[1:]) == [0.10, 0.10] and list(x[1:]) == [-0.2, -0.2] and list(off[1:]) == [0.0, 0.0]
    assert flat["drive.wheel_y"] == [0.0, 0.3, -0.3]
    # every line but the three fitted arrays (and the comment header) is as in the starting file
    body = [ln for ln in out.read_text(encoding="utf-8").splitlines() if not ln.startswith("#")]
    changed = [a for a, b in zip(TRICYCLE_START.splitlines()[1:], body) if a != b]
    assert [c.split(":")[0].strip() for c in changed] == ["wheel_x", "wheel_radius", "steer_offset"]
    assert all("#" in c for c in changed if "steer_offset" not in c)          # comments kept on changed lines
    refused = tmp_path / "refused.yaml"
    bad = _cli(str(bag), "--truth", "/ground_truth", "--params", str(start), "--write", str(refused), "--truth-offset")
    assert bad.returncode == 2 and "Traceback" not in bad.stderr
    assert bad.stderr.count("\n") == 1 and "--truth-offset is not available for a tricycle base" in bad.stderr
    assert not refused.exists()
    custom = tmp_path / "custom.yaml"
    custom.write_text(TRICYCLE_START.replace("kind: tricycle", "kind: custom"), encoding="utf-8")
    bad = _cli(str(bag), "--truth", "/ground_truth", "--params", str(custom), "--write", str(refused))
    assert bad.returncode == 2 and "Traceback" not in bad.stderr and bad.stderr.count("\n") == 1
    assert "drive.kind 'custom' has no per-kind calibration" in bad.stderr and not refused.exists()
