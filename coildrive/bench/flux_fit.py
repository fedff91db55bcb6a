"""The coil's flux-linkage curve from the switch-on rise in a capture.

From ``v = R i + dpsi/dt``, the flux linkage a coil has built up since its switch-on at
``t_on`` is

    psi(t) = integral_{t_on}^{t} (V - R_loop i) dt

(the trapezoid rule over the samples, from zero current at the switch-on moment).
``R_loop`` is the whole loop while the switch is on (coil, switch, sense resistor):
the rise must run long enough for the current to settle, where ``dpsi/dt = 0`` and so
``R_loop = V / i_settled``; or the coil's resistance at the capture's temperature is
given (``resistance``), and the board's switch and sense resistances are added. While
the current rises it is a one-to-one function of time, so each sample gives a point
``(i, psi)``; the table is read off them at evenly spaced currents up to 98 % of the
settled current (above it the current barely moves and each ADC code spans a long stretch
of flux), as the median over the actuations. The armature must not move during the
rise (block it open for the open curve; capture a seated coil for the seated one).

The residual is the RMS distance of the samples' flux from the table's interpolant
(PCHIP, as the design uses it), relative to the largest flux; the current range the
table covers is reported, and above it the design extends the curve straight.

Eddy currents (a resistance ``R_e`` across the magnetising branch, see
:mod:`coildrive.model.eddy`) show as a step at the switch-on: at zero flux the
magnetising current is zero, so the terminal current starts at ``V / (R_loop + R_e)``.
``psi = int (V - R_loop i) dt`` still holds (it is the branch voltage), but the curve is
the flux against the magnetising current ``i_m = i - (V - R_loop i) / R_e``. Near zero
flux ``i_m = psi / L_0``, so the terminal current is a straight line in the flux,
``i = (V + R_e psi / L_0) / (R_loop + R_e)``; its intercept at zero flux is the step. The
fit reads it off the start of each rise (a quadratic in ``psi`` over the samples below
:data:`EDDY_SPAN` of the largest flux: the curve's bend does not pull the intercept),
takes the median over the actuations, and when it stands clear of the ADC's resolution
(:data:`EDDY_MIN_CODES` codes and :data:`EDDY_MIN_SHARE` of the settled current) gives
``R_e = V / step - R_loop`` and tabulates the flux against ``i_m``. Its residual is the
RMS distance of those samples from the quadratic, relative to the step.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field

import numpy as np

from ..config import Board
from ..errors import InputError
from ..units import format_si
from .analysis import Analysis, analyse
from .capture_file import Capture

#: Points of the fitted table (zero included).
TABLE_POINTS = 12
#: Share of the settled current the table reaches.
TOP_FRACTION = 0.98
#: The last share of the peak over which the current must be flat (within SETTLED_SPREAD)
#: for the loop resistance to come from the settled current.
SETTLED_TAIL = 0.1
SETTLED_SPREAD = 0.005
#: Most measured points kept per rise for the plot.
PLOT_SAMPLES = 400
#: The start of the rise the switch-on step is read off: samples below this share of
#: the rise's largest flux.
EDDY_SPAN = 0.2
#: A step smaller than this many ADC codes, or this share of the settled current, is
#: not an eddy-current term (the fit then has none).
EDDY_MIN_CODES = 6
EDDY_MIN_SHARE = 0.002


@dataclass(frozen=True)
class FluxFit:
    """The fitted curve: currents A and flux linkages Wb (from 0, rising), the coil's
    resistance ohm (the loop less switch and sense) at ``coil_temp_c``, how it was found,
    the relative RMS residual, the current range covered and the actuations used.
    ``samples`` holds each used rise's measured ``(current A, flux Wb)`` points, thinned
    to at most :data:`PLOT_SAMPLES` each (for ``--plot``; not in the JSON)."""

    current_a: tuple[float, ...]
    flux_wb: tuple[float, ...]
    resistance_ohm: float
    loop_resistance_ohm: float
    resistance_from: str
    supply_v: float
    coil_temp_c: float
    residual: float
    actuations: int
    notes: tuple[str, ...] = ()
    samples: tuple[tuple[np.ndarray, np.ndarray], ...] = field(default=(), repr=False, compare=False)
    eddy_resistance_ohm: float | None = None
    eddy_step_a: float | None = None
    eddy_residual: float | None = None

    def to_dict(self) -> dict:
        out = fit_dict(self)
        for key in ("eddy_resistance_ohm", "eddy_step_a", "eddy_residual"):
            if out[key] is None:   # no eddy term seen: the document as before
                del out[key]
        out["coil_section"] = self.coil_section()
        return out

    def coil_section(self) -> str:
        """A ``[coil]`` section with the curve, ready to paste into a drive file (TOML)."""
        cur, flux = table_text(self.current_a, self.flux_wb)
        return "\n".join([
            "[coil]",
            f'resistance = "{self.resistance_ohm:.5g} ohm"    # {self.resistance_from}',
            f'reference_temp = "{self.coil_temp_c:.4g} degC"',
            f"# flux linkage from the rise at {self.supply_v:.4g} V over {self.actuations} "
            f"actuation(s), residual {self.residual:.2%}; covers 0..{self.current_a[-1]:.4g} A "
            "(above it the design extends the curve straight)",
            f"flux_current = [{cur}]",
            f"flux_linkage = [{flux}]",
            *([f'eddy_resistance = "{self.eddy_resistance_ohm:.5g} ohm"    # from the switch-on '
               f"step {self.eddy_step_a:.4g} A, residual {self.eddy_residual:.2%}; the curve is "
               "against the magnetising current"] if self.eddy_resistance_ohm is not None else []),
            "# resistance_tolerance, inductance_tolerance: keep your part's figures",
        ]) + "\n"


def fit_flux(capture: Capture, board: Board, supply: float, coil_temp: float | None = None,
             resistance: float | None = None, analysis: Analysis | None = None,
             points: int = TABLE_POINTS) -> FluxFit:
    """The flux-linkage curve of the coil in ``capture`` (see the module docstring).

    ``supply`` V during the capture; ``coil_temp`` degC (``None``: 20 degC, noted);
    ``resistance`` the coil's ohm at that temperature (``None``: from the settled
    current at the end of each peak).
    """
    from .fit import coil_temperature, drive_switch_resistance

    if not (math.isfinite(supply) and supply > 0):
        raise InputError("--supply", "", f"{supply!r} must be a voltage above zero")
    if resistance is not None and not (math.isfinite(resistance) and resistance > 0):
        raise InputError("--resistance", "", f"{resistance!r} must be a resistance above zero")
    meta = capture.meta
    fs, apc = meta.sample_rate_hz, meta.amps_per_code
    if analysis is None:
        analysis = analyse(capture)
    r_extra = drive_switch_resistance(board) + board.sense.resistance
    rises = []
    notes: list[str] = []
    idx = capture.index
    for act in analysis.actuations:
        end_index = act.peak_end_index if act.peak_end_index is not None else act.off_index
        if act.partial is not None or end_index is None or act.seated_time_s is not None:
            notes.append(f"actuation {act.number}: "
                         + ("the armature moves in the rise" if act.seated_time_s is not None
                            else "no whole peak") + ", not used")
            continue
        a = int(np.searchsorted(idx, act.on_index))
        b = int(np.searchsorted(idx, end_index))
        t = np.concatenate([[act.on_at_s], idx[a:b] / fs])
        i = np.concatenate([[0.0], np.maximum((capture.code[a:b].astype(float) - meta.zero_code + 0.5) * apc, 0.0)])
        settled = float(np.mean(i[-_tail(i.size):]))
        if resistance is None:
            r_loop = settled_loop_resistance(i, supply)
            if r_loop is None:
                notes.append(f"actuation {act.number}: the current does not settle by the end of "
                             "the peak, not used (give the coil's resistance, or a longer peak)")
                continue
        else:
            r_loop = resistance + r_extra
        psi = _flux(t, i, supply, r_loop)
        rises.append((i, psi, r_loop, settled, t))
    if not rises:
        raise InputError(capture.source, "", "no actuation with a usable rise for a flux-linkage "
                         "curve" + (f" ({'; '.join(notes)})" if notes else ""))
    r_e, step, eddy_residual = _eddy_step(rises, supply, apc)
    if r_e is not None:   # the curve against the magnetising current; the rise starts at the step
        for k, (i, psi, r, settled, t) in enumerate(rises):
            i = np.concatenate([[step], i[1:]])
            psi = _flux(t, i, supply, r)
            rises[k] = (i - (supply - r * i) / r_e, psi, r, settled, t)
    top = TOP_FRACTION * min(min(s, supply / r) for _, _, r, s, _ in rises)
    table_i, table_psi, residual = median_table([(i, psi) for i, psi, _, _, _ in rises], top, points)
    if not np.all(np.diff(table_psi) > 0):
        raise InputError(capture.source, "", "the flux linkage read off the rise does not rise with "
                         "the current (noise, an eddy-current hump or a moving armature): not a curve")
    r_loop = float(np.median([r for _, _, r, _, _ in rises]))
    r_coil = r_loop - r_extra
    if r_coil <= 0:
        raise InputError(capture.source, "", f"the loop resistance {r_loop:.4g} ohm is below the board's "
                         f"switch + sense resistance ({r_extra:.4g} ohm): wrong supply or sense scaling?")
    temp, note = coil_temperature(coil_temp)
    notes += [note] if note else []
    how = ("given (--resistance)" if resistance is not None else
           f"from the settled current: {supply:.4g} V / loop, less switch + sense {r_extra:.3g} ohm")
    return FluxFit(tuple(float(x) for x in table_i), tuple(float(x) for x in table_psi), r_coil, r_loop,
                   how, float(supply), temp, residual, len(rises), tuple(notes),
                   tuple(thin_samples(i, psi) for i, psi, _, _, _ in rises),
                   eddy_resistance_ohm=r_e, eddy_step_a=step, eddy_residual=eddy_residual)


def _flux(t, i, supply: float, r_loop: float) -> np.ndarray:
    """``psi = int (V - R_loop i) dt`` from the first sample (the trapezoid rule), Wb."""
    return np.concatenate([[0.0], np.cumsum(0.5 * (2 * supply - r_loop * (i[1:] + i[:-1])) * np.diff(t))])


def _eddy_step(rises, supply: float, amps_per_code: float):
    """``(R_e ohm, step A, residual)`` of the switch-on step read off the start of each
    rise (see the module docstring), or ``(None, None, None)`` when there is no step."""
    steps, resid = [], []
    for i, psi, r_loop, settled, _ in rises:
        sel = np.flatnonzero(psi[1:] <= EDDY_SPAN * psi[-1]) + 1   # the samples, not the on moment
        if sel.size < 6:
            return None, None, None
        c = np.polyfit(psi[sel], i[sel], 2)
        steps.append((float(c[2]), r_loop, settled))
        resid.append(float(np.sqrt(np.mean((np.polyval(c, psi[sel]) - i[sel]) ** 2))))
    step = float(np.median([s for s, _, _ in steps]))
    settled = min(s for _, _, s in steps)
    if not step > max(EDDY_MIN_CODES * amps_per_code, EDDY_MIN_SHARE * settled):
        return None, None, None
    r_loop = float(np.median([r for _, r, _ in steps]))
    r_e = supply / step - r_loop
    if not r_e > 0:
        return None, None, None
    return r_e, step, float(np.median(resid)) / step


def median_table(pairs, top: float, points: int) -> tuple[np.ndarray, np.ndarray, float]:
    """The table of ``points`` evenly spaced currents ``0..top`` A and the median over
    ``pairs`` (each measured ``(current A, flux Wb)``, in time order: the current made
    monotone first) of their flux there, and the RMS residual of the samples up to ``top``
    against the table's PCHIP interpolant, relative to the largest flux."""
    from ..model.flux import FluxCurve

    table_i = np.linspace(0.0, top, points)
    tables = []
    for i, psi in pairs:
        mono = np.maximum.accumulate(i)
        keep = np.concatenate([[True], np.diff(mono) > 0])
        tables.append(np.interp(table_i, mono[keep], psi[keep]))
    table_psi = np.median(np.array(tables), axis=0)
    if not np.all(np.diff(table_psi) > 0):
        return table_i, table_psi, math.nan
    curve = FluxCurve(table_i, table_psi)
    errs = [psi[i <= top] - curve.psi(i[i <= top]) for i, psi in pairs]
    return table_i, table_psi, float(np.sqrt(np.mean(np.concatenate(errs) ** 2)) / table_psi[-1])


def table_text(current, flux) -> tuple[str, str]:
    """A table's currents (A) and flux linkages (as ``"... mWb"`` strings) as TOML list items."""
    return (", ".join(f"{x:.6g}" for x in current), ", ".join(f'"{x * 1e3:.6g} mWb"' for x in flux))


def fit_dict(fit) -> dict:
    """A fit dataclass as JSON-ready data, its plot ``samples`` left out."""
    out = asdict(fit)
    del out["samples"]
    out["notes"] = list(fit.notes)
    return out


def _tail(n: int) -> int:
    """Samples in the last :data:`SETTLED_TAIL` of a peak of ``n`` samples (at least 5)."""
    return max(5, int(SETTLED_TAIL * n))


def settled_loop_resistance(i: np.ndarray, supply: float) -> float | None:
    """The loop resistance ohm from the settled current of a peak's samples ``i`` A at
    ``supply`` V (``V / i``), or ``None`` when the last :data:`SETTLED_TAIL` of the peak is
    not flat within :data:`SETTLED_SPREAD` (where ``dpsi/dt = 0`` the copper takes it all)."""
    tail = i[-_tail(i.size):]
    settled = float(np.mean(tail))
    if not (settled > 0 and np.ptp(tail) <= SETTLED_SPREAD * settled):
        return None
    return supply / settled


def thin_samples(i: np.ndarray, psi: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """At most :data:`PLOT_SAMPLES` evenly picked points of one rise (both ends kept)."""
    pick = np.unique(np.linspace(0, i.size - 1, min(i.size, PLOT_SAMPLES)).round().astype(int))
    return i[pick].copy(), psi[pick].copy()


def flux_text(fit: FluxFit) -> str:
    """One status line: what was fitted."""
    return (f"flux-linkage curve from {fit.actuations} actuation(s) at {fit.supply_v:.4g} V: "
            f"0..{fit.current_a[-1]:.4g} A, up to {format_si(fit.flux_wb[-1], 'Wb')}, "
            f"residual {fit.residual:.2%}; loop {fit.loop_resistance_ohm:.4g} ohm"
            + (f"; eddy resistance {fit.eddy_resistance_ohm:.4g} ohm (switch-on step "
               f"{fit.eddy_step_a:.4g} A)" if fit.eddy_resistance_ohm is not None else ""))
