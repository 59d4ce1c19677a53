"""SE(2) alignment against a reference library and against constructed transforms."""
from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.spatial.transform import Rotation

from wheel_dr.analysis.align import anchor_first, apply_se2, rotation_2d, umeyama_se2
from wheel_dr.core.errors import InputError


def _cloud(rng: np.random.Generator, n: int = 200) -> np.ndarray:
    return rng.uniform(-5.0, 5.0, size=(n, 2)) * np.array([3.0, 1.0])


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_umeyama_rotation_matches_scipy_align_vectors(seed: int) -> None:
    """Umeyama (TPAMI 1991) without scale and scipy.spatial.transform.Rotation.align_vectors (Kabsch)
    solve the same least-squares rotation on the same centred points (reference library check)."""
    rng = np.random.default_rng(seed)
    src = _cloud(rng)
    yaw = rng.uniform(-math.pi, math.pi)
    dst = src @ rotation_2d(yaw).T + np.array([4.0, -2.5]) + rng.normal(0.0, 0.3, size=src.shape)
    rot, t, yaw_est = umeyama_se2(src, dst)
    a = np.column_stack([dst - dst.mean(axis=0), np.zeros(len(dst))])
    b = np.column_stack([src - src.mean(axis=0), np.zeros(len(src))])
    ref, _ = Rotation.align_vectors(a, b)          # rotation taking b onto a
    ref_m = ref.as_matrix()
    assert np.allclose(ref_m[:2, :2], rot, atol=1e-9)
    assert abs(ref_m[2, 2] - 1.0) < 1e-9           # a rotation about z, as in the plane
    assert math.isclose(yaw_est, math.atan2(rot[1, 0], rot[0, 0]))
    # translation: Umeyama eq. (41), t = mu_dst - R mu_src
    assert np.allclose(t, dst.mean(axis=0) - rot @ src.mean(axis=0))


def test_umeyama_recovers_an_exact_rigid_transform() -> None:
    """Noise-free points under a known rotation and translation give them back (to round-off)."""
    rng = np.random.default_rng(7)
    src = _cloud(rng, 50)
    yaw = 2.7
    t_true = np.array([-1.0, 3.0])
    dst = src @ rotation_2d(yaw).T + t_true
    rot, t, yaw_est = umeyama_se2(src, dst)
    assert math.isclose(yaw_est, yaw, abs_tol=1e-12)
    assert np.allclose(t, t_true, atol=1e-12)
    out, _ = apply_se2(rot, t, src)
    assert np.allclose(out, dst, atol=1e-12)


def test_umeyama_never_returns_a_reflection() -> None:
    """On mirrored points the best proper rotation has det +1 (Umeyama 1991, the S = diag(1, -1) case)."""
    rng = np.random.default_rng(3)
    src = _cloud(rng, 100)
    dst = src * np.array([1.0, -1.0])
    rot, _, _ = umeyama_se2(src, dst)
    assert math.isclose(np.linalg.det(rot), 1.0, abs_tol=1e-12)
    # an unconstrained orthogonal fit would be the reflection itself, with a smaller residual
    assert not np.allclose(rot, np.diag([1.0, -1.0]))


def test_umeyama_on_collinear_points() -> None:
    """A straight drive (rank-1 cross-covariance) still gives the rotation between the two lines."""
    s = np.linspace(0.0, 10.0, 30)
    src = np.column_stack([s, np.zeros_like(s)])
    dst = src @ rotation_2d(0.4).T + np.array([1.0, 1.0])
    _, t, yaw_est = umeyama_se2(src, dst)
    assert math.isclose(yaw_est, 0.4, abs_tol=1e-12)
    assert np.allclose(t, [1.0, 1.0], atol=1e-12)


def test_anchor_first_puts_the_first_pose_on_the_truth() -> None:
    est = np.array([[1.0, 2.0, 0.3], [2.0, 2.5, 0.5], [3.0, 2.0, -0.2]])
    truth = np.array([[-4.0, 1.0, 2.0], [0.0, 0.0, 0.0], [0.0, 0.0, 0.0]])
    rot, t, angle = anchor_first(est, truth)
    xy, yaw = apply_se2(rot, t, est[:, :2], est[:, 2])
    assert np.allclose(xy[0], truth[0, :2], atol=1e-12)
    assert math.isclose(yaw[0], truth[0, 2], abs_tol=1e-12)
    assert math.isclose(angle, 1.7, abs_tol=1e-12)
    # distances between poses are kept (rigid transform)
    assert np.allclose(np.linalg.norm(np.diff(xy, axis=0), axis=1), np.linalg.norm(np.diff(est[:, :2], axis=0), axis=1))


def test_bad_inputs_raise_one_clear_error() -> None:
    with pytest.raises(InputError, match="at least 2"):
        umeyama_se2(np.zeros((1, 2)), np.zeros((1, 2)))
    with pytest.raises(InputError, match="as many"):
        umeyama_se2(np.zeros((3, 2)), np.zeros((4, 2)))
    with pytest.raises(InputError, match="spread"):
        umeyama_se2(np.ones((5, 2)), np.ones((5, 2)))
