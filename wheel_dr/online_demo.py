"""The online self-calibration part of ``wheel-dr demo``: the Quokka's rounds while a tyre softens, run
through the core with online calibration on, as a report section (invented demo data)."""
from __future__ import annotations

from pathlib import Path

import numpy as np

__all__ = ["online_demo_section"]


def online_demo_section(config_dir: Path, seed: int = 2027) -> tuple[str, str, list]:
    """Simulate ``softening_round_scenario``, run it with config/demo_corrected.yaml and online calibration
    on, and return the report section (about two seconds)."""
    from .core import run
    from .demo.scenarios import SOFTENING_FRACTION, softening_round_scenario
    from .params import load_settings
    from .report.online_section import online_section
    from .sim import simulate

    sc = softening_round_scenario()
    sim = simulate(sc, seed)
    settings = load_settings(config_dir / "demo_corrected.yaml").replace(**{"online_calibration.enabled": True})
    res = run(sim.joint_samples(), settings, gyro_z_radps=sim.gyro_z_radps).online
    # truth per interval: the left radius as the simulator changed it
    rc = sc.radius_changes[0]
    t = (res.stamp_ns - sim.stamp_ns[0]) * 1e-9
    left = sc.true_left_radius_m * (1.0 + rc.fraction * np.clip((t - rc.start_s) / rc.ramp_s, 0.0, 1.0))
    right = sc.true_right_radius_m
    truth_ratio = right / left
    truth_track = sc.true_track_m / (0.5 * (left + right))
    notes = [f"The Quokka drives its night round four times ({sim.t_s[-1] / 60.0:.1f} min) with "
             f"the corrected geometry; from the end of the first lap its left tyre softens by "
             f"{-100 * SOFTENING_FRACTION:.1f} % over two minutes (invented demo). The node, with "
             "online_calibration.enabled, sees the change through the gyro and alerts; the mean radius (scale) "
             "is not observable from a gyro and is kept."]
    return online_section(res, notes, truth_ratio, truth_track)
