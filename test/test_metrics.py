"""Trajectory metrics and consistency checks against published formulas, scipy and hand-made cases."""
from __future__ import annotations

import json
import math

import numpy as np
import pytest
from scipy import stats

from wheel_dr.analysis.consistency import chi2_bounds, mean_nees_bounds, nees, segment_covariance
from wheel_dr.analysis.metrics import (evaluate, nees_stats, rank, rpe_distance, slip_scores, slip_side_scores,
                                       step_noise_of)
from wheel_dr.analysis.path import PlanarPath
from wheel_dr.core import JointSamples, Settings, run
from wheel_dr.core.errors import InputError
from wheel_dr.core.motion import body_increment, integrate
from wheel_dr.core.noise import propagate_step

# Demo-scenario geometry ("Quokka" cart; invented numbers, demo only).
RADIUS_M = 0.0825
TRACK_M = 0.412
JOINTS = ("quokka_left_wheel_joint", "quokka_right_wheel_joint")
T0_NS = 1_700_000_000_000_000_000


def _settings(k: float) -> Settings:
    return Settings.from_flat({"wheels.left_radius": RADIUS_M, "wheels.right_radius": RADIUS_M,
                               "wheels.track_width": TRACK_M, "noise.k_left": k, "noise.k_right": k,
                               "wheels.left_joints": (JOINTS[0],), "wheels.right_joints": (JOINTS[1],)},
                              base=Settings())


def drive(seed: int, k_true: float, n: int = 12000, rate_hz: float = 50.0):
    """A winding drive; the true wheel travel is corrupted per step with variance k |ds| per wheel
    (the per-wheel model of Siegwart et al. 2011 sec. 5.2.4), so an estimator told k_true is
    consistent by construction. Returns joint samples and the true path."""
    rng = np.random.default_rng(seed)
    t = np.arange(n) / rate_hz
    v = 0.5 + 0.1 * np.sin(0.05 * t)
    w = 0.3 * np.sin(0.07 * t)
    dl = (v - 0.5 * w * TRACK_M) / rate_hz
    dr = (v + 0.5 * w * TRACK_M) / rate_hz
    dl[0] = dr[0] = 0.0
    ds, dth = body_increment(dl, dr, TRACK_M)
    x, y, th, *_ = integrate(ds, dth, "exact")
    ml = dl + rng.standard_normal(n) * np.sqrt(k_true * np.abs(dl))
    mr = dr + rng.standard_normal(n) * np.sqrt(k_true * np.abs(dr))
    pos = np.column_stack([np.cumsum(ml), np.cumsum(mr)]) / RADIUS_M
    stamp = T0_NS + np.round(t * 1e9).astype(np.int64)
    return JointSamples(stamp, JOINTS, pos, np.zeros_like(pos)), PlanarPath(stamp, x, y, th)


# ---------------------------------------------------------------------------------------------
# chi-square bounds (Bar-Shalom, Li & Kirubarajan 2001, sec. 5.4; values in REFERENCES.md from
# scipy.stats.chi2)
def test_chi2_bounds_match_scipy_and_reference_values() -> None:
    lo, hi = chi2_bounds(3, 0.95)
    assert math.isclose(lo, stats.chi2.ppf(0.025, 3)) and math.isclose(hi, stats.chi2.ppf(0.975, 3))
    assert round(lo, 4) == 0.2158 and round(hi, 3) == 9.348
    # the one-sided 95 % quantile 7.815 is the upper end of the two-sided 90 % interval
    assert round(chi2_bounds(3, 0.90)[1], 3) == 7.815


@pytest.mark.parametrize("n, lo_ref, hi_ref", [(40, 2.289, 3.805), (100, 2.539, 3.499)])
def test_mean_nees_bounds_match_reference_values(n: int, lo_ref: float, hi_ref: float) -> None:
    """[chi2(3N, .025)/N, chi2(3N, .975)/N] (Bar-Shalom et al. 2001 sec. 5.4; REFERENCES.md values)."""
    lo, hi = mean_nees_bounds(n, 3, 0.95)
    assert round(lo, 3) == lo_ref and round(hi, 3) == hi_ref
    assert math.isclose(lo, stats.chi2.ppf(0.025, 3 * n) / n)


def _random_spd(rng: np.random.Generator, s: int) -> np.ndarray:
    a = rng.normal(size=(s, 3, 3))
    return a @ np.swapaxes(a, 1, 2) + 0.1 * np.eye(3)


def test_nees_of_errors_drawn_from_the_covariance_is_chi_square_3() -> None:
    """Errors drawn from N(0, P) have NEES ~ chi2(3) (Bar-Shalom et al. 2001 sec. 5.4): a
    Kolmogorov-Smirnov test against scipy.stats.chi2(3) accepts them, and the mean of N = 40 lands in
    its 95 % interval in about 95 % of 500 trials; a covariance claimed half as large (overconfident)
    almost never does."""
    rng = np.random.default_rng(11)
    trials, n = 500, 40
    cov = _random_spd(rng, trials * n)
    err = np.einsum("sab,sb->sa", np.linalg.cholesky(cov), rng.standard_normal((trials * n, 3)))
    honest = nees(err, cov)
    assert stats.kstest(honest, stats.chi2(3).cdf).pvalue > 0.01
    lo, hi = mean_nees_bounds(n)
    means = honest.reshape(trials, n).mean(axis=1)
    inside = np.mean((means >= lo) & (means <= hi))
    assert 0.92 <= inside <= 0.98
    over = nees(err, 0.5 * cov).reshape(trials, n).mean(axis=1)
    assert np.mean((over >= lo) & (over <= hi)) < 0.01
    # and a singular covariance gives NaN, not a number
    assert np.isnan(nees(np.ones((1, 3)), np.zeros((1, 3, 3))))[0]


def test_segment_covariance_equals_the_recursion_restarted_at_each_start() -> None:
    """The vectorised segment covariance equals iterating the core's P' = F P F^T + Q
    (noise.propagate_step, first-order propagation, Siegwart et al. 2011 sec. 5.2.4) from zero at
    each segment start, also far from the odom origin."""
    rng = np.random.default_rng(2)
    m = 400
    theta = np.cumsum(rng.normal(0.0, 0.05, m))
    x = 5000.0 + np.cumsum(0.02 * np.cos(theta))
    y = -3000.0 + np.cumsum(0.02 * np.sin(theta))
    a = rng.normal(size=(m, 3, 3)) * 1e-3
    q = a @ np.swapaxes(a, 1, 2)
    for starts, ends in (([0, 37, 120, 250], [37, 100, 250, 399]),      # with gaps between segments
                         ([3, 37, 100, 250], [37, 100, 250, 399])):     # tiling a range
        got = segment_covariance(x, y, q, np.array(starts), np.array(ends))
        for k, (i, j) in enumerate(zip(starts, ends)):
            p = np.zeros((3, 3))
            for step in range(i + 1, j + 1):
                p = propagate_step(p, x[step] - x[step - 1], y[step] - y[step - 1], q[step])
            assert np.allclose(got[k], p, rtol=1e-9, atol=1e-15), (starts, k)


def test_segment_nees_of_the_real_estimator_is_consistent_when_its_noise_model_is_right() -> None:
    """End to end: the core run on wheel travel corrupted exactly as its per-wheel model says gives a
    mean segment NEES inside the chi-square interval (Bar-Shalom et al. 2001 sec. 5.4); the same data
    with the model told k/4 (overconfident) gives a mean near 4 x 3 and is flagged inconsistent."""
    k = 5e-4
    consistent = 0
    over_means = []
    for seed in range(3):
        samples, truth = drive(seed, k)
        ev = evaluate(run(samples, _settings(k)), truth, _settings(k))
        assert ev.metrics["nees_segments"] >= 50 and ev.metrics["nees_dropped"] == 0
        consistent += bool(ev.metrics["nees_consistent"])
        assert ev.metrics["nees_frac_inside_95"] >= 0.88
        bad = evaluate(run(samples, _settings(k / 4)), truth, _settings(k / 4))
        assert not bad.metrics["nees_consistent"]
        over_means.append(bad.metrics["nees_mean"])
    assert consistent >= 2              # each check is a 95 % interval
    assert 9.0 < np.mean(over_means) < 15.0


def test_segments_the_estimator_flagged_are_scored_apart_from_the_rest() -> None:
    """A consistent drive with five spins of the left wheel that the estimator flags: the flagged
    segments carry the large NEES and are counted apart; the rest stay consistent (mean inside its
    chi-square interval, Bar-Shalom et al. 2001 sec. 5.4); the median of all segments stays near the
    chi-square(3) median, 2.366 (scipy.stats.chi2.median(3)), while the mean is pulled far up."""
    k = 5e-4
    samples, truth = drive(7, k)
    n = len(samples.stamp_ns)
    spin = np.zeros(n, dtype=bool)
    for start in range(1000, 11000, 2000):
        spin[start:start + 50] = True                          # 1 s at 50 Hz
    pos = samples.position.copy()
    pos[:, 0] += np.cumsum(spin * 0.01 / RADIUS_M)            # the left wheel turns 1 cm a step more
    traj = run(JointSamples(samples.stamp_ns, samples.names, pos, samples.velocity), _settings(k))
    flags = np.zeros(len(traj), dtype=bool)
    flags[np.isin(traj.stamp_ns, samples.stamp_ns[spin])] = True
    traj.slip.slip = flags                                      # the estimator's own flags on those samples
    m = evaluate(traj, truth, _settings(k)).metrics
    assert 5 <= m["nees_flagged_segments"] <= 10
    assert m["nees_flagged_segments"] + m["nees_unflagged_segments"] == m["nees_segments"]
    assert m["nees_flagged_median"] > 100
    assert m["nees_unflagged_consistent"] and not m["nees_consistent"]
    assert m["nees_mean"] > 10 * m["nees_unflagged_mean"]
    assert abs(m["nees_median"] - stats.chi2.median(3)) < 0.6
    assert 0.88 <= m["nees_unflagged_frac_inside_95"] <= 1.0


def test_nees_stats_of_known_values() -> None:
    """Count, mean, median and share inside the chi-square(3) 95 % band [0.2158, 9.348] (scipy.stats.chi2)
    of five hand-picked values; empty input gives NaN, not an error."""
    s = nees_stats(np.array([0.1, 1.0, 2.0, 3.0, 20.0]), "x")
    assert s["x_segments"] == 5 and s["x_mean"] == pytest.approx(5.22) and s["x_median"] == 2.0
    assert s["x_frac_inside_95"] == pytest.approx(0.6)
    assert (s["x_mean_lo"], s["x_mean_hi"]) == pytest.approx(mean_nees_bounds(5, 3, 0.95))
    empty = nees_stats(np.zeros(0), "y")
    assert empty["y_segments"] == 0 and math.isnan(empty["y_mean"]) and math.isnan(empty["y_median"])


def test_recorded_step_noise_equals_the_recomputed_one() -> None:
    """The step noise the metrics use (Trajectory.step_noise) is what the noise model gives for the
    trajectory's own wheel travel (recomputed path of step_noise_of)."""
    samples, _ = drive(4, 5e-4, n=500)
    s = _settings(5e-4)
    traj = run(samples, s)
    recorded = step_noise_of(traj, s)
    traj.step_noise = None
    assert np.allclose(step_noise_of(traj, s), recorded, rtol=1e-12, atol=1e-18)


# ---------------------------------------------------------------------------------------------
# ATE, RPE, drift on hand-made trajectories (definitions: Sturm et al. IROS 2012; Geiger et al.
# CVPR 2012)
class _FakeSlip:
    def __init__(self, n: int, flags: np.ndarray | None = None) -> None:
        self.slip = np.zeros(n, dtype=bool) if flags is None else flags
        self.left = self.slip.copy()
        self.right = np.zeros(n, dtype=bool)
        self.dtheta_rad = None
        self.noise_scale = None


class _FakeTravel:
    def __init__(self, n: int) -> None:
        self.restart = np.zeros(n, dtype=bool)


class _HandTrajectory:
    """The fields of wheel_dr.core.Trajectory that the metrics read, set by hand."""

    def __init__(self, stamp_ns, x, y, theta, flags=None) -> None:
        n = len(stamp_ns)
        self.stamp_ns = np.asarray(stamp_ns, dtype=np.int64)
        self.x_m, self.y_m, self.theta_rad = (np.asarray(v, dtype=np.float64) for v in (x, y, theta))
        self.yaw_rad = self.theta_rad
        self.cov = np.tile(np.diag([1e-4, 1e-4, 1e-5]), (n, 1, 1))
        self.step_noise = np.tile(np.diag([1e-6, 1e-6, 1e-7]), (n, 1, 1))
        self.travel = _FakeTravel(n)
        self.slip = _FakeSlip(n, flags)

    def __len__(self) -> int:
        return len(self.stamp_ns)


def _circle_truth(n: int = 2001, radius_m: float = 3.0) -> PlanarPath:
    a = np.linspace(0.0, 1.5 * math.pi, n)
    stamp = T0_NS + np.arange(n, dtype=np.int64) * 20_000_000
    return PlanarPath(stamp, radius_m * np.sin(a), radius_m * (1 - np.cos(a)), a)


def test_constant_offset_after_the_first_pose() -> None:
    """An estimate equal to the truth but shifted by a constant d from the second pose on: anchored
    ATE is d sqrt((N-1)/N) and the end-point drift is d over the distance travelled."""
    truth = _circle_truth()
    d = np.array([0.3, -0.4])                     # |d| = 0.5 m
    x = truth.x_m + d[0]
    y = truth.y_m + d[1]
    x[0], y[0] = truth.x_m[0], truth.y_m[0]
    ev = evaluate(_HandTrajectory(truth.stamp_ns, x, y, truth.yaw_rad), truth, Settings())
    n = len(truth)
    assert math.isclose(ev.metrics["ate_anchored_rmse_m"], 0.5 * math.sqrt((n - 1) / n), rel_tol=1e-9)
    length = 3.0 * 1.5 * math.pi
    assert math.isclose(ev.metrics["distance_m"], length, rel_tol=1e-5)
    assert math.isclose(ev.metrics["drift_endpoint_pct"], 100 * 0.5 / ev.metrics["distance_m"], rel_tol=1e-9)
    # aligned: the best rigid fit removes almost all of it (only the first pose is off)
    assert ev.metrics["ate_aligned_rmse_m"] < 0.5 / math.sqrt(n) * 1.01


def test_rigid_transform_of_the_truth_has_no_error() -> None:
    """A whole estimate displaced and rotated rigidly (a wrong start pose) has zero ATE both ways and
    zero RPE: every metric here is invariant to the choice of odom origin (REP 105)."""
    truth = _circle_truth()
    c, s = math.cos(0.8), math.sin(0.8)
    x = c * truth.x_m - s * truth.y_m + 5.0
    y = s * truth.x_m + c * truth.y_m - 2.0
    ev = evaluate(_HandTrajectory(truth.stamp_ns, x, y, truth.yaw_rad + 0.8), truth, Settings())
    for key in ("ate_anchored_rmse_m", "ate_aligned_rmse_m", "ate_aligned_yaw_rmse_deg", "rpe_trans_pct",
                "rpe_rot_degpm", "drift_endpoint_pct"):
        assert abs(ev.metrics[key]) < 1e-9, key
    assert math.isclose(ev.metrics["align_yaw_deg"], math.degrees(-0.8), abs_tol=1e-9)


def test_positions_rotated_about_the_start_keep_heading() -> None:
    """Positions rotated by alpha about the start with headings unchanged: the anchoring (by the first
    pose's heading) cannot remove it, the error at distance r from the start is 2 sin(alpha/2) r,
    while the position-only Umeyama alignment removes it exactly."""
    truth = _circle_truth()
    alpha = 0.05
    c, s = math.cos(alpha), math.sin(alpha)
    x = c * truth.x_m - s * truth.y_m
    y = s * truth.x_m + c * truth.y_m
    ev = evaluate(_HandTrajectory(truth.stamp_ns, x, y, truth.yaw_rad), truth, Settings())
    r = np.hypot(truth.x_m, truth.y_m)
    expected = math.sqrt(np.mean((2 * math.sin(alpha / 2) * r) ** 2))
    assert math.isclose(ev.metrics["ate_anchored_rmse_m"], expected, rel_tol=1e-9)
    assert ev.metrics["ate_aligned_rmse_m"] < 1e-9


@pytest.mark.parametrize("scale", [0.02, -0.035])
def test_rpe_translation_of_a_scale_error_equals_it(scale: float) -> None:
    """A straight drive measured (1 + s) too long: every segment's relative translation is off by
    s times its length, so RPE translation is 100 s % at every length (Geiger et al. 2012 definition)
    and the rotation part is zero."""
    n = 3001
    xt = np.linspace(0.0, 30.0, n)
    stamp = T0_NS + np.arange(n, dtype=np.int64) * 10_000_000
    truth = PlanarPath(stamp, xt, np.zeros(n), np.zeros(n))
    ev = evaluate(_HandTrajectory(stamp, (1 + scale) * xt, np.zeros(n), np.zeros(n)), truth, Settings(),
                  segment_lengths_m=(1.0, 2.0, 5.0, 10.0))
    assert math.isclose(ev.metrics["rpe_trans_pct"], 100 * abs(scale), rel_tol=1e-9)
    for length, (tp, rd, count) in ev.rpe_by_length.items():
        assert math.isclose(tp, 100 * abs(scale), rel_tol=1e-9) and rd == 0.0 and count > 0, length
    assert math.isclose(ev.metrics["drift_endpoint_pct"], 100 * abs(scale), rel_tol=1e-9)


def test_rpe_rotation_of_a_heading_drift_per_metre() -> None:
    """Heading drifting by c rad per metre travelled gives RPE rotation of c in deg/m."""
    truth = _circle_truth()
    dist = 3.0 * truth.yaw_rad                      # arc length on a 3 m circle
    c = 0.01
    ev = evaluate(_HandTrajectory(truth.stamp_ns, truth.x_m, truth.y_m, truth.yaw_rad + c * dist), truth,
                  Settings())
    assert math.isclose(ev.metrics["rpe_rot_degpm"], math.degrees(c), rel_tol=1e-3)


def test_rpe_skips_lengths_longer_than_the_run() -> None:
    pose = np.column_stack([np.linspace(0, 3, 31), np.zeros(31), np.zeros(31)])
    out = rpe_distance(pose, pose, pose[:, 0], (1.0, 50.0))
    assert len(out[1.0][0]) > 0 and len(out[50.0][0]) == 0


def test_truth_that_does_not_overlap_is_a_clear_error() -> None:
    truth = _circle_truth()
    late = PlanarPath(truth.stamp_ns + 10**12, truth.x_m, truth.y_m, truth.yaw_rad)
    with pytest.raises(InputError, match="Ground truth overlaps"):
        evaluate(_HandTrajectory(truth.stamp_ns, truth.x_m, truth.y_m, truth.yaw_rad), late, Settings())


def test_too_short_truth_and_bad_slip_intervals_are_clear_errors() -> None:
    truth = _circle_truth()
    est = _HandTrajectory(truth.stamp_ns, truth.x_m, truth.y_m, truth.yaw_rad)
    one = PlanarPath(truth.stamp_ns[:1], truth.x_m[:1], truth.y_m[:1], truth.yaw_rad[:1])
    with pytest.raises(InputError, match="too few to compare"):
        evaluate(est, one, Settings())
    with pytest.raises(InputError, match="ends before it starts"):
        evaluate(est, truth, Settings(), slip_truth=np.array([[truth.stamp_ns[9], truth.stamp_ns[3]]]))
    # slip truth given with no events: false flags are still scored
    ev = evaluate(est, truth, Settings(), slip_truth=np.zeros((0, 2), dtype=np.int64))
    assert ev.metrics["slip_truth"] == 1 and ev.metrics["slip_false_flag_frac"] == 0.0
    assert ev.metrics["slip_events"] == 0 and math.isnan(ev.metrics["slip_recall"])


def test_a_base_standing_still_gives_blank_relative_metrics_not_an_error() -> None:
    """No travel: per-distance metrics are undefined (blank), the anchored ATE still measures creep."""
    n = 200
    stamp = T0_NS + np.arange(n, dtype=np.int64) * 10_000_000
    truth = PlanarPath(stamp, np.zeros(n), np.zeros(n), np.zeros(n))
    ev = evaluate(_HandTrajectory(stamp, np.linspace(0, 0.01, n), np.zeros(n), np.zeros(n)), truth, Settings())
    for key in ("rpe_trans_pct", "drift_endpoint_pct", "ate_aligned_rmse_m", "nees_mean"):
        assert math.isnan(ev.metrics[key]), key
    assert ev.metrics["nees_segments"] == 0 and not ev.metrics["nees_consistent"]
    assert math.isclose(ev.metrics["endpoint_error_m"], 0.01)
    json.dumps(ev.to_dict(series=True), allow_nan=False)


def test_truth_covering_part_of_the_run_is_compared_there_only() -> None:
    """Interpolated truth (PlanarPath.interpolate) is NaN outside its span; only the overlap counts."""
    truth = _circle_truth()
    part = PlanarPath(truth.stamp_ns[500:1500], truth.x_m[500:1500], truth.y_m[500:1500], truth.yaw_rad[500:1500])
    ev = evaluate(_HandTrajectory(truth.stamp_ns, truth.x_m, truth.y_m, truth.yaw_rad), part, Settings())
    assert ev.metrics["n_samples"] == 1000
    assert ev.metrics["ate_anchored_rmse_m"] < 1e-9


# ---------------------------------------------------------------------------------------------
# slip scores (coverage after the first 0.2 s, false flags of non-slip time, latency); expected counts worked out by hand below
def test_slip_scores_on_hand_made_flags() -> None:
    stamp = np.arange(200, dtype=np.int64) * 10_000_000          # 100 Hz, 0.00 .. 1.99 s
    t = stamp * 1e-9
    flags = (t > 0.295) & (t < 0.705)                            # 0.30 .. 0.70 s: 41 samples
    events = np.array([[200_000_000, 600_000_000],               # 0.20 .. 0.60 s: 41 samples
                       [1_500_000_000, 1_600_000_000]])          # 1.50 .. 1.60 s: 11 samples, missed
    sc = slip_scores(stamp, flags, events, grace_s=0.2)
    # flagged inside the first event: 0.30 .. 0.60 = 31 samples
    assert math.isclose(sc["slip_precision"], 31 / 41)
    assert math.isclose(sc["slip_recall"], 31 / (41 + 11))
    # after the grace: 0.40 .. 0.60 (21 samples) and 1.70 .. 1.60 (none): all 21 flagged
    assert sc["slip_coverage_after_grace"] == 1.0
    # non-slip samples 200 - 52 = 148, flagged among them 0.61 .. 0.70 = 10
    assert math.isclose(sc["slip_false_flag_frac"], 10 / 148)
    assert math.isclose(sc["slip_latency_mean_s"], 0.1) and math.isclose(sc["slip_latency_max_s"], 0.1)
    assert sc["slip_events"] == 2 and sc["slip_events_detected"] == 1


def test_slip_scores_merge_overlapping_intervals_and_handle_no_flags() -> None:
    stamp = np.arange(100, dtype=np.int64) * 10_000_000
    events = np.array([[100_000_000, 300_000_000], [200_000_000, 400_000_000]])
    sc = slip_scores(stamp, np.zeros(100, dtype=bool), events)
    assert sc["slip_events"] == 1 and sc["slip_events_detected"] == 0
    assert sc["slip_recall"] == 0.0 and math.isnan(sc["slip_precision"]) and sc["slip_false_flag_frac"] == 0.0
    # a perfect detector (flags exactly the merged interval 0.10 .. 0.40 s)
    perfect = (stamp >= 100_000_000) & (stamp <= 400_000_000)
    sc = slip_scores(stamp, perfect, events)
    assert sc["slip_precision"] == sc["slip_recall"] == sc["slip_coverage_after_grace"] == 1.0
    assert sc["slip_latency_max_s"] == 0.0 and sc["slip_false_flag_frac"] == 0.0


def test_heading_error_left_by_each_slip_event() -> None:
    """A heading error of 0.1 rad that builds up inside an event (and stays) is what the event leaves:
    5.73 deg (= degrees(0.1)); a second event with no heading change leaves 0."""
    truth = _circle_truth()
    theta = truth.yaw_rad.copy()
    theta[300:] += 0.1
    theta[300:320] = truth.yaw_rad[300:320] + np.linspace(0.0, 0.1, 20)     # builds up over 20 samples
    events = np.array([[truth.stamp_ns[295], truth.stamp_ns[330]], [truth.stamp_ns[800], truth.stamp_ns[900]]])
    ev = evaluate(_HandTrajectory(truth.stamp_ns, truth.x_m, truth.y_m, theta), truth, Settings(), slip_truth=events)
    assert math.isclose(ev.metrics["slip_heading_error_max_deg"], math.degrees(0.1), rel_tol=1e-9)
    assert math.isclose(ev.metrics["slip_heading_error_mean_deg"], math.degrees(0.1) / 2, rel_tol=1e-9)


def test_slip_side_scores_on_hand_made_flags() -> None:
    stamp = np.arange(100, dtype=np.int64) * 10_000_000
    events = np.array([[100_000_000, 190_000_000], [500_000_000, 590_000_000]])     # 10 samples each
    left = np.zeros(100, dtype=bool)
    right = np.zeros(100, dtype=bool)
    left[10:20] = True                  # event 1 (left): 10 flagged, all by the left flag: correct
    right[50:55] = True                 # event 2 (right): 5 by the right flag (correct), then 3 left only
    left[55:58] = True
    sc = slip_side_scores(stamp, left, right, events, ["left", "right"])
    assert math.isclose(sc["slip_side_correct_frac"], (10 + 5) / (10 + 8))
    with pytest.raises(InputError, match="one per interval"):
        slip_side_scores(stamp, left, right, events, ["left"])


def test_evaluate_scores_slip_and_serialises() -> None:
    truth = _circle_truth()
    flags = np.zeros(len(truth), dtype=bool)
    flags[100:200] = True
    ev = evaluate(_HandTrajectory(truth.stamp_ns, truth.x_m, truth.y_m, truth.yaw_rad, flags), truth, Settings(),
                  slip_truth=np.array([[truth.stamp_ns[100], truth.stamp_ns[199]]]), bag="b1", name="nominal")
    assert ev.metrics["slip_precision"] == 1.0 and ev.metrics["slip_recall"] == 1.0
    sided = evaluate(_HandTrajectory(truth.stamp_ns, truth.x_m, truth.y_m, truth.yaw_rad, flags), truth, Settings(),
                     slip_truth=np.array([[truth.stamp_ns[100], truth.stamp_ns[199]]]), slip_side=["right"])
    assert sided.metrics["slip_side_correct_frac"] == 0.0      # the hand-made flags name the left side
    assert ev.series["flag_intervals_s"].shape == (1, 2)
    text = json.dumps(ev.to_dict(series=True), allow_nan=False)      # NaN become null
    back = json.loads(text)
    assert back["settings"] == "nominal" and back["metrics"]["slip_events"] == 1
    row = ev.summary_row()
    assert row["bag"] == "b1" and "rpe_trans_pct_2m" in row


def test_rank_orders_within_each_bag() -> None:
    truth = _circle_truth(501)
    evs = []
    for bag in ("a", "b"):
        for name, drift in (("worse", 0.02), ("best", 0.0), ("broken", float("nan"))):
            ev = evaluate(_HandTrajectory(truth.stamp_ns, truth.x_m, truth.y_m, truth.yaw_rad), truth, Settings(),
                          bag=bag, name=name)
            ev.metrics["rpe_trans_pct"] = drift
            evs.append(ev)
    assert [(e.bag, e.name) for e in rank(evs)] == [("a", "best"), ("a", "worse"), ("a", "broken"),
                                                    ("b", "best"), ("b", "worse"), ("b", "broken")]
