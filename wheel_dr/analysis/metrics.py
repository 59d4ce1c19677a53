"""Trajectory metrics against ground truth: ATE, RPE over distance, end-point drift, NEES, slip scores.

Sources: ATE and RPE after Sturm et al., "A benchmark for the evaluation of RGB-D SLAM systems",
IROS 2012; drift per distance over segments of fixed length after Geiger, Lenz & Urtasun, "Are we
ready for autonomous driving? The KITTI vision benchmark suite", CVPR 2012; alignment after Umeyama
1991 (see ``align``); NEES after Bar-Shalom et al. 2001 sec. 5.4 (see ``consistency``). Slip scores
are precision, recall, coverage after the first 0.2 s of each event, the false-flag fraction of
non-slip time and the detection latency. All positions in metres, angles in radians inside, degrees only
in the names that say so.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Sequence

import numpy as np

from ..core.errors import InputError
from ..core.estimator import Trajectory
from ..core.motion import body_increment, wrap_angle
from ..core.noise import increment_noise
from ..core.se2 import Poses
from ..core.settings import Settings
from .align import anchor_first, apply_se2, umeyama_se2
from .consistency import chi2_bounds, mean_nees_bounds, segment_nees
from .path import PlanarPath

__all__ = ["Evaluation", "evaluate", "nees_stats", "rpe_distance", "slip_scores", "slip_heading_error", "slip_side_scores",
           "step_noise_of", "rank",
           "DEFAULT_SEGMENT_LENGTHS_M"]

DEFAULT_SEGMENT_LENGTHS_M = (1.0, 2.0, 5.0, 10.0)  # indoor bases: shorter than KITTI's 100-800 m


@dataclass
class Evaluation:
    """Result of comparing one trajectory with ground truth.

    ``metrics`` holds flat scalars (units in the key names), ``rpe_by_length`` the RPE per segment
    length (m -> (translation %, rotation deg/m, segment count)), ``series`` decimated arrays for the
    plots, ``nees_segments`` the NEES of every segment.
    """

    bag: str
    name: str
    metrics: dict[str, Any]
    rpe_by_length: dict[float, tuple[float, float, int]] = field(default_factory=dict)
    series: dict[str, np.ndarray] = field(default_factory=dict)
    nees_segments: np.ndarray = field(default_factory=lambda: np.zeros(0))

    def summary_row(self) -> dict[str, Any]:
        """One flat row for summary.csv: bag, settings, the metrics, then RPE per length."""
        row: dict[str, Any] = {"bag": self.bag, "settings": self.name}
        row.update(self.metrics)
        for length, (tp, rd, n) in sorted(self.rpe_by_length.items()):
            tag = f"{length:g}m"
            row[f"rpe_trans_pct_{tag}"] = tp
            row[f"rpe_rot_degpm_{tag}"] = rd
            row[f"rpe_segments_{tag}"] = n
        return {k: _plain(v) for k, v in row.items()}

    def to_dict(self, series: bool = False) -> dict[str, Any]:
        """JSON-ready dict (numpy to Python, NaN to None); ``series`` adds the plot arrays."""
        out: dict[str, Any] = {
            "bag": self.bag,
            "settings": self.name,
            "metrics": {k: _plain(v) for k, v in self.metrics.items()},
            "rpe_by_length": {f"{k:g}": {"trans_pct": _plain(v[0]), "rot_degpm": _plain(v[1]), "segments": int(v[2])}
                              for k, v in sorted(self.rpe_by_length.items())},
            "nees_segments": [_plain(v) for v in np.asarray(self.nees_segments).tolist()],
        }
        if series:
            out["series"] = {k: _plain_list(np.asarray(v).tolist()) for k, v in self.series.items()}
        return out


def _plain(v: Any) -> Any:
    if isinstance(v, (np.bool_, bool)):
        return bool(v)
    if isinstance(v, (np.integer,)):
        return int(v)
    if isinstance(v, (float, np.floating)):
        f = float(v)
        return f if math.isfinite(f) else None
    return v


def _plain_list(v: Any) -> Any:
    if isinstance(v, list):
        return [_plain_list(x) for x in v]
    return _plain(v)


# ------------------------------------------------------------------------------------------------
def step_noise_of(traj: Trajectory, settings: Settings) -> np.ndarray:
    """The step noise Q (M, 3, 3) of a trajectory: ``traj.step_noise`` when the estimator recorded it,
    otherwise recomputed from its wheel travel with ``settings`` (same call as the batch estimator)."""
    q = getattr(traj, "step_noise", None)
    if q is not None:
        return np.asarray(q)
    tr = traj.travel
    b = settings.wheels.track_width
    ds, dth = body_increment(tr.ds_left_m, tr.ds_right_m, b)
    if traj.slip.dtheta_rad is not None:
        dth = traj.slip.dtheta_rad
    theta = np.asarray(traj.theta_rad, dtype=np.float64)
    theta_before = np.concatenate(([theta[0] - dth[0]], theta[:-1])) if len(theta) else theta
    n = settings.noise
    q, _ = increment_noise(theta_before, tr.ds_left_m, tr.ds_right_m, b, settings.integration, n.model,
                           n.k_left, n.k_right, n.alphas)
    if traj.slip.noise_scale is not None:
        q = q * traj.slip.noise_scale[:, None, None]
    return q


def _path_distance(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Cumulative path length (m) along a polyline, starting at 0."""
    return np.concatenate(([0.0], np.cumsum(np.hypot(np.diff(x), np.diff(y)))))


def rpe_distance(est_pose: np.ndarray, truth_pose: np.ndarray, dist_m: np.ndarray,
                 lengths_m: Sequence[float], max_starts: int = 4000) -> dict[float, tuple[np.ndarray, np.ndarray]]:
    """Relative pose errors over segments of travelled distance (Geiger et al. 2012; Sturm et al. 2012).

    For each length L and each start i (every k-th sample so that at most ``max_starts`` are used),
    j is the first sample whose true travelled distance reaches dist[i] + L. With relative motions
    D_est = T_est,i^-1 T_est,j and D_true likewise, the error E = D_true^-1 D_est gives the
    translation error |t(E)| / d and the rotation error |angle(E)| / d, d = dist[j] - dist[i] (the
    true distance actually covered, >= L; the benchmark divides by the nominal L). Returns
    L -> (translation error fraction (S,), rotation error rad/m (S,)).
    """
    est = np.asarray(est_pose, dtype=np.float64)
    tru = np.asarray(truth_pose, dtype=np.float64)
    pe, pt = Poses.from_array(est), Poses.from_array(tru)
    d = np.asarray(dist_m, dtype=np.float64)
    n = len(d)
    stride = max(1, int(math.ceil(n / max_starts)))
    i_all = np.arange(0, n, stride)
    out: dict[float, tuple[np.ndarray, np.ndarray]] = {}
    for length in lengths_m:
        j = np.searchsorted(d, d[i_all] + length, side="left")
        ok = j < n
        i, j = i_all[ok], j[ok]
        if len(i) == 0:
            out[float(length)] = (np.zeros(0), np.zeros(0))
            continue
        covered = d[j] - d[i]
        rel_e, rel_t = pe.relative(i, j), pt.relative(i, j)
        ex, ey = rel_e.x - rel_t.x, rel_e.y - rel_t.y
        eth = wrap_angle(rel_e.theta - rel_t.theta)
        out[float(length)] = (np.hypot(ex, ey) / covered, np.abs(eth) / covered)
    return out


def _merge_intervals(intervals_ns: np.ndarray) -> np.ndarray:
    iv = np.asarray(intervals_ns, dtype=np.int64).reshape(-1, 2)
    if len(iv) == 0:
        return iv
    iv = iv[np.argsort(iv[:, 0], kind="stable")]
    merged = [list(iv[0])]
    for s, e in iv[1:]:
        if s <= merged[-1][1]:
            merged[-1][1] = max(merged[-1][1], e)
        else:
            merged.append([s, e])
    return np.array(merged, dtype=np.int64)


def _inside(stamp_ns: np.ndarray, merged: np.ndarray) -> np.ndarray:
    if len(merged) == 0:
        return np.zeros(len(stamp_ns), dtype=bool)
    k = np.searchsorted(merged[:, 0], stamp_ns, side="right") - 1
    ok = k >= 0
    out = np.zeros(len(stamp_ns), dtype=bool)
    out[ok] = stamp_ns[ok] <= merged[k[ok], 1]
    return out


def slip_scores(stamp_ns: np.ndarray, flags: np.ndarray, intervals_ns: np.ndarray,
                grace_s: float = 0.2) -> dict[str, Any]:
    """Per-sample slip detection scores against true slip intervals [start_ns, end_ns] (inclusive).

    precision = flagged-and-slipping / flagged; recall = flagged-and-slipping / slipping;
    coverage_after_grace = flagged share of slipping samples at least ``grace_s`` after their event's
    start; false_flag_frac = flagged share of non-slip samples; latency of an event = first flag inside
    it minus its start (events never flagged inside count as missed). Overlapping intervals are
    merged. Samples stand for equal time (uniform rate). Good detectors reach coverage >= 95 %,
    false flags <= 1 %, latency < 0.2 s (wheel_dr's own aims, docs/slip.md).
    """
    t = np.asarray(stamp_ns, dtype=np.int64)
    f = np.asarray(flags, dtype=bool)
    merged = _merge_intervals(intervals_ns)
    truth = _inside(t, merged)
    grace_ns = int(round(grace_s * 1e9))
    late = _inside(t, np.column_stack([merged[:, 0] + grace_ns, merged[:, 1]])) if len(merged) else truth
    tp = int(np.count_nonzero(f & truth))
    n_flag = int(np.count_nonzero(f))
    n_true = int(np.count_nonzero(truth))
    n_late = int(np.count_nonzero(late))
    n_free = int(len(t) - n_true)
    latencies = []
    events = 0
    for s, e in merged:
        lo, hi = np.searchsorted(t, s, side="left"), np.searchsorted(t, e, side="right")
        if hi <= lo:
            continue                       # no sample inside this event: not scored
        events += 1
        hit = np.flatnonzero(f[lo:hi])
        if len(hit):
            latencies.append((t[lo + hit[0]] - s) * 1e-9)
    nan = float("nan")
    return {
        "slip_truth": 1,
        "slip_precision": tp / n_flag if n_flag else nan,
        "slip_recall": tp / n_true if n_true else nan,
        "slip_coverage_after_grace": float(np.count_nonzero(f & late)) / n_late if n_late else nan,
        "slip_false_flag_frac": float(np.count_nonzero(f & ~truth)) / n_free if n_free else nan,
        "slip_latency_mean_s": float(np.mean(latencies)) if latencies else nan,
        "slip_latency_max_s": float(np.max(latencies)) if latencies else nan,
        "slip_events": events,
        "slip_events_detected": len(latencies),
        "slip_flag_frac": n_flag / len(t) if len(t) else nan,
    }


def slip_heading_error(stamp_ns: np.ndarray, theta_est_rad: np.ndarray, theta_true_rad: np.ndarray,
                       intervals_ns: np.ndarray) -> dict[str, float]:
    """Heading error each slip event leaves: |wrap(dtheta_est - dtheta_true)| in degrees between the
    last sample before the event's start and the last sample at or before its end (merged events;
    events without a sample before them are skipped). With gyro substitution this should shrink
    (wheel_dr aims at least 5x smaller than without). Headings are unwrapped, radians."""
    t = np.asarray(stamp_ns, dtype=np.int64)
    merged = _merge_intervals(intervals_ns)
    errs = []
    for s, e in merged:
        i = int(np.searchsorted(t, s, side="left")) - 1
        j = int(np.searchsorted(t, e, side="right")) - 1
        if i < 0 or j <= i:
            continue
        d = (theta_est_rad[j] - theta_est_rad[i]) - (theta_true_rad[j] - theta_true_rad[i])
        errs.append(abs(float(wrap_angle(d))))
    nan = float("nan")
    return {"slip_heading_error_mean_deg": math.degrees(float(np.mean(errs))) if errs else nan,
            "slip_heading_error_max_deg": math.degrees(float(np.max(errs))) if errs else nan}


def slip_side_scores(stamp_ns: np.ndarray, left: np.ndarray, right: np.ndarray, intervals_ns: np.ndarray,
                     sides: Sequence[str]) -> dict[str, float]:
    """Share of flagged samples inside true events whose side flags match the event's side: 'left'
    needs the left flag, 'right' the right flag, 'both' both (intervals not merged here)."""
    t = np.asarray(stamp_ns, dtype=np.int64)
    iv = np.asarray(intervals_ns, dtype=np.int64).reshape(-1, 2)
    if len(sides) != len(iv):
        raise InputError(f"Slip truth has {len(iv)} intervals but {len(sides)} side labels; give one per interval.")
    hit = total = 0
    for (s, e), side in zip(iv, sides):
        lo, hi = np.searchsorted(t, s, side="left"), np.searchsorted(t, e, side="right")
        lf, rf = left[lo:hi], right[lo:hi]
        flagged = lf | rf
        want = {"left": lf, "right": rf, "both": lf & rf}.get(str(side))
        if want is None:
            raise InputError(f"Slip side '{side}' is not one of left, right, both.")
        total += int(np.count_nonzero(flagged))
        hit += int(np.count_nonzero(flagged & want))
    return {"slip_side_correct_frac": hit / total if total else float("nan")}


def _flag_intervals_s(t_s: np.ndarray, flags: np.ndarray) -> np.ndarray:
    """Runs of True in ``flags`` as (F, 2) [first, last] times."""
    f = np.asarray(flags, dtype=bool)
    if not f.any():
        return np.zeros((0, 2))
    edges = np.diff(np.concatenate(([0], f.astype(np.int8), [0])))
    starts = np.flatnonzero(edges == 1)
    ends = np.flatnonzero(edges == -1) - 1
    return np.column_stack([t_s[starts], t_s[ends]])


def nees_stats(values: np.ndarray, prefix: str) -> dict[str, float]:
    """Count, mean with its chi-square 95 % interval, median and share inside the chi-square(3) 95 %
    band of segment NEES values, under ``prefix_*`` keys (NaN when there are none).

    The median of chi-square(3) is 2.366 (scipy.stats.chi2.median(3)); unlike the mean it is not
    moved by a few segments far out, so a median near 2.4 with a large mean says the covariance is
    right on most segments and a few are not (slip, a bump)."""
    v = np.asarray(values, dtype=np.float64)
    n = int(len(v))
    lo95, hi95 = chi2_bounds(3, 0.95)
    mlo, mhi = mean_nees_bounds(n, 3, 0.95)
    nan = float("nan")
    return {f"{prefix}_segments": n,
            f"{prefix}_mean": float(np.mean(v)) if n else nan,
            f"{prefix}_mean_lo": mlo,
            f"{prefix}_mean_hi": mhi,
            f"{prefix}_median": float(np.median(v)) if n else nan,
            f"{prefix}_frac_inside_95": float(np.mean((v >= lo95) & (v <= hi95))) if n else nan}


def evaluate(traj: Trajectory, truth: PlanarPath, settings: Settings, slip_truth: np.ndarray | None = None,
             segment_lengths_m: Sequence[float] = DEFAULT_SEGMENT_LENGTHS_M, *, bag: str = "", name: str = "",
             nees_segment_m: float = 2.0, slip_grace_s: float = 0.2, max_plot_points: int = 3000,
             rpe_max_starts: int = 4000, slip_side: Sequence[str] | None = None) -> Evaluation:
    """Compare an estimator trajectory with ground truth (see the module docstring for sources).

    Truth is interpolated at the trajectory's stamps; samples outside its span are not compared.
    ATE: RMSE of position error after anchoring the first estimated pose on the first true pose, and
    after SE(2) Umeyama alignment of all positions. RPE: ``rpe_distance`` pooled over all lengths.
    End-point drift: anchored end-point error over true distance travelled, in %. NEES: disjoint
    segments of ``nees_segment_m`` true distance, covariance restarted at each start; segments holding
    a chain restart (gap, jump) are dropped. Slip: ``slip_scores`` over all samples when
    ``slip_truth`` (K, 2) ns intervals is given, the heading error each event leaves
    (``slip_heading_error``) and, with ``slip_side`` (K,) 'left'/'right'/'both', the share of
    flagged event samples that name the right side (``slip_side_scores``).
    """
    if len(traj) < 2:
        raise InputError("The estimate has fewer than 2 poses; check that the joint states were decoded.")
    if len(truth) < 2:
        raise InputError(f"Ground truth has {len(truth)} pose(s), too few to compare; record truth over the "
                         "drive or choose the right truth topic.")
    if slip_truth is not None:
        slip_truth = np.asarray(slip_truth, dtype=np.int64).reshape(-1, 2) if np.size(slip_truth) else \
            np.zeros((0, 2), dtype=np.int64)
        if np.any(slip_truth[:, 1] < slip_truth[:, 0]):
            raise InputError("A slip truth interval ends before it starts; give intervals as [start_ns, end_ns].")
    stamps = np.asarray(traj.stamp_ns, dtype=np.int64)
    at = truth.interpolate(stamps)
    valid = np.isfinite(at.x_m) & np.isfinite(at.y_m) & np.isfinite(at.yaw_rad)
    idx = np.flatnonzero(valid)
    if len(idx) < 2:
        raise InputError("Ground truth overlaps the estimate at fewer than 2 samples; record truth over "
                         "the drive or choose the right truth topic.")
    lo_i, hi_i = int(idx[0]), int(idx[-1]) + 1          # truth span is an interval of stamps
    sl = slice(lo_i, hi_i)
    est = np.column_stack([traj.x_m[sl], traj.y_m[sl], traj.theta_rad[sl]])
    tru_yaw = np.unwrap(at.yaw_rad[sl])
    tru = np.column_stack([at.x_m[sl], at.y_m[sl], tru_yaw])
    t_s = (stamps[sl] - stamps[lo_i]) * 1e-9
    dist = _path_distance(tru[:, 0], tru[:, 1])
    total = float(dist[-1])
    nan = float("nan")
    m: dict[str, Any] = {"n_samples": int(len(est)), "duration_s": float(t_s[-1]), "distance_m": total}

    # ATE, anchored and aligned (Sturm et al. 2012; Umeyama 1991)
    r_a, t_a, ang_a = anchor_first(est, tru)
    anc_xy, anc_yaw = apply_se2(r_a, t_a, est[:, :2], est[:, 2])
    err_anc = np.hypot(*(anc_xy - tru[:, :2]).T)
    m["ate_anchored_rmse_m"] = float(np.sqrt(np.mean(err_anc ** 2)))
    try:
        r_u, t_u, ang_u = umeyama_se2(est[:, :2], tru[:, :2])
        ali_xy, ali_yaw = apply_se2(r_u, t_u, est[:, :2], est[:, 2])
        err_ali = np.hypot(*(ali_xy - tru[:, :2]).T)
        m["ate_aligned_rmse_m"] = float(np.sqrt(np.mean(err_ali ** 2)))
        m["ate_aligned_yaw_rmse_deg"] = float(np.degrees(np.sqrt(np.mean(wrap_angle(ali_yaw - tru[:, 2]) ** 2))))
        m["align_yaw_deg"] = float(np.degrees(ang_u))
    except InputError:
        ali_xy = np.full_like(anc_xy, np.nan)
        m["ate_aligned_rmse_m"] = m["ate_aligned_yaw_rmse_deg"] = m["align_yaw_deg"] = nan

    # RPE over distance (Geiger et al. 2012)
    rpe = rpe_distance(est, tru, dist, segment_lengths_m, rpe_max_starts)
    by_len: dict[float, tuple[float, float, int]] = {}
    all_t, all_r = [], []
    for length, (te, re) in rpe.items():
        by_len[length] = (float(np.mean(te) * 100.0) if len(te) else nan,
                          float(np.degrees(np.mean(re))) if len(re) else nan, int(len(te)))
        all_t.append(te)
        all_r.append(re)
    pooled_t, pooled_r = np.concatenate(all_t) if all_t else np.zeros(0), np.concatenate(all_r) if all_r else np.zeros(0)
    m["rpe_trans_pct"] = float(np.mean(pooled_t) * 100.0) if len(pooled_t) else nan
    m["rpe_rot_degpm"] = float(np.degrees(np.mean(pooled_r))) if len(pooled_r) else nan
    m["rpe_segments"] = int(len(pooled_t))

    # End-point drift
    m["endpoint_error_m"] = float(err_anc[-1])
    m["drift_endpoint_pct"] = float(100.0 * err_anc[-1] / total) if total > 0 else nan

    # NEES over restarted segments (Bar-Shalom et al. 2001, sec. 5.4)
    q_all = step_noise_of(traj, settings)
    q = q_all[sl]
    restart = np.asarray(traj.travel.restart, dtype=bool)[sl]
    if total >= nees_segment_m > 0:
        marks = np.searchsorted(dist, np.arange(0.0, total + 1e-12, nees_segment_m), side="left")
        marks = np.unique(marks[marks < len(dist)])
        starts, ends = marks[:-1], marks[1:]
        csum = np.concatenate(([0], np.cumsum(restart)))
        clean = (csum[ends + 1] - csum[starts + 1]) == 0           # no restart in steps i+1..j
        seg = segment_nees(est, tru, q, starts, ends)          # all (contiguous: fastest), then drop
        keep = np.isin(seg.start, starts[clean])
        values, seg_start, seg_end = seg.value[keep], seg.start[keep], seg.end[keep]
        dropped = int(len(starts) - len(values))               # restarts and non-positive covariances
        fsum = np.concatenate(([0], np.cumsum(np.asarray(traj.slip.slip, dtype=bool)[sl])))
        seg_flagged = (fsum[seg_end + 1] - fsum[seg_start + 1]) > 0   # the estimator flagged slip in i+1..j
    else:
        values, seg_end, dropped = np.zeros(0), np.zeros(0, dtype=np.int64), 0
        seg_flagged = np.zeros(0, dtype=bool)
    n_seg = len(values)
    m.update(nees_stats(values, "nees"))
    m["nees_consistent"] = bool(n_seg and m["nees_mean_lo"] <= m["nees_mean"] <= m["nees_mean_hi"])
    m["nees_dropped"] = dropped
    m["nees_segment_m"] = float(nees_segment_m)
    # segments the estimator itself flagged as slipping, scored apart from the rest: the rest tells
    # whether the covariance is right where the model holds
    m.update(nees_stats(values[~seg_flagged], "nees_unflagged"))
    m["nees_unflagged_consistent"] = bool(m["nees_unflagged_segments"]
                                          and m["nees_unflagged_mean_lo"] <= m["nees_unflagged_mean"]
                                          <= m["nees_unflagged_mean_hi"])
    m.update(nees_stats(values[seg_flagged], "nees_flagged"))

    # Slip scores
    flags_all = np.asarray(traj.slip.slip, dtype=bool)
    if slip_truth is not None:
        m.update(slip_scores(stamps, flags_all, np.asarray(slip_truth), slip_grace_s))
        m.update(slip_heading_error(stamps[sl], est[:, 2], tru[:, 2], slip_truth))
        if slip_side is not None:
            m.update(slip_side_scores(stamps, np.asarray(traj.slip.left, dtype=bool),
                                      np.asarray(traj.slip.right, dtype=bool), slip_truth, slip_side))
        else:
            m["slip_side_correct_frac"] = nan
    else:
        m.update({"slip_truth": 0, "slip_precision": nan, "slip_recall": nan, "slip_coverage_after_grace": nan,
                  "slip_false_flag_frac": nan, "slip_latency_mean_s": nan, "slip_latency_max_s": nan,
                  "slip_events": 0, "slip_events_detected": 0,
                  "slip_flag_frac": float(np.mean(flags_all)) if len(flags_all) else nan,
                  "slip_heading_error_mean_deg": nan, "slip_heading_error_max_deg": nan,
                  "slip_side_correct_frac": nan})

    # Series for the plots (decimated)
    stride = max(1, int(math.ceil(len(est) / max_plot_points)))
    pick = np.arange(0, len(est), stride)
    if pick[-1] != len(est) - 1:
        pick = np.append(pick, len(est) - 1)
    cov_xy = np.asarray(traj.cov)[sl][pick][:, :2, :2]
    cov_anc = r_a @ cov_xy @ r_a.T
    t0 = stamps[lo_i]
    all_t_s = (stamps - t0) * 1e-9
    series = {
        "t_s": t_s[pick], "dist_m": dist[pick],
        "truth_x_m": tru[pick, 0], "truth_y_m": tru[pick, 1],
        "est_x_m": anc_xy[pick, 0], "est_y_m": anc_xy[pick, 1],
        "aligned_x_m": ali_xy[pick, 0], "aligned_y_m": ali_xy[pick, 1],
        "err_anchored_m": err_anc[pick],
        "cov_xx": cov_anc[:, 0, 0], "cov_xy": cov_anc[:, 0, 1], "cov_yy": cov_anc[:, 1, 1],
        "nees_dist_m": dist[seg_end] if n_seg else np.zeros(0),
        "nees_flagged": seg_flagged,
        "flag_intervals_s": _flag_intervals_s(all_t_s, flags_all),
        "slip_truth_s": ((_merge_intervals(slip_truth) - t0) * 1e-9) if slip_truth is not None
        else np.zeros((0, 2)),
        "span_s": np.array([all_t_s[0], all_t_s[-1]]),
    }
    return Evaluation(bag, name, m, by_len, series, values)


def rank(evaluations: Sequence[Evaluation], key: str = "rpe_trans_pct") -> list[Evaluation]:
    """Evaluations grouped by bag (first-seen order), each group sorted by ``key`` ascending (NaN last)."""
    bags: list[str] = []
    for e in evaluations:
        if e.bag not in bags:
            bags.append(e.bag)

    def k(e: Evaluation) -> tuple[int, float]:
        v = e.metrics.get(key, float("nan"))
        v = float("nan") if v is None else float(v)
        return (1, 0.0) if not math.isfinite(v) else (0, v)

    out: list[Evaluation] = []
    for b in bags:
        out.extend(sorted((e for e in evaluations if e.bag == b), key=k))
    return out
