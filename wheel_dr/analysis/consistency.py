"""Covariance consistency: NEES of pose errors over segments with the covariance restarted, chi-square bounds.

Follows Bar-Shalom, Li & Kirubarajan, "Estimation with Applications to Tracking and Navigation",
Wiley 2001, sec. 5.4: the normalised estimation error squared e^T P^-1 e of an n-dof error is
chi-square with n degrees of freedom when P is right; the mean of N independent NEES values times N
is chi-square with n N degrees of freedom. Errors along one run are correlated, so independent
samples are taken from disjoint segments, each with the covariance restarted (zero) at its start.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import stats

from ..core.motion import wrap_angle
from ..core.se2 import Poses, rotate_covariance
from ..core.noise import segment_covariance  # re-exported: the restarted-segment covariance

__all__ = ["chi2_bounds", "mean_nees_bounds", "SegmentNees", "segment_nees", "segment_covariance", "nees"]


def chi2_bounds(dof: int = 3, prob: float = 0.95) -> tuple[float, float]:
    """Two-sided ``prob`` interval of a chi-square(dof) variable: the (1-prob)/2 and (1+prob)/2 quantiles."""
    a = 0.5 * (1.0 - prob)
    return float(stats.chi2.ppf(a, dof)), float(stats.chi2.ppf(1.0 - a, dof))


def mean_nees_bounds(n: int, dof: int = 3, prob: float = 0.95) -> tuple[float, float]:
    """Two-sided ``prob`` interval of the mean of ``n`` independent chi-square(dof) NEES values:
    [chi2(dof n, a) / n, chi2(dof n, 1 - a) / n], a = (1 - prob) / 2 (Bar-Shalom et al. 2001, sec. 5.4)."""
    if n < 1:
        return float("nan"), float("nan")
    lo, hi = chi2_bounds(dof * n, prob)
    return lo / n, hi / n


def nees(err: np.ndarray, cov: np.ndarray) -> np.ndarray:
    """e^T P^-1 e for stacks err (S, n), cov (S, n, n); NaN where P is not positive definite."""
    err = np.asarray(err, dtype=np.float64)
    cov = np.asarray(cov, dtype=np.float64)
    out = np.full(len(err), np.nan)
    if len(err) == 0:
        return out
    finite = np.all(np.isfinite(cov), axis=(1, 2)) & np.all(np.isfinite(err), axis=1)
    sym = 0.5 * (cov + np.swapaxes(cov, 1, 2))
    ok = finite.copy()
    ok[finite] = np.linalg.eigvalsh(sym[finite])[:, 0] > 0.0          # positive definite
    if ok.any():
        z = np.linalg.solve(sym[ok], err[ok][..., None])[..., 0]
        out[ok] = np.einsum("si,si->s", err[ok], z)
    return out


@dataclass
class SegmentNees:
    """NEES of disjoint segments: value (S,), start/end sample positions, the error (S, 3) and the
    restarted covariance (S, 3, 3), both in the frame of the estimated pose at the segment start."""

    value: np.ndarray
    start: np.ndarray
    end: np.ndarray
    err: np.ndarray
    cov: np.ndarray
    dropped: int


def segment_nees(est_pose: np.ndarray, truth_pose: np.ndarray, step_noise: np.ndarray,
                 starts: np.ndarray, ends: np.ndarray) -> SegmentNees:
    """NEES of each segment [starts[k], ends[k]] (sample positions, ends > starts) with the
    covariance restarted at the segment start.

    est_pose, truth_pose: (M, 3) x m, y m, heading rad (unwrapped or wrapped) at the same stamps, each
    in its own frame; step_noise (M, 3, 3): the Q_k the estimator added at step k (odom frame).
    For a segment i -> j the covariance of the estimate at j given the pose at i is
    P = sum_{k=i+1..j} F_{k..j} Q_k F_{k..j}^T (the core's propagation from zero), rotated into the
    frame of the estimated pose at i. The error compares the relative motions:
    e_xy = R(-th_est_i)(p_est_j - p_est_i) - R(-th_true_i)(p_true_j - p_true_i),
    e_yaw = wrap((th_est_j - th_est_i) - (th_true_j - th_true_i)); this equals the error of an
    estimator restarted at the true pose i, expressed in that pose's frame.
    """
    est = np.asarray(est_pose, dtype=np.float64)
    tru = np.asarray(truth_pose, dtype=np.float64)
    q = np.asarray(step_noise, dtype=np.float64)
    starts = np.asarray(starts, dtype=np.int64)
    ends = np.asarray(ends, dtype=np.int64)
    covs = segment_covariance(est[:, 0], est[:, 1], q, starts, ends)
    pe, pt = Poses.from_array(est), Poses.from_array(tru)
    err = pe.relative(starts, ends).as_array() - pt.relative(starts, ends).as_array()
    err[:, 2] = wrap_angle(err[:, 2])
    cov_local = rotate_covariance(covs, -est[starts, 2])
    value = nees(err, cov_local)
    ok = np.isfinite(value)
    return SegmentNees(value[ok], starts[ok], ends[ok], err[ok], cov_local[ok], int(np.count_nonzero(~ok)))
