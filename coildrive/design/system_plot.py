"""Plot of a system's rail current (matplotlib, Agg). Imported only for ``design
SYSTEM.toml --plot``; it draws the arrays of :func:`coildrive.design.system.rail_curves`
and computes nothing."""

from __future__ import annotations

from ..plotting import agg_figure, png_bytes


def plot_system(name: str, curves: list[dict]) -> bytes:
    """PNG bytes: for each rail, two panels -- the peaks staggered as designed and the
    peaks together -- with each channel's draw bound, the rail's total and the limit."""
    fig = agg_figure(figsize=(10, 3.8 * 2 * len(curves)), dpi=110)
    axes = fig.subplots(2 * len(curves), 1, squeeze=False)[:, 0]
    for r, rail in enumerate(curves):
        for j, view in enumerate(("staggered", "together")):
            ax = axes[2 * r + j]
            c = rail[view]
            ms = c["time_s"] * 1e3
            for ch, cur in zip(rail["channels"], c["channel_a"]):
                ax.plot(ms, cur, lw=0.9, label=ch)
            ax.plot(ms, c["total_a"], color="black", lw=1.8, label="rail (sum)")
            if rail["limit_a"] > 0:
                ax.axhline(rail["limit_a"], color="red", ls="--", lw=1.2,
                           label=f"limit {rail['limit_a']:.4g} A")
            lo, hi = c["supply_v"]
            how = (f"peaks {rail['stagger_ticks']} ticks apart" if view == "staggered"
                   else "peaks together")
            ax.set_title(f"{name}, rail {', '.join(rail['channels'])}: {how}\nbound <= "
                         f"{c['bound_a']:.4g} A; drawn at supply {lo:.4g}..{hi:.4g} V, coldest coils",
                         fontsize=9)
            ax.set_xlabel("time after the first switch-on (ms)")
            ax.set_ylabel("current bound (A)")
            ax.grid(True, alpha=0.3)
            ax.legend(fontsize=7, loc="upper left", bbox_to_anchor=(1.01, 1.0))
    return png_bytes(fig)
