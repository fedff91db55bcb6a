"""Fit the real coil's resistance and inductance from the rise in a capture.

While the armature has not started to move, a switched-on coil is a fixed RL circuit:
``i(t) = V / R_loop * (1 - exp(-(t - t0) R_loop / L))`` (the textbook RL step response),
with ``R_loop = R_coil + R_switch + R_sense`` (switch on-resistance and sense resistor
from the board file, a full bridge's two switches Q1 + Q4; the sense resistor is in the
loop while the switch is on wherever it sits). The fit is a least-squares fit of ``R_loop``, ``L`` and the switch-on moment
``t0`` to the samples of the rise (``scipy.optimize.least_squares``, trust-region
reflective), actuation by actuation; the coil's figures are the medians over the
actuations and their spread is reported.

Which samples count: from the switch-on to the end of the peak, or -- when the current
dips (a moving armature) -- only up to ``motion_fraction`` of the current at the top
before the dip: the motional back-EMF bends the rise well before the top, so the window
stops early. Codes are read mid-step (``code + 0.5``, a truncating ADC) and samples at
zero or at full scale are left out (there the mid-step reading is biased).

Eddy currents (a resistance ``R_e`` across the magnetising branch,
:mod:`coildrive.model.eddy`) make the rise start with a step: the terminal current is
``V/R_loop (1 - (1 - s) exp(-(t - t0) / tau'))`` with the step share ``s = R_loop /
(R_loop + R_e)`` and ``tau' = L / (R_loop (1 - s))``. Each actuation is also fitted with
that four-parameter form; where its step stands clear of the ADC's resolution
(:data:`EDDY_MIN_CODES` codes and :data:`EDDY_MIN_SHARE` of ``V / R_loop``) and it
halves the residual of the plain fit, the coil has an eddy term
(``R_e = R_loop (1 - s) / s``) and that fit is kept; otherwise the plain one.

Actuations the capture cut short (``partial``) are not fitted. Also reported: the seat
time (bottom of the current dip) and the drop-out current seen in the release bump (the
current when the opening armature turned the decay around; the armature let go slightly
above it), when the capture shows them.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np

from ..config import Board
from ..errors import InputError
from ..model.circuit import COPPER_ALPHA
from ..model.topology import topology_named
from ..units import format_si
from .analysis import Analysis, analyse
from .capture_file import Capture

#: Share of the current at the top before the dip up to which the rise is fitted when
#: the armature moves (its motion barely shows below it; checked in the tests).
MOTION_FRACTION = 0.5
#: Fewest samples in a fit window.
MIN_FIT_SAMPLES = 12
#: A switch-on step smaller than this many ADC codes, or this share of the settled
#: current, is not taken for an eddy term (as in coildrive.bench.flux_fit).
EDDY_MIN_CODES = 6
EDDY_MIN_SHARE = 0.002


@dataclass(frozen=True)
class RiseFit:
    """One actuation's fit: loop resistance ohm, inductance H, switch-on moment s
    (capture time), RMS residual A, samples used."""

    number: int
    loop_resistance_ohm: float
    inductance_h: float
    t0_s: float
    rms_residual_a: float
    samples: int
    eddy_resistance_ohm: float | None = None


@dataclass(frozen=True)
class CoilFit:
    """The coil as the capture shows it. SI units, temperatures in degC.

    ``resistance_ohm`` is the coil alone (the loop less the board's switch and sense
    resistances) at ``coil_temp_c`` (the ``[coil]`` section states it with
    ``reference_temp`` = ``coil_temp_c``); ``switch_resistance_ohm`` is the switches' in
    the drive path (a full bridge's two). Spreads are the relative half-ranges over the
    actuations.
    """

    resistance_ohm: float
    loop_resistance_ohm: float
    inductance_h: float
    resistance_spread: float
    inductance_spread: float
    supply_v: float
    coil_temp_c: float
    coil_temp_known: bool
    switch_resistance_ohm: float
    sense_resistance_ohm: float
    armature_moves: bool
    seated_time_s: float | None
    dip_top_current_a: float | None
    dropout_current_a: float | None
    fits: tuple[RiseFit, ...]
    notes: tuple[str, ...] = ()
    eddy_resistance_ohm: float | None = None
    eddy_spread: float | None = None

    def to_dict(self) -> dict:
        out = asdict(self)
        out["fits"] = [_without_none_eddy(asdict(f)) for f in self.fits]
        out["notes"] = list(self.notes)
        if self.eddy_resistance_ohm is None:   # no eddy term seen: the document as before
            del out["eddy_resistance_ohm"], out["eddy_spread"]
        out["coil_section"] = self.coil_section()
        return out

    def coil_section(self) -> str:
        """A ``[coil]`` section of a drive file, ready to paste (TOML)."""
        temp_note = ("the coil's temperature during the capture" if self.coil_temp_known else
                     "assumed: the capture did not say the coil temperature (give --coil-temp)")
        what = ("the rise before the armature moves: with [armature] this is inductance_open"
                if self.armature_moves else "the rise of the peak")
        n = len(self.fits)
        lines = [
            "[coil]",
            f'resistance = "{self.resistance_ohm:.4g} ohm"    # fitted over {n} actuation(s), '
            f"spread +/-{self.resistance_spread:.1%}; the coil alone",
            f'reference_temp = "{self.coil_temp_c:.4g} degC"    # {temp_note}',
            f'inductance = "{format_si(self.inductance_h, "H", 4)}"    # fitted from '
            f"{what}, spread +/-{self.inductance_spread:.1%}",
        ]
        if self.eddy_resistance_ohm is not None:
            lines.append(f'eddy_resistance = "{format_si(self.eddy_resistance_ohm, "ohm", 4)}"    # fitted '
                         f"from the switch-on step, spread +/-{self.eddy_spread:.1%}")
        lines.append("# resistance_tolerance, inductance_tolerance: keep your part's figures")
        if self.seated_time_s is not None:
            lines.append(f"# seen: the armature seats {self.seated_time_s * 1e3:.4g} ms after switch-on "
                         f"(current dip, top {self.dip_top_current_a:.4g} A)")
        if self.dropout_current_a is not None:
            lines.append(f"# seen: drop-out near {self.dropout_current_a:.4g} A (release bump)")
        return "\n".join(lines) + "\n"


def _without_none_eddy(d: dict) -> dict:
    if d.get("eddy_resistance_ohm", 0) is None:
        del d["eddy_resistance_ohm"]
    return d


def _fit_eddy(t: np.ndarray, y: np.ndarray, v: float, t_on: float, fs: float, plain: np.ndarray,
              plain_rms: float, amps_per_code: float) -> tuple[np.ndarray, float] | None:
    """The four-parameter fit with a switch-on step (see the module docstring), started
    from the plain fit ``plain`` (R_loop, L, t0): ``((R_loop, L, t0, R_e), rms)``, or
    ``None`` when the capture shows no step."""
    from scipy.optimize import least_squares

    r0, l0, _ = plain
    span = 2.0 / fs
    s0 = float(np.clip(y[0] * r0 / v, 0.01, 0.9))

    def model(x):
        r, ind, t0, share = x[0] * r0, x[1] * l0, t_on + x[2] * span, x[3]
        dt = t - t0
        tau = ind / (r * (1.0 - share))
        return np.where(dt >= 0, v / r * (1.0 - (1.0 - share) * np.exp(-np.maximum(dt, 0.0) / tau)), 0.0)

    sol = least_squares(lambda x: model(x) - y, x0=[1.0, 1.0, 0.0, s0],
                        bounds=([1e-4, 1e-3, -1.0, 0.0], [1e4, 1e3, 1.0, 0.95]), method="trf",
                        xtol=1e-12, ftol=1e-12, gtol=1e-12)
    x = sol.x
    rms = float(np.sqrt(np.mean(sol.fun**2)))
    r = x[0] * r0
    step = v / r * x[3]
    if not (step > max(EDDY_MIN_CODES * amps_per_code, EDDY_MIN_SHARE * v / r) and rms < 0.5 * plain_rms):
        return None
    return np.array([r, x[1] * l0, t_on + x[2] * span, r * (1.0 - x[3]) / x[3]]), rms


def _fit_one(t: np.ndarray, y: np.ndarray, v: float, t_on: float, fs: float) -> tuple[np.ndarray, float]:
    from scipy.optimize import least_squares

    # starting point: the initial slope gives L (di/dt = V/L at t0), the curvature R
    k = max(3, min(t.size // 5, 50))
    slope = np.polyfit(t[:k] - t_on, y[:k], 1)[0]
    l0 = v / slope if slope > 0 else 0.1
    r0 = max(v / max(float(y.max()) * 1.5, 1e-9), 1e-3)
    span = 2.0 / fs

    def model(x):
        r, ind, t0 = x[0] * r0, x[1] * l0, t_on + x[2] * span
        dt = np.maximum(t - t0, 0.0)
        return v / r * -np.expm1(-dt * r / ind)

    def residual(x):
        return model(x) - y

    sol = least_squares(residual, x0=[1.0, 1.0, 0.0], bounds=([1e-4, 1e-3, -1.0], [1e4, 1e3, 1.0]),
                        x_scale=[1.0, 1.0, 1.0], method="trf", xtol=1e-12, ftol=1e-12, gtol=1e-12)
    x = sol.x
    rms = float(np.sqrt(np.mean(sol.fun**2)))
    return np.array([x[0] * r0, x[1] * l0, t_on + x[2] * span]), rms


def coil_temperature(coil_temp: float | None) -> tuple[float, str | None]:
    """The coil temperature a fit states (degC), and a note when the capture did not say it."""
    if coil_temp is not None:
        return float(coil_temp), None
    return 20.0, ("coil temperature unknown: 20 degC assumed for reference_temp "
                  f"(copper changes {COPPER_ALPHA:.2%} per K, IEC 60028)")


def drive_switch_resistance(board: Board) -> float:
    """The switches' on-resistance (ohm) in the switched-on loop: one switch's, or a full
    bridge's two (Q1 + Q4)."""
    return board.switch.on_resistance * topology_named(board.switch.topology).drive_switches


def fit_capture(capture: Capture, board: Board, supply: float, coil_temp: float | None = None,
                analysis: Analysis | None = None, motion_fraction: float = MOTION_FRACTION) -> CoilFit:
    """Fit R and L of the coil from every actuation of ``capture`` (see the module docstring).

    Parameters
    ----------
    capture : with sample rate and scaling (the board's, if the capture does not say).
    board : the board: switch on-resistance and sense resistance in the loop.
    supply : bus voltage in V during the capture.
    coil_temp : coil temperature in degC during the capture (``None``: unknown, 20 degC
        is written and flagged).
    analysis : an :func:`analyse` result of the capture, if already made.
    motion_fraction : see :data:`MOTION_FRACTION`.
    """
    if not (math.isfinite(supply) and supply > 0):
        raise InputError("--supply", "", f"{supply!r} must be a voltage above zero")
    meta = capture.meta
    fs = meta.sample_rate_hz
    apc = meta.amps_per_code
    if analysis is None:
        analysis = analyse(capture)
    full = 2 ** meta.adc_bits - 1 if meta.adc_bits else 0xFFFF
    fits: list[RiseFit] = []
    notes: list[str] = []
    moves = False
    seats, tops, drops = [], [], []
    idx = capture.index
    for act in analysis.actuations:
        if act.partial is not None:
            notes.append(f"{act.partial_text()}: not fitted")
            continue
        a = int(np.searchsorted(idx, act.on_index))
        end_index = act.peak_end_index if act.peak_end_index is not None else act.off_index
        if end_index is None:
            notes.append(f"actuation {act.number}: no end of the peak, not fitted")
            continue
        b = int(np.searchsorted(idx, end_index)) - 1     # the last sample before the hold
        if act.seated_time_s is not None:
            moves = True
            seats.append(act.seated_time_s)
            tops.append(act.dip_top_current_a)
            limit = motion_fraction * float(act.dip_top_current_a)
            c_amps = (capture.code[a:b].astype(float) - meta.zero_code + 0.5) * apc
            over = np.flatnonzero(c_amps >= limit)
            b = a + int(over[0]) if over.size else b
        if act.release_bump_current_a is not None:
            drops.append(act.release_bump_current_a)
        code = capture.code[a:b].astype(np.int64) - meta.zero_code
        keep = (code > 0) & (capture.code[a:b] < full)
        if np.count_nonzero(keep) < MIN_FIT_SAMPLES:
            notes.append(f"actuation {act.number}: only {np.count_nonzero(keep)} samples in the rise, not fitted")
            continue
        t = idx[a:b][keep] / fs
        y = (code[keep] + 0.5) * apc
        plain, rms = _fit_one(t, y, supply, act.on_at_s, fs)
        stepped = (None if act.seated_time_s is not None else   # a moving armature: the plain fit
                   _fit_eddy(t, y, supply, act.on_at_s, fs, plain, rms, apc))
        if stepped is not None:
            (r_loop, ind, t0, r_e), rms = stepped
            fits.append(RiseFit(act.number, float(r_loop), float(ind), float(t0), rms, int(t.size),
                                float(r_e)))
            continue
        r_loop, ind, t0 = plain
        fits.append(RiseFit(act.number, float(r_loop), float(ind), float(t0), rms, int(t.size)))
    if not fits:
        raise InputError(capture.source, "", "no actuation with a usable rise to fit"
                         + (f" ({'; '.join(notes)})" if notes else ""))
    r_loops = np.array([f.loop_resistance_ohm for f in fits])
    inds = np.array([f.inductance_h for f in fits])
    r_loop = float(np.median(r_loops))
    ind = float(np.median(inds))
    r_sw = drive_switch_resistance(board)
    r_sense = board.sense.resistance
    r_coil = r_loop - r_sw - r_sense
    if r_coil <= 0:
        raise InputError(capture.source, "", f"the fitted loop resistance {r_loop:.4g} ohm is below the "
                         f"board's switch + sense resistance ({r_sw + r_sense:.4g} ohm): wrong supply "
                         "voltage or sense scaling?")
    known = coil_temp is not None
    temp, note = coil_temperature(coil_temp)
    notes += [note] if note else []
    if moves:
        notes.append(f"the armature moves: the rise is fitted up to {motion_fraction:.0%} of the current "
                     "at the top before the dip; the inductance is the open armature's")

    def spread(x):
        return float((x.max() - x.min()) / 2.0 / np.median(x)) if x.size > 1 else 0.0

    eddies = np.array([f.eddy_resistance_ohm for f in fits if f.eddy_resistance_ohm is not None])
    r_e = e_spread = None
    if eddies.size:
        if eddies.size < len(fits):
            notes.append(f"a switch-on step (eddy currents) in {eddies.size} of {len(fits)} "
                         "actuation(s): the eddy resistance is their median")
        r_e, e_spread = float(np.median(eddies)), spread(eddies)
    return CoilFit(eddy_resistance_ohm=r_e, eddy_spread=e_spread, resistance_ohm=r_coil, loop_resistance_ohm=r_loop, inductance_h=ind,
                   resistance_spread=spread(r_loops - r_sw - r_sense), inductance_spread=spread(inds),
                   supply_v=float(supply), coil_temp_c=temp, coil_temp_known=known,
                   switch_resistance_ohm=r_sw, sense_resistance_ohm=r_sense, armature_moves=moves,
                   seated_time_s=float(np.median(seats)) if seats else None,
                   dip_top_current_a=float(np.median(tops)) if tops else None,
                   dropout_current_a=float(np.median(drops)) if drops else None,
                   fits=tuple(fits), notes=tuple(notes))
