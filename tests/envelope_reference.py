"""An independent time-domain simulator of the switched low-side coil driver.

The envelope tests check the design against this, so it owes nothing to the library's
closed forms (``coildrive.model``, ``coildrive.design``): the element values come from the
parsed drive and board files alone, and every figure is an integration of the circuit's
differential equation with scipy's ``solve_ivp`` (LSODA, ``rtol = 1e-9``), split at every
switching edge, with an event where the current reaches zero.

The circuit (Kirchhoff's voltage law around each loop, the topology of DESIGN.md):

* switch on: ``L di/dt = V_bus - (R_coil(T) + R_switch + R_sense) i`` -- the sense
  resistor carries the coil current wherever it sits;
* switch off, freewheel element across the coil (diode, diode + Zener, diode +
  resistor): ``L di/dt = -(V_d [+ V_z] + (R_coil [+ R_sense in the coil path] [+ R_fw]) i)``;
* switch off, clamp from the drain to ground (supply still connected):
  ``L di/dt = V_bus - V_clamp - (R_coil [+ R_sense in the coil path]) i``;
* split decay: during the hold a bypass switch shorts the fast element (or, with a clamp,
  closes a diode path across the coil): ``L di/dt = -(V_d + (R_coil [+ R_sense] +
  R_bypass) i)``; the final turn-off takes the fast element;
* every freewheel path conducts one way: the current stops at zero and stays there;
* a full bridge: two switches on, ``V_bus = (R_coil + 2 R_sw + R_sense) i + L di/dt``; the
  hold's off-times recirculate through the two low-side switches, ``0 = (R_coil + 2 R_sw
  [+ R_sense inline]) i + L di/dt``; the release runs through two body diodes into the
  bus, ``-(V_bus + 2 V_d) = (R_coil + R_sense) i + L di/dt``.

Copper: IEC 60028 gives the resistance of annealed copper linear in temperature about
20 degC, ``R(T) = R_20 (1 + alpha_20 (T - 20))`` with ``alpha_20 = 0.00393 /K``; a coil
whose resistance is given at another reference temperature ``T_ref`` is first brought
back to 20 degC: ``R(T) = R_ref (1 + alpha_20 (T - 20)) / (1 + alpha_20 (T_ref - 20))``.

PWM periodic steady state: the one-period map ``i0 -> i(T)`` is integrated and its fixed
point found by shooting (a secant step, exact for the affine map of a linear circuit and
confirmed by one more period, else ``brentq`` on ``i(T) - i0``). Self-heating: the coil temperature
is the fixed point ``T = T_amb + R_th * P_coil(T)`` with ``P_coil = I_rms^2 R_coil(T)`` from
that steady state (``brentq`` again); with an on/off cycle and a heat capacity, the
hottest point of the cycle's periodic orbit (:func:`cycle_coil_temperature`).
"""

from __future__ import annotations

import math
import subprocess
from dataclasses import dataclass
from pathlib import Path

from scipy.integrate import solve_ivp
from scipy.optimize import brentq

from coildrive.config import Drive

#: Annealed copper, temperature coefficient of resistance at 20 degC, 1/K (IEC 60028).
IEC60028_ALPHA_20 = 0.00393
#: solve_ivp settings: LSODA (scipy), relative tolerance 1e-9 (the brief of issue 11).
METHOD, RTOL = "LSODA", 1e-9
ATOL = (1e-13, 1e-17, 1e-17)  # A, C, A^2 s: far below every figure checked


def copper_resistance(r_ref: float, t_ref: float, temp: float) -> float:
    """Copper resistance at ``temp`` degC of a coil measuring ``r_ref`` at ``t_ref`` (IEC 60028)."""
    return r_ref * (1.0 + IEC60028_ALPHA_20 * (temp - 20.0)) / (1.0 + IEC60028_ALPHA_20 * (t_ref - 20.0))


@dataclass(frozen=True)
class Segment:
    """One switch state: ``L di/dt = v - r i``; ``one_way``: the current stops at zero."""

    v: float
    r: float
    one_way: bool


@dataclass(frozen=True)
class Circuit:
    """The driver circuit at one operating point (SI units)."""

    v_bus: float
    r_coil: float
    inductance: float
    on: Segment
    hold_off: Segment       # the PWM off-times (the bypass path with split decay)
    release_off: Segment    # the final turn-off (the fast element)
    v_release_element: float  # V across the release path's element(s) at zero current
    r_release_element: float  # ohm in the release element (the freewheel resistor)
    clamp: bool

    def switch_voltage(self, current: float) -> float:
        """Drain voltage right after the switch interrupts ``current`` A into the release
        path: a clamp holds it at the clamp voltage; an element across the coil puts its
        own voltage on top of the supply (KVL: drain = V_bus + V_element)."""
        if self.clamp:
            return self.v_release_element
        return self.v_bus + self.v_release_element + self.r_release_element * current


def circuit(drive: Drive, supply: float, coil_temp: float, r_factor: float = 1.0,
            l_factor: float = 1.0, inductance: float | None = None) -> Circuit:
    """The circuit of ``drive`` at a supply (V), coil temperature (degC) and tolerance factors.

    ``inductance`` (H, before ``l_factor``) defaults to ``coil.inductance``, or with an
    ``[armature]`` to the seated ``inductance_closed`` (the hold's armature is seated).
    """
    coil, sense, fw = drive.coil, drive.board.sense, drive.freewheel
    r_coil = copper_resistance(coil.resistance, coil.reference_temp, coil_temp) * r_factor
    if inductance is None:
        inductance = coil.inductance if drive.armature is None else drive.armature.inductance_closed
    r_path = r_coil + (sense.resistance if sense.position == "coil" else 0.0)
    if drive.switch.topology == "full_bridge":
        # KVL round the bridge (docs/design-method.md#full-bridge): two switches drive; the
        # hold recirculates through the two low-side ones; the release runs through two
        # body diodes into the bus, past the sense resistor in either position; the
        # switches then see the bus plus a diode (plus a common-return sense drop).
        r_sw = drive.switch.on_resistance
        on = Segment(supply, r_coil + 2 * r_sw + sense.resistance, False)
        hold_off = Segment(0.0, r_path + 2 * r_sw, False)
        release = Segment(-(supply + 2 * fw.diode_drop), r_coil + sense.resistance, True)
        r_el = sense.resistance if sense.position == "switch" else 0.0
        return Circuit(float(supply), r_coil, inductance * l_factor, on, hold_off, release,
                       fw.diode_drop, r_el, False)
    on = Segment(supply, r_coil + drive.switch.on_resistance + sense.resistance, False)
    if fw.type == "clamp":
        release = Segment(supply - fw.clamp_voltage, r_path, True)
        v_el, r_el = fw.clamp_voltage, 0.0
    else:
        v_el, r_el = fw.diode_drop + fw.zener_voltage, fw.resistance
        release = Segment(-v_el, r_path + r_el, True)
    # A bypass has something to bypass only when the path holds more than the diode.
    if fw.split_decay and fw.type != "diode":
        hold_off = Segment(-fw.diode_drop, r_path + fw.bypass_resistance, True)
    else:
        hold_off = release
    return Circuit(float(supply), r_coil, inductance * l_factor, on, hold_off, release,
                   v_el, r_el, fw.type == "clamp")


@dataclass(frozen=True)
class Span:
    """The end of one integrated stretch: current, and the integrals of ``i`` and ``i^2``."""

    current: float
    charge: float
    square: float


def run(seg: Segment, inductance: float, i0: float, duration: float) -> Span:
    """Integrate one switch state for ``duration`` s from ``i0`` A (scipy ``solve_ivp``).

    A one-way path stops at zero current (terminal event) and stays there.
    """
    if duration <= 0.0:
        return Span(i0, 0.0, 0.0)

    def rhs(_t, y):
        i = y[0]
        return [(seg.v - seg.r * i) / inductance, i, i * i]

    events = None
    if seg.one_way:
        if i0 <= 0.0 and seg.v <= 0.0:
            return Span(0.0, 0.0, 0.0)

        def zero(_t, y):
            return y[0]

        zero.terminal, zero.direction = True, -1
        events = zero
    sol = solve_ivp(rhs, (0.0, duration), [i0, 0.0, 0.0], method=METHOD, rtol=RTOL,
                    atol=ATOL, events=events)
    if not sol.success:
        raise RuntimeError(f"solve_ivp failed: {sol.message}")
    if events is not None and sol.t_events[0].size:
        _, q, s = sol.y_events[0][0]
        return Span(0.0, q, s)  # stopped at zero for the rest of the stretch
    i, q, s = sol.y[:, -1]
    return Span(max(i, 0.0) if seg.one_way else i, q, s)


def rise_current(c: Circuit, times: list[float]) -> list[float]:
    """Current at each of ``times`` (s, ascending) after the switch closes on a dead coil."""
    out, i, t = [], 0.0, 0.0
    for t_next in times:
        i = run(c.on, c.inductance, i, t_next - t).current
        t = t_next
        out.append(i)
    return out


def time_to_current(c: Circuit, target: float) -> float | None:
    """Time (s) for the current to rise from zero to ``target`` A with the switch on
    (an event of the integration); ``None`` when the steady current stays below it."""
    if c.on.v / c.on.r <= target:
        return None

    def rhs(_t, y):
        return [(c.on.v - c.on.r * y[0]) / c.inductance]

    def reach(_t, y):
        return y[0] - target

    reach.terminal, reach.direction = True, 1
    # 40 time constants: far past any reachable target (1 - e^-40)
    sol = solve_ivp(rhs, (0.0, 40.0 * c.inductance / c.on.r), [0.0], method=METHOD,
                    rtol=RTOL, atol=ATOL[:1], events=reach)
    return float(sol.t_events[0][0])


@dataclass(frozen=True)
class Steady:
    """PWM periodic steady state: mean, RMS, the current at the switch's turn-off (top of
    the ripple) and at its turn-on; ripple = peak-to-peak."""

    mean: float
    rms: float
    i_top: float
    i_bottom: float

    @property
    def ripple(self) -> float:
        return self.i_top - self.i_bottom


def pwm_steady_state(c: Circuit, on_time: float, period: float) -> Steady:
    """Periodic steady state of the hold (switch on for ``on_time`` of every ``period``), by
    shooting on the one-period map ``P(i0) - i0``: a secant step through ``0`` and the
    current's ceiling, kept where one more integrated period returns to it within
    ``1e-12`` (relative), else ``brentq``. (Over every linear example at both supply ends,
    both temperature ends and duties 0.2/0.5/0.9 the secant step was always kept and agreed
    with ``brentq`` within 4e-11.)"""

    def one_period(i0: float) -> tuple[Span, Span]:
        a = run(c.on, c.inductance, i0, on_time)
        return a, run(c.hold_off, c.inductance, a.current, period - on_time)

    def gap(i0: float) -> float:
        return one_period(i0)[1].current - i0

    # The current can never exceed the on-state's final value V/R: P(i_hi) <= i_hi.
    i_hi = max(c.on.v / c.on.r, 0.0) * 1.001 + 1e-9
    g_lo = gap(0.0)
    if g_lo <= 0.0:
        i0 = 0.0  # the period ends at zero: discontinuous conduction from a dead start
    else:
        # While the current never stops at zero, the circuit is linear and the one-period
        # map affine in i0 (superposition), so one secant step through the bracket's ends
        # lands on the fixed point; it is taken only where the integrated map confirms it
        # (a residual of 1e-12 of the current), else brentq shoots as before.
        g_hi = gap(i_hi)
        i0 = i_hi * g_lo / (g_lo - g_hi)
        a, b = one_period(i0)
        if abs(b.current - i0) <= 1e-14 + 1e-12 * i0:
            return _steady(a, b, i0, period)
        i0 = brentq(gap, 0.0, i_hi, xtol=1e-14, rtol=1e-12)
    a, b = one_period(i0)
    return _steady(a, b, i0, period)


def _steady(a: Span, b: Span, i0: float, period: float) -> Steady:
    """The steady state of one period's two spans (on, then off) from ``i0`` A."""
    return Steady(mean=(a.charge + b.charge) / period,
                  rms=math.sqrt((a.square + b.square) / period), i_top=a.current, i_bottom=i0)


def coil_temperature(drive: Drive, supply: float, ambient: float, r_factor: float,
                     l_factor: float, on_time: float, period: float) -> float:
    """Settled coil temperature (degC) under the hold: ``T = T_amb + R_th P_coil(T)`` with
    ``P_coil = I_rms^2 R_coil(T)`` of the PWM steady state (fixed point by ``brentq``).

    Returns ``thermal.max_coil_temp + 1000`` when no fixed point lies below that (thermal
    run-away is far past any limit)."""
    r_th = drive.thermal.resistance
    if r_th == 0.0:
        return ambient

    def gap(temp: float) -> float:
        c = circuit(drive, supply, temp, r_factor, l_factor)
        ss = pwm_steady_state(c, on_time, period)
        return ambient + r_th * ss.rms ** 2 * c.r_coil - temp

    top = drive.thermal.max_coil_temp + 1000.0
    if gap(top) > 0.0:
        return top
    return brentq(gap, ambient, top, xtol=1e-6)


def adc_code(volts_at_pin: float, bits: int, reference: float) -> int:
    """ADC reading of a voltage at the pin: ``floor(V / V_ref * 2^bits)``, clipped to full scale."""
    return min(int(math.floor(volts_at_pin / reference * 2 ** bits)), 2 ** bits - 1)


def supply_code(drive: Drive, supply: float) -> int:
    """What the board's ADC reads for a bus at ``supply`` V through its divider."""
    adc = drive.board.adc
    return adc_code(supply / drive.board.supply_sense.divider, adc.bits, adc.reference)


def current_code(drive: Drive, current: float) -> int:
    """What the current-sense channel reads for ``current`` A (sense resistor x gain)."""
    adc, sense = drive.board.adc, drive.board.sense
    return adc_code(current * sense.resistance * sense.gain, adc.bits, adc.reference)


# --------------------------------------------------------------------------- firmware
@dataclass(frozen=True)
class Firmware:
    """What the firmware takes from the generated header (through the compiled C program
    ``tests/data/envelope_firmware.c``): regulation, timer, over-current code, and the
    hold compare and peak ticks for each supply-sense code asked for."""

    regulation: str          # "fixed", "supply_table", "current" or "closed_loop"
    period: int              # timer counts per PWM period
    prescaler: int
    clock: float             # Hz, timer input clock
    over_current_code: int
    tick_rate: float         # Hz, the scheduler's (board file)
    compare: dict[int, int]  # supply code -> compare counts (-1: current mode, closed loop)
    peak_ticks: dict[int, int]
    setpoint_code: int | None = None   # closed loop: the current-sense code it holds

    @property
    def period_s(self) -> float:
        return self.period * self.prescaler / self.clock

    def on_time(self, code: int) -> float:
        return self.compare[code] * self.prescaler / self.clock


@dataclass(frozen=True)
class DesignFailed:
    """``coildrive design`` exited 1 (a check failed, no header): its output."""

    output: str


FIRMWARE_C = Path(__file__).resolve().parent / "data" / "envelope_firmware.c"


def build_firmware(drive: Drive, drive_path: Path, folder: Path, codes) -> Firmware | DesignFailed:
    """Generate the header with ``coildrive design DRIVE --header`` (a real subprocess),
    compile ``envelope_firmware.c`` against it with gcc, and read what the firmware would
    use at each supply code in ``codes``."""
    from conftest import require_tool, run_cli

    gcc = require_tool("gcc")
    header = folder / "coil_drive.h"
    proc = run_cli("design", str(drive_path), "--header", str(header))
    if proc.returncode == 1:
        assert not header.exists(), "a failed design must not write its header"
        return DesignFailed(proc.stdout + proc.stderr)
    assert proc.returncode == 0, f"coildrive design {drive_path}: exit {proc.returncode}\n{proc.stderr}"
    exe = folder / "envelope_firmware"
    cc = subprocess.run([gcc, "-std=c11", "-Wall", "-Wextra", "-Wpedantic", "-Werror", "-include",
                         str(header), str(FIRMWARE_C), "-o", str(exe)],
                        capture_output=True, text=True, timeout=60)
    assert cc.returncode == 0, f"gcc on the header of {drive_path}:\n{cc.stderr}"
    codes = sorted(set(codes))
    out = subprocess.run([str(exe)], input="\n".join(map(str, codes)) + "\n",
                         capture_output=True, text=True, timeout=30, check=True).stdout
    head, compare, ticks = {}, {}, {}
    for line in out.splitlines():
        parts = line.split()
        if parts[0] == "code":
            code, cmp, pk = map(int, parts[1:])
            compare[code], ticks[code] = cmp, pk
        else:
            head[parts[0]] = parts[1]
    assert len(compare) == len(codes), out
    return Firmware(regulation=head["regulation"], period=int(head["period"]),
                    prescaler=int(head["prescaler"]), clock=float(head["clock"]),
                    over_current_code=int(head["over_current_code"]),
                    tick_rate=drive.board.tick.rate, compare=compare, peak_ticks=ticks,
                    setpoint_code=int(head["setpoint_code"]) if "setpoint_code" in head else None)


def step_edges(drive: Drive, fw: Firmware) -> list[tuple[float, float]]:
    """``(bottom, top)`` supplies of every change of the firmware's choice (hold compare or
    peak ticks) between two adjacent supply codes: ``bottom`` the lowest supply read as
    the new code, ``top`` the highest still read as the old one. Within one step the
    choice is fixed and the current rises with the supply, so a step's lowest currents
    sit at its bottom and its highest at its top."""
    div, adc = drive.board.supply_sense.divider, drive.board.adc
    codes = sorted(fw.compare)
    out = []
    for prev, code in zip(codes, codes[1:]):
        if (fw.compare[code], fw.peak_ticks[code]) != (fw.compare[prev], fw.peak_ticks[prev]):
            edge = code / 2 ** adc.bits * adc.reference * div  # the first supply read as ``code``
            bottom, top = edge * (1 + 1e-12), edge * (1 - 1e-12)
            assert (supply_code(drive, bottom), supply_code(drive, top)) == (code, prev)
            out.append((bottom, top))
    return out


def cycle_coil_temperature(drive: Drive, supply: float, ambient: float, r_factor: float,
                           l_factor: float, on_time: float, period: float, peak_time: float) -> float:
    """Hottest coil (degC) over the periodic steady state of the on/off cycle of ``[duty]``
    with ``thermal.capacity``: ``C dT/dt = P_on(T) - (T - T_amb) / R_th`` while on,
    ``P = 0`` while off, integrated by ``solve_ivp`` (LSODA) and its periodic orbit found
    by shooting (``brentq`` on the one-cycle map). ``P_on(T)`` is one actuation's copper
    heat over the on-time -- the peak (``peak_time`` s full on from zero), the hold's PWM
    steady state for the rest, the release from the top of the ripple through the hold's
    off path -- each integrated here, tabulated at Chebyshev nodes over ambient .. limit +
    100 K and interpolated by a cubic spline (scipy), to spare thousands of shootings."""
    import numpy as np
    from scipy.interpolate import CubicSpline

    cyc, th = drive.duty, drive.thermal
    t_on, t_off = cyc.on_time, cyc.off_time
    t_pk = min(peak_time, t_on)

    def p_on(temp: float) -> float:
        c = circuit(drive, supply, temp, r_factor, l_factor)
        peak = run(c.on, c.inductance, 0.0, t_pk).square
        ss = pwm_steady_state(c, on_time, period)
        release = run(c.hold_off, c.inductance, ss.i_top, 40.0 * c.inductance / c.hold_off.r).square
        return c.r_coil * (peak + release + ss.rms ** 2 * (t_on - t_pk)) / t_on

    lo, hi = ambient, th.max_coil_temp + 100.0
    k = np.arange(9)
    nodes = np.sort(0.5 * (lo + hi) + 0.5 * (hi - lo) * np.cos((2 * k + 1) * np.pi / 18))
    spline = CubicSpline(nodes, [p_on(t) for t in nodes])

    def seg(on: bool, start: float, duration: float) -> float:
        def rhs(_t, y):
            p = float(spline(y[0])) if on else 0.0
            return [(p - (y[0] - ambient) / th.resistance) / th.capacity]
        sol = solve_ivp(rhs, (0.0, duration), [start], method=METHOD, rtol=1e-11, atol=1e-9)
        return float(sol.y[0, -1])

    def gap(start: float) -> float:   # one cycle from the start of an on-time
        return seg(False, seg(True, start, t_on), t_off) - start

    if gap(hi) > 0.0:
        return th.max_coil_temp + 1000.0   # no orbit below: far past any limit
    start = brentq(gap, ambient, hi, xtol=1e-7)
    return seg(True, start, t_on)


def hottest_coil(drive: Drive, fw: Firmware, supplies, r_factor: float, l_factors):
    """Hottest settled coil of this resistance corner under the firmware's hold, at any
    supply and ambient. The settled temperature rises with the ambient (at a stable fixed
    point of ``T = T_amb + R_th P(T)``, ``dT/dT_amb = 1 / (1 - R_th P'(T)) > 0``), so the
    highest ambient is enough; supplies and inductances are all tried. Returns
    ``(degC, supply V, l_factor)`` of the hottest."""
    best = (-math.inf, None, None)
    for v in supplies:
        code = supply_code(drive, v)
        for l in l_factors:
            if drive.duty is not None and drive.thermal.capacity > 0:   # an on/off cycle
                t = cycle_coil_temperature(drive, v, drive.ambient.max, r_factor, l,
                                           fw.on_time(code), fw.period_s,
                                           fw.peak_ticks[code] / fw.tick_rate)
            else:
                t = coil_temperature(drive, v, drive.ambient.max, r_factor, l,
                                     fw.on_time(code), fw.period_s)
            best = max(best, (t, v, l), key=lambda x: x[0])
    return best


def regulated_coil_temperature(drive: Drive, fw: Firmware, r_factor: float) -> float:
    """Hottest settled coil (degC) of this resistance corner under a closed-loop hold, at
    the highest ambient: the loop holds the sampled current, at most two codes above the
    header's set-point as a channel reading low reads it (one code for the converter's
    truncation, one more to cover the ripple's share of the RMS); as DC,
    ``T = T_amb + R_th I^2 R(T)`` with IEC 60028 copper, solved in closed form:
    ``R(T) = R_20 (1 + alpha (T - 20))`` makes it linear in ``T``."""
    adc, sense = drive.board.adc, drive.board.sense
    low = (1 - sense.resistance_tolerance) * (1 - sense.gain_tolerance)
    amps = (fw.setpoint_code + 2) * adc.reference / 2 ** adc.bits / (sense.resistance * sense.gain) / low
    c = drive.coil
    r20 = copper_resistance(c.resistance, c.reference_temp, 20.0) * r_factor
    k = drive.thermal.resistance * amps ** 2 * r20
    a = IEC60028_ALPHA_20
    if k * a >= 1.0:
        return drive.thermal.max_coil_temp + 1000.0
    return (drive.ambient.max + k * (1.0 - 20.0 * a)) / (1.0 - k * a)


def envelope_supplies(drive: Drive, fw: Firmware, count: int) -> list[float]:
    """``count`` supplies evenly from ``supply.min`` to ``supply.max``, plus both sides of
    every step of the firmware's choice (:func:`step_edges`)."""
    even = (drive.supply.min + k * (drive.supply.max - drive.supply.min) / (count - 1)
            for k in range(count))
    return sorted({*even, *(v for edge in step_edges(drive, fw) for v in edge)})
