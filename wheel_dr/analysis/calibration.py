"""Calibration against ground truth: wheel radii and track by least squares, then noise by maximum likelihood.

Method (common practice for odometry calibration against an external reference; see also Antonelli,
Chiaverini & Fusco, IEEE T-RO 21(5), 2005, and Censi et al., IEEE T-RO 29(2), 2013, from memory):

1. The wheel angle increments are computed once from the joint states with the nominal settings
   (``dphi = ds / r_nominal``: wheel travel in radians does not depend on the radius). A candidate
   geometry (r_left, r_right, b) then re-integrates the whole drive in one vectorised pass
   (``wheel_dr.core.motion.integrate``, the estimator's own scheme).
2. The drive is cut into consecutive, non-overlapping segments of about ``segment_length_m`` of
   mean wheel travel (none crosses a chain restart or a stretch without truth). For each segment
   the relative motion (dx, dy in the frame of the segment's start pose, dyaw) of odometry is
   compared with that of the truth, each in its own frame: the comparison does not depend on the
   frame the truth is expressed in (a map frame offset from odom changes nothing).
3. ``scipy.optimize.least_squares`` fits the three ratios to the start values on those errors, each
   segment's error whitened by its propagated covariance (generalised least squares). Standard
   errors are s^2 (J^T J)^-1 from the Jacobian at the solution and the residual variance s^2.
4. The noise parameters (per_wheel: k_left, k_right; motion_model: alpha1..alpha4) are fitted by
   maximum likelihood of the segment errors, e ~ N(0, P(theta)), where P is the covariance
   propagated over the segment from zero at its start (the closed form of
   ``wheel_dr.core.noise.propagate_covariance``, evaluated for all segments at once by
   ``wheel_dr.core.noise.segment_covariance``). Q is linear in the noise parameters for both models, so
   P(theta) = sum_a theta_a P_a with basis covariances P_a propagated once. Steps 3 and 4 alternate
   until stable; segments whose NEES is beyond the chi-square(3) 99.9 % quantile (slip, truth
   glitches) are set aside. The noise uses shorter segments than the geometry (more independent
   samples).
   The truth's own noise is modelled too, so that truth jitter is not blamed on the wheels: each
   truth pose carries white noise of standard deviation sd_xy (each of x, y) and sd_yaw, which adds
   to every segment the covariance sd_xy^2 B_xy + sd_yaw^2 B_yaw of its relative motion
   (``truth_noise_basis``: both end positions, and the start heading turning the displacement).
   The two variances are fitted with the wheel noise (the same linear-in-parameters likelihood) or
   given (``truth_sd``). Segments that share an end pose share its noise; that correlation is
   neglected (common practice for a first-order model; the segments stay much longer than the
   truth noise).
   Standard errors of the noise come from the joint fit's covariance (wheel and truth parameters
   together), the sandwich F^-1 (sum_s u_s u_s^T) F^-1 of the expected information F and the
   per-segment scores u_s, which stays honest when the noise model does not fit (Huber 1967;
   White 1982, from memory), so correlations between parameters are in it; pairs with a
   correlation beyond ``TIED_CORRELATION`` are reported as not told apart.
5. Optionally (``fit_truth_offset``) the pose of the truth's body frame in base_link is fitted
   too (three more parameters): B_rel = M (+) T_rel (+) M^-1 for each segment.

Independence: the relative motion over a segment depends only on the wheel increments inside it,
so errors of non-overlapping segments are independent and their NEES values are chi-square(3)
samples when the covariance is right (Bar-Shalom, Li & Kirubarajan 2001, sec. 5.4).

Units: metres, radians, nanosecond stamps; frames REP 103 / REP 105.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Sequence

import numpy as np
from scipy import optimize, stats

from ..core import errors as _errors
from ..core.motion import body_increment, integrate, wrap_angle
from ..core.noise import increment_noise, segment_covariance as segment_propagate
from ..core.se2 import Poses, rotate_covariance, umeyama_se2
from ..core.settings import Settings
from ..core.wheels import JointSamples, wheel_travel
from .consistency import nees as _nees
from .path import PlanarPath

__all__ = [
    "CalibrationError",
    "TruthError",
    "ExcitationError",
    "CalibrationRun",
    "Segments",
    "Excitation",
    "SystematicFit",
    "NoiseFit",
    "RunFigures",
    "CalibrationResult",
    "GEOMETRY_NAMES",
    "NOISE_NAMES",
    "prepare_run",
    "make_segments",
    "segment_errors",
    "base_motion_from_truth",
    "segment_covariance_basis",
    "segment_propagate",
    "noise_vector",
    "noise_values",
    "geometry_of",
    "fit_systematic",
    "fit_noise",
    "excitation",
    "run_figures",
    "calibrate",
    "mean_nees_interval",
    "truth_noise_basis",
    "correlation_notes",
    "TRUTH_NOISE_NAMES",
]

GEOMETRY_NAMES = ("wheels.left_radius", "wheels.right_radius", "wheels.track_width")
NOISE_NAMES = {"per_wheel": ("noise.k_left", "noise.k_right"), "motion_model": ("noise.alphas",)}

EXACT_TRUTH_NS = 50_000       # a truth stamp this close to a joint stamp is taken as "at" it (50 us)
OUTLIER_QUANTILE = 0.999
LOOSE_RADIUS = 1e-3           # relative standard errors above these are reported as a loose fit
LOOSE_TRACK = 2e-3
MOUNT_NOTE_M = 0.005          # a truth body offset beyond these (and 4 sigma) is reported when not fitted
MOUNT_NOTE_RAD = math.radians(0.2)      # chi-square(3) quantile beyond which a segment is set aside
_MIN_VARIANCE = 1e-14         # added to the diagonal of segment covariances (m^2, rad^2)
TIED_CORRELATION = 0.9        # |correlation| beyond this: the two parameters cannot be told apart
TRUTH_NOISE_NAMES = ("truth.sd_xy", "truth.sd_yaw")     # m, rad per truth pose (not written to the file)


# defined with every other error in wheel_dr.core.errors
CalibrationError = _errors.CalibrationError
TruthError = _errors.TruthError
ExcitationError = _errors.ExcitationError


# ------------------------------------------------------------------------------------------------
# data
# ------------------------------------------------------------------------------------------------
@dataclass
class CalibrationRun:
    """One recording ready for calibration, per accepted joint-state sample (M entries).

    ``dphi_*_rad`` are wheel angle increments (rad, mean over each side's joints), ``restart`` marks
    dropped increments (chain start, gap, jump). ``truth_*`` is the truth interpolated at the
    accepted stamps (x, y m and unwrapped yaw rad in the truth's own frame), ``truth_valid`` where
    that interpolation is trustworthy (inside the truth's span, no long truth gap). When the truth
    was recorded at joint stamps (every k-th sample, say), only those samples are valid, so that
    segments start and end on true poses rather than interpolated ones.
    """

    name: str
    stamp_ns: np.ndarray
    dphi_left_rad: np.ndarray
    dphi_right_rad: np.ndarray
    restart: np.ndarray
    truth_x_m: np.ndarray
    truth_y_m: np.ndarray
    truth_yaw_rad: np.ndarray
    truth_valid: np.ndarray
    truth_frame: str = ""
    nominal: Settings = field(default_factory=Settings)

    def __len__(self) -> int:
        return int(len(self.stamp_ns))

    def wheel_travel_m(self, left_radius_m: float, right_radius_m: float) -> tuple[np.ndarray, np.ndarray]:
        """Left and right wheel travel (m) per step for the given radii."""
        return left_radius_m * self.dphi_left_rad, right_radius_m * self.dphi_right_rad


def prepare_run(samples: JointSamples, truth: PlanarPath, settings: Settings, name: str = "",
                max_truth_gap_s: float = 0.5) -> CalibrationRun:
    """Wheel angle increments (from ``settings``' joint rules) and truth at the accepted stamps.

    Raises TruthError when the truth has fewer than two poses or does not overlap the joint states.
    """
    label = f" of '{name}'" if name else ""
    travel = wheel_travel(samples, settings)
    w = settings.wheels
    dphi_l = np.asarray(travel.ds_left_m) / w.left_radius
    dphi_r = np.asarray(travel.ds_right_m) / w.right_radius
    st = np.asarray(travel.stamp_ns, dtype=np.int64)
    if len(truth) < 2:
        raise TruthError(f"the ground truth{label} has {len(truth)} poses; record the truth topic during the "
                         "whole drive (give it with --truth).")
    ts = np.asarray(truth.stamp_ns, dtype=np.int64)
    order = np.argsort(ts, kind="stable")
    ts = ts[order]
    keep = np.concatenate(([True], np.diff(ts) > 0))
    ts = ts[keep]
    tx = np.asarray(truth.x_m, dtype=np.float64)[order][keep]
    ty = np.asarray(truth.y_m, dtype=np.float64)[order][keep]
    tyaw = np.unwrap(np.asarray(truth.yaw_rad, dtype=np.float64)[order][keep])
    finite = np.isfinite(tx) & np.isfinite(ty) & np.isfinite(tyaw)
    ts, tx, ty, tyaw = ts[finite], tx[finite], ty[finite], tyaw[finite]
    if len(ts) < 2:
        raise TruthError(f"the ground truth{label} has fewer than 2 usable poses; record the truth topic "
                         "during the whole drive.")
    if len(st) == 0:
        raise CalibrationError(f"the recording{label} has no usable joint-state samples; check the joint names "
                               "in the parameters file.")
    tq = (st - ts[0]).astype(np.float64)
    tb = (ts - ts[0]).astype(np.float64)
    inside = (st >= ts[0]) & (st <= ts[-1])
    hi = np.clip(np.searchsorted(ts, st, side="left"), 1, len(ts) - 1)
    gap_s = (ts[hi] - ts[hi - 1]) * 1e-9
    near = np.clip(np.searchsorted(ts, st), 0, len(ts) - 1)
    prev = np.clip(near - 1, 0, len(ts) - 1)
    offset_ns = np.minimum(np.abs(ts[near] - st), np.abs(ts[prev] - st))
    exact = offset_ns <= EXACT_TRUTH_NS
    valid = inside & ((gap_s <= max_truth_gap_s) | exact)
    if exact.sum() >= max(100, 0.02 * len(st)):
        # truth recorded at (a subset of) the joint stamps: end segments only there, so that no
        # interpolation error (chord of an arc, speed changes between truth samples) enters
        valid &= exact
    if valid.sum() < 2:
        raise TruthError(
            f"the ground truth{label} does not overlap the joint states in time (truth {ts[0] * 1e-9:.1f} to "
            f"{ts[-1] * 1e-9:.1f} s, joints {st[0] * 1e-9:.1f} to {st[-1] * 1e-9:.1f} s); record both during "
            "the same drive with the same clock.")
    return CalibrationRun(name, st, dphi_l, dphi_r, np.asarray(travel.restart, dtype=bool),
                          np.interp(tq, tb, tx), np.interp(tq, tb, ty), np.interp(tq, tb, tyaw), valid,
                          truth.frame_id, settings)


@dataclass
class Segments:
    """Consecutive non-overlapping segments of one run: sample ``start[s]`` to ``end[s]`` (indices)."""

    start: np.ndarray
    end: np.ndarray
    length_m: float

    def __len__(self) -> int:
        return int(len(self.start))


def _motion_measure(run: CalibrationRun) -> np.ndarray:
    w = run.nominal.wheels
    dl, dr = run.wheel_travel_m(w.left_radius, w.right_radius)
    return np.cumsum(0.5 * (np.abs(dl) + np.abs(dr)))


def make_segments(run: CalibrationRun, segment_length_m: float = 2.0) -> Segments:
    """Cut the run into segments of ``segment_length_m`` mean wheel travel (nominal radii), each with
    truth at both ends and no chain restart inside (a partial segment at the end is dropped)."""
    m = _motion_measure(run)
    n = len(m)
    rc = np.cumsum(run.restart)
    valid = run.truth_valid
    valid_idx = np.flatnonzero(valid)
    starts: list[int] = []
    ends: list[int] = []

    def next_valid(k: int) -> int:
        p = np.searchsorted(valid_idx, k)
        return int(valid_idx[p]) if p < len(valid_idx) else n

    i = next_valid(0)
    while i < n:
        j = next_valid(int(np.searchsorted(m, m[i] + segment_length_m, side="left")))
        if j >= n:
            break
        if rc[j] != rc[i]:                          # a restart inside (i, j]: start again there
            i = next_valid(int(np.searchsorted(rc, rc[i] + 1, side="left")))
            continue
        starts.append(i)
        ends.append(j)
        i = j
    return Segments(np.asarray(starts, dtype=np.int64), np.asarray(ends, dtype=np.int64), float(segment_length_m))


def _relative(x, y, th, i, j) -> np.ndarray:
    """(S, 3) motion from pose i to pose j in the frame of pose i (``Poses.relative``)."""
    return Poses(x, y, th).relative(i, j).as_array()


def _integrate_run(run: CalibrationRun, geometry: Sequence[float], scheme: str):
    rl, rr, b = geometry
    dl, dr = run.wheel_travel_m(rl, rr)
    ds, dth = body_increment(dl, dr, b)
    return integrate(ds, dth, scheme)


def base_motion_from_truth(truth_rel: np.ndarray, mount: Sequence[float]) -> np.ndarray:
    """Relative motion of base_link from that of a truth body mounted at ``mount`` = (x m, y m, yaw rad)
    in base_link: B_rel = M (+) T_rel (+) M^-1 (SE(2) composition; Sola et al. 2018 notation)."""
    lx, ly, d = (float(v) for v in mount)
    if lx == 0.0 and ly == 0.0 and d == 0.0:
        return truth_rel
    c, s = math.cos(-d), math.sin(-d)
    inv_xy = -np.array([c * lx - s * ly, s * lx + c * ly])        # M^-1 = (-R(-d) l, -d)
    ct, st = np.cos(truth_rel[:, 2]), np.sin(truth_rel[:, 2])
    cx = truth_rel[:, 0] + ct * inv_xy[0] - st * inv_xy[1]          # C = T_rel (+) M^-1
    cy = truth_rel[:, 1] + st * inv_xy[0] + ct * inv_xy[1]
    cd, sd = math.cos(d), math.sin(d)
    out = np.empty_like(truth_rel)
    out[:, 0] = lx + cd * cx - sd * cy                               # B = M (+) C
    out[:, 1] = ly + sd * cx + cd * cy
    out[:, 2] = truth_rel[:, 2]
    return out


def segment_errors(run: CalibrationRun, seg: Segments, geometry: Sequence[float], scheme: str,
                   mount: Sequence[float] = (0.0, 0.0, 0.0)) -> np.ndarray:
    """(S, 3) odometry-minus-truth relative motion per segment (dx, dy m in the start frame, dyaw rad);
    ``mount`` is where the truth's body frame sits in base_link (x m, y m, yaw rad)."""
    x, y, th, _, _, _ = _integrate_run(run, geometry, scheme)
    odo = _relative(x, y, th, seg.start, seg.end)
    tru = base_motion_from_truth(_relative(run.truth_x_m, run.truth_y_m, run.truth_yaw_rad, seg.start, seg.end),
                                 mount)
    err = odo - tru
    err[:, 2] = wrap_angle(err[:, 2])
    return err


def _noise_basis_params(model: str) -> list[dict]:
    if model == "per_wheel":
        return [dict(k_left=1.0, k_right=0.0, alphas=(0, 0, 0, 0)), dict(k_left=0.0, k_right=1.0, alphas=(0, 0, 0, 0))]
    return [dict(k_left=0.0, k_right=0.0, alphas=tuple(float(a == b) for b in range(4))) for a in range(4)]


def segment_covariance_basis(run: CalibrationRun, seg: Segments, geometry: Sequence[float], scheme: str,
                             model: str) -> np.ndarray:
    """(S, A, 3, 3) covariance of each segment's relative motion per unit of each noise parameter.

    The covariance is propagated from zero at the segment start with the core's closed form and
    rotated into the start pose's frame; for the true parameters theta the segment covariance is
    sum_a theta_a basis[:, a] (Q is linear in k_left, k_right and in alpha1..alpha4).
    """
    rl, rr, b = geometry
    dl, dr = run.wheel_travel_m(rl, rr)
    x, y, th, th_before, _, _ = _integrate_run(run, geometry, scheme)
    params = _noise_basis_params(model)
    qs = [increment_noise(th_before, dl, dr, b, scheme, model, p["k_left"], p["k_right"], p["alphas"])[0]
          for p in params]
    out = np.zeros((len(seg), len(params), 3, 3))
    for a, q in enumerate(qs):
        out[:, a] = rotate_covariance(segment_propagate(x, y, q, seg.start, seg.end), -th[seg.start])
    return out


def truth_noise_basis(run: CalibrationRun, seg: Segments) -> np.ndarray:
    """(S, 2, 3, 3) covariance of each segment's truth relative motion per unit of the truth's
    position variance (sd_xy^2, each of x and y) and heading variance (sd_yaw^2) per pose.

    The relative motion is r = R(-th_i) (p_j - p_i), dth = th_j - th_i. Position noise at both ends
    adds 2 sd_xy^2 to x and y (isotropic, so the rotation does not change it); heading noise at the
    start turns the displacement, dr/dth_i = (r_y, -r_x), and enters dth with -1; heading noise at
    the end enters dth with +1 (first order)."""
    tru = _relative(run.truth_x_m, run.truth_y_m, run.truth_yaw_rad, seg.start, seg.end)
    out = np.zeros((len(seg), 2, 3, 3))
    out[:, 0, 0, 0] = out[:, 0, 1, 1] = 2.0
    v = np.column_stack([tru[:, 1], -tru[:, 0], -np.ones(len(seg))])
    out[:, 1] = v[:, :, None] * v[:, None, :]
    out[:, 1, 2, 2] += 1.0
    return out


def correlation_notes(names: Sequence[str], cov: np.ndarray, threshold: float = TIED_CORRELATION) -> list[str]:
    """One sentence per pair of parameters whose correlation (from their joint covariance ``cov``)
    exceeds ``threshold`` in size: they cannot be told apart on this drive, only a combination is
    known (their sum for a negative correlation, their difference for a positive one)."""
    cov = np.asarray(cov, dtype=np.float64)
    sd = np.sqrt(np.maximum(np.diag(cov), 0.0))
    out = []
    for a in range(len(names)):
        for b in range(a + 1, len(names)):
            if not (sd[a] > 0 and sd[b] > 0 and math.isfinite(sd[a]) and math.isfinite(sd[b])):
                continue
            r = float(cov[a, b] / (sd[a] * sd[b]))
            if abs(r) > threshold:
                combo = "a sum of the two" if r < 0 else "a difference of the two"
                if any(n in TRUTH_NOISE_NAMES for n in (names[a], names[b])):
                    todo = "give the truth's noise with --truth-sd, or fit on longer noise segments (--noise-segment-m)"
                else:
                    todo = "drive more of what separates them (turns both ways, arcs, straight runs at several speeds)"
                out.append(f"{names[a]} and {names[b]} cannot be told apart on this drive (correlation {r:+.2f}): "
                           f"only {combo} is well known; {todo} before relying on either value.")
    return out


def noise_vector(settings: Settings, model: str | None = None) -> np.ndarray:
    """The noise parameters of ``model`` (default the settings' own) as a vector."""
    n = settings.noise
    model = model or n.model
    return np.array([n.k_left, n.k_right]) if model == "per_wheel" else np.array(n.alphas, dtype=np.float64)


def noise_values(model: str, theta: np.ndarray) -> dict[str, object]:
    """Dotted-name values of a noise parameter vector."""
    if model == "per_wheel":
        return {"noise.k_left": float(theta[0]), "noise.k_right": float(theta[1])}
    return {"noise.alphas": tuple(float(v) for v in theta)}


def geometry_of(settings: Settings) -> np.ndarray:
    """(left radius m, right radius m, track m) of the settings."""
    w = settings.wheels
    return np.array([w.left_radius, w.right_radius, w.track_width])


def _combine(basis: np.ndarray, theta: np.ndarray, extra: np.ndarray | None = None) -> np.ndarray:
    """sum_a theta_a basis[:, a] (+ extra), made positive definite: eigenvalues are floored at 1e-9 of
    the largest (and at ``_MIN_VARIANCE``) so that round-off never leaves a segment without a whitener."""
    cov = np.einsum("sa,sakl->skl", np.broadcast_to(theta, basis.shape[:2]), basis)
    if extra is not None:
        cov = cov + extra
    cov = 0.5 * (cov + np.swapaxes(cov, 1, 2))
    lam, vec = np.linalg.eigh(cov)
    floor = np.maximum(lam[:, -1:] * 1e-9, _MIN_VARIANCE)
    lam = np.maximum(lam, floor)
    return (vec * lam[:, None, :]) @ np.swapaxes(vec, 1, 2)


def _truth_cov(basis: np.ndarray, truth_var: Sequence[float]) -> np.ndarray | None:
    """sd_xy^2 B_xy + sd_yaw^2 B_yaw per segment (None when the truth is taken as exact)."""
    tv = np.asarray(truth_var, dtype=np.float64)
    if not np.any(tv > 0):
        return None
    return np.einsum("a,sakl->skl", tv, basis)


def mean_nees_interval(n: int, dof: int = 3, prob: float = 0.95) -> tuple[float, float]:
    """Two-sided interval of the mean of n chi-square(dof) NEES values (Bar-Shalom et al. 2001, sec. 5.4;
    quantiles from scipy.stats.chi2)."""
    a = 0.5 * (1.0 - prob)
    return float(stats.chi2.ppf(a, dof * n) / n), float(stats.chi2.ppf(1.0 - a, dof * n) / n)


# ------------------------------------------------------------------------------------------------
# systematic fit
# ------------------------------------------------------------------------------------------------
@dataclass
class SystematicFit:
    """Fitted geometry (left radius m, right radius m, track m), standard errors, Jacobian figures."""

    geometry: np.ndarray
    std_error: np.ndarray
    residual_variance: float
    condition: float            # condition number of the column-normalised whitened Jacobian
    singular_values: np.ndarray  # of the Jacobian in relative units (per unit relative change)
    n_residuals: int
    cost: float
    success: bool
    mount: np.ndarray = field(default_factory=lambda: np.zeros(3))       # truth body in base_link (m, m, rad)
    mount_std_error: np.ndarray = field(default_factory=lambda: np.full(3, math.nan))
    cov: np.ndarray = field(default_factory=lambda: np.full((3, 3), math.nan))   # of the geometry (m^2)

    @property
    def relative_std_error(self) -> np.ndarray:
        """Standard errors over the values (dimensionless)."""
        return self.std_error / self.geometry


def _whiteners(covs: Sequence[np.ndarray]) -> list[np.ndarray]:
    out = []
    for c in covs:
        chol = np.linalg.cholesky(c)
        out.append(np.linalg.inv(chol))
    return out


def fit_systematic(runs: Sequence[CalibrationRun], segs: Sequence[Segments], start_geometry: Sequence[float],
                   scheme: str, covs: Sequence[np.ndarray], masks: Sequence[np.ndarray] | None = None,
                   fit_mount: bool = False, start_mount: Sequence[float] = (0.0, 0.0, 0.0)) -> SystematicFit:
    """Least squares of (r_left, r_right, b) on whitened segment errors (``covs`` (S, 3, 3) per run,
    held fixed), parametrised as ratios to ``start_geometry`` (so the Jacobian is per relative change).

    ``fit_mount`` also fits where the truth's body frame sits in base_link (x, y in m, yaw in rad:
    a motion-capture marker set off the base's origin or turned); the condition number and the
    geometry's standard errors then account for it."""
    g0 = np.asarray(start_geometry, dtype=np.float64)
    m0 = np.asarray(start_mount, dtype=np.float64)
    n_par = 6 if fit_mount else 3
    masks = list(masks) if masks is not None else [np.ones(len(s), dtype=bool) for s in segs]
    whites = []
    for c, mk in zip(covs, masks):
        sel = c[mk]
        whites.append(np.stack(_whiteners(sel)) if len(sel) else np.zeros((0, 3, 3)))
    kept = [Segments(s.start[mk], s.end[mk], s.length_m) for s, mk in zip(segs, masks)]

    def residuals(x: np.ndarray) -> np.ndarray:
        g = g0 * x[:3]       # x = ratio to the start values, near 1 (finite-difference steps are relative to x)
        mount = m0 + (x[3:] - 1.0) if fit_mount else m0      # metres and radians, offset by 1 likewise
        parts = []
        for run, sg, wt in zip(runs, kept, whites):
            if len(sg) == 0:
                continue
            e = segment_errors(run, sg, g, scheme, mount)
            parts.append(np.einsum("skl,sl->sk", wt, e).ravel())
        return np.concatenate(parts)

    res = optimize.least_squares(residuals, np.ones(n_par), method="trf", diff_step=1e-7, x_scale=1e-3,
                                 xtol=1e-12, ftol=1e-12, gtol=1e-12, max_nfev=300)
    jac = res.jac
    m = len(res.fun)
    dof = max(m - n_par, 1)
    s2 = float(2.0 * res.cost / dof)
    jg = jac[:, :3]
    if fit_mount:   # geometry columns with the mount's part projected out (what the mount cannot explain)
        q, _ = np.linalg.qr(jac[:, 3:])
        jg = jg - q @ (q.T @ jg)
    sv = np.linalg.svd(jg, compute_uv=False)
    norms = np.linalg.norm(jg, axis=0)
    svn = np.linalg.svd(jg / np.where(norms > 0, norms, 1.0), compute_uv=False)
    cond = float(svn[0] / svn[-1]) if svn[-1] > 0 else math.inf
    try:
        cov_u = s2 * np.linalg.inv(jac.T @ jac)
        se_u = np.sqrt(np.maximum(np.diag(cov_u), 0.0))
    except np.linalg.LinAlgError:
        cov_u = np.full((n_par, n_par), math.inf)
        se_u = np.full(n_par, math.inf)
    g = g0 * res.x[:3]
    out = SystematicFit(g, np.abs(g0) * se_u[:3], s2, cond, sv, m, float(res.cost), bool(res.success))
    out.cov = cov_u[:3, :3] * np.outer(g0, g0)          # ratios to metres (the mount's part included)
    if fit_mount:
        out.mount = m0 + (res.x[3:] - 1.0)
        out.mount_std_error = se_u[3:]
    else:
        out.mount = m0.copy()
    return out


# ------------------------------------------------------------------------------------------------
# noise fit
# ------------------------------------------------------------------------------------------------
@dataclass
class NoiseFit:
    """Maximum-likelihood noise parameters of ``model`` with standard errors from their joint covariance.

    ``theta`` / ``std_error`` are the wheel noise parameters; ``cov`` is the joint covariance of every
    fitted parameter (``names``: the wheel ones, then the truth variances when they were fitted),
    the sandwich estimate (see the module docstring). ``truth_sd`` is the truth's noise used
    (sd_xy m, sd_yaw rad; fitted or given) and ``truth_sd_se`` its standard errors (NaN when given).
    """

    model: str
    theta: np.ndarray
    std_error: np.ndarray
    nees_mean: float
    n_segments: int
    success: bool
    cov: np.ndarray = field(default_factory=lambda: np.zeros((0, 0)))
    names: tuple[str, ...] = ()
    truth_sd: np.ndarray = field(default_factory=lambda: np.zeros(2))
    truth_sd_se: np.ndarray = field(default_factory=lambda: np.full(2, math.nan))
    truth_fitted: bool = False

    @property
    def correlation(self) -> np.ndarray:
        """Correlation matrix of the fitted parameters (from ``cov``)."""
        sd = np.sqrt(np.maximum(np.diag(self.cov), 0.0))
        with np.errstate(invalid="ignore", divide="ignore"):
            return self.cov / np.outer(sd, sd)


def fit_noise(errs: np.ndarray, basis: np.ndarray, model: str, start: np.ndarray | None = None,
              extra_cov: np.ndarray | None = None) -> NoiseFit:
    """Maximise the Gaussian likelihood of segment errors ``errs`` (S, 3) with covariance
    sum_a theta_a basis[:, a] (+ ``extra_cov``): minimise sum_s log det P_s + e_s^T P_s^-1 e_s over
    theta >= 0 (optimised in log theta, analytic gradient)."""
    s, a = basis.shape[:2]
    if s == 0:
        raise ExcitationError("no segment is left to fit the noise on; drive longer with ground truth recorded.")
    # a common scale first: for P = c P0 the likelihood is maximal at c = mean(e^T P0^-1 e) / 3
    th0 = np.ones(a) if start is None else np.maximum(np.asarray(start, dtype=np.float64), 0.0)
    if not np.any(th0 > 0):
        th0 = np.ones(a)
    th0 = np.where(th0 > 0, th0, th0[th0 > 0].min() * 1e-2)
    c = float(np.mean(_nees(errs, _combine(basis, th0, extra_cov)))) / 3.0
    th0 = th0 * max(c, 1e-30)
    lo = np.log(np.maximum(th0 * 1e-8, 1e-30))
    hi = np.log(np.maximum(th0 * 1e8, 1e-20))
    hi = np.minimum(hi, math.log(10.0))
    u0 = np.clip(np.log(th0), lo, hi)

    def nll(u: np.ndarray):
        th = np.exp(u)
        cov = _combine(basis, th, extra_cov)
        inv = np.linalg.inv(cov)
        sign, logdet = np.linalg.slogdet(cov)
        w = np.einsum("skl,sl->sk", inv, errs)
        val = float(np.sum(logdet) + np.einsum("si,si->", errs, w))
        # d/dtheta_a = sum tr(P^-1 B_a) - w^T B_a w
        g_th = np.einsum("skl,salk->a", inv, basis) - np.einsum("sk,sakl,sl->a", w, basis, w)
        return val, g_th * th

    res = optimize.minimize(nll, u0, jac=True, method="L-BFGS-B", bounds=list(zip(lo, hi)),
                            options=dict(maxiter=500, ftol=1e-14, gtol=1e-10))
    th = np.exp(res.x)
    cov = _combine(basis, th, extra_cov)
    inv = np.linalg.inv(cov)
    ib = np.einsum("skl,salm->sakm", inv, basis)
    fisher = 0.5 * np.einsum("sakm,sbmk->ab", ib, ib)         # expected information of the log-likelihood
    w = np.einsum("skl,sl->sk", inv, errs)
    score = -0.5 * (np.einsum("sakk->sa", ib) - np.einsum("sk,sakl,sl->sa", w, basis, w))   # per segment
    try:
        f_inv = np.linalg.inv(fisher)
        par_cov = f_inv @ (score.T @ score) @ f_inv             # sandwich: honest under a misfit model
        par_cov = 0.5 * (par_cov + par_cov.T)
        se = np.sqrt(np.maximum(np.diag(par_cov), 0.0))
    except np.linalg.LinAlgError:
        par_cov = np.full((a, a), math.inf)
        se = np.full(a, math.inf)
    return NoiseFit(model, th, se, float(np.mean(_nees(errs, cov))), s, bool(res.success), par_cov)


# ------------------------------------------------------------------------------------------------
# excitation
# ------------------------------------------------------------------------------------------------
@dataclass
class Excitation:
    """What the drive contains (nominal geometry) and whether it suffices; ``advice`` says what to drive."""

    travel_m: float
    straight_m: float
    left_turn_rad: float
    right_turn_rad: float
    n_segments: int
    condition: float
    ok: bool
    problems: list[str]
    advice: list[str]

    def message(self) -> str:
        """One sentence: what is wrong and what to drive."""
        return (f"the drive does not excite the wheel radii and track enough ({'; '.join(self.problems)}); "
                f"{'; '.join(self.advice)}, then calibrate again.")


WINDOW_M = 0.25           # windows of mean wheel travel over which turns and straight runs are counted
STRAIGHT_RAD_PER_M = 0.05  # a window turning less than this per metre of travel counts as straight


def excitation(runs: Sequence[CalibrationRun], segs: Sequence[Segments], condition: float = math.nan,
               min_travel_m: float = 30.0, min_segments: int = 15, min_straight_m: float = 10.0,
               min_turn_rad: float = 2.0 * math.pi, max_condition: float = 200.0) -> Excitation:
    """Turns each way, straight distance and segment count of the drive, against these minima
    (common practice: straight runs fix the mean radius and the radius ratio, turns both ways fix
    the track and separate it from the radius ratio; the numbers are this project's choice)."""
    travel = straight = left = right = 0.0
    for run in runs:
        w = run.nominal.wheels
        dl, dr = run.wheel_travel_m(w.left_radius, w.right_radius)
        ok = ~run.restart
        m = np.cumsum(np.where(ok, 0.5 * (np.abs(dl) + np.abs(dr)), 0.0))
        th = np.cumsum(np.where(ok, (dr - dl) / w.track_width, 0.0))
        fwd = np.cumsum(np.where(ok, 0.5 * (dr + dl), 0.0))
        if len(m) == 0:
            continue
        travel += float(m[-1])
        edges = np.searchsorted(m, np.arange(0.0, m[-1] + WINDOW_M, WINDOW_M))
        edges = np.unique(np.clip(edges, 0, len(m) - 1))
        dth = np.diff(th[edges])
        dfw = np.abs(np.diff(fwd[edges]))
        left += float(dth[dth > 0].sum())
        right += float(-dth[dth < 0].sum())
        straight += float(dfw[np.abs(dth) < STRAIGHT_RAD_PER_M * np.maximum(dfw, 1e-9)].sum())
    n_seg = int(sum(len(s) for s in segs))
    problems: list[str] = []
    advice: list[str] = []
    short = travel < min_travel_m or n_seg < min_segments
    if short:
        problems.append(f"only {travel:.1f} m of wheel travel in {n_seg} usable segments with truth")
        advice.append(f"drive at least {min_travel_m:.0f} m with ground truth recorded")
    if straight < min_straight_m:
        problems.append(f"only {straight:.1f} m of straight driving")
        advice.append(f"add straight runs of a few metres, {min_straight_m:.0f} m in total")
    for side, amount in (("left", left), ("right", right)):
        if amount < min_turn_rad:
            problems.append(f"only {math.degrees(amount):.0f} deg of {side} turns")
            advice.append(f"turn {side} (on the spot and on arcs) at least {math.degrees(min_turn_rad):.0f} deg "
                          "in total")
    ill = not math.isnan(condition) and not (condition <= max_condition)   # an infinite one is ill too
    if ill:
        number = f" (condition number {condition:.0f})" if math.isfinite(condition) else ""
        problems.append(f"the radii and the track cannot be told apart{number}")
        if not advice:
            advice.append("mix straight runs, arcs of different radii and turns on the spot both ways")
    ok = not short and not ill
    return Excitation(travel, straight, left, right, n_seg, condition, ok, problems, advice)


# ------------------------------------------------------------------------------------------------
# figures and the whole calibration
# ------------------------------------------------------------------------------------------------
@dataclass
class RunFigures:
    """Before/after figures of one run: ATE (m, whole run started on the truth, aligned by Umeyama SE(2)),
    drift % (sum of segment translation errors over the segments' true path length) and NEES."""

    name: str
    ate_m: float
    drift_pct: float
    nees_mean: float
    nees_lo: float
    nees_hi: float
    n_segments: int

    @property
    def nees_inside(self) -> bool:
        """Mean NEES inside its chi-square 95 % interval."""
        return self.nees_lo <= self.nees_mean <= self.nees_hi


def _aligned_rmse(src: np.ndarray, dst: np.ndarray) -> float:
    """RMS of dst - (R src + t) after the least-squares rotation and translation (Umeyama 1991, no scale)."""
    rot, t, _ = umeyama_se2(src, dst)
    res = dst - (src @ rot.T + t)
    return float(np.sqrt(np.mean(np.sum(res * res, axis=1))))


def run_figures(run: CalibrationRun, settings: Settings, segment_length_m: float = 2.0,
                seg: Segments | None = None, mount: Sequence[float] = (0.0, 0.0, 0.0),
                truth_var: Sequence[float] = (0.0, 0.0)) -> RunFigures:
    """ATE, drift % and mean segment NEES of ``run`` under ``settings`` (geometry, scheme, noise);
    ``truth_var`` (sd_xy^2 m^2, sd_yaw^2 rad^2) adds the truth's own noise to each segment's covariance."""
    seg = seg if seg is not None else make_segments(run, segment_length_m)
    g = geometry_of(settings)
    scheme = settings.integration
    x, y, th, _, _, _ = _integrate_run(run, g, scheme)
    v = run.truth_valid
    ate = _aligned_rmse(np.column_stack([x[v], y[v]]), np.column_stack([run.truth_x_m[v], run.truth_y_m[v]])) \
        if v.sum() >= 2 else math.nan
    if len(seg) == 0:
        return RunFigures(run.name, ate, math.nan, math.nan, math.nan, math.nan, 0)
    err = segment_errors(run, seg, g, scheme, mount)
    step = np.hypot(np.diff(run.truth_x_m), np.diff(run.truth_y_m))
    cum = np.concatenate(([0.0], np.cumsum(np.where(np.isfinite(step), step, 0.0))))
    length = float(np.sum(cum[seg.end] - cum[seg.start]))
    drift = 100.0 * float(np.sum(np.hypot(err[:, 0], err[:, 1]))) / length if length > 0 else math.nan
    basis = segment_covariance_basis(run, seg, g, scheme, settings.noise.model)
    nees = _nees(err, _combine(basis, noise_vector(settings), _truth_cov(truth_noise_basis(run, seg), truth_var)))
    lo, hi = mean_nees_interval(len(seg))
    return RunFigures(run.name, ate, drift, float(np.mean(nees)), lo, hi, len(seg))


@dataclass
class CalibrationResult:
    """Everything ``calibrate`` found: tuned settings, the changed values and how well they are known."""

    before: Settings
    after: Settings
    values: dict[str, object]
    systematic: SystematicFit | None
    noise: NoiseFit | None
    excitation: Excitation
    n_segments: int
    n_outliers: int
    notes: list[str]
    figures_before: list[RunFigures]
    figures_after: list[RunFigures]
    holdout_before: list[RunFigures] = field(default_factory=list)
    holdout_after: list[RunFigures] = field(default_factory=list)
    segment_length_m: float = 2.0
    mount: np.ndarray = field(default_factory=lambda: np.zeros(3))   # truth body in base_link used (m, m, rad)


def calibrate(runs: Sequence[CalibrationRun], settings: Settings, *, segment_length_m: float = 2.0,
              noise_segment_m: float = 0.2, fit_geometry: bool = True, fit_noise_params: bool = True,
              noise_model: str | None = None, holdout: Sequence[CalibrationRun] = (), iterations: int = 4,
              reject_outliers: bool = True, fit_truth_offset: bool = False,
              truth_sd: Sequence[float] | None = None) -> CalibrationResult:
    """Fit the geometry (least squares) then the noise (maximum likelihood) jointly over ``runs``.

    ``truth_sd`` (sd_xy m, sd_yaw rad per truth pose) gives the truth's own noise; None fits it with
    the wheel noise (when the noise is fitted; otherwise the truth is taken as exact). Pairs of
    parameters that cannot be told apart and noise values not distinguishable from zero are said in
    ``notes``.

    The geometry is fitted on segments of ``segment_length_m``, the noise on shorter segments of
    ``noise_segment_m`` (more independent samples: the noise fit's precision grows with their
    number); figures (ATE, drift, NEES) use ``segment_length_m``. ``fit_truth_offset`` also fits
    where the truth's body frame sits in base_link (a marker set off the base's origin); without it
    a significant offset is reported in ``notes``. Raises ExcitationError when the
    drive cannot determine the geometry (the message says what to drive) and
    TruthError/CalibrationError for unusable input.
    """
    if not runs:
        raise CalibrationError("no recording to calibrate on; give at least one bag.")
    for what, value in (("segment length", segment_length_m), ("noise segment length", noise_segment_m)):
        if not (value > 0 and math.isfinite(value)):
            raise CalibrationError(f"the {what} is {value:g} m; give a positive length (defaults 2 and 0.2 m).")
    model = noise_model or settings.noise.model
    scheme = settings.integration
    segs = [make_segments(r, segment_length_m) for r in runs]
    nsegs = [make_segments(r, noise_segment_m) for r in runs]
    notes: list[str] = []
    frames = sorted({r.truth_frame for r in runs if r.truth_frame})
    odom = settings.frames.odom
    if any(f != odom for f in frames):
        notes.append(f"truth is in frame {', '.join(repr(f) for f in frames)}, not '{odom}': only segment-relative "
                     "motion is compared, which does not depend on that frame's offset.")
    pre = excitation(runs, segs)
    if not pre.ok or sum(len(s) for s in segs) < 3:
        raise ExcitationError(pre.message())

    geometry = geometry_of(settings)
    theta = noise_vector(settings, model)
    if not np.any(theta > 0):
        theta = np.ones_like(theta)
    masks = [np.ones(len(s), dtype=bool) for s in segs]
    nmasks = [np.ones(len(s), dtype=bool) for s in nsegs]
    gate = float(stats.chi2.ppf(OUTLIER_QUANTILE, 3))
    fit_truth = truth_sd is None and fit_noise_params
    if truth_sd is not None:
        sd = np.asarray(truth_sd, dtype=np.float64)
        if sd.shape != (2,) or not np.all(np.isfinite(sd)) or np.any(sd < 0):
            raise CalibrationError(f"the truth's noise is {tuple(truth_sd)}; give two standard deviations, position "
                                   "(m) and heading (rad), both zero or more (for example 0.001,0.002).")
        truth_var = sd ** 2
    else:
        truth_var = np.array([1e-6, 1e-5]) if fit_truth else np.zeros(2)
    tg = [truth_noise_basis(r, s) for r, s in zip(runs, segs)]
    tn = [truth_noise_basis(r, s) for r, s in zip(runs, nsegs)]
    mount = np.zeros(3)
    sysfit: SystematicFit | None = None
    nfit: NoiseFit | None = None
    def both(geom: np.ndarray, mnt: np.ndarray):
        """Covariance bases and errors of the geometry and the noise segments in one pass per run."""
        gb, ge, nb, ne = [], [], [], []
        for r, sg, sn in zip(runs, segs, nsegs):
            joint = Segments(np.concatenate([sg.start, sn.start]), np.concatenate([sg.end, sn.end]), sg.length_m)
            bb = segment_covariance_basis(r, joint, geom, scheme, model)
            ee = segment_errors(r, joint, geom, scheme, mnt)
            k = len(sg)
            gb.append(bb[:k]), nb.append(bb[k:]), ge.append(ee[:k]), ne.append(ee[k:])
        return gb, ge, nb, ne

    gbases = [segment_covariance_basis(r, s, geometry, scheme, model) for r, s in zip(runs, segs)]
    for it in range(max(1, iterations)):
        if fit_geometry:
            covs = [_combine(b, theta, _truth_cov(tb, truth_var)) for b, tb in zip(gbases, tg)]
            sysfit = fit_systematic(runs, segs, geometry, scheme, covs, masks, fit_mount=fit_truth_offset,
                                    start_mount=mount)
            geometry, mount = sysfit.geometry, sysfit.mount
        gbases, gerrs, nbases, nerrs = both(geometry, mount)
        if fit_noise_params:
            e_all = np.concatenate([e[m] for e, m in zip(nerrs, nmasks)])
            b_all = np.concatenate([b[m] for b, m in zip(nbases, nmasks)])
            t_all = np.concatenate([b[m] for b, m in zip(tn, nmasks)])
            if fit_truth:
                nfit = fit_noise(e_all, np.concatenate([b_all, t_all], axis=1), model,
                                 start=np.concatenate([theta, truth_var]))
                theta, truth_var = nfit.theta[:len(theta)], nfit.theta[len(theta):]
            else:
                nfit = fit_noise(e_all, b_all, model, start=theta, extra_cov=_truth_cov(t_all, truth_var))
                theta = nfit.theta
        if not reject_outliers:
            if it > 0:
                break
            continue
        new_n = [_nees(e, _combine(b, theta, _truth_cov(tb, truth_var))) <= gate
                 for e, b, tb in zip(nerrs, nbases, tn)]
        new_g = [_nees(e, _combine(b, theta, _truth_cov(tb, truth_var))) <= gate
                 for e, b, tb in zip(gerrs, gbases, tg)]
        changed = any(np.any(x != y) for x, y in zip(new_n + new_g, nmasks + masks))
        nmasks, masks = new_n, new_g
        if not changed and it > 0:
            break
    n_out = int(sum((~m).sum() for m in masks))
    exc = excitation(runs, segs, sysfit.condition if sysfit is not None else math.nan)
    if fit_geometry and not exc.ok:
        raise ExcitationError(exc.message())
    if sysfit is not None and fit_truth_offset:
        notes.append(_mount_text(sysfit.mount, sysfit.mount_std_error, "was fitted and accounted for"))
    elif sysfit is not None:
        covs = [_combine(b, theta, _truth_cov(tb, truth_var)) for b, tb in zip(gbases, tg)]
        probe = fit_systematic(runs, segs, geometry, scheme, covs, masks, fit_mount=True)
        off, se = probe.mount, probe.mount_std_error
        if (math.hypot(off[0], off[1]) > max(MOUNT_NOTE_M, 4.0 * float(np.hypot(se[0], se[1])))
                or abs(off[2]) > max(MOUNT_NOTE_RAD, 4.0 * float(se[2]))):
            notes.append(_mount_text(off, se, "looks offset from base_link and was NOT accounted for; the "
                                     "fitted values are biased: calibrate again with --truth-offset"))
    if sysfit is not None:
        rel = sysfit.relative_std_error
        if rel[0] > LOOSE_RADIUS or rel[1] > LOOSE_RADIUS or rel[2] > LOOSE_TRACK:
            todo = "; ".join(exc.advice) if exc.advice else "drive longer with the same mix of straight runs and turns"
            notes.append(f"the fit is loose (standard errors {100 * rel[0]:.2f} %, {100 * rel[1]:.2f} % of the radii, "
                         f"{100 * rel[2]:.2f} % of the track); to tighten it: {todo}.")
    if nfit is not None:
        nfit = _finish_noise_fit(nfit, model, fit_truth, truth_var)
        notes += _noise_notes(nfit)
    if sysfit is not None:
        notes += correlation_notes(GEOMETRY_NAMES, sysfit.cov)
    if n_out:
        notes.append(f"{n_out} of {sum(len(s) for s in segs)} segments were set aside as outliers (NEES beyond the "
                     "chi-square 99.9 % quantile: slip or truth glitches).")
    values: dict[str, object] = {}
    if fit_geometry:
        values.update({k: float(v) for k, v in zip(GEOMETRY_NAMES, geometry)})
    if fit_noise_params:
        if model != settings.noise.model:
            values["noise.model"] = model
        values.update(noise_values(model, theta))
    after = settings.with_values(values)
    fb = [run_figures(r, settings, segment_length_m, s, mount, truth_var) for r, s in zip(runs, segs)]
    fa = [run_figures(r, after, segment_length_m, s, mount, truth_var) for r, s in zip(runs, segs)]
    hb = [run_figures(r, settings, segment_length_m, None, mount, truth_var) for r in holdout]
    ha = [run_figures(r, after, segment_length_m, None, mount, truth_var) for r in holdout]
    return CalibrationResult(settings, after, values, sysfit, nfit, exc, int(sum(len(s) for s in segs)), n_out,
                             notes, fb, fa, hb, ha, segment_length_m, mount)


def noise_parameter_names(model: str) -> tuple[str, ...]:
    """Names of the wheel noise parameters of ``model`` as reported."""
    return ("noise.k_left", "noise.k_right") if model == "per_wheel" else tuple(f"alpha{k}" for k in range(1, 5))


def _finish_noise_fit(nfit: NoiseFit, model: str, fit_truth: bool, truth_var: np.ndarray) -> NoiseFit:
    """Split a joint fit into the wheel parameters and the truth's noise, with names for the report."""
    a = len(noise_parameter_names(model))
    names = noise_parameter_names(model) + (TRUTH_NOISE_NAMES if fit_truth else ())
    sd = np.sqrt(np.maximum(np.asarray(truth_var, dtype=np.float64), 0.0))
    if fit_truth:
        var_se = nfit.std_error[a:]
        # delta method, d sd = d var / (2 sd), where sd is well above its own uncertainty; near zero
        # (a truth about as good as exact) the square root of the variance's standard error instead
        root = np.sqrt(np.maximum(var_se, 0.0))
        with np.errstate(divide="ignore", invalid="ignore"):
            sd_se = np.where(sd > root, var_se / (2.0 * sd), root)
    else:
        sd_se = np.full(2, math.nan)
    return NoiseFit(model, nfit.theta[:a], nfit.std_error[:a], nfit.nees_mean, nfit.n_segments, nfit.success,
                    nfit.cov, names, sd, sd_se, fit_truth)


def _noise_notes(nfit: NoiseFit) -> list[str]:
    out = correlation_notes(nfit.names, nfit.cov)
    for name, value, se in zip(nfit.names, nfit.theta, nfit.std_error):
        if math.isfinite(se) and value < 2.0 * se:
            out.append(f"{name} = {value:.3g} +- {se:.2g} is not distinguishable from zero on this drive: over "
                       "the noise segments the wheels add less error than the truth's own noise and the "
                       "other sources; lengthen --noise-segment-m or record a more precise truth to measure it.")
    if nfit.truth_fitted:
        exact = bool(np.all(nfit.truth_sd < 2.0 * nfit.truth_sd_se))
        out.append(f"the truth's own noise was fitted with the wheel noise: {1000 * nfit.truth_sd[0]:.2f} mm "
                   f"(+- {1000 * nfit.truth_sd_se[0]:.2f}) in x and y and {math.degrees(nfit.truth_sd[1]):.3f} deg "
                   f"(+- {math.degrees(nfit.truth_sd_se[1]):.3f}) in heading per pose"
                   + ("; that is no more than an exact truth would show" if exact else "")
                   + "; give it with --truth-sd when it is known.")
    return out


def _mount_text(mount: np.ndarray, se: np.ndarray, what: str) -> str:
    return (f"the ground truth's body frame sits at x {mount[0]:+.4f} m, y {mount[1]:+.4f} m, yaw "
            f"{math.degrees(mount[2]):+.3f} deg in base_link (+- {se[0]:.4f} m, {se[1]:.4f} m, "
            f"{math.degrees(se[2]):.3f} deg); it {what}.")
