"""Cut a capture into actuations and phases, and measure each actuation.

Phases come from the event records when the capture has them (``on``, ``peak_end``,
``off``), else from the waveform itself:

* **on**: the current rises from zero -- the first sample of a run of activity, with
  the switch-on moment put where the first samples of the rise extrapolate to zero;
* **peak end**: under the switch, the first zero reading after the highest current (the
  switch opened); in the coil path, the top of the current (the hold's currents are
  lower; the armature's dip comes before it), placed on the sharp concave kink where the
  rise turns into the freewheel fall when there is one, else on the last sample near the
  top;
* **off**: under the switch, the sample after the last one that reads current; in the
  coil path, the top from which the current falls monotonically to zero.

Per actuation (all times from the switch-on, in s; currents in A): time to the pull-in
current, the armature-seated moment from the current dip with its depth and a
confidence (depth over the noise of the smoothed current), peak duration, hold mean
current and ripple over the settled part of the hold, release time to the drop-out
current and the release bump. Where the samples cannot show a figure the figure is
``None`` and a note says why: ripple when the sample rate gives fewer than
``min_samples_per_period`` samples per PWM period, the release and the mean in
discontinuous conduction when the sense resistor sits under the switch (it reads zero
while the switch is off).

Codes are read as the middle of their quantisation step (``code + 0.5``), since the ADC
truncates (``floor``, the design's ADC convention); a code at or below ``zero_code``
reads zero current.

The whole capture is handled with numpy: the work per actuation is on short slices, so
10^7 samples take well under two seconds (``benchmarks/bench_analysis.py``).
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field

import numpy as np

from ..errors import InputError
from .capture_file import Capture, CaptureEvent
from .messages import EventKind

#: Fewest samples per PWM period to measure the hold ripple (common practice: about ten
#: samples per period resolve a triangle-like ripple).
MIN_SAMPLES_PER_PERIOD = 10.0
#: Dip depth over the noise of the smoothed current below which no dip is reported.
DIP_MIN_CONFIDENCE = 8.0
#: Release-bump height over the noise below which no bump is reported.
BUMP_MIN_CONFIDENCE = 8.0
#: Gap without activity (s) that separates two actuations when the hold frequency is unknown.
MIN_IDLE_S = 1e-3
#: The quantisation noise of an ideal ADC, in codes (uniform error over one step: 1/sqrt(12)).
QUANTISATION_SIGMA = 1.0 / math.sqrt(12.0)


@dataclass(frozen=True)
class ActuationResult:
    """What one actuation measured. Times in s from the switch-on unless named ``*_at_s``
    (capture time, s since sample index 0); currents in A; ``None`` = not measurable
    (see ``notes``).

    Attributes
    ----------
    number : 1, 2, ... in capture order.
    phases_from : ``"events"`` or ``"waveform"``.
    on_at_s : switch-on moment in capture time.
    on_index, peak_end_index, off_index, end_index : sample indices of the first sample
        of the peak, of the hold, of the release, and after the release (the current is
        back at zero, or the next actuation starts).
    pull_in_time_s : to the first reach of the pull-in current; pull_in_resolution_s :
        how finely the samples place it (the larger of one sample period and the time the
        current takes to rise by one code there).
    peak_duration_s : switch-on to the start of the hold.
    peak_current_a : highest current of the peak phase; peak_end_current_a : at its end.
    seated_time_s : the bottom of the current dip (the armature seats), if one shows.
    dip_depth_a, dip_confidence : how deep the dip is, and that depth over the noise of
        the smoothed current (no dip is reported below ``DIP_MIN_CONFIDENCE``).
    dip_top_current_a : the current at the top before the dip.
    hold_duration_s, hold_mean_a, hold_ripple_a : the hold and its settled mean current
        and peak-to-peak ripple (over the last half of the hold, in whole PWM periods).
    hold_samples_per_period : sample rate over hold frequency.
    hold_duty_measured : switch on-fraction seen in the hold (sense under the switch).
    hold_discontinuous : the current reaches zero in each PWM period.
    release_time_s : switch-off to the drop-out current (release_resolution_s: as for
        the pull-in time); release_zero_time_s : to zero.
    release_bump_time_s, release_bump_current_a, release_bump_height_a : the bottom of a
        rise of current during the release (the armature opening), and its height.
    samples_missing : sample indices missing inside the actuation (lost frames).
    noise_a : noise of one sample (one sigma, quantisation included) during the peak.
    complete : the actuation has its switch-off and release in the capture.
    partial : ``None``, or where the capture cut this actuation short: ``"end"`` (the
        capture ended before its current was back at zero and idle for ``min_idle``:
        Ctrl-C, a stopped or killed capture, ``--duration``, the end of a recording or
        of a scope record) or ``"start"`` (the capture began with current flowing).
        ``check`` leaves partial actuations out of its verdict.
    notes : why figures are missing or how they were estimated.
    """

    number: int
    phases_from: str
    on_at_s: float
    on_index: int
    peak_end_index: int | None
    off_index: int | None
    end_index: int
    pull_in_time_s: float | None = None
    pull_in_resolution_s: float | None = None
    peak_duration_s: float | None = None
    peak_current_a: float | None = None
    peak_end_current_a: float | None = None
    seated_time_s: float | None = None
    dip_depth_a: float | None = None
    dip_confidence: float = 0.0
    dip_top_current_a: float | None = None
    hold_duration_s: float | None = None
    hold_mean_a: float | None = None
    hold_ripple_a: float | None = None
    hold_samples_per_period: float | None = None
    hold_duty_measured: float | None = None
    hold_discontinuous: bool = False
    release_time_s: float | None = None
    release_resolution_s: float | None = None
    release_zero_time_s: float | None = None
    release_bump_time_s: float | None = None
    release_bump_current_a: float | None = None
    release_bump_height_a: float | None = None
    samples_missing: int = 0
    noise_a: float = 0.0
    complete: bool = True
    partial: str | None = None
    notes: tuple[str, ...] = ()

    def partial_text(self) -> str:
        """How the capture cut this actuation short, e.g. ``"the capture ended during
        actuation 3"`` (empty when it did not)."""
        if self.partial is None:
            return ""
        return f"the capture {'ended' if self.partial == 'end' else 'began'} during actuation {self.number}"

    def to_dict(self) -> dict:
        """Plain JSON-ready dict (non-finite floats as ``None``)."""
        out = asdict(self)
        out["notes"] = list(self.notes)
        return {k: (None if isinstance(v, float) and not math.isfinite(v) else v) for k, v in out.items()}


@dataclass(frozen=True)
class Analysis:
    """Every actuation of a capture, with the settings the analysis used.

    ``sense_position`` decides how samples are read; ``zero_threshold_a`` is the current
    below which a sample counts as zero; ``notes`` apply to the whole capture.
    """

    actuations: tuple[ActuationResult, ...]
    sample_rate_hz: float
    amps_per_code: float
    sense_position: str
    zero_threshold_a: float
    pull_in_current_a: float | None
    dropout_current_a: float | None
    hold_frequency_hz: float | None
    notes: tuple[str, ...] = ()

    def values(self, name: str) -> np.ndarray:
        """One figure over the actuations as a float array (``nan`` where ``None``)."""
        return np.array([np.nan if getattr(a, name) is None else float(getattr(a, name))
                         for a in self.actuations], float)

    def to_dict(self) -> dict:
        return {"sample_rate_hz": self.sample_rate_hz, "amps_per_code": self.amps_per_code,
                "sense_position": self.sense_position, "zero_threshold_a": self.zero_threshold_a,
                "pull_in_current_a": self.pull_in_current_a,
                "dropout_current_a": self.dropout_current_a,
                "hold_frequency_hz": self.hold_frequency_hz, "notes": list(self.notes),
                "actuations": [a.to_dict() for a in self.actuations]}


# --------------------------------------------------------------------------- helpers
def _smooth(x: np.ndarray, width: int) -> np.ndarray:
    """Centred moving average of ``width`` samples (edges use the nearest full window)."""
    x = np.asarray(x, float)
    if width <= 1 or x.size < width:
        return x.copy()
    c = np.cumsum(np.concatenate([[0.0], x]))
    valid = (c[width:] - c[:-width]) / width
    left = (width - 1) // 2
    right = x.size - valid.size - left
    return np.concatenate([np.full(left, valid[0]), valid, np.full(right, valid[-1])])


def _noise_codes(c: np.ndarray) -> float:
    """Noise of one sample in codes from second differences (robust: median absolute
    deviation; at least the quantisation noise). White noise of sigma s gives second
    differences of sigma s*sqrt(6); smooth signal and sparse switch edges hardly count.
    (On integer codes the median absolute deviation moves in whole codes: this reads the
    noise in steps of about 0.6 codes, coarse but robust, as the phase searches want it;
    :func:`_block_noise` reads it finely.)"""
    if c.size < 8:
        return QUANTISATION_SIGMA
    d2 = np.diff(c.astype(np.float64), 2)
    mad = float(np.median(np.abs(d2 - np.median(d2))))
    return max(1.4826 * mad / math.sqrt(6.0), QUANTISATION_SIGMA)


def _block_noise(c: np.ndarray, lag: int = 0) -> float:
    """Noise of one sample in codes (one sigma, at least the quantisation noise) of a block
    of the capture, from second differences ``c[k + 2L] - 2 c[k + L] + c[k]``: white noise
    of sigma s gives them a sigma of s*sqrt(6), a straight stretch none. ``L`` is 1 (a
    smooth signal) or, given ``lag`` (a whole number of samples spanning whole PWM
    periods: :func:`_pwm_lag`), the smaller of the estimates at 1 and at ``lag``: a PWM
    sampled a few times a period has second differences at lag 1 as large as its ripple,
    but its samples repeat a period later. Robust to sparse switch edges: the RMS of the
    second differences within 5 robust sigmas (median absolute deviation, at least one
    code) of their median -- the RMS, not the median absolute deviation itself, whose
    whole-code steps on integer codes would read the noise in steps of 0.6 codes."""
    if c.size < 8:
        return QUANTISATION_SIGMA
    x = c.astype(np.float64)
    out = []
    for step in {1, lag} - {0}:
        if x.size < 2 * step + 8:
            continue
        r = _centred_d2(x, step)
        out.append(_d2_sigma(r, 5.0 * max(1.4826 * float(np.median(np.abs(r))), 1.0)))
    return max(min(out), QUANTISATION_SIGMA) if out else QUANTISATION_SIGMA


def _centred_d2(x: np.ndarray, step: int) -> np.ndarray:
    """Second differences ``x[k + 2L] - 2 x[k + L] + x[k]`` (``L`` = ``step``) less their
    median."""
    d2 = x[2 * step:] - 2.0 * x[step:-step] + x[:-2 * step]
    return d2 - np.median(d2)


def _d2_sigma(r: np.ndarray, limit: float) -> float:
    """One sample's noise (codes) from centred second differences ``r``: the RMS of those
    within ``limit`` of zero (the rest are edges or corners), over sqrt(6) (white noise of
    sigma s gives second differences of sigma s*sqrt(6))."""
    kept = r[np.abs(r) <= limit]
    return math.sqrt(float(np.mean(kept * kept)) / 6.0)


def _pwm_lag(samples_per_period: float | None, longest: int, slow: float = 16.0) -> int:
    """The lag (samples) for :func:`_block_noise` over a PWM of ``samples_per_period``: the
    shortest whole number of periods (up to 8) within 0.05 samples of a whole number of
    samples, no longer than ``longest``; 0 when there is none (or the PWM is slow against
    the sampling, ``slow`` samples a period or more: its straight segments leave lag 1
    clean)."""
    if not samples_per_period or samples_per_period >= slow:
        return 0
    for m in range(1, 9):
        n = m * samples_per_period
        if abs(n - round(n)) <= 0.05 and 1 <= round(n) <= longest:
            return int(round(n))
    return 0


def _noise_codes_ramps(c: np.ndarray) -> float:
    """Noise of one sample in codes over a stretch that is straight between sparse corners
    (a PWM hold resolved by ten or more samples a period): the RMS of the second
    differences (white noise of sigma s: s*sqrt(6)), those beyond 4 of the robust scale
    (``_noise_codes``) left out as the ripple's corners; at least the quantisation noise.
    The RMS, not the median: a median of values on a scope's coarse vertical step moves
    by whole steps (a 2 mA noise on 0.5 mA steps reads 1.9 mA), and the ripple is the
    small difference of two variances that this noise's square is one of."""
    if c.size < 8:
        return QUANTISATION_SIGMA
    r = _centred_d2(c.astype(np.float64), 1)
    return max(_d2_sigma(r, max(4.0 * math.sqrt(6.0) * _noise_codes(c), 2.0)), QUANTISATION_SIGMA)


def _denoise(c: np.ndarray, sigma: float) -> np.ndarray:
    """Codes for a level crossing: as they are when the noise is below half a code, else a
    centred moving average just wide enough to bring it there (at most 15 samples; on a
    steady slope a centred average does not shift the crossing)."""
    if sigma <= 0.5:
        return c
    width = int(min(15, math.ceil((sigma / 0.5) ** 2)))
    width += 1 - width % 2
    return _smooth(c.astype(np.float64), width)


def _boundary(t: np.ndarray, c: np.ndarray, b: int, rising: bool) -> float | None:
    """Time (s) the true signal first crosses code boundary ``b`` (rising: the first code
    >= b; falling: the first code < b), between the two samples around it, linear in the
    mid-step values ``code + 0.5``."""
    hit = c >= b if rising else c < b
    if hit.size == 0:
        return None
    k = int(np.argmax(hit))
    if not hit[k]:
        return None
    if k == 0:
        return float(t[0])
    y0, y1 = float(c[k - 1]) + 0.5, float(c[k]) + 0.5
    frac = (b - y0) / (y1 - y0) if rising else (y0 - b) / (y0 - y1)
    return float(t[k - 1] + min(max(frac, 0.0), 1.0) * (t[k] - t[k - 1]))


def _level_time(t: np.ndarray, c: np.ndarray, level: float, rising: bool,
                period: float) -> tuple[float, float] | None:
    """When the signal first reaches ``level`` (codes, not a whole number in general), and
    the resolution of that time (s).

    A truncating ADC steps from code ``m - 1`` to ``m`` when the signal crosses ``m``, so
    the two code boundaries around the level are located in time (each within its
    sample interval) and the level is interpolated between them: on a slow slope (many
    samples per code) this is far better than interpolating between two samples.
    """
    m = math.floor(level)
    lo, hi = (m, m + 1) if rising else (m + 1, m)
    t_lo = _boundary(t, c, lo, rising)
    t_hi = _boundary(t, c, hi, rising)
    if t_lo is None or t_hi is None:
        return None
    frac = (level - m) if rising else (m + 1 - level)
    when = t_lo + frac * (t_hi - t_lo)
    return float(when), float(max(period, abs(t_hi - t_lo)))


class _Reader:
    """The capture's arrays and scaling, shared by the per-actuation code."""

    def __init__(self, capture: Capture, fs: float, apc: float, zero_code: int):
        self.index = capture.index
        self.c = capture.code.astype(np.int32) - int(zero_code)
        self.fs = fs
        self.apc = apc

    def amps(self, a: int, b: int) -> np.ndarray:
        """Mid-step currents (A) of positions ``a..b-1``."""
        c = self.c[a:b]
        return np.where(c > 0, c + 0.5, 0.0) * self.apc

    def t(self, a: int, b: int) -> np.ndarray:
        """Capture times (s) of positions ``a..b-1``."""
        return self.index[a:b] / self.fs

    def time_of(self, p: int) -> float:
        return float(self.index[min(p, self.index.size - 1)] / self.fs)

    def pos(self, sample_index: int) -> int:
        """Position of the first sample whose index is >= ``sample_index``."""
        return int(np.searchsorted(self.index, sample_index))


@dataclass(frozen=True)
class _Levels:
    """Code levels of a capture: ``idle`` (the most common code: no current), ``sigma``
    (noise of one sample, codes), ``zero`` (at or below: zero current)."""

    idle: int
    sigma: float
    zero: int


def _levels(c: np.ndarray, blocks: int = 512, samples_per_period: float | None = None) -> _Levels:
    """Noise and zero levels from contiguous blocks spread over the capture
    (``samples_per_period``: the hold's PWM, whose samples repeat a period later:
    :func:`_pwm_lag`)."""
    if c.size == 0:
        return _Levels(0, QUANTISATION_SIGMA, 3)
    block = min(1024, max(64, c.size // 32))
    if c.size <= block * 2:
        parts = [c]
    elif c.size <= block * blocks:
        parts = [c[a:a + block] for a in range(0, c.size - block + 1, block)]
    else:
        starts = np.linspace(0, c.size - block, blocks).astype(np.int64)
        parts = [c[a:a + block] for a in starts]
    sample = np.concatenate(parts)
    lag = _pwm_lag(samples_per_period, block // 8)
    # the quiet blocks (idle, smooth rises, a PWM a whole period apart) tell the noise: those
    # within 1.5 x the 10th percentile of the blocks' estimates, pooled (the percentile
    # alone reads low by the estimates' own scatter)
    est = np.array([_block_noise(p, lag) for p in parts])
    quiet = est[est <= 1.5 * float(np.percentile(est, 10.0))]
    sigma = max(math.sqrt(float(np.mean(quiet * quiet))), QUANTISATION_SIGMA)
    # idle: the most common code near the bottom (zero current; the hold's codes can be
    # more common overall when the sampling is commensurate with the PWM)
    clipped = np.clip(sample, 0, None)
    bottom = clipped[clipped <= np.percentile(clipped, 2.0) + math.ceil(4.0 * sigma) + 1]
    idle = int(np.argmax(np.bincount(bottom)))
    # an idle ADC at zero current clips the noise's lower half: the upper half tells it.
    # A truncating ADC reads code >= idle + k when the noise passes k - offset, so the
    # shares q_k of the idle samples at or above idle + 1 and idle + 2 give the normal
    # quantiles z_k = (k - offset) / s: s = 1 / (z_2 - z_1), or 1 / z_1 (offset 0) when
    # too few reach idle + 2; plus the quantisation noise (only samples in idle stretches:
    # 4 neighbours either side near the bottom too, not the foot of a rise passing through)
    low = (sample <= np.percentile(clipped, 2.0) + math.ceil(4.0 * sigma) + 1).astype(np.float64)
    still = np.convolve(low, np.ones(9), mode="same") >= 9.0 - 1e-9
    above = clipped[still].astype(np.float64) - idle
    q1, q2 = float(np.mean(above >= 1)), float(np.mean(above >= 2))
    if above.size >= 64 and 0.0 < q1 < 0.5:
        from statistics import NormalDist

        z1 = NormalDist().inv_cdf(1.0 - q1)
        z2 = NormalDist().inv_cdf(1.0 - q2) if 0.0 < q2 < q1 else math.inf
        s_n = 1.0 / (z2 - z1) if q2 * above.size >= 20 and z2 > z1 + 1e-9 else 1.0 / z1
        sigma = max(sigma, math.sqrt(s_n * s_n + QUANTISATION_SIGMA**2))
    zero = idle + max(3, int(math.ceil(6.0 * sigma)))
    return _Levels(idle, sigma, zero)


# --------------------------------------------------------------------------- segmentation
@dataclass
class _Cut:
    on: int                 # positions in the arrays
    peak_end: int | None
    off: int | None
    end: int
    source: str
    notes: list[str] = field(default_factory=list)
    partial: str | None = None      # "start" / "end": the capture cut it short there


def _cuts_from_events(rd: _Reader, events: tuple[CaptureEvent, ...], lv: _Levels) -> list[_Cut]:
    ev = sorted((e for e in events if e.kind in (EventKind.ON, EventKind.PEAK_END, EventKind.OFF)),
                key=lambda e: e.index)
    n = rd.c.size
    cuts: list[_Cut] = []
    for e in ev:
        p = min(rd.pos(e.index), n)
        if e.kind == EventKind.ON:
            cuts.append(_Cut(p, None, None, n, "events"))
        elif cuts and e.kind == EventKind.PEAK_END and cuts[-1].peak_end is None and cuts[-1].off is None:
            cuts[-1].peak_end = p
        elif cuts and e.kind == EventKind.OFF and cuts[-1].off is None:
            cuts[-1].off = p
    for k, cut in enumerate(cuts):
        limit = cuts[k + 1].on if k + 1 < len(cuts) else n
        if cut.off is None:
            cut.end = limit
            continue
        low = np.flatnonzero(rd.c[cut.off:limit] <= lv.zero)
        cut.end = cut.off + int(low[0]) if low.size else limit
    if cuts and (cuts[-1].off is None or cuts[-1].end >= n):
        cuts[-1].partial = "end"
    return cuts


def _cuts_from_waveform(rd: _Reader, lv: _Levels, sense: str, min_gap: int,
                        spp: float | None) -> list[_Cut]:
    c = rd.c
    n = c.size
    zero = lv.zero
    active = np.flatnonzero(c > zero)
    if active.size == 0:
        return []
    high = float(np.percentile(c[active], 99.0)) if active.size > 100 else float(c[active].max())
    strong_level = max(zero, 0.25 * high)
    strong = np.flatnonzero(c > strong_level)
    if strong.size < 3:
        return []
    breaks = np.flatnonzero(np.diff(strong) > min_gap)
    starts = strong[np.r_[0, breaks + 1]]
    ends = strong[np.r_[breaks, strong.size - 1]]
    cuts: list[_Cut] = []
    for s, e in zip(starts, ends):
        if e - s < 2:
            continue  # a lone spike, not an actuation
        before = np.flatnonzero(c[max(0, s - min_gap):s] <= zero)
        on = max(0, s - min_gap) + int(before[-1]) + 1 if before.size else max(0, s - min_gap)
        after = np.flatnonzero(c[e:min(n, e + min_gap)] <= zero)
        end = int(e) + int(after[0]) if after.size else min(n, int(e) + min_gap)
        cut = _Cut(int(on), None, None, int(end), "waveform")
        if e == ends[-1] and (n - 1 - int(e) < min_gap or end >= n):
            cut.partial = "end"      # no idle after it: the capture may have stopped it
        elif s == starts[0] and on == 0 and c[0] > zero:
            cut.partial = "start"
        seg = c[cut.on:cut.end]
        if sense == "switch":
            # the peak ends at the run's highest current (the hold's on-time currents are
            # lower); its first zero reading after that is the first switch-off
            top = int(np.argmax(seg))
            zeros = np.flatnonzero(seg[top:] <= zero)
            cut.peak_end = cut.on + top + int(zeros[0]) if zeros.size else None
            last = np.flatnonzero(seg > zero)
            cut.off = cut.on + int(last[-1]) + 1
            cut.end = cut.off
            if cut.peak_end is None:
                cut.notes.append("the current never returned to zero inside the actuation: "
                                 "no hold phase seen")
                cut.off = None
        else:
            cut.peak_end = cut.on + _coil_peak_end(seg)
            cut.off = cut.on + _coil_off(seg, zero, cut.peak_end - cut.on, spp)
            if cut.off <= cut.peak_end:
                cut.notes.append("no hold phase seen between the peak and the final decay")
        cuts.append(cut)
    return cuts


def _coil_peak_end(seg: np.ndarray) -> int:
    """Offset of the first hold sample in a coil-path run (see the module docstring).

    The peak ends at the top of the (lightly smoothed, if noisy) current: the hold's
    currents are all lower. Near that top, the first sharp concave kink (the rise turning
    into the freewheel fall) marks the last peak sample; without one, the last sample
    near the top does (the rise before the top is slower than the fall after it).
    """
    top = int(np.argmax(seg))
    noise = _noise_codes(seg[: max(top, 8)])
    width = 5 if noise > 0.5 else 1
    s = _smooth(seg.astype(np.float64), width)
    m = int(np.argmax(s))
    lo, hi = max(m - 2 * width - 1, 0), min(m + 2 * width + 2, seg.size)
    d2 = np.diff(seg[max(lo - 1, 0):hi + 1].astype(np.int64), 2)
    limit = -max(6.0 * noise * math.sqrt(6.0), 3.0)
    kinks = np.flatnonzero(d2 < limit) + max(lo - 1, 0) + 1
    for k in kinks:
        if np.all(seg[k + 1:k + 3] < seg[k]):
            return int(k) + 1
    near = np.flatnonzero(seg[lo:hi] >= s[m] - max(noise, 0.5))
    return lo + int(near[-1]) + 1 if near.size else m + 1


def _coil_off(seg: np.ndarray, zero: int, peak_end: int, spp: float | None) -> int:
    """Offset of the first release sample in a coil-path run: the final decay falls from
    the top of the hold ripple through the hold's median level and on to zero, so the
    switch-off is the highest sample within a PWM period before the last (lightly
    smoothed) sample at or above the median of the hold's second half."""
    nz = np.flatnonzero(seg > zero)
    last = int(nz[-1]) if nz.size else seg.size - 1
    if last <= peak_end + 1:
        return last + 1
    hold = seg[peak_end:last + 1]
    # the median of the hold's second half: a hold still settling from the peak towards
    # its mean lies above its overall median for a long time
    level = float(np.median(hold[hold.size // 2:]))
    above = np.flatnonzero(hold >= level)
    k = peak_end + (int(above[-1]) if above.size else 0)
    reach = max(3, int(math.ceil(spp)) + 2) if spp else 3
    lo = max(peak_end, k - reach)
    window = seg[lo:k + 2].astype(np.float64)
    # the latest sample near the window's top: the ripple tops before it are as high
    near = window >= window.max() - max(3.0 * _noise_codes(hold), 1.0)
    top = lo + int(np.flatnonzero(near)[-1])
    return top + 1


# --------------------------------------------------------------------------- measuring
def _switch_on_time(rd: _Reader, on: int, end: int, lv: _Levels, from_events: bool) -> float:
    """Switch-on moment (s): the start of the rise extrapolated back to zero current from
    two code levels just above the noise, kept inside the interval it must lie in (from
    events: the sample interval before the ON sample; from the waveform: after the last
    plainly idle sample). Without a usable rise: half a sample before the first sample."""
    fs = rd.fs
    t_first = rd.time_of(on)
    if from_events:
        lo, hi = t_first - 1.0 / fs, t_first
    else:
        k = on - 1
        while k >= 0 and k > on - 64 and rd.c[k] > lv.idle:
            k -= 1
        lo = rd.time_of(k) if k >= 0 else t_first - 1.0 / fs
        hi = rd.time_of(on)
        t_first = rd.time_of(k + 1) if k >= 0 else t_first
    b1 = float(max(lv.zero, 1) - lv.idle) + lv.idle
    b2 = b1 + max(b1 - lv.idle, 4.0)
    a = max(on - 64, 0) if not from_events else max(on - 1, 0)
    b = min(end, rd.c.size, on + 4096)
    t, c = rd.t(a, b), rd.c[a:b]
    p1 = _level_time(t, c, b1, True, 1.0 / fs)
    p2 = _level_time(t, c, b2, True, 1.0 / fs)
    if p1 is not None and p2 is not None and p2[0] > p1[0]:
        t0 = p1[0] - (b1 - lv.idle) * (p2[0] - p1[0]) / (b2 - b1)
        return float(min(max(t0, lo), hi))
    return t_first - 0.5 / fs


def _measure(rd: _Reader, cut: _Cut, number: int, lv: _Levels, sense: str,
             pull_in: float | None, dropout: float | None, f_hold: float | None,
             min_spp: float, dip_conf: float) -> ActuationResult:
    fs, apc = rd.fs, rd.apc
    notes = list(cut.notes)
    idx = rd.index
    n = rd.c.size
    on = min(cut.on, n - 1)
    end = min(max(cut.end, on + 1), n)
    t_on = _switch_on_time(rd, on, end, lv, cut.source == "events")
    span = int(idx[end - 1] - idx[on] + 1)
    missing = max(span - (end - on), 0)
    if missing:
        notes.append(f"{missing} samples missing inside this actuation (lost frames): figures may be off")
    res: dict = {}
    peak_end, off = cut.peak_end, cut.off
    if peak_end is not None and peak_end >= n:
        peak_end = None
    if off is not None and off >= n:
        off = None
    complete = off is not None and (cut.end < n or sense == "switch") and cut.partial is None
    if cut.partial == "end":
        notes.append("the capture ended during this actuation (its current was not back at zero "
                     "and idle): incomplete, left out of the check")
    elif cut.partial == "start":
        notes.append("the capture began during this actuation (current already flowing): "
                     "incomplete, left out of the check")
    elif off is None:
        notes.append("the capture ends before the switch-off")
    pe = peak_end if peak_end is not None else (off if off is not None else end)
    pe = min(max(pe, on + 1), n)

    # ---- peak phase
    t = rd.t(on, pe)
    c = rd.c[on:pe]
    amps = rd.amps(on, pe)
    res["noise_a"] = _noise_codes(c) * apc
    res["peak_current_a"] = float(amps.max())
    res["peak_end_current_a"] = float(amps[-1])
    if peak_end is not None:
        res["peak_duration_s"] = (idx[peak_end] - 0.5) / fs - t_on
    else:
        notes.append("no start of the hold found: peak duration not measured")
    # the average runs on into the samples after the peak (up to half its widest window):
    # padded with its last full window instead, a short peak's last samples would lag the
    # current by half a window and hide a pull-in reached just before the peak ends
    smooth_c = _denoise(rd.c[on:min(pe + 7, n)], lv.sigma)[:pe - on]
    if pull_in is not None:
        hit = _level_time(t, smooth_c, pull_in / apc, True, 1.0 / fs)
        if hit is None:
            notes.append(f"never reached the pull-in current {pull_in:.4g} A during the peak "
                         f"(highest {amps.max():.4g} A)")
        else:
            res["pull_in_time_s"] = max(hit[0] - t_on, 0.0)
            res["pull_in_resolution_s"] = hit[1]
    _dip(amps, t, t_on, res, notes, apc, dip_conf, lv.zero * apc)

    # ---- hold
    if peak_end is not None:
        h1 = off if off is not None else end
        if h1 - peak_end >= 4:
            res["hold_duration_s"] = float((idx[h1 - 1] - idx[peak_end] + 1) / fs)
            _hold(rd, peak_end, h1, lv, sense, f_hold, min_spp, res, notes)
        else:
            notes.append("hold too short to measure")

    # ---- release
    if off is not None:
        if sense == "switch":
            notes.append("sense resistor under the switch: the release decay is invisible "
                         "(it reads zero while the switch is off); release time not measured")
        else:
            r_end = min(max(end + 1, off + 1), n)
            t_off = (idx[off] - 0.5) / fs
            tr, cr = rd.t(off, r_end), rd.c[off:r_end]
            if dropout is not None:
                # denoised past the end (as the peak's, above): a centred average must not
                # hold its last full window's value over a drop-out reached within half a
                # window of the end (a fast release, or noise inflated by a PWM sampled a
                # few times a period)
                smooth_r = _denoise(rd.c[off:min(r_end + 7, n)], lv.sigma)[:r_end - off]
                hit = _level_time(tr, smooth_r, dropout / apc, False, 1.0 / fs)
                if hit is None:
                    notes.append(f"the current did not fall to the drop-out current {dropout:.4g} A")
                else:
                    res["release_time_s"] = max(hit[0] - t_off, 0.0)
                    res["release_resolution_s"] = hit[1]
            tz = _boundary(tr, cr, lv.zero + 1, False)
            if tz is not None:
                res["release_zero_time_s"] = max(tz - t_off, 0.0)
            _bump(rd.amps(off, r_end), tr, t_off, res, apc, lv.zero * apc)
    return ActuationResult(
        number=number, phases_from=cut.source, on_at_s=float(t_on), on_index=int(idx[on]),
        peak_end_index=None if peak_end is None else int(idx[peak_end]),
        off_index=None if off is None else int(idx[off]),
        end_index=int(idx[cut.end]) if cut.end < n else int(idx[-1]) + 1,
        samples_missing=int(missing), complete=bool(complete), partial=cut.partial,
        notes=tuple(notes), **res)


def _dip(amps: np.ndarray, t: np.ndarray, t_on: float, res: dict, notes: list[str],
         apc: float, dip_conf: float, zero_a: float) -> None:
    """The deepest fall from the running maximum of the peak phase that recovers before
    the peak ends: the armature's motion makes the current dip, and it seats at the
    bottom of the dip (its motional back-EMF stops there)."""
    if amps.size < 8:
        return
    width = int(min(max(3, amps.size // 100), 31))
    s = _smooth(amps, width)
    core = s[: max(s.size - width, 1)]
    run = np.maximum.accumulate(core)
    draw = run - core
    j = int(np.argmax(draw))
    depth = float(draw[j])
    recovers = depth > 0 and float(np.max(s[j:])) - float(s[j]) >= 0.5 * depth
    sigma = max(res["noise_a"], QUANTISATION_SIGMA * apc) / math.sqrt(width)
    conf = depth / sigma if recovers and sigma > 0 else 0.0
    res["dip_confidence"] = float(conf)
    top = int(np.argmax(s[:j + 1]))
    real = depth >= 0.02 * float(s[top]) and float(s[top]) >= 4.0 * zero_a
    if conf >= dip_conf and real:
        lo, hi = max(j - width, top), min(j + width + 1, amps.size)
        bottom = lo + int(np.argmin(s[lo:hi]))
        res["seated_time_s"] = float(t[bottom] - t_on)
        res["dip_depth_a"] = depth
        res["dip_top_current_a"] = float(s[top])
    else:
        notes.append(f"no current dip above the noise (confidence {conf:.1f}, at least {dip_conf:g} "
                     "and 2 % of the current wanted): the armature's seating does not show")


def _hold(rd: _Reader, h0: int, h1: int, lv: _Levels, sense: str, f_hold: float | None,
          min_spp: float, res: dict, notes: list[str]) -> None:
    """Hold figures over its last half, cut into whole PWM periods ending at the off edge.

    The ripple comes from the spread of the samples inside each period (so a mean that
    still drifts does not count as ripple): a ripple of peak-to-peak ``r`` whose segments
    are short against ``L/R`` is a triangle, whose values spread evenly over ``r`` (sigma
    ``r / sqrt(12)``), less the noise of one sample (measured over the same samples:
    ``_noise_codes_ramps``).
    """
    fs, apc = rd.fs, rd.apc
    spp = fs / f_hold if f_hold else None
    res["hold_samples_per_period"] = spp
    a = h0 + (h1 - h0) // 2
    edges = np.array([a, h1])
    if spp is not None:
        periods = int((h1 - a) / spp)
        if periods >= 1:
            edges = h1 - np.round((periods - np.arange(periods + 1)) * spp).astype(np.int64)
            a = int(edges[0])
    c = rd.c[a:h1]
    if c.size < 2:
        notes.append("hold too short to measure")
        return
    resolved = spp is not None and spp >= min_spp
    if spp is None:
        notes.append("hold frequency unknown: ripple not measured")
    elif not resolved:
        notes.append(f"the sample rate resolves the PWM with {spp:.3g} samples per period "
                     f"(< {min_spp:g}): hold mean only, no ripple")
    # the noise under the ripple, from the hold's own samples: the capture's level (its
    # quietest blocks: idle, clipped at zero, and smooth rises) reads low, and the ripple's
    # variance can be a quarter of the noise's, so a few % low here is tens of % of ripple
    # A current with steps (an eddy term's terminal current steps at each edge) has corners
    # no wider than the noise, which the ramps' estimate takes for noise: samples whole PWM
    # periods apart repeat the ripple and its steps, so their second differences hold the
    # noise alone -- the lower of the two (the settled hold repeats; the lag's is absent
    # where whole periods span no whole number of samples)
    lag = _pwm_lag(spp, c.size // 3, slow=math.inf) if resolved else 0
    noise2 = (min(_noise_codes_ramps(c), _block_noise(c, lag) if lag else math.inf) if resolved
              else lv.sigma)**2
    live = c > lv.zero
    if sense == "switch" and np.any(live):
        # on-time samples sit at the hold current, far above a noisy zero reading
        live = c > max(lv.zero, 0.1 * float(np.median(c[live])))
    vals = np.where(c > 0, c + 0.5, 0.0)
    starts = edges[:-1] - a
    if sense == "coil":
        dcm = float(np.mean(~live)) > 0.02
        weight = np.ones_like(vals)
    else:
        weight = live.astype(float)
        res["hold_duty_measured"] = float(np.mean(live))
        if weight.sum() < 2:
            notes.append("no on-time samples in the hold: hold current not measured")
            return
        on_vals = vals[live]
        dcm = float(np.percentile(on_vals, 2.0)) < 0.25 * float(np.median(on_vals))
    res["hold_discontinuous"] = bool(dcm)
    if sense == "switch" and dcm:
        notes.append("sense under the switch in discontinuous conduction: the coil current's "
                     "off-time is invisible, hold mean and ripple not estimated")
        return
    # Under the switch only the on-time samples read the coil current. In continuous
    # conduction they rise evenly from the ripple's bottom to its top, so their mean is
    # the coil's mean current; the mean of all samples, zeros included, would be the
    # switch (supply) current.
    total = float(weight.sum())
    res["hold_mean_a"] = float((vals * weight).sum() / total * apc)
    if sense == "switch":
        notes.append("sense under the switch: hold mean from the on-time samples (continuous conduction)")
    if resolved:
        cnt = np.add.reduceat(weight, starts)
        s1 = np.add.reduceat(vals * weight, starts)
        s2 = np.add.reduceat(vals * vals * weight, starts)
        ok = cnt >= 3
        if not np.any(ok):
            notes.append("too few samples per period for the ripple")
        elif dcm:
            spans = [float(vals[x:y][weight[x:y] > 0].max() - vals[x:y][weight[x:y] > 0].min())
                     for x, y in zip(starts, np.r_[starts[1:], c.size]) if weight[x:y].sum() >= 2]
            res["hold_ripple_a"] = float(np.mean(spans)) * apc
            notes.append("discontinuous conduction: ripple is the per-period peak (from zero), "
                         "as sampled (low by up to one sample's slope)")
        else:
            m = cnt[ok]
            var = s2[ok] / m - (s1[ok] / m) ** 2
            # n evenly spaced samples of a ramp spread (n^2 - 1)/n^2 of its full variance
            corr = m * m / np.maximum(m * m - 1.0, 1.0)
            r2 = 12.0 * float(np.mean(np.maximum(var - noise2, 0.0) * corr))
            res["hold_ripple_a"] = math.sqrt(r2) * apc
    on_vals = vals[weight > 0]
    half = on_vals.size // 2
    if half >= 4:
        m1, m2 = float(on_vals[:half].mean()), float(on_vals[half:].mean())
        spread = float(np.std(on_vals)) / math.sqrt(half)
        if abs(m1 - m2) > 0.01 * abs(m2) + 4.0 * spread:
            notes.append(f"the hold current was still changing ({m1 * apc:.4g} -> {m2 * apc:.4g} A "
                         "over the measured half): a longer hold settles it")


def _bump(amps: np.ndarray, t: np.ndarray, t_off: float, res: dict, apc: float,
          zero_a: float) -> None:
    """A rise of current during the release (the armature opening), if above the noise.
    The tail near zero, where the decay flattens and the ADC clips, is left out."""
    low = np.flatnonzero(amps < 2.0 * zero_a)
    keep = int(low[0]) if low.size else amps.size
    amps, t = amps[:keep], t[:keep]
    if amps.size < 8:
        return
    width = int(min(max(3, amps.size // 50), 15))
    s = _smooth(amps, width)
    run = np.minimum.accumulate(s)
    rise = s - run
    j = int(np.argmax(rise))
    height = float(rise[j])
    sigma = max(res.get("noise_a", 0.0), QUANTISATION_SIGMA * apc) / math.sqrt(width)
    if height > 0 and height / sigma >= BUMP_MIN_CONFIDENCE:
        k = int(np.argmin(s[:j + 1]))
        res["release_bump_time_s"] = float(t[k] - t_off)
        res["release_bump_current_a"] = float(s[k])
        res["release_bump_height_a"] = height


# --------------------------------------------------------------------------- entry point
def analyse(capture: Capture, *, pull_in_current: float | None = None,
            dropout_current: float | None = None, hold_frequency: float | None = None,
            sense_position: str | None = None, use_events: bool = True,
            min_samples_per_period: float = MIN_SAMPLES_PER_PERIOD,
            dip_min_confidence: float = DIP_MIN_CONFIDENCE,
            min_idle: float | None = None) -> Analysis:
    """Cut ``capture`` into actuations and measure each (see the module docstring).

    Parameters
    ----------
    capture : with ``sample_rate_hz`` and ``amps_per_code`` in its metadata.
    pull_in_current, dropout_current : A; the thresholds of the pull-in and release times
        (``None``: those times are not measured).
    hold_frequency : PWM frequency of the hold in Hz (default: the capture's
        ``hold_frequency_hz``); decides whether the ripple is resolved.
    sense_position : ``"coil"`` or ``"switch"`` (default: the capture's, else ``"coil"``).
    use_events : take the phases from event records when there are any.
    min_samples_per_period : fewest samples per PWM period to report the ripple.
    dip_min_confidence : dip depth over the noise below which no dip is reported.
    min_idle : s without current that separates actuations found from the waveform
        (default: the larger of 1 ms and three PWM periods).

    Examples
    --------
    >>> import numpy as np
    >>> from coildrive.bench.capture_file import Capture
    >>> t = np.arange(4000) / 1e5                       # 100 kS/s
    >>> amps = np.where((t > 0.001) & (t < 0.03), 1.0 - np.exp(-(t - 0.001) / 0.004), 0.0)
    >>> cap = Capture.from_codes(np.floor(amps / 1e-3), sample_rate_hz=1e5, amps_per_code=1e-3)
    >>> a = analyse(cap, pull_in_current=0.5)
    >>> round(a.actuations[0].pull_in_time_s * 1e3, 2)  # 4 ms * ln 2 = 2.77 ms
    2.77
    """
    meta = capture.meta
    fs = meta.sample_rate_hz
    if fs is None or not fs > 0:
        raise InputError(capture.source, "sample_rate_hz",
                         "the capture does not say its sample rate; give a board (--board)")
    apc = meta.amps_per_code
    if apc is None or not apc > 0:
        raise InputError(capture.source, "amps_per_code",
                         "the capture does not say how many A one ADC code is; give a board (--board)")
    sense = sense_position or meta.sense_position or "coil"
    if sense not in ("coil", "switch"):
        raise InputError(capture.source, "sense_position", f"{sense!r} is not 'coil' or 'switch'")
    f_hold = hold_frequency if hold_frequency is not None else meta.hold_frequency_hz
    notes: list[str] = []
    rd = _Reader(capture, float(fs), float(apc), meta.zero_code)
    lv = _levels(rd.c, samples_per_period=fs / f_hold if f_hold else None)
    idle = min_idle if min_idle is not None else max(MIN_IDLE_S, 3.0 / f_hold if f_hold else 0.0)
    has_on = any(e.kind == EventKind.ON for e in capture.events)
    if len(capture) == 0:
        cuts = []
    elif use_events and has_on:
        cuts = _cuts_from_events(rd, capture.events, lv)
    else:
        if use_events:
            notes.append("no event records: phases found from the waveform")
        cuts = _cuts_from_waveform(rd, lv, sense, max(1, int(round(idle * fs))),
                                   fs / f_hold if f_hold else None)
    if not cuts:
        notes.append("no actuation found (no current rises above zero): an open coil, a "
                     "capture without actuations, or the wrong sense scaling")
    results = tuple(_measure(rd, cut, k + 1, lv, sense, pull_in_current, dropout_current,
                             f_hold, min_samples_per_period, dip_min_confidence)
                    for k, cut in enumerate(cuts) if cut.on < len(capture))
    return Analysis(results, float(fs), float(apc), sense, lv.zero * float(apc), pull_in_current,
                    dropout_current, f_hold, tuple(notes))
