"""Plot of a bench check: measured current over the model's, with the acceptance bands
(matplotlib, Agg).

Imported only for ``check --plot``; reads a :class:`~coildrive.bench.check.CheckReport`
and its capture, computes no physics. Drawn, all against the time from switch-on:

* the model actuation at the check's operating point (black) and each measured one;
* the **pull-in window**: the accepted band of the pull-in time, a shaded column,
  with the pull-in current as a dashed line and each actuation's pull-in moment marked;
* the **hold-mean band**: the accepted hold mean currents, a shaded stripe over the
  measured part of the hold (its second half), each actuation's mean marked;
* the **release window**: the accepted release times after the model's switch-off, a
  shaded column, with the drop-out current dash-dotted and each actuation's release
  marked at the same distance from the model's switch-off as from its own.

A row that failed draws its band in red. Actuations the capture cut short are drawn
thin and grey, labelled, and carry no markers (they are not part of the verdict).
"""

from __future__ import annotations

import numpy as np

from ..plotting import agg_figure, png_bytes
from .capture_file import Capture, code_current
from .check import FAIL, CheckReport


def _band_colour(item) -> str:
    return "tab:red" if item is not None and item.status == FAIL else "tab:green"


def plot_check(report: CheckReport, capture: Capture, max_actuations: int = 5) -> bytes:
    """PNG bytes of :func:`check_figure`."""
    return png_bytes(check_figure(report, capture, max_actuations))


def check_figure(report: CheckReport, capture: Capture, max_actuations: int = 5):
    """The matplotlib figure: every actuation (up to ``max_actuations``) aligned at its
    switch-on, over the model waveform at the check's operating point, with the pull-in
    window, the hold-mean band and the release window; failed figures in the title."""
    fig = agg_figure(figsize=(10, 5.5), dpi=110)
    ax = fig.add_subplot(1, 1, 1)
    w = report.waveform
    items = {i.name: i for i in report.items}
    p = report.prediction
    off_model = None
    if w is not None:
        ax.plot(np.asarray(w.time) * 1e3, np.asarray(w.current), color="k", lw=1.2, alpha=0.7,
                label=f"predicted: {w.label}", zorder=3)
        off_model = float(w.events.get("off")) if "off" in w.events else None
    a = report.analysis
    fs = a.sample_rate_hz
    apc = a.amps_per_code
    zero = capture.meta.zero_code
    colours = {}
    for k, act in enumerate(a.actuations[:max_actuations]):
        lo = int(np.searchsorted(capture.index, act.on_index)) - int(0.0005 * fs)
        hi = int(np.searchsorted(capture.index, act.end_index)) + int(0.0005 * fs)
        lo, hi = max(lo, 0), min(hi, len(capture))
        t = capture.index[lo:hi] / fs - act.on_at_s
        i = code_current(capture.code[lo:hi], zero, apc)  # mid-step, as the analysis reads it
        if act.partial is not None:
            ax.plot(t * 1e3, i, lw=0.5, color="0.6",
                    label=f"#{act.number}: cut short at the {act.partial} of the capture (not checked)")
            continue
        line, = ax.plot(t * 1e3, i, lw=0.6, label=f"measured #{act.number}")
        colours[act.number] = line.get_color()

    def band_x(name: str, start: float, level: float | None, text: str) -> None:
        item = items.get(name)
        if item is None or item.low is None:
            return
        ax.axvspan((start + item.low) * 1e3, (start + item.high) * 1e3, color=_band_colour(item),
                   alpha=0.18, lw=0, zorder=1,
                   label=f"{text}: {item.low * 1e3:.4g} .. {item.high * 1e3:.4g} ms ({item.status})")
        if level is None:
            return
        for number, value in zip(item.actuations, item.values):
            if value is not None and number in colours:
                ax.plot((start + value) * 1e3, level, marker="o", ms=5, mfc="none",
                        color=colours[number], zorder=4)

    band_x("pull_in_time", 0.0, p.get("pull_in_current_a"), "pull-in window")
    if off_model is not None:
        band_x("release_time", off_model, p.get("dropout_current_a"), "release window")
    hold = items.get("hold_mean")
    if hold is not None and hold.low is not None and w is not None:
        t_hold0 = float(w.events.get("hold", p.get("peak_duration_s") or 0.0))
        t_off = off_model if off_model is not None else float(np.asarray(w.time)[-1])
        x0 = t_hold0 + 0.5 * (t_off - t_hold0)
        ax.fill_between([x0 * 1e3, t_off * 1e3], hold.low, hold.high, color=_band_colour(hold),
                        alpha=0.25, lw=0, zorder=1,
                        label=f"hold-mean band: {hold.low:.4g} .. {hold.high:.4g} A ({hold.status})")
        for number, value in zip(hold.actuations, hold.values):
            if value is not None and number in colours:
                ax.plot([x0 * 1e3, t_off * 1e3], [value, value], color=colours[number], lw=1.0,
                        ls=":", zorder=4)
    for key, style, text in (("pull_in_current_a", "--", "pull-in"), ("dropout_current_a", "-.", "drop-out")):
        value = p.get(key)
        if value:
            ax.axhline(value, color="tab:gray", ls=style, lw=0.8)
            ax.text(0, value, f" {text} {value:.3g} A", va="bottom", fontsize=8)
    failed = [i.name for i in report.items if i.status == FAIL]
    verdict = "PASS" if report.ok else "FAIL: " + ", ".join(failed)
    ax.set_title(f"{report.drive_name} on {report.board_name} at {report.point.supply_v:.4g} V, "
                 f"{report.point.coil_temp_c:.4g} degC -- {verdict}", fontsize=9)
    ax.set_xlabel("time from switch-on [ms] (release window and marks: from the model's switch-off)")
    ax.set_ylabel("coil current (sense) [A]")
    ax.grid(alpha=0.3)
    ax.legend(fontsize=7, loc="upper right")
    return fig
