"""Plot of a hold tuning's trade-off (matplotlib, Agg). Imported only for ``tune --plot``."""

from __future__ import annotations

import numpy as np

from ..plotting import agg_figure, png_bytes
from .sweep import TuneResult


def plot_tune(r: TuneResult) -> bytes:
    """PNG bytes: the trade-off between PWM frequency, ripple and loss.

    For the lowest hold level at every swept frequency (each point is one compare
    value, so the quantisation to whole counts shows as a fine saw-tooth): the objective
    -- all hold power drawn from the supply at the worst corner (feasible settings
    green, infeasible grey) with the tie band above the least, switch conduction and
    switching loss, and ripple against its limit. The recommendation is marked.
    """
    fg = r.figures
    base = r.level == r.level.min()
    order = np.argsort(r.frequency[base])
    f = r.frequency[base][order] / 1e3
    pick = lambda a: a[base][order]  # noqa: E731
    total, ripple, feas = pick(fg.total_power), pick(fg.ripple), pick(r.feasible)
    cond, swl = pick(fg.conduction_power), pick(fg.switching_power)

    fig = agg_figure(figsize=(9, 8), dpi=110)
    ax1 = fig.add_subplot(3, 1, 1)
    ax2 = fig.add_subplot(3, 1, 2, sharex=ax1)
    ax3 = fig.add_subplot(3, 1, 3, sharex=ax1)
    def dots(ax, x, y, colour, label):
        ax.plot(x, y, ".", ms=3, color=colour)
        ax.plot([], [], ".", ms=6, color=colour, label=label)  # legend entry at a readable size
    dots(ax1, f[feas], total[feas], "tab:green", "feasible")
    if np.any(~feas):
        dots(ax1, f[~feas], total[~feas], "tab:gray", "infeasible")
    dots(ax2, f, cond * 1e3, "tab:blue", "switch conduction")
    if r.switching_estimated:
        dots(ax2, f, swl * 1e3, "tab:red", "switching (rise/fall times)")
        dots(ax2, f, (cond + swl) * 1e3, "k", "switch total")
    ax3.plot(f, ripple * 1e3, color="tab:purple", lw=0.9, label="ripple p-p")
    ax3.axhline(r.max_ripple * 1e3, color="tab:purple", ls="--", lw=0.8, label="ripple limit")
    if r.order.size:
        least = float(r.figures.total_power[r.order].min())
        ax1.axhline(least * (1 + r.options.tie_band), color="tab:green", ls=":", lw=0.8,
                    label=f"tie band ({r.options.tie_band * 100:g} % above the least)")
    rec = r.recommendation
    if rec is not None:
        fk = rec.frequency_hz / 1e3
        ax1.plot([fk], [rec.total_power_w], "o", color="tab:orange", ms=7,
                 label=f"recommended {rec.frequency_hz:.0f} Hz")
        ax2.plot([fk], [rec.switch_power_w * 1e3], "o", color="tab:orange", ms=7)
        ax3.plot([fk], [rec.ripple_a * 1e3], "o", color="tab:orange", ms=7)
    ax1.set_ylabel("from the supply [W]")
    ax2.set_ylabel("switch power [mW]")
    ax3.set_ylabel("ripple [mA]")
    ax3.set_xlabel("PWM frequency [kHz]")
    for ax in (ax1, ax2, ax3):
        ax.grid(alpha=0.3)
        ax.legend(fontsize=7, loc="best")
    ax1.set_title(f"{r.drive.name} on {r.drive.board.name}: hold at {r.level.min():.4g} A, "
                  f"worst case over {len(r.grid)} corners")
    return png_bytes(fig)
