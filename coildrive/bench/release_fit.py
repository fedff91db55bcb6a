"""The seated coil's flux-linkage curve from the release in a capture.

After the final switch-off the coil current decays through the freewheel path, which
puts a known voltage across the coil: ``dpsi/dt = -(V_fw + R_off i)``, with ``V_fw``
and ``R_off`` from the board (:func:`release_path`). The decay ends at zero current,
where the flux linkage is zero too (the diode blocks; the core's remanence is taken as
none), so the flux linkage at every sample of the decay is anchored at that end:

    psi(t) = integral_{t}^{t_zero} (V_fw + R_off i) dt

(the trapezoid rule over the samples; the last stretch to ``t_zero``, found by a line
through the last samples above zero, with the current falling straight to zero). The
armature is seated when the switch turns off, so the pairs ``(i, psi)`` lie on the
seated coil's curve -- until the armature lets go: below the current of a release bump
the points belong to an opening gap, and the table says from which current it is the
seated curve (``seated_above_a``).

Why the release and not the hold or the rise: the rise of a normal actuation moves the
armature, so ``integral (V - R_on i) dt`` there crosses from the open to the seated
curve; a PWM hold gives only the flux swing over its ripple (the slope near the hold
current), and integrating ``v - R i`` through a whole hold to reach an anchor would add
up the error of ``R`` over the hold's length. The release is short (a few time
constants), its voltage is the freewheel element's, and it ends at a known flux (zero).
It needs the current read while the coil freewheels: a sense resistor in the coil path.

The table, residual and resistance follow :mod:`coildrive.bench.flux_fit`: evenly
spaced currents up to 98 % of the lowest switch-off current over the actuations, the
median over the actuations, the RMS residual relative to the largest flux. Units: A,
Wb, V, ohm, s.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ..config import Board
from ..errors import InputError
from ..units import format_si
from .analysis import Analysis, analyse
from .capture_file import Capture, code_current
from .flux_fit import (TABLE_POINTS, TOP_FRACTION, fit_dict, median_table, settled_loop_resistance, table_text,
                       thin_samples)

#: The anchor near zero current: the share of the switch-off current (at least
#: ANCHOR_CODES ADC steps) above which the flux at zero current is read off the curve
#: (a quadratic through the samples from it to ANCHOR_SPAN times it, at least
#: ANCHOR_SAMPLES of them).
ANCHOR_FRACTION = 0.02
ANCHOR_CODES = 4
ANCHOR_SPAN = 4.0
ANCHOR_SAMPLES = 6


@dataclass(frozen=True)
class SeatedFit:
    """The seated curve: currents A and flux linkages Wb (from 0, rising), the coil's
    resistance ohm at ``coil_temp_c`` and how it was found, the freewheel path's voltage V
    and loop resistance ohm during the release, the relative RMS residual, the actuations
    used and the current above which the table is the seated curve (0: all of it; above
    it when the armature let go during the decay). ``samples``: each release's measured
    ``(current A, flux Wb)`` points, thinned (for ``--plot``; not in the JSON)."""

    current_a: tuple[float, ...]
    flux_wb: tuple[float, ...]
    resistance_ohm: float
    resistance_from: str
    freewheel: str
    freewheel_voltage_v: float
    freewheel_resistance_ohm: float
    supply_v: float
    coil_temp_c: float
    residual: float
    actuations: int
    seated_above_a: float
    notes: tuple[str, ...] = ()
    samples: tuple[tuple[np.ndarray, np.ndarray], ...] = field(default=(), repr=False, compare=False)

    def to_dict(self) -> dict:
        return fit_dict(self)

    def text(self) -> str:
        """The seated table as ``[coil]`` keys (``seated_current``, ``seated_linkage``),
        to paste below the open curve of a drive file with ``[armature]`` (one without
        takes one curve, the open one, and refuses these keys)."""
        cur, flux = table_text(self.current_a, self.flux_wb)
        above = (f"; the seated curve above {self.seated_above_a:.4g} A only (the armature lets go "
                 "below it)" if self.seated_above_a > 0 else "")
        return "\n".join([
            f"# seated curve, from the release through the {self.freewheel} path "
            f"({self.freewheel_voltage_v:.4g} V + {self.freewheel_resistance_ohm:.4g} ohm) over "
            f"{self.actuations} actuation(s), residual {self.residual:.2%}; covers "
            f"0..{self.current_a[-1]:.4g} A{above}",
            "# with [armature] these two lines follow flux_current/flux_linkage "
            "(docs/coil-model.md); without [armature] leave them out",
            f"seated_current = [{cur}]",
            f"seated_linkage = [{flux}]",
        ]) + "\n"


def release_path(board: Board, supply: float, r_coil: float) -> tuple[float, float, str]:
    """``(V_fw, R_off, name)`` of the path the final release decays through: the voltage
    V against the current and the loop resistance ohm, as :func:`coildrive.model.circuit.loop`
    with ``path="release"`` (tests/test_flux_fit.py checks the two agree on every board).
    ``supply`` V (a clamp and a bridge's fast decay return to the bus)."""
    fw = board.freewheel
    r_sense = board.sense.resistance
    r_sense_off = r_sense if board.sense.position == "coil" else 0.0
    if board.switch.topology == "full_bridge":   # two body diodes into the bus
        return supply + 2.0 * fw.diode_drop, r_coil + r_sense, "bridge's fast-decay"
    r_off = r_coil + r_sense_off + fw.resistance
    if fw.type == "clamp":
        return fw.clamp_voltage - supply, r_off, "clamp"
    return fw.diode_drop + fw.zener_voltage, r_off, fw.type


def fit_seated(capture: Capture, board: Board, supply: float, coil_temp: float | None = None,
               resistance: float | None = None, analysis: Analysis | None = None,
               points: int = TABLE_POINTS) -> SeatedFit:
    """The seated curve of the coil in ``capture`` from each actuation's release (see the
    module docstring). ``supply`` V; ``coil_temp`` degC (``None``: 20 degC, noted);
    ``resistance`` the coil's ohm at that temperature (``None``: from the settled current
    at the end of each peak, as :func:`coildrive.bench.flux_fit.fit_flux`)."""
    from .fit import coil_temperature, drive_switch_resistance

    if not (math.isfinite(supply) and supply > 0):
        raise InputError("--supply", "", f"{supply!r} must be a voltage above zero")
    if resistance is not None and not (math.isfinite(resistance) and resistance > 0):
        raise InputError("--resistance", "", f"{resistance!r} must be a resistance above zero")
    if board.sense.position != "coil":
        raise InputError("--seated", "", "the board's sense resistor sits under the switch "
                         "(sense.position = \"switch\"): it reads nothing while the coil "
                         "freewheels, so the release cannot be integrated; measure with the "
                         "sense in the coil path (or a current probe, a scope CSV)")
    fw = board.freewheel
    if board.switch.topology != "full_bridge" and fw.split_decay and fw.bypass_lead < 0:
        raise InputError("--seated", "", "split decay with a negative bypass_lead: the release "
                         "starts on the slow path and switches path at a moment the capture does "
                         "not show, so its voltage is not known")
    if release_path(board, supply, 0.0)[0] <= 0:
        raise InputError("--supply", "", f"{supply:.4g} V is at or above the board's clamp voltage "
                         f"{fw.clamp_voltage:.4g} V: the clamp would not conduct")
    meta = capture.meta
    fs, apc = meta.sample_rate_hz, meta.amps_per_code
    if analysis is None:
        analysis = analyse(capture)
    r_extra = drive_switch_resistance(board) + board.sense.resistance
    idx = capture.index
    notes: list[str] = []
    releases = []
    ons = [act.on_index for act in analysis.actuations[1:]] + [None]
    for act, next_on in zip(analysis.actuations, ons):
        if act.partial is not None or act.off_index is None:
            notes.append(f"actuation {act.number}: no whole release, not used")
            continue
        if resistance is None:
            if act.peak_end_index is None:
                notes.append(f"actuation {act.number}: no end of the peak to read R from, not used")
                continue
            a = int(np.searchsorted(idx, act.on_index))
            b = int(np.searchsorted(idx, act.peak_end_index))
            r_loop = settled_loop_resistance(code_current(capture.code[a:b], meta.zero_code, apc), supply)
            if r_loop is None:
                notes.append(f"actuation {act.number}: the current does not settle by the end of "
                             "the peak, not used (give the coil's resistance, or a longer peak)")
                continue
            r_coil = r_loop - r_extra
        else:
            r_coil = resistance
        # the release: from the switch-off (a sample later when the phases come from the
        # waveform, whose switch-off moment is an estimate) to the first sample at zero,
        # which may lie past the analysis's end (that ends at its noise threshold)
        start = int(np.searchsorted(idx, act.off_index)) + (act.phases_from != "events")
        stop = len(idx) if next_on is None else int(np.searchsorted(idx, next_on))
        t = idx[start:stop] / fs
        i = code_current(capture.code[start:stop], meta.zero_code, apc)
        zero = np.flatnonzero(i <= 0.0)
        if zero.size == 0 or zero[0] < ANCHOR_SAMPLES + 2:
            notes.append(f"actuation {act.number}: the release does not reach zero in the capture"
                         if zero.size == 0 else f"actuation {act.number}: too few samples in the release")
            continue
        p = int(zero[0])                              # the first sample at zero
        t, i = t[:p], np.minimum.accumulate(i[:p])    # the decay only falls
        v_fw, r_off, name = release_path(board, supply, r_coil)
        rate = v_fw + r_off * i                       # -dpsi/dt, V
        steps = 0.5 * (rate[1:] + rate[:-1]) * np.diff(t)
        # flux relative to the anchor sample ``a``, the last at or above ``low``; then the
        # flux at zero current, read off a quadratic through (i, psi) just above ``low``
        low = max(ANCHOR_FRACTION * float(i[0]), ANCHOR_CODES * apc)
        a = int(np.flatnonzero(i >= low)[-1])
        before = np.cumsum(steps[:a][::-1])[::-1]      # psi(k) - psi(a) for k < a
        after = -np.cumsum(steps[a:])                  # the same for k > a
        rel = np.concatenate([before, [0.0], after])
        window = (i >= low) & (i <= ANCHOR_SPAN * low)
        if np.count_nonzero(window) < ANCHOR_SAMPLES:
            notes.append(f"actuation {act.number}: too few samples near zero current in the release, not used")
            continue
        psi = rel - np.polyval(np.polyfit(i[window], rel[window], 2), 0.0)
        # rising in current, with the zero moment at (0, 0)
        releases.append((np.concatenate([[0.0], i[::-1]]), np.concatenate([[0.0], psi[::-1]]),
                         r_coil, act.release_bump_current_a, (v_fw, r_off, name)))
    if not releases:
        raise InputError(capture.source, "", "no actuation with a usable release for a seated curve"
                         + (f" ({'; '.join(notes)})" if notes else ""))
    top = TOP_FRACTION * min(float(i[-1]) for i, *_ in releases)
    # rising in current already: the pairs keep their order
    table_i, table_psi, residual = median_table([(i, psi) for i, psi, *_ in releases], top, points)
    if not np.all(np.diff(table_psi) > 0):
        raise InputError(capture.source, "", "the flux linkage read off the release does not rise "
                         "with the current (noise, or the wrong freewheel path): not a curve")
    r_coil = float(np.median([r for _, _, r, _, _ in releases]))
    if r_coil <= 0:
        raise InputError(capture.source, "", f"the loop resistance is below the board's switch + sense "
                         f"resistance ({r_extra:.4g} ohm): wrong supply or sense scaling?")
    bumps = [b for *_, b, _ in releases if b is not None]
    above = float(np.median(bumps)) if bumps else 0.0
    if bumps:
        notes.append(f"the armature lets go during the release near {above:.4g} A: below it the "
                     "table follows the opening gap, not the seated curve")
    temp, note = coil_temperature(coil_temp)
    notes += [note] if note else []
    v_fw, r_off, name = release_path(board, supply, r_coil)
    how = ("given (--resistance)" if resistance is not None else
           f"from the settled current: {supply:.4g} V / loop, less switch + sense {r_extra:.3g} ohm")
    return SeatedFit(tuple(float(x) for x in table_i), tuple(float(x) for x in table_psi), r_coil, how,
                     name, float(v_fw), float(r_off), float(supply), temp, residual, len(releases), above,
                     tuple(notes), tuple(thin_samples(i, psi) for i, psi, *_ in releases))


def seated_text(fit: SeatedFit) -> str:
    """One status line: what was fitted."""
    return (f"seated curve from {fit.actuations} release(s): 0..{fit.current_a[-1]:.4g} A, up to "
            f"{format_si(fit.flux_wb[-1], 'Wb')}, residual {fit.residual:.2%}")
