"""Plot of a Design's actuation waveforms (matplotlib, Agg). Imported only for --plot."""

from __future__ import annotations

from ..plotting import agg_figure, png_bytes
from .result import Design


def plot_design(d: Design, waveforms: dict, thermal: dict | None = None) -> bytes:
    """PNG bytes: coil current at the nominal and the worst pull-in corner, phases marked.

    ``waveforms``: the actuations to draw by name, as
    :func:`coildrive.design.design_waveforms` makes them (``"worst"`` gives the phases).
    ``thermal``: the coil temperature held on from a cold start and a hot restart, as
    :func:`coildrive.design.design_thermal_curves` makes them, in a panel below (none:
    no panel).
    """
    peak = ("pull-in not reached" if d.pull_in.peak_time_s is None else
            f"peak {d.pull_in.peak_time_s * 1e3:.3g} ms")
    if d.boost is not None and d.pull_in.peak_time_s is not None:
        peak = f"boost peak to {d.boost.threshold_a:.3g} A, time-out {d.pull_in.peak_time_s * 1e3:.3g} ms"
    title = (f"{d.drive.name} on {d.drive.board.name}: duty {d.hold.duty:.3f} at "
             f"{d.hold.frequency_hz / 1e3:.4g} kHz ({d.hold.regulation}), {peak}")
    return _plot(d, waveforms, "worst", title, thermal=thermal)


def plot_actuation(d: Design, w, title: str) -> bytes:
    """PNG bytes of one simulated actuation ``w`` of ``d`` (``coildrive simulate --plot``):
    the current with the phases marked, and with an armature its gap and velocity."""
    return _plot(d, {"simulated": w}, "simulated", title, velocity=True)


def _plot(d: Design, waveforms: dict, phases: str, title: str, velocity: bool = False,
          thermal: dict | None = None) -> bytes:
    """The current of ``waveforms`` (by name) with the phases of ``waveforms[phases]``, the
    pull-in/hold/drop-out levels, and the armature panel when the design has one."""
    moving = d.armature is not None
    if thermal:
        fig = agg_figure(figsize=(9, (7.5 if moving else 5) + 3.5), dpi=110)
        gs = fig.add_gridspec(3 if moving else 2, 1, height_ratios=[3, 2, 2.5] if moving else [3, 2.5])
        ax = fig.add_subplot(gs[0])
        if moving:
            ax_x = fig.add_subplot(gs[1], sharex=ax)
        _thermal_panel(d, thermal, fig.add_subplot(gs[-1]))
    elif moving:
        fig = agg_figure(figsize=(9, 7.5), dpi=110)
        ax, ax_x = fig.subplots(2, 1, sharex=True, gridspec_kw={"height_ratios": [3, 2]})
    else:
        fig = agg_figure(figsize=(9, 5), dpi=110)
        ax = fig.add_subplot(1, 1, 1)
    colours = {"nominal": "tab:blue", "worst": "tab:red", "simulated": "tab:blue"}
    for key, w in waveforms.items():
        ax.plot(w.time * 1e3, w.current, lw=0.9, color=colours.get(key), label=w.label)
        if w.magnetising_current is not None:   # an eddy term: the flux's current too
            ax.plot(w.time * 1e3, w.magnetising_current, lw=1.4, ls="--", color="k" if key == "simulated"
                    else colours.get(key), alpha=0.9, label=f"{key}: magnetising current (the flux)")
    w = waveforms[phases]
    ev = w.events
    split = w.bypass_on is not None
    boosted = d.boost is not None
    ax.axvspan(0, ev["hold"] * 1e3, color="tab:orange", alpha=0.12,
               label=f"boost peak ({d.boost.boost_v:.3g} V, to the threshold)" if boosted else "peak")
    ax.axvspan(ev["hold"] * 1e3, ev["off"] * 1e3, color="tab:green", alpha=0.08,
               label="hold (PWM, slow decay: bypass on)" if split else "hold (PWM)")
    ax.axvspan(ev["off"] * 1e3, ev["zero"] * 1e3, color="tab:gray", alpha=0.15,
               label="release (fast decay: bypass open)" if split else "release")
    if split:
        _bypass_trace(d, waveforms, ax, colours)
    if boosted:
        _boost_trace(d, waveforms, ax, colours)
    ax.axhline(d.pull_in.current_a, color="k", ls="--", lw=0.8)
    ax.text(0, d.pull_in.current_a, " pull-in", va="bottom", fontsize=8)
    ax.axhline(d.hold.current_a, color="k", ls=":", lw=0.8)
    ax.text(0, d.hold.current_a, " hold", va="bottom", fontsize=8)
    ax.axhline(d.release.dropout_current_a, color="k", ls="-.", lw=0.8)
    ax.text(0, d.release.dropout_current_a, " drop-out", va="bottom", fontsize=8)
    if moving:
        _armature_panel(d, waveforms, ax, ax_x, colours)
        if velocity:
            _velocity_trace(waveforms, ax_x, colours)
    else:
        ax.set_xlabel("time [ms]")
    ax.set_ylabel("coil current [A]")
    ax.set_title(title)
    ax.grid(alpha=0.3)
    ax.legend(fontsize=7, loc="upper right")
    return png_bytes(fig)


def _boost_trace(d: Design, waveforms: dict, ax, colours: dict) -> None:
    """A boosted peak: its threshold, and the boost capacitor's voltage on a second axis."""
    b = d.boost
    ax.axhline(b.threshold_a, color="tab:orange", ls="--", lw=0.8)
    ax.text(0, b.threshold_a, " boost threshold", va="bottom", fontsize=8)
    ax_b = ax.twinx()
    for key, w in waveforms.items():
        if w.boost_voltage is not None:
            ax_b.plot(w.time * 1e3, w.boost_voltage, color=colours.get(key), lw=0.8, ls="--", alpha=0.7)
    ax_b.set_ylim(0.0, 1.15 * b.boost_max_v)
    ax_b.set_ylabel("boost capacitor [V] (dashed)", fontsize=8)


def _bypass_trace(d: Design, waveforms: dict, ax, colours: dict) -> None:
    """Split decay: the bypass switch state on a second axis, and where it opens."""
    ax_b = ax.twinx()
    for key, w in waveforms.items():
        c = colours.get(key)
        ax_b.step(w.time * 1e3, w.bypass_on, where="post", color=c, lw=0.8, ls="--", alpha=0.7)
        ax.axvline(w.events["bypass_open"] * 1e3, color=c, ls="--", lw=0.7)
    s = d.split_decay
    ax_b.set_ylim(-0.1, 4.0)
    ax_b.set_yticks([0, 1], ["open", "on"])
    ax_b.set_ylabel("bypass switch (dashed)", fontsize=8)
    ax.text(0.01, 0.97, f"hold via {s.hold_path}\nrelease via {s.release_path}",
            transform=ax.transAxes, va="top", fontsize=7)


def _armature_panel(d: Design, waveforms: dict, ax, ax_x, colours: dict) -> None:
    """Armature position under the current; the dip and the seat/release moments marked."""
    for key, w in waveforms.items():
        c = colours.get(key)
        ax_x.plot(w.time * 1e3, w.position * 1e3, lw=0.9, color=c, label=w.label)
        ev = w.events
        if "impact" in ev:
            ax.plot(ev["impact"] * 1e3, ev["dip_current"], "v", color=c, ms=7,
                    label=f"dip {ev['dip_current']:.3g} A at {ev['impact'] * 1e3:.3g} ms ({key})")
        for name, style in (("seat", "--"), ("open", ":")):
            if name in ev:
                for axis in (ax, ax_x):
                    axis.axvline(ev[name] * 1e3, color=c, ls=style, lw=0.8)
                ax_x.annotate(f"{'seated' if name == 'seat' else 'open'} {ev[name] * 1e3:.3g} ms",
                              (ev[name] * 1e3, d.armature.stroke_m * 1e3 * (0.5 if name == "seat" else 0.8)),
                              fontsize=7, color=c, rotation=90, va="center", ha="right")
    ax_x.set_ylabel("gap x [mm] (open = stroke)")
    ax_x.set_xlabel("time [ms]")
    ax_x.set_ylim(-0.05 * d.armature.stroke_m * 1e3, 1.1 * d.armature.stroke_m * 1e3)
    ax_x.grid(alpha=0.3)
    ax_x.legend(fontsize=7, loc="center right")


def _velocity_trace(waveforms: dict, ax_x, colours: dict) -> None:
    """The armature's velocity on a second axis of the gap panel (dotted)."""
    ax_v = ax_x.twinx()
    for key, w in waveforms.items():
        ax_v.plot(w.time * 1e3, w.velocity, lw=0.7, ls=":", color=colours.get(key))
    ax_v.set_ylabel("velocity [m/s] (dotted; < 0 closing)", fontsize=8)


def _thermal_panel(d: Design, curves: dict, ax) -> None:
    """The coil temperature held on from a cold start and from a hot restart (the warm coil
    of the on/off cycle), the limit, the cycle's band and each time to the limit."""
    t = d.thermal_cycle
    longest = max(float(c[0][-1]) for c in curves.values())
    minutes = longest >= 120.0
    scale, unit = (1 / 60.0, "min") if minutes else (1.0, "s")
    colours = {"cold start": "tab:blue", "hot restart": "tab:red"}
    for name, (time, temp, t_lim) in curves.items():
        c = colours.get(name)
        when = "never reaches the limit" if t_lim is None else f"limit after {t_lim * scale:.3g} {unit}"
        ax.plot(time * scale, temp, color=c, lw=1.2, label=f"held on, {name} ({when})")
        if t_lim is not None:
            ax.axvline(t_lim * scale, color=c, ls=":", lw=0.8)
    ax.axhline(t.max_coil_temp_c, color="k", ls="--", lw=0.8)
    ax.text(0, t.max_coil_temp_c, " coil limit", va="bottom", fontsize=8)
    if t.cycle is not None:
        ax.axhspan(t.cycle["coolest_c"], t.cycle["hottest_c"], color="tab:orange", alpha=0.3,
                   label=f"on/off cycle {t.cycle['coolest_c']:.1f}..{t.cycle['hottest_c']:.1f} degC")
    ax.set_xlabel(f"time held on [{unit}]")
    ax.set_ylabel("coil temperature [degC]")
    ax.set_title(f"coil held on: time constant {t.time_constant_s:.4g} s", fontsize=9)
    ax.grid(alpha=0.3)
    ax.legend(fontsize=7, loc="lower right")
