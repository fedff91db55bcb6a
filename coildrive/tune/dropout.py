"""The drop-out judge: what one captured actuation says about the armature.

Did it seat during the peak (the position switch, else the current dip), and did it let
go during the hold (the switch, else the current's signature: a rise of the
period-averaged hold current above its running minimum, or no release bump at the final
turn-off where the design-duty actuation had one)? Limits in docs/tuning.md.

Units: SI (A, s), from the switch-on.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field

import numpy as np

#: A hold-current rise must exceed this many sigmas of the averaged current's noise.
RISE_MIN_CONFIDENCE = 8.0
#: ... and at least this many ADC codes (our choice: well above quantisation).
RISE_MIN_CODES = 2.0
#: ... and this fraction of the model's hold ripple (aliasing of an unresolved PWM).
RISE_RIPPLE_FRACTION = 0.25
#: The averaging window of the hold current covers at least this many samples.
RISE_WINDOW_SAMPLES = 32
#: Slack on the device's peak duration, in samples, on top of one scheduler tick.


@dataclass(frozen=True)
class Judgement:
    """What one captured actuation says about the armature (A, s from the switch-on).

    ``seated``/``seated_by``: it seated during the peak (``"switch"`` or ``"dip"``);
    ``dropped``/``dropped_by``: it let go during the hold (``"switch"``,
    ``"hold rise"`` or ``"no release bump"``); ``evidence`` says it in words.
    ``hold_rise_a`` is the largest rise of the period-averaged hold current above its
    running minimum and ``rise_threshold_a`` what counts as one; ``late_hold_mean_a``
    the measured mean over the last quarter of the hold (whole PWM periods);
    ``settled_hold_a`` the settled hold current: the last eighth's mean when the hold had
    settled, else the Aitken extrapolation of the last three eighths (``None`` when the
    samples show no clean exponential settling); ``dropped_at_s`` when the switch opened
    (from the switch-on).
    """

    seated: bool
    seated_by: str
    dropped: bool
    dropped_by: str
    evidence: str
    peak_current_a: float
    late_hold_mean_a: float | None
    settled_hold_a: float | None
    settled_how: str
    hold_rise_a: float | None
    rise_threshold_a: float | None
    release_bump_a: float | None
    dropped_at_s: float | None
    peak_duration_s: float | None
    samples_missing: int
    analysis: object = field(repr=False, default=None)

    def to_dict(self) -> dict:
        out = {f.name: getattr(self, f.name) for f in dataclasses.fields(self) if f.name != "analysis"}
        out["analysis"] = None if self.analysis is None else self.analysis.to_dict()
        return out


def _hold_rise(amps: np.ndarray, spp: float | None, noise_a: float) -> tuple[float, float]:
    """Largest rise of the hold current, averaged over whole PWM periods, above its
    running minimum (A), and the noise of that average (A, one sigma)."""
    if spp and spp > 0:
        periods = max(1, math.ceil(RISE_WINDOW_SAMPLES / spp))
        width = max(1, int(round(periods * spp)))
    else:
        width = RISE_WINDOW_SAMPLES
    if amps.size < 2 * width:
        return 0.0, noise_a
    from ..bench.analysis import _smooth

    s = _smooth(amps, width)[width:]
    rise = s - np.minimum.accumulate(s)
    return float(np.max(rise)), noise_a / math.sqrt(width)


def settled_value(amps: np.ndarray, spp: float | None, noise_a: float) -> tuple[float | None, str]:
    """The value a settling hold current tends to, from its last three eighths (A).

    The mean over equal windows of ``a + b exp(-t / tau)`` is a geometric sequence plus
    ``a``, so Aitken's delta-squared process gives ``a`` exactly from three windows:
    ``a = w3 - (w3 - w2)^2 / ((w3 - w2) - (w2 - w1))``, used while the first step stands
    out of the noise (3 sigma) and the steps shrink like one exponential (ratio 0..0.9).
    Otherwise, when the last two windows agree within the noise (or 0.1 %), the hold has
    settled and ``w3`` is the answer; else there is no estimate.
    """
    n = amps.size // 8
    if spp and spp > 0 and n >= spp:
        n = int(round(int(n / spp) * spp))
    if n < 4:
        return None, "hold too short"
    w1, w2, w3 = (float(np.mean(amps[amps.size - k * n: amps.size - (k - 1) * n])) for k in (3, 2, 1))
    sigma = noise_a / math.sqrt(n) * math.sqrt(2.0)
    d1, d2 = w2 - w1, w3 - w2
    if abs(d1) > 3.0 * sigma and 0 < d2 / d1 < 0.9:
        return w3 - d2 * d2 / (d2 - d1), f"still settling (steps {d1 * 1e3:.3g}, {d2 * 1e3:.3g} mA): Aitken extrapolation"
    if abs(d2) <= max(3.0 * sigma, 1e-3 * abs(w3)):
        return w3, "settled"
    return None, f"not settling like one exponential (steps {d1 * 1e3:.3g}, {d2 * 1e3:.3g} mA)"


def judge_actuation(capture, *, hold_frequency: float, use_switch: bool,
                    release_bump_expected: bool = False, ripple_a: float = 0.0,
                    pull_in_current: float | None = None, dropout_current: float | None = None,
                    sense_position: str | None = None) -> Judgement:
    """Analyse a capture of one actuation (with ON, PEAK_END and OFF events) and say
    whether the armature seated and whether it dropped out during the hold.

    Parameters
    ----------
    capture : :class:`~coildrive.bench.capture_file.Capture` with sample rate and scaling.
    hold_frequency : Hz of the hold PWM (for whole-period averages).
    use_switch : judge from the SWITCH events (the board has a position switch).
    release_bump_expected : the design-duty actuation showed a release bump, so a
        missing one means the armature was already open (signature mode only).
    ripple_a : the model's hold ripple, A p-p (raises the rise threshold by
        :data:`RISE_RIPPLE_FRACTION` of it).
    pull_in_current, dropout_current : A, passed to the analysis.
    """
    from ..bench.analysis import analyse
    from ..bench.messages import EventKind

    a = analyse(capture, pull_in_current=pull_in_current, dropout_current=dropout_current,
                hold_frequency=hold_frequency, sense_position=sense_position)
    if not a.actuations:
        return Judgement(False, "", False, "", "no actuation in the capture", 0.0, None, None, "no hold",
                         None, None, None, None, None, 0, None)
    r = a.actuations[0]
    fs = a.sample_rate_hz
    apc = a.amps_per_code
    sense = a.sense_position
    idx = capture.index
    on_i = r.on_index
    pe_i = r.peak_end_index
    off_i = r.off_index
    t_on = r.on_at_s

    # late-hold mean and the hold rise
    late = rise = thr = settled = None
    settled_how = "no hold"
    if pe_i is not None and off_i is not None and off_i > pe_i:
        sel = (idx >= pe_i) & (idx < off_i)
        c = capture.code[sel].astype(np.int64) - int(capture.meta.zero_code)
        amps = np.where(c > 0, c + 0.5, 0.0) * apc
        spp = fs / hold_frequency if hold_frequency else None
        if sense == "switch":
            amps = amps[amps > a.zero_threshold_a]
        if amps.size >= 4:
            quarter = amps.size // 4
            if spp and sense == "coil":
                periods = max(1, int(quarter / spp))
                quarter = max(1, int(round(periods * spp)))
            late = float(np.mean(amps[-quarter:]))
            settled, settled_how = settled_value(amps, spp if sense == "coil" else None, r.noise_a)
            rise, sigma = _hold_rise(amps, spp if sense == "coil" else None, r.noise_a)
            thr = max(RISE_MIN_CONFIDENCE * sigma, RISE_MIN_CODES * apc, RISE_RIPPLE_FRACTION * ripple_a)
    bump = r.release_bump_height_a

    switch = [(e.index, e.value) for e in capture.events if e.kind == EventKind.SWITCH]
    dropped_at = None
    if use_switch:
        end_peak = pe_i if pe_i is not None else (off_i if off_i is not None else idx[-1])
        seat_idx = [i for i, v in switch if v == 1 and on_i <= i <= (off_i if off_i is not None else idx[-1])]
        seated = bool(seat_idx)
        seated_by = "switch" if seated else ""
        drop_idx = [i for i, v in switch if v == 0 and seat_idx and i > seat_idx[0]
                    and end_peak <= i <= (off_i if off_i is not None else idx[-1])]
        dropped = bool(drop_idx)
        dropped_by = "switch" if dropped else ""
        if dropped:
            dropped_at = drop_idx[0] / fs - t_on
        if not seated:
            evidence = "the position switch never reported the armature seated (no SWITCH = 1)"
        elif dropped:
            evidence = f"the position switch opened {dropped_at * 1e3:.3g} ms after the switch-on, during the hold"
        else:
            evidence = "the position switch stayed closed through the hold"
    else:
        seated = r.seated_time_s is not None
        seated_by = "dip" if seated else ""
        why = []
        if rise is not None and rise > thr:
            why.append(f"the hold current rose {rise * 1e3:.3g} mA above its running minimum "
                       f"(threshold {thr * 1e3:.3g} mA)")
        if release_bump_expected and off_i is not None and bump is None and sense == "coil":
            why.append("no release bump at the turn-off (the armature was already open)")
        dropped = bool(why)
        dropped_by = ("hold rise" if why and why[0].startswith("the hold") else "no release bump") if why else ""
        if not seated:
            evidence = (f"no current dip during the peak (confidence {r.dip_confidence:.1f}): "
                        "the armature did not move")
        elif dropped:
            evidence = "; ".join(why)
        else:
            evidence = ("the hold current never rose"
                        + (f" (largest rise {rise * 1e3:.3g} mA, threshold {thr * 1e3:.3g} mA)" if rise is not None else "")
                        + ("" if not release_bump_expected else "; the release bump is there"))
    return Judgement(
        seated=seated, seated_by=seated_by, dropped=bool(seated and dropped), dropped_by=dropped_by if seated else "",
        evidence=evidence, peak_current_a=float(r.peak_current_a or 0.0), late_hold_mean_a=late,
        settled_hold_a=settled, settled_how=settled_how,
        hold_rise_a=rise, rise_threshold_a=thr, release_bump_a=bump, dropped_at_s=dropped_at,
        peak_duration_s=r.peak_duration_s, samples_missing=r.samples_missing, analysis=r)
