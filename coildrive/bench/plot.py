"""Plot of a bench check: measured current over the model's (matplotlib, Agg).

Imported only for ``check --plot``; reads a :class:`~coildrive.bench.check.CheckReport`
and its capture, computes no physics.
"""

from __future__ import annotations

import numpy as np

from ..plotting import agg_figure, png_bytes
from .capture_file import Capture
from .check import FAIL, CheckReport


def plot_check(report: CheckReport, capture: Capture, max_actuations: int = 5) -> bytes:
    """PNG bytes: every actuation (up to ``max_actuations``) aligned at its switch-on,
    over the model waveform at the check's operating point; failed figures in the title."""
    fig = agg_figure(figsize=(9, 5), dpi=110)
    ax = fig.add_subplot(1, 1, 1)
    w = report.waveform
    if w is not None:
        ax.plot(np.asarray(w.time) * 1e3, np.asarray(w.current), color="k", lw=1.2, alpha=0.7,
                label=f"predicted: {w.label}")
    a = report.analysis
    fs = a.sample_rate_hz
    apc = a.amps_per_code
    zero = capture.meta.zero_code
    for act in a.actuations[:max_actuations]:
        lo = int(np.searchsorted(capture.index, act.on_index)) - int(0.0005 * fs)
        hi = int(np.searchsorted(capture.index, act.end_index)) + int(0.0005 * fs)
        lo, hi = max(lo, 0), min(hi, len(capture))
        t = capture.index[lo:hi] / fs - act.on_at_s
        i = (capture.code[lo:hi].astype(float) - zero) * apc
        ax.plot(t * 1e3, i, lw=0.6, label=f"measured #{act.number}")
    p = report.prediction
    for key, style, text in (("pull_in_current_a", "--", "pull-in"), ("dropout_current_a", "-.", "drop-out")):
        value = p.get(key)
        if value:
            ax.axhline(value, color="tab:gray", ls=style, lw=0.8)
            ax.text(0, value, f" {text}", va="bottom", fontsize=8)
    failed = [i.name for i in report.items if i.status == FAIL]
    verdict = "PASS" if report.ok else "FAIL: " + ", ".join(failed)
    ax.set_title(f"{report.drive_name} on {report.board_name} at {report.point.supply_v:.4g} V, "
                 f"{report.point.coil_temp_c:.4g} degC -- {verdict}", fontsize=9)
    ax.set_xlabel("time from switch-on [ms]")
    ax.set_ylabel("coil current (sense) [A]")
    ax.grid(alpha=0.3)
    ax.legend(fontsize=7, loc="upper right")
    return png_bytes(fig)
