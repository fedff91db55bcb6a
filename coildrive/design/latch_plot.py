"""PNG of a latching coil's pulses (imported only for ``design --plot``; draws, computes
nothing)."""

from __future__ import annotations

from ..plotting import agg_figure, png_bytes
from .latch import LatchDesign


def plot_latch(d: LatchDesign, waveforms: dict) -> bytes:
    """The set pulse and the reset pulse side by side, each from its start (ms), at each
    operating point of ``waveforms`` (label -> LatchWaveform), with the current each must
    reach and carry (the reset's as a magnitude); PNG bytes."""
    fig = agg_figure(figsize=(10, 4.2), dpi=110)
    by = {p.name: p for p in d.latch.pulses}
    for k, name in enumerate(("set", "reset")):
        ax = fig.add_subplot(1, 2, k + 1)
        p = by[name]
        for label, w in waveforms.items():
            t0 = w.events[name]
            end = w.events[f"{name}_zero"]
            cols = w.columns
            current = cols["current_a"] if name == "set" or "reset_current_a" not in cols else cols["reset_current_a"]
            keep = (w.time >= t0) & (w.time <= end)
            ax.plot((w.time[keep] - t0) * 1e3, abs(current[keep]), label=label)
        ax.axhline(p.current_a, color="0.4", ls="--", lw=0.8, label=f"{name} current {p.current_a:.3g} A")
        ax.axhline(p.force_current_a, color="0.4", ls=":", lw=0.8,
                   label=f"x {p.current_margin:g} by the shortest pulse")
        ax.axvline(p.time_s * 1e3, color="k", lw=0.8)
        ax.set_title(f"{name} pulse {p.time_s * 1e3:.4g} ms ({p.ticks} ticks), {p.switches}", fontsize=9)
        ax.set_xlabel("time from the pulse's start (ms)")
        ax.set_ylabel("coil current magnitude (A)")
        ax.legend(fontsize=7)
    fig.suptitle(f"{d.drive.name}: shortest interval {d.latch.interval_s * 1e3:.4g} ms "
                 f"({d.latch.governed_by})", fontsize=10)
    return png_bytes(fig)
