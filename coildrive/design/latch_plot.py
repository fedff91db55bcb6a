"""PNGs of a latching coil's pulses (imported only for ``design --plot`` and
``simulate --plot``; draws, computes nothing)."""

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
        boosted = p.boost is not None   # from the boost: it ends at its threshold, the line is its time-out
        ax.axhline(p.force_current_a, color="0.4", ls=":", lw=0.8,
                   label=f"x {p.current_margin:g}: its threshold" if boosted else
                   f"x {p.current_margin:g} by the shortest pulse")
        ax.axvline(p.time_s * 1e3, color="k", lw=0.8)
        ax.set_title((f"{name} pulse to {p.force_current_a:.3g} A from the boost, "
                      + (f"time-out {p.time_s * 1e3:.4g} ms" if p.ticks else "never reached: to its first maximum"))
                     if boosted else f"{name} pulse {p.time_s * 1e3:.4g} ms ({p.ticks} ticks), {p.switches}",
                     fontsize=9)
        ax.set_xlabel("time from the pulse's start (ms)")
        ax.set_ylabel("coil current magnitude (A)")
        ax.legend(fontsize=7)
    fig.suptitle(f"{d.drive.name}: shortest interval {d.latch.interval_s * 1e3:.4g} ms "
                 f"({d.latch.governed_by})", fontsize=10)
    return png_bytes(fig)


def plot_latch_actuation(d: LatchDesign, w, title: str, lengths: dict | None = None) -> bytes:
    """PNG bytes of one simulated set-and-reset cycle ``w`` (a LatchWaveform,
    ``coildrive simulate --plot``): the coil current (each winding's, or the signed current
    of a bridge) with both pulses marked, the switches' on/off states, and with a moving
    armature its gap (mm) through the set pulse. ``lengths``: each pulse's length (s, by
    name) as ``w`` runs it (a compensated pulse's entry, a pulse from the boost to its
    threshold there), else the design's ``time_s``."""
    moving = w.gap is not None
    fig = agg_figure(figsize=(9, 7.5 if moving else 6), dpi=110)
    ratios = [3, 1.4, 2] if moving else [3, 1.4]
    axes = fig.subplots(len(ratios), 1, sharex=True, gridspec_kw={"height_ratios": ratios})
    ax, ax_s = axes[0], axes[1]
    t_ms = w.time * 1e3
    cols, ev = w.columns, w.events
    two = "reset_current_a" in cols
    ax.plot(t_ms, cols["current_a"], lw=0.9, color="tab:blue",
            label="set winding current" if two else "coil current (+ set, - reset)")
    if two:
        ax.plot(t_ms, cols["reset_current_a"], lw=0.9, color="tab:red", label="reset winding current")
    by = {p.name: p for p in d.latch.pulses}
    length = {name: p.time_s for name, p in by.items()} if lengths is None else lengths
    sign = -1.0 if not two else 1.0   # a bridge's reset current is negative
    for name, colour in (("set", "tab:orange"), ("reset", "tab:purple")):
        p = by[name]
        t0 = ev[name] * 1e3
        ax.axvspan(t0, t0 + length[name] * 1e3, color=colour, alpha=0.15,
                   label=f"{name} pulse {length[name] * 1e3:.4g} ms")
        level = p.current_a * (sign if name == "reset" else 1.0)
        ax.axhline(level, color="0.4", ls="--", lw=0.8)
        ax.text(t_ms[0], level, f" {name} current", va="bottom", fontsize=8)
    ax.set_ylabel("current [A]")
    ax.set_title(title, fontsize=9)
    ax.grid(alpha=0.3)
    ax.legend(fontsize=7, loc="upper right")
    # the switch states: on from each pulse's start for its length
    for k, name in enumerate(("set", "reset")):
        p = by[name]
        on = (w.time >= ev[name]) & (w.time < ev[name] + length[name])
        ax_s.step(t_ms, 1.5 * k + on.astype(float), where="post", lw=0.9, label=p.switches)
    ax_s.set_yticks([0, 1, 1.5, 2.5], ["off", "on", "off", "on"], fontsize=7)
    ax_s.set_ylabel("switches")
    ax_s.grid(alpha=0.3)
    ax_s.legend(fontsize=7, loc="upper right")
    if moving:
        ax_x = axes[2]
        ax_x.plot(t_ms, w.gap * 1e3, lw=0.9, color="tab:green",
                  label="gap (0 seated; held by the catch; not modelled from the reset pulse on)")
        ax_x.set_ylabel("armature gap [mm]")
        ax_x.grid(alpha=0.3)
        ax_x.legend(fontsize=7, loc="upper right")
    axes[-1].set_xlabel("time [ms]")
    return png_bytes(fig)
