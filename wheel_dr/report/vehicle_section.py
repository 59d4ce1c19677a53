"""A report section introducing a wheel-table vehicle: its wheels (nominal against true) and which wheel disagrees.

Built from plain arrays (no simulator or bag types), with the page's own table and figure helpers,
and returned as (title, HTML fragment, [(figure, caption), ...]) for ``write_report(extra_sections=...)``.
The figure shows each encoder wheel's whitened residual of the rolling equations
(``core.drive.WheelTable.residual``: the measured travel against the travel the fitted body
increment implies, over its standard deviation), with the true slip intervals shaded: a wheel
that slips stands out from the others on bases with more encoders than degrees of freedom.
"""
from __future__ import annotations

import html
from typing import Sequence

import numpy as np

from .plots import PALETTE, _style, new_figure
from .style import table_html

__all__ = ["table_vehicle_section"]


def _mm(v: float) -> str:
    return f"{1000.0 * v:.1f}"


def table_vehicle_section(title: str, intro: str, nominal, true, t_s: np.ndarray, residual: np.ndarray,
                          slip_spans_s: Sequence[tuple[float, float, str]] = (), recording: str = "",
                          smooth_s: float = 0.5):
    """(title, fragment, figures) for a vehicle given by its ``nominal`` and ``true`` WheelTables.

    ``t_s`` (M,) step end times, ``residual`` (M, E) whitened residuals per encoder wheel (table
    order), ``slip_spans_s`` (start s, end s, joint) true slip; ``recording`` names the bag whose
    comparison sections show the replay; the figure plots each residual's ``smooth_s`` moving mean."""
    rows = []
    for i, joint in enumerate(nominal.wheel_joints):
        steer = nominal.steer_joints[i]
        rows.append([html.escape(joint or "(no encoder)"), html.escape(steer or "-"),
                     f"{_mm(nominal.x[i])} / {_mm(true.x[i])}", f"{_mm(nominal.y[i])} / {_mm(true.y[i])}",
                     f"{_mm(nominal.radius[i])} / {_mm(true.radius[i])}",
                     f"{np.degrees(nominal.roller[i]):.0f}", f"{1000.0 * true.offset[i]:.1f}"])
    table = table_html(["spin joint", "steering joint", "x mm (nominal / true)", "y mm", "radius mm",
                        "roller deg", "true steer offset mrad"], rows,
                       caption=f"The {nominal.kind} table: the parameters file and URDF carry the nominal values, "
                       "the simulator drives the true ones (invented).", text_columns=(0, 1), raw=True)
    where = (f" The replay with the example parameters is ranked and plotted above as recording "
             f"<b>{html.escape(recording)}</b>." if recording else "")
    frag = f'<p class="note">{html.escape(intro)}{where}</p>' + table
    fig = new_figure(7.2, 3.6)
    ax = fig.add_subplot(1, 1, 1)
    _style(ax)
    for t0, t1, _ in slip_spans_s:
        ax.axvspan(t0, t1, color="#e09f3e", alpha=0.25, linewidth=0)
    names = [j for j in nominal.wheel_joints if j]
    res = np.asarray(residual, dtype=np.float64)
    t = np.asarray(t_s, dtype=np.float64)
    step = float(np.median(np.diff(t))) if len(t) > 1 else 1.0
    width = max(1, int(round(smooth_s / step)))
    kernel = np.ones(width) / width
    for c, name in enumerate(names):
        ax.plot(t, np.convolve(res[:, c], kernel, mode="same"), linewidth=0.9, color=PALETTE[c % len(PALETTE)],
                label=name)
    ax.set_xlabel("time (s)", fontsize=9)
    ax.set_ylabel(f"whitened residual, {smooth_s:g} s mean", fontsize=9)
    ax.legend(fontsize=7, loc="upper right", frameon=False)
    spans = ", ".join(sorted({j for _, _, j in slip_spans_s}))
    std = np.asarray(nominal.standard, dtype=bool)
    ang = np.asarray(nominal.mount)[std] + 0.5 * np.pi
    rows_c = np.column_stack([np.cos(ang), np.sin(ang), np.sin(ang) * nominal.x[std] - np.cos(ang) * nominal.y[std]])
    dof = 3 - (int(np.linalg.matrix_rank(rows_c, tol=1e-9)) if len(rows_c) else 0)   # given the steering
    redundant = len(names) - dof
    caption = (f"Rolling-equation residual of each encoder wheel (nominal table, {smooth_s:g} s moving mean); "
               f"shaded: the true slip{f' of {spans}' if spans else ''}. With {len(names)} encoder wheels for "
               f"{dof} degree(s) of freedom the residuals span {max(redundant, 0)} direction(s): a slip moves them "
               "together, so it is seen but not always pinned to one wheel; the small wiggles elsewhere are wheel "
               "noise and the nominal table's geometry error.")
    return title, frag, [(fig, caption)]
