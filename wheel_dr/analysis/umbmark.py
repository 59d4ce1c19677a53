"""UMBmark square test (Borenstein & Feng 1996): systematic odometry errors from return-position errors.

Borenstein & Feng, "Measurement and correction of systematic odometry errors in mobile robots",
IEEE Transactions on Robotics and Automation 12(6):869-880, 1996. The base drives a square of
side L by its own odometry (straight legs, 90 degree turns on the spot) n times clockwise and n
times counter-clockwise; after each run the real end position is measured against the start.

Frame and signs used here (REP 103): x along the base's heading at the start (the first leg),
y to its left; an error is the measured end position minus the start position, in metres. With
the centres of gravity (x_cw, y_cw), (x_ccw, y_ccw) of the two directions' errors:

    E_max,syst = max(|cg_cw|, |cg_ccw|)
    alpha = (x_cw + x_ccw) / (-4 L)      turn error per corner (rad), > 0: the base under-turns
    beta  = (x_cw - x_ccw) / (-4 L)      heading change per leg from unequal wheels (rad), > 0: curves left
    R     = (L / 2) / sin(beta / 2)      radius of the curved legs
    E_d   = D_R / D_L = (R + b/2) / (R - b/2)
    E_b   = (pi / 2) / (pi / 2 - alpha),  b_actual = E_b b_nominal

and the corrected wheels c_L = 2 / (E_d + 1), c_R = 2 / (1 / E_d + 1) (the mean diameter kept).
These formulas were written from memory; their signs were confirmed in this frame by simulation
(``simulate_square_test``: known E_d and E_b in, the same numbers out, see
test/test_umbmark.py). They are first-order in the errors, as in the paper: with errors as large
as the demo cart's (E_d about 0.99), the product of the two errors biases E_b by tens of percent
of its deviation. ``refine`` therefore also solves the square's kinematics exactly (least squares
of the simulated centres of gravity against the measured ones, started from the paper's values);
the corrected geometry is taken from the refined figures, and both are reported.
"""
from __future__ import annotations

import csv
import io
import math
from dataclasses import dataclass
from typing import Sequence

import numpy as np

from scipy import optimize

from ..core import errors as _errors
from ..core.motion import body_increment, integrate

__all__ = [
    "SquareTestError",
    "SquareErrors",
    "UmbmarkResult",
    "umbmark",
    "corrected_geometry",
    "parse_square_csv",
    "square_csv_text",
    "square_wheel_angles",
    "simulate_square_test",
    "CSV_COLUMNS",
    "refine",
]

CSV_COLUMNS = ("direction", "x_m", "y_m")


SquareTestError = _errors.SquareTestError  # defined with every other error in wheel_dr.core.errors


@dataclass
class SquareErrors:
    """Return-position errors (m) of the runs, (n, 2) arrays of x, y per direction (frame: see module)."""

    cw: np.ndarray
    ccw: np.ndarray


@dataclass
class UmbmarkResult:
    """Centres of gravity (m), E_max,syst (m), alpha and beta (rad), R (m), E_d and E_b (ratios)."""

    side_m: float
    track_width_m: float
    cg_cw: tuple[float, float]
    cg_ccw: tuple[float, float]
    e_max_syst_m: float
    alpha_rad: float
    beta_rad: float
    radius_m: float
    e_d: float
    e_b: float
    n_cw: int
    n_ccw: int
    e_d_refined: float = math.nan
    e_b_refined: float = math.nan

    @property
    def e_d_best(self) -> float:
        """The refined E_d when available, else the paper's first-order one."""
        return self.e_d if math.isnan(self.e_d_refined) else self.e_d_refined

    @property
    def e_b_best(self) -> float:
        """The refined E_b when available, else the paper's first-order one."""
        return self.e_b if math.isnan(self.e_b_refined) else self.e_b_refined


def umbmark(errors: SquareErrors, side_m: float, track_width_m: float) -> UmbmarkResult:
    """E_max,syst, E_d and E_b from the square test's return-position errors (Borenstein & Feng 1996)."""
    if not (side_m > 0 and math.isfinite(side_m)):
        raise SquareTestError(f"the square's side is {side_m:g} m; give a positive side length with --side.")
    cw = np.asarray(errors.cw, dtype=np.float64).reshape(-1, 2)
    ccw = np.asarray(errors.ccw, dtype=np.float64).reshape(-1, 2)
    if len(cw) == 0 or len(ccw) == 0:
        missing = "clockwise (cw)" if len(cw) == 0 else "counter-clockwise (ccw)"
        raise SquareTestError(f"the square test has no {missing} runs; drive the square both ways "
                              "(5 runs each in the paper) and enter every run.")
    gcw, gccw = cw.mean(axis=0), ccw.mean(axis=0)
    e_max = float(max(np.hypot(*gcw), np.hypot(*gccw)))
    lsq = side_m
    alpha = float((gcw[0] + gccw[0]) / (-4.0 * lsq))
    beta = float((gcw[0] - gccw[0]) / (-4.0 * lsq))
    b = track_width_m
    if beta == 0.0:
        radius, e_d = math.inf, 1.0
    else:
        radius = (lsq / 2.0) / math.sin(beta / 2.0)
        e_d = (radius + b / 2.0) / (radius - b / 2.0)
    if not (0.0 < e_d < math.inf) or alpha >= math.pi / 2:
        raise SquareTestError("the square-test errors are too large for the method (a metre-scale miss on a "
                              f"{lsq:g} m square); check the signs and units of the CSV (metres, x along the "
                              "first leg, y to the left).")
    e_b = (math.pi / 2.0) / (math.pi / 2.0 - alpha)
    return UmbmarkResult(lsq, b, (float(gcw[0]), float(gcw[1])), (float(gccw[0]), float(gccw[1])), e_max,
                         alpha, beta, float(radius), float(e_d), float(e_b), len(cw), len(ccw))


def _apply(e_d: float, e_b: float, left_radius_m: float, right_radius_m: float,
           track_width_m: float) -> tuple[float, float, float]:
    c_l = 2.0 / (e_d + 1.0)
    c_r = 2.0 / (1.0 / e_d + 1.0)
    return left_radius_m * c_l, right_radius_m * c_r, track_width_m * e_b


def corrected_geometry(result: UmbmarkResult, left_radius_m: float, right_radius_m: float,
                       track_width_m: float, first_order: bool = False) -> tuple[float, float, float]:
    """Radii and track corrected by E_d and E_b: r_L c_L, r_R c_R, b E_b with c_L = 2 / (E_d + 1),
    c_R = 2 / (1 / E_d + 1) (Borenstein & Feng 1996, from memory; keeps the mean of equal radii).
    Uses the refined E_d, E_b unless ``first_order`` or they are missing."""
    e_d = result.e_d if first_order else result.e_d_best
    e_b = result.e_b if first_order else result.e_b_best
    return _apply(e_d, e_b, left_radius_m, right_radius_m, track_width_m)


def refine(result: UmbmarkResult, left_radius_m: float, right_radius_m: float,
           track_width_m: float) -> UmbmarkResult:
    """``result`` with E_d and E_b solved exactly: the (E_d, E_b) whose simulated square test
    (``simulate_square_test`` without noise, geometry ``corrected_geometry`` of the nominal one)
    ends at the measured centres of gravity, by least squares (scipy.optimize.least_squares)."""
    nominal = (left_radius_m, right_radius_m, track_width_m)
    target = np.array(result.cg_cw + result.cg_ccw)

    def residual(p: np.ndarray) -> np.ndarray:
        true = _apply(1.0 + p[0], 1.0 + p[1], *nominal)
        e = simulate_square_test(result.side_m, nominal, true, runs=1, steps_per_leg=50)
        return np.concatenate([e.cw[0], e.ccw[0]]) - target

    fit = optimize.least_squares(residual, np.array([result.e_d - 1.0, result.e_b - 1.0]), x_scale=1e-2,
                                 xtol=1e-12, ftol=1e-12)
    if not fit.success or not np.all(np.isfinite(fit.x)) or np.any(np.abs(fit.x) > 0.5):
        return result
    out = UmbmarkResult(**{**result.__dict__})
    out.e_d_refined, out.e_b_refined = float(1.0 + fit.x[0]), float(1.0 + fit.x[1])
    return out


def parse_square_csv(text: str, source: str = "square-test CSV") -> SquareErrors:
    """Runs from CSV text with the header ``direction,x_m,y_m`` (one row per run, direction cw or ccw,
    x_m and y_m the measured end position minus the start, metres, x along the first leg, y left;
    lines starting with # are comments)."""
    rows = [ln for ln in text.splitlines() if ln.strip() and not ln.lstrip().startswith("#")]
    if not rows:
        raise SquareTestError(f"{source} is empty; write a header '{','.join(CSV_COLUMNS)}' and one row per run.")
    reader = csv.DictReader(io.StringIO("\n".join(rows)))
    header = [h.strip().lower() for h in (reader.fieldnames or [])]
    if any(c not in header for c in CSV_COLUMNS):
        raise SquareTestError(f"{source} has columns {', '.join(header) or 'none'}; its header must be "
                              f"'{','.join(CSV_COLUMNS)}'.")
    out: dict[str, list[tuple[float, float]]] = {"cw": [], "ccw": []}
    for n, row in enumerate(reader, start=2):
        r = {k.strip().lower(): (v or "").strip() for k, v in row.items() if k is not None}
        d = r["direction"].lower()
        if d not in out:
            raise SquareTestError(f"{source} row {n}: direction is '{r['direction']}'; write cw or ccw.")
        try:
            x, y = float(r["x_m"]), float(r["y_m"])
        except ValueError:
            raise SquareTestError(f"{source} row {n}: x_m and y_m must be numbers in metres (got "
                                  f"'{r['x_m']}', '{r['y_m']}').") from None
        if not (math.isfinite(x) and math.isfinite(y)):
            raise SquareTestError(f"{source} row {n}: x_m and y_m must be finite numbers in metres.")
        out[d].append((x, y))
    return SquareErrors(np.array(out["cw"]).reshape(-1, 2), np.array(out["ccw"]).reshape(-1, 2))


def square_csv_text(errors: SquareErrors, comment: str = "") -> str:
    """The CSV text ``parse_square_csv`` reads (for the synthetic test, or as a template)."""
    lines = [f"# {ln}" for ln in comment.splitlines()] if comment else []
    lines.append(",".join(CSV_COLUMNS))
    for name, arr in (("cw", errors.cw), ("ccw", errors.ccw)):
        lines += [f"{name},{x:.5f},{y:.5f}" for x, y in np.asarray(arr).reshape(-1, 2)]
    return "\n".join(lines) + "\n"


def square_wheel_angles(direction: str, side_m: float, left_radius_m: float, right_radius_m: float,
                        track_width_m: float, steps_per_leg: int = 400) -> tuple[np.ndarray, np.ndarray]:
    """Wheel angle increments (rad) that odometry with the given (nominal) geometry reads as a perfect
    square: four legs of ``side_m`` each followed by a 90 degree turn on the spot (left for ccw)."""
    if direction not in ("cw", "ccw"):
        raise SquareTestError(f"direction '{direction}' is not cw or ccw.")
    sgn = 1.0 if direction == "ccw" else -1.0
    n = steps_per_leg
    straight_l = np.full(n, side_m / left_radius_m / n)
    straight_r = np.full(n, side_m / right_radius_m / n)
    arc = (math.pi / 2.0) * (track_width_m / 2.0)           # each wheel's travel for a quarter turn
    turn_l = np.full(n, -sgn * arc / left_radius_m / n)
    turn_r = np.full(n, sgn * arc / right_radius_m / n)
    return np.tile(np.concatenate([straight_l, turn_l]), 4), np.tile(np.concatenate([straight_r, turn_r]), 4)


def simulate_square_test(side_m: float, nominal: Sequence[float], true: Sequence[float], runs: int = 5,
                         k_left_m: float = 0.0, k_right_m: float = 0.0, measure_sd_m: float = 0.0,
                         seed: int = 0, steps_per_leg: int = 400) -> SquareErrors:
    """Drive the square test in simulation: the base follows its odometry with the ``nominal``
    (left radius, right radius, track) while it really moves with the ``true`` ones; each wheel's
    travel gets random error of variance k |ds| per step (per-wheel model) and each measured end
    position Gaussian error of ``measure_sd_m``. Returns the return-position errors per direction.

    The real motion is integrated with the estimator's exact (constant-curvature) scheme.
    """
    rng = np.random.default_rng(seed)
    rl_n, rr_n, b_n = nominal
    rl_t, rr_t, b_t = true
    out = {}
    for direction in ("cw", "ccw"):
        dphi_l, dphi_r = square_wheel_angles(direction, side_m, rl_n, rr_n, b_n, steps_per_leg)
        ends = []
        for _ in range(runs):
            dl, dr = rl_t * dphi_l, rr_t * dphi_r
            if k_left_m > 0:
                dl = dl + rng.standard_normal(len(dl)) * np.sqrt(k_left_m * np.abs(dl))
            if k_right_m > 0:
                dr = dr + rng.standard_normal(len(dr)) * np.sqrt(k_right_m * np.abs(dr))
            ds, dth = body_increment(dl, dr, b_t)
            x, y, _, _, _, _ = integrate(ds, dth, "exact")
            ends.append((x[-1], y[-1]))
        end = np.array(ends)
        if measure_sd_m > 0:
            end = end + rng.standard_normal(end.shape) * measure_sd_m
        out[direction] = end
    return SquareErrors(out["cw"], out["ccw"])
