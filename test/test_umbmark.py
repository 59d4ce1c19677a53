"""UMBmark square test (Borenstein & Feng, IEEE T-RA 12(6), 1996): formulas, signs, corrections, CSV input.

The formulas in wheel_dr/analysis/umbmark.py were written from memory (see REFERENCES.md); these
tests confirm their sign conventions by simulation: a base with known E_d and E_b drives the square
by its nominal odometry (``simulate_square_test``), and the method must give the same numbers back.
"""
from __future__ import annotations

import math

import numpy as np
import pytest

from wheel_dr.analysis.umbmark import (SquareErrors, SquareTestError, corrected_geometry, parse_square_csv,
                                       refine, simulate_square_test, square_csv_text, square_wheel_angles,
                                       umbmark)
from wheel_dr.core.motion import body_increment, integrate

R_NOM, B_NOM, SIDE = 0.0825, 0.412, 4.0   # demo cart's nominal geometry; the paper's 4 m square


def true_geometry(e_d: float, e_b: float) -> tuple[float, float, float]:
    """Equal nominal radii, mean radius kept, D_R / D_L = e_d, b_true = e_b b_nominal."""
    left = 2.0 * R_NOM / (e_d + 1.0)
    return left, left * e_d, B_NOM * e_b


def test_nominal_square_closes_under_nominal_odometry() -> None:
    """The wheel angles of the test read as a closed square under the nominal geometry (sanity of the driver)."""
    for direction in ("cw", "ccw"):
        dl, dr = square_wheel_angles(direction, SIDE, R_NOM, R_NOM, B_NOM)
        ds, dth = body_increment(R_NOM * dl, R_NOM * dr, B_NOM)
        x, y, th, _, _, _ = integrate(ds, dth, "exact")
        assert abs(x[-1]) < 1e-9 and abs(y[-1]) < 1e-9
        assert th[-1] == pytest.approx((1 if direction == "ccw" else -1) * 2 * math.pi, abs=1e-9)
        # a quarter of the way the base is at the first corner, on +x (first leg along the start heading)
        assert x[len(x) // 8 - 1] == pytest.approx(SIDE, abs=1e-9)


@pytest.mark.parametrize("e_d", [0.998, 1.0015])
def test_pure_wheel_diameter_error_comes_back(e_d: float) -> None:
    """Known E_d in, the same E_d out from the paper's first-order formulas (signs confirmed by simulation)."""
    res = umbmark(simulate_square_test(SIDE, (R_NOM, R_NOM, B_NOM), true_geometry(e_d, 1.0), runs=1), SIDE, B_NOM)
    assert (res.e_d - 1.0) == pytest.approx(e_d - 1.0, rel=0.02)
    # a right wheel larger than the left curves the straight legs left: beta > 0 (REP 103 yaw sign)
    assert math.copysign(1.0, res.beta_rad) == math.copysign(1.0, e_d - 1.0)
    assert abs(res.e_b - 1.0) < 0.2 * abs(e_d - 1.0) + 1e-9


@pytest.mark.parametrize("e_b", [0.99, 1.012])
def test_pure_track_error_comes_back(e_b: float) -> None:
    """Known E_b in, the same E_b out; a wider real track under-turns every corner (alpha > 0)."""
    res = umbmark(simulate_square_test(SIDE, (R_NOM, R_NOM, B_NOM), true_geometry(1.0, e_b), runs=1), SIDE, B_NOM)
    assert (res.e_b - 1.0) == pytest.approx(e_b - 1.0, rel=0.03)
    assert math.copysign(1.0, res.alpha_rad) == math.copysign(1.0, e_b - 1.0)
    assert res.e_d == pytest.approx(1.0, abs=1e-6)
    # type B errors mirror between directions: same x, opposite y (Borenstein & Feng 1996)
    assert res.cg_cw[0] == pytest.approx(res.cg_ccw[0], rel=1e-6)
    assert res.cg_cw[1] == pytest.approx(-res.cg_ccw[1], rel=1e-6)


def test_refined_solution_recovers_demo_sized_errors_and_corrects_geometry() -> None:
    """With both errors as large as the demo cart's, the first-order figures are biased; the refined
    (exact square kinematics) ones and the corrected geometry come back to the truth."""
    e_d, e_b = 0.9915, 1.0158
    truth = true_geometry(e_d, e_b)
    errors = simulate_square_test(SIDE, (R_NOM, R_NOM, B_NOM), truth, runs=5, k_left_m=1e-6, k_right_m=1e-6,
                                  measure_sd_m=0.002, seed=4)
    first = umbmark(errors, SIDE, B_NOM)
    res = refine(first, R_NOM, R_NOM, B_NOM)
    assert res.e_d_refined == pytest.approx(e_d, abs=3e-4)
    assert res.e_b_refined == pytest.approx(e_b, abs=1e-3)
    assert abs(first.e_b - e_b) > abs(res.e_b_refined - e_b)
    left, right, track = corrected_geometry(res, R_NOM, R_NOM, B_NOM)
    assert left == pytest.approx(truth[0], rel=2e-4)
    assert right == pytest.approx(truth[1], rel=2e-4)
    assert track == pytest.approx(truth[2], rel=1e-3)
    # driving the test again with the corrected geometry as the odometry leaves a far smaller E_max,syst
    again = umbmark(simulate_square_test(SIDE, (left, right, track), truth, runs=1), SIDE, track)
    assert again.e_max_syst_m < 0.05 * first.e_max_syst_m


def test_e_max_syst_is_the_larger_centre_of_gravity_distance() -> None:
    """E_max,syst = max(r_cg,cw, r_cg,ccw) (Borenstein & Feng 1996), averaged over the runs per direction."""
    errors = SquareErrors(np.array([[0.10, 0.00], [0.14, 0.06]]), np.array([[-0.03, 0.04], [-0.03, 0.04]]))
    res = umbmark(errors, SIDE, B_NOM)
    assert res.cg_cw == pytest.approx((0.12, 0.03))
    assert res.e_max_syst_m == pytest.approx(math.hypot(0.12, 0.03))


def test_csv_round_trip_and_bad_input() -> None:
    errors = simulate_square_test(SIDE, (R_NOM, R_NOM, B_NOM), true_geometry(1.002, 1.005), runs=3, seed=1)
    back = parse_square_csv(square_csv_text(errors, "demo"))
    assert np.allclose(back.cw, errors.cw, atol=1e-5) and np.allclose(back.ccw, errors.ccw, atol=1e-5)
    with pytest.raises(SquareTestError, match="header"):
        parse_square_csv("dir,x,y\ncw,0.1,0.2\n")
    with pytest.raises(SquareTestError, match="row 3"):
        parse_square_csv("direction,x_m,y_m\ncw,0.1,0.2\nsideways,0.1,0.2\n")
    with pytest.raises(SquareTestError, match="counter-clockwise"):
        umbmark(parse_square_csv("direction,x_m,y_m\ncw,0.1,0.2\n"), SIDE, B_NOM)
    with pytest.raises(SquareTestError, match="numbers"):
        parse_square_csv("direction,x_m,y_m\nccw,abc,0.2\n")
