"""Drive and board files: TOML in, frozen dataclasses out, every error naming its key.

A *drive file* describes the coil, its supply and environment and what the mechanics
need (pull-in, hold, drop-out currents); a *board file* describes the driver hardware
(timer, ADC, sense resistor, switch, freewheel path, serial link, scheduler tick).
All quantities are SI inside (see :mod:`coildrive.units`). Unknown keys are rejected.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import re
import tomllib
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from .errors import InputError
from .fileio import read_input
from .resources import bundled_boards
from .units import parse_quantity, short_repr

_MISSING = object()
#: Largest drive or board file read (bytes): a real one is a few kB.
MAX_FILE_BYTES = 1 << 20

FREEWHEEL_TYPES = ("diode", "zener", "resistor", "clamp")
SENSE_POSITIONS = ("coil", "switch")
#: Where the switch sits (``[switch] topology``): between the coil and ground
#: (``low_side``), between the supply and the coil (``high_side``), or four switches
#: around it (``full_bridge``: slow decay in the hold, fast decay into the supply at the
#: release).
TOPOLOGIES = ("low_side", "high_side", "full_bridge")
HOLD_MODES = ("voltage", "current", "latch")
CURRENT_CONTROLS = ("hysteretic", "off_time")
_CURRENT_MODE_KEYS = ("control", "band", "off_time", "min_frequency", "max_frequency", "sense_delay")
DISTRIBUTIONS = ("uniform", "normal")
#: Default fraction of a part's rated average power that the hold may use (common
#: practice: power resistors, diodes and switches are run at about half their rating,
#: which leaves room for a hot enclosure and for the rating's own test conditions).
POWER_DERATING = 0.5
#: Default fraction of a part's single-pulse energy rating that one turn-off may use
#: (common practice, as for the power: half the rating, for the hot part and the
#: rating's own pulse shape).
ENERGY_DERATING = 0.5
#: Default factor by which the shortest real peak must carry the current above
#: ``pull_in.current`` (common practice: the magnetic force grows with the square of the
#: current, so 1.1 x the current is about 1.2 x the force).
PULL_IN_CURRENT_MARGIN = 1.1
#: What the firmware does in a voltage-mode hold (``[hold] regulation``): one fixed
#: compare, the compare looked up against the measured supply, or a PI loop on the
#: sampled current that sets the compare every PWM period (``current`` is what a
#: current-mode hold reports).
REGULATIONS = ("fixed", "supply_table", "closed_loop")
#: Tolerance keys of the freewheel elements (fractions, 0 = exact).
_FREEWHEEL_TOLERANCES = ("diode_drop_tolerance", "zener_voltage_tolerance", "clamp_voltage_tolerance")
#: Single-pulse energy ratings of the freewheel elements (J, 0 = not given).
_ENERGY_RATINGS = ("diode_energy_rating", "zener_energy_rating", "resistor_energy_rating",
                   "clamp_energy_rating")
#: Freewheel keys of split decay (only with ``split_decay = true``).
_BYPASS_KEYS = ("bypass_resistance", "bypass_lead", "bypass_power_rating")
#: Datasheet keys of ``[coil]`` (docs/coil-model.md).
_DATASHEET_KEYS = ("rated_voltage", "rated_power", "pick_up_voltage", "drop_out_voltage",
                   "operate_time", "release_time")
_FREEWHEEL_LATER = ("split_decay", "bypass_resistance", "bypass_lead", "diode_power_rating",
                    "zener_power_rating", "resistor_power_rating", "clamp_power_rating",
                    "bypass_power_rating", "power_derating", *_FREEWHEEL_TOLERANCES,
                    *_ENERGY_RATINGS, "energy_derating")


# --------------------------------------------------------------------------- bounds
#: The range coildrive accepts for each quantity, (low, high) in SI (degC for
#: temperatures), both ends included; the table in docs/file-formats.md is this one.
#: They span what copper coils, their drivers and bench links are (common practice:
#: coils from a reed relay's 1 uH to a large contactor's tens of H, hold PWM up to a few
#: MHz, windings up to class-220 insulation) and keep every design loop, search and
#: waveform of a size it can finish. A key whose default 0 means "not given" also
#: accepts 0 (:data:`_ZERO_MEANS_UNSET`).
BOUNDS: dict[str, tuple[float, float, str]] = {
    "coil.resistance": (1e-3, 100e3, "resistance"),
    "coil.reference_temp": (-75.0, 250.0, "temperature"),
    "coil.inductance": (1e-6, 100.0, "inductance"),
    "coil.rated_voltage": (0.1, 10e3, "voltage"),
    "coil.rated_power": (1e-4, 100e3, "power"),
    "coil.pick_up_voltage": (0.01, 10e3, "voltage"),
    "coil.drop_out_voltage": (0.001, 10e3, "voltage"),
    "coil.stated_temp": (-75.0, 250.0, "temperature"),
    "coil.operate_time": (1e-6, 10.0, "time"),
    "coil.release_time": (1e-6, 10.0, "time"),
    "coil.flux_current": (0.0, 1000.0, "current"),
    "coil.flux_linkage": (0.0, 1000.0, "flux_linkage"),
    "coil.eddy_resistance": (1e-3, 1e9, "resistance"),
    "coil.eddy_time_constant": (1e-9, 1.0, "time"),
    "coil.seated_current": (0.0, 1000.0, "current"),
    "coil.seated_linkage": (0.0, 1000.0, "flux_linkage"),
    "supply.min": (0.5, 1000.0, "voltage"),
    "supply.nominal": (0.5, 1000.0, "voltage"),
    "supply.max": (0.5, 1000.0, "voltage"),
    "supply.capacitance": (1e-9, 10.0, "capacitance"),
    "supply.capacitor_voltage": (1.0, 10e3, "voltage"),
    "supply.source_resistance": (100e-6, 100.0, "resistance"),
    "supply.boost": (1.0, 1000.0, "voltage"),
    "supply.boost_tolerance": (0.0, 0.5, "dimensionless"),
    "supply.boost_capacitance": (1e-9, 10.0, "capacitance"),
    "supply.boost_capacitance_tolerance": (0.0, 0.9, "dimensionless"),
    "supply.boost_resistance": (0.0, 100.0, "resistance"),
    "supply.boost_power": (1e-3, 100e3, "power"),
    "supply.boost_efficiency": (0.05, 1.0, "dimensionless"),
    "ambient.min": (-75.0, 200.0, "temperature"),
    "ambient.max": (-75.0, 200.0, "temperature"),
    "thermal.resistance": (0.0, 10e3, "thermal_resistance"),
    "thermal.max_coil_temp": (-50.0, 250.0, "temperature"),
    "thermal.capacity": (1e-3, 1e5, "heat_capacity"),
    "thermal.time_constant": (0.01, 1e5, "time"),
    "duty.on_time": (1e-4, 1e5, "time"),
    "duty.off_time": (1e-4, 1e7, "time"),
    "duty.actuation_rate": (1e-7, 1e3, "frequency"),
    "pull_in.current": (1e-6, 1000.0, "current"),
    "pull_in.margin": (1.0, 10.0, "dimensionless"),
    "pull_in.current_margin": (1.0, 3.0, "dimensionless"),
    "pull_in.settle_time": (0.0, 10.0, "time"),
    "hold.current": (1e-6, 1000.0, "current"),
    "hold.frequency": (1.0, 5e6, "frequency"),
    "hold.band": (1e-6, 1000.0, "current"),
    "hold.off_time": (10e-9, 1.0, "time"),
    "hold.min_frequency": (1.0, 5e6, "frequency"),
    "hold.max_frequency": (1.0, 5e6, "frequency"),
    "hold.sense_delay": (0.0, 10e-3, "time"),
    "release.current": (1e-6, 1000.0, "current"),
    "reset.current": (1e-6, 1000.0, "current"),
    "reset.margin": (1.0, 10.0, "dimensionless"),
    "reset.current_margin": (1.0, 3.0, "dimensionless"),
    "reset.settle_time": (0.0, 10.0, "time"),
    "reset_coil.resistance": (1e-3, 100e3, "resistance"),
    "reset_coil.reference_temp": (-75.0, 250.0, "temperature"),
    "reset_coil.inductance": (1e-6, 100.0, "inductance"),
    "armature.inductance_open": (1e-6, 100.0, "inductance"),
    "armature.inductance_closed": (1e-6, 100.0, "inductance"),
    "armature.stroke": (1e-6, 0.1, "length"),
    "armature.mass": (1e-6, 10.0, "mass"),
    "armature.spring_preload": (0.0, 10e3, "force"),
    "armature.spring_rate": (0.0, 10e6, "stiffness"),
    "armature.load_force": (-10e3, 10e3, "force"),
    "armature.damping": (0.0, 10e3, "damping"),
    "armature.current_margin": (1.0, 10.0, "dimensionless"),
    "timer.clock": (1e3, 1e9, "frequency"),
    "timer.max_pwm_frequency": (1.0, 5e6, "frequency"),
    "adc.reference": (0.1, 50.0, "voltage"),
    "adc.sample_rate": (1.0, 10e6, "frequency"),
    "sense.resistance": (10e-6, 1e3, "resistance"),
    "sense.gain": (1e-3, 10e3, "dimensionless"),
    "sense.resistance_tolerance": (0.0, 0.5, "dimensionless"),
    "sense.gain_tolerance": (0.0, 0.5, "dimensionless"),
    "supply_sense.divider": (1.0, 1000.0, "dimensionless"),
    "supply_sense.divider_tolerance": (0.0, 0.5, "dimensionless"),
    "switch.on_resistance": (0.0, 1e3, "resistance"),
    "switch.max_voltage": (1.0, 10e3, "voltage"),
    "switch.rise_time": (1e-12, 1e-3, "time"),
    "switch.fall_time": (1e-12, 1e-3, "time"),
    "switch.power_rating": (1e-3, 10e3, "power"),
    "freewheel.diode_drop": (0.0, 10.0, "voltage"),
    "freewheel.zener_voltage": (0.1, 5000.0, "voltage"),
    "freewheel.resistance": (1e-3, 1e6, "resistance"),
    "freewheel.clamp_voltage": (0.1, 10e3, "voltage"),
    "freewheel.bypass_resistance": (0.0, 1e3, "resistance"),
    "freewheel.bypass_lead": (-1.0, 1.0, "time"),
    "freewheel.diode_power_rating": (1e-3, 10e3, "power"),
    "freewheel.zener_power_rating": (1e-3, 10e3, "power"),
    "freewheel.resistor_power_rating": (1e-3, 10e3, "power"),
    "freewheel.clamp_power_rating": (1e-3, 10e3, "power"),
    "freewheel.bypass_power_rating": (1e-3, 10e3, "power"),
    "freewheel.diode_drop_tolerance": (0.0, 0.5, "dimensionless"),
    "freewheel.zener_voltage_tolerance": (0.0, 0.5, "dimensionless"),
    "freewheel.clamp_voltage_tolerance": (0.0, 0.5, "dimensionless"),
    "freewheel.diode_energy_rating": (1e-6, 1e6, "energy"),
    "freewheel.zener_energy_rating": (1e-6, 1e6, "energy"),
    "freewheel.resistor_energy_rating": (1e-6, 1e6, "energy"),
    "freewheel.clamp_energy_rating": (1e-6, 1e6, "energy"),
    "tick.rate": (1.0, 10e6, "frequency"),
}
#: Keys whose 0 (their default) means "not given" and is accepted beside the range.
_ZERO_MEANS_UNSET = frozenset((
    "hold.band", "hold.off_time", "hold.max_frequency", "timer.max_pwm_frequency",
    "switch.rise_time", "switch.fall_time", "switch.power_rating", "freewheel.zener_voltage",
    "supply.capacitance", "supply.capacitor_voltage", "supply.source_resistance",
    "supply.boost", "supply.boost_capacitance", "supply.boost_power", "supply.boost_efficiency",
    "freewheel.resistance", "freewheel.clamp_voltage", "freewheel.diode_power_rating",
    "freewheel.zener_power_rating", "freewheel.resistor_power_rating",
    "freewheel.clamp_power_rating", "freewheel.bypass_power_rating",
    "freewheel.diode_energy_rating", "freewheel.zener_energy_rating",
    "freewheel.resistor_energy_rating", "freewheel.clamp_energy_rating"))


def _in_bounds(value: float, name: str) -> bool:
    low, high, _ = BOUNDS[name]
    return low <= value <= high or (value == 0 and name in _ZERO_MEANS_UNSET)


def bounds_text(name: str) -> str:
    """The accepted range of the key ``name`` as the error line and the docs show it,
    e.g. ``'1 µH .. 100 H'``."""
    from .units import DIMENSIONS, format_si

    low, high, dimension = BOUNDS[name]
    unit = DIMENSIONS[dimension].si
    if dimension == "mass":
        ends = [format_si(x * 1e3, "g") for x in (low, high)]
    elif dimension in ("resistance", "inductance", "voltage", "current", "time", "frequency",
                       "length", "force", "stiffness", "power", "capacitance"):
        ends = [format_si(x, unit) for x in (low, high)]
    else:   # units without SI prefixes in the files (degC, K/W, N*s/m, plain numbers)
        ends = [f"{x:g} {unit}".strip() for x in (low, high)]
    return " .. ".join(ends) + (" (or 0: not given)" if name in _ZERO_MEANS_UNSET else "")


# --------------------------------------------------------------------------- data
@dataclass(frozen=True)
class Coil:
    """The coil. Resistance in ohm at ``reference_temp`` (degC), inductance in H.

    Tolerances are fractions (0.1 = +/-10 %); ``tolerance_distribution`` is used by the
    Monte Carlo (``normal`` reads the tolerance as 3 sigma).

    Datasheet inputs (0 = not given; see docs/coil-model.md): ``rated_voltage`` (V) and
    ``rated_power`` (W) at ``reference_temp`` give ``resistance = V^2 / P``;
    ``pick_up_voltage`` and ``drop_out_voltage`` (V) at the coil temperature
    ``stated_temp`` (degC) give the pull-in and drop-out currents; ``operate_time`` and
    ``release_time`` (s) are the datasheet's response times, for the design's checks.

    A saturating coil (docs/coil-model.md): ``flux_current`` (A) and ``flux_linkage``
    (Wb) tabulate its flux linkage against current, from (0, 0), both rising; empty for
    the linear coil. With a curve, ``inductance`` is the slope of its first segment
    (the small-signal value, for reports) and the tolerance scales the whole curve.
    With ``[armature]`` that curve is the open one (armature blocked open) and
    ``seated_current`` (A) / ``seated_linkage`` (Wb) tabulate the seated coil's.

    Eddy currents (docs/coil-model.md): ``eddy_resistance`` (ohm) across the magnetising
    branch, given as such or as ``eddy_time_constant`` (s, ``L / R_e`` with ``inductance``,
    the small-signal value); 0 = none. ``eddy_time_constant`` keeps the given time
    constant (0 when the resistance was given), for reports and the input hash.
    """

    resistance: float
    reference_temp: float
    inductance: float
    resistance_tolerance: float
    inductance_tolerance: float
    tolerance_distribution: str = "uniform"
    rated_voltage: float = 0.0
    rated_power: float = 0.0
    pick_up_voltage: float = 0.0
    drop_out_voltage: float = 0.0
    stated_temp: float | None = None
    operate_time: float = 0.0
    release_time: float = 0.0
    flux_current: tuple[float, ...] = ()
    flux_linkage: tuple[float, ...] = ()
    eddy_resistance: float = 0.0
    eddy_time_constant: float = 0.0
    seated_current: tuple[float, ...] = ()
    seated_linkage: tuple[float, ...] = ()

    @property
    def derived(self) -> tuple[str, ...]:
        """The file keys whose values came from the datasheet keys."""
        return tuple(key for key, given in (("coil.resistance", self.rated_voltage),
                                            ("pull_in.current", self.pick_up_voltage),
                                            ("release.current", self.drop_out_voltage)) if given)


@dataclass(frozen=True)
class Supply:
    """Bus voltage range in V.

    For a full bridge, whose fast decay returns the coil's energy to the bus: ``sink``
    says whether the supply takes current back (default true); when it cannot, the
    returned charge lands on the bulk ``capacitance`` (F, needed then) and pumps the bus
    up; ``capacitor_voltage`` is that capacitor's rated voltage (V, 0 = not given).

    ``source_resistance`` (ohm, 0 = not given: a stiff bus) is the cable or battery
    resistance between the source at the supply voltage and the bulk ``capacitance``;
    with both the bus droops during the peak (:mod:`coildrive.model.supply`).

    ``boost`` (V, 0 = none) is a second, higher voltage the peak runs from until a current
    threshold (:mod:`coildrive.model.boost`), within ``boost_tolerance`` (fraction); from a
    capacitor of ``boost_capacitance`` (F, 0 = an ideal source) within
    ``boost_capacitance_tolerance`` (fraction), through ``boost_resistance`` (ohm: the boost
    switch and the capacitor's ESR), recharged at ``boost_power`` (W, 0 = not given);
    ``boost_efficiency`` (fraction, 0 = not given) is the boost converter's: it draws its
    output over it from the main supply (:attr:`converter_draw`): the drooping main bus
    carries it after the peak (:func:`coildrive.design.supply.handover_bus`), a system's
    shared rail in the peak and after (:mod:`coildrive.design.system`); both need it.
    """

    min: float
    nominal: float
    max: float
    sink: bool = True
    capacitance: float = 0.0
    capacitor_voltage: float = 0.0
    source_resistance: float = 0.0
    boost: float = 0.0
    boost_tolerance: float = 0.0
    boost_capacitance: float = 0.0
    boost_capacitance_tolerance: float = 0.0
    boost_resistance: float = 0.0
    boost_power: float = 0.0
    boost_efficiency: float = 0.0

    @property
    def converter_draw(self) -> float:
        """W the boost converter draws from the main supply while it recharges:
        ``boost_power / boost_efficiency`` (0 without ``boost_power``; ``boost_power`` itself,
        a lossless converter, where the efficiency is not given -- a drooping main supply
        and a system file require it)."""
        if not self.boost_power > 0:
            return 0.0
        return self.boost_power / self.boost_efficiency if self.boost_efficiency > 0 else self.boost_power

    @property
    def boosted(self) -> bool:
        """True when the peak runs from a boost voltage (``supply.boost`` given)."""
        return self.boost > 0

    @property
    def droops(self) -> bool:
        """True when the bus droops under the coil's current (a source resistance given)."""
        return self.source_resistance > 0


@dataclass(frozen=True)
class Ambient:
    """Ambient temperature range in degC."""

    min: float
    max: float


@dataclass(frozen=True)
class Thermal:
    """Coil-to-ambient thermal resistance in K/W (0 = no self-heating), the coil limit in
    degC and the coil's heat capacity in J/K (0 = not given: the coil is taken at the
    temperature a continuous hold settles at). ``time_constant`` is ``R_th C`` in s."""

    resistance: float
    max_coil_temp: float
    capacity: float = 0.0

    @property
    def time_constant(self) -> float:
        return self.resistance * self.capacity


@dataclass(frozen=True)
class Duty:
    """The on/off cycle of the actuations (``[duty]``): each actuation keeps the coil on
    for ``on_time`` s (peak and hold), then off for ``off_time`` s."""

    on_time: float
    off_time: float

    @property
    def period(self) -> float:
        return self.on_time + self.off_time

    @property
    def actuation_rate(self) -> float:
        """Actuations per second (Hz)."""
        return 1.0 / self.period


@dataclass(frozen=True)
class PullIn:
    """Current in A that pulls the armature in, and how the peak is sized from it.

    ``margin`` multiplies the worst pull-in time; ``current_margin`` is the factor by
    which the shortest real peak must carry the current above ``current`` at the hot,
    low-supply corner (the force grows with the square of the current), and
    ``settle_time`` (s) the time the armature needs after that. The peak is the longest
    any of them asks for. ``compensate``: the peak is looked up against the measured
    supply (a peak table, like the hold's duty table).
    """

    current: float
    margin: float
    current_margin: float = PULL_IN_CURRENT_MARGIN
    settle_time: float = 0.0
    compensate: bool = False


@dataclass(frozen=True)
class Hold:
    """Hold current in A to be met at every corner, PWM frequency in Hz, mode.

    ``frequency_tolerance`` is the largest relative error accepted between the asked
    frequency and the one the timer can make.

    Current-mode hold only (``mode = "current"``, see docs/tuning.md): ``control`` is
    ``"hysteretic"`` (switch on below a lower, off above an upper ADC threshold; needs
    the sense resistor in the coil path) or ``"off_time"`` (switch off at a peak
    threshold for a fixed, timer-made off time; works with either sense position).
    ``band`` (A, upper - lower threshold) and ``off_time`` (s) are sized from
    ``frequency`` at the nominal point when 0. The switching frequency must stay within
    ``min_frequency``..``max_frequency`` (Hz; 0 = the board's
    ``timer.max_pwm_frequency``, else 100 kHz) at every corner. ``sense_delay`` (s) is
    the time from a threshold crossing to the switch edge (comparator, ADC conversion,
    interrupt latency).
    """

    current: float
    frequency: float
    mode: str = "voltage"
    frequency_tolerance: float = 0.01
    control: str = "hysteretic"
    band: float = 0.0
    off_time: float = 0.0
    min_frequency: float = 20_000.0
    max_frequency: float = 0.0
    sense_delay: float = 0.0
    regulation: str = "supply_table"
    fast_fraction: float = 0.0


@dataclass(frozen=True)
class Release:
    """Drop-out current in A: below it the armature lets go."""

    current: float


@dataclass(frozen=True)
class Armature:
    """Moving armature (optional). SI: H, m, kg, N, N/m, N*s/m.

    ``spring_preload`` is the spring force at the open position; ``spring_rate`` raises it
    as the armature closes. ``load_force`` is constant and pushes open.
    ``restitution`` is the bounce factor at the seated stop (0 = inelastic).
    ``current_margin`` multiplies the least currents the mechanics need when the drive
    file leaves ``pull_in.current`` or ``hold.current`` out (see docs/armature.md);
    ``derived`` names the keys so filled in (``"pull_in.current"``, ``"hold.current"``,
    ``"release.current"``).

    With a saturating coil (``coil.flux_current`` and ``coil.seated_current``, see
    docs/coil-model.md) ``open_current``/``open_linkage`` and
    ``seated_current``/``seated_linkage`` are those two curves (A, Wb), and the two
    inductances are their first segments' slopes (small-signal, for reports and time
    scales); empty for the linear ``L(x)``.
    """

    inductance_open: float
    inductance_closed: float
    stroke: float
    mass: float
    spring_preload: float
    spring_rate: float
    load_force: float
    damping: float
    restitution: float = 0.0
    current_margin: float = 1.25
    derived: tuple[str, ...] = ()
    open_current: tuple[float, ...] = ()
    open_linkage: tuple[float, ...] = ()
    seated_current: tuple[float, ...] = ()
    seated_linkage: tuple[float, ...] = ()


@dataclass(frozen=True)
class Timer:
    """PWM timer: input clock in Hz, counter width in bits, largest prescaler divide ratio.

    ``prescalers`` lists the only divide ratios the timer has, for timers with a fixed
    set (empty: every ratio 1..prescaler_max). ``max_pwm_frequency`` (Hz, 0 = not
    given) is the highest hold switching frequency this board is meant for (gate drive,
    switching loss); ``coildrive tune`` sweeps up to it.
    """

    clock: float
    bits: int
    prescaler_max: int
    prescalers: tuple[int, ...] = ()
    max_pwm_frequency: float = 0.0


@dataclass(frozen=True)
class Adc:
    """ADC: resolution in bits, reference in V, sample rate in Hz (samples per second)."""

    bits: int
    reference: float
    sample_rate: float


@dataclass(frozen=True)
class Sense:
    """Current-sense resistor in ohm, amplifier gain (V/V), position ``coil`` or ``switch``.

    ``coil``: in series with the coil, reads the current always. ``switch``: between the
    switch source and ground, reads zero while the switch is off.
    """

    resistance: float
    gain: float
    position: str
    resistance_tolerance: float = 0.0
    gain_tolerance: float = 0.0


@dataclass(frozen=True)
class SupplySense:
    """Bus-voltage divider ratio: bus voltage / voltage at the ADC pin (>= 1), and its
    tolerance (a fraction: the ratio may be off by that much either way)."""

    divider: float
    divider_tolerance: float = 0.0


@dataclass(frozen=True)
class Switch:
    """The switch: on-resistance in ohm, voltage rating in V, derating fraction, topology.

    ``topology`` (one of :data:`TOPOLOGIES`) says where it sits: ``low_side`` between the
    coil and ground (the freewheel path across the coil, the drain rising above the
    supply at turn-off), ``high_side`` between the supply and the coil (the freewheel
    path returning to ground, the switch node swinging below ground at turn-off); see
    :mod:`coildrive.model.topology`.

    The peak switch voltage must stay below ``max_voltage * derating``. ``rise_time``
    and ``fall_time`` (s, 0 = not given) are the switching transition times used for
    the switching-loss estimate (``coildrive tune``, the hold's switch power).
    ``power_rating`` (W, 0 = not given) is the average power the switch may dissipate
    as mounted; the hold's switch power must stay below ``power_rating *
    power_derating`` (default :data:`POWER_DERATING`, common practice).
    """

    on_resistance: float
    max_voltage: float
    derating: float = 0.8
    rise_time: float = 0.0
    fall_time: float = 0.0
    power_rating: float = 0.0
    power_derating: float = POWER_DERATING
    topology: str = "low_side"


@dataclass(frozen=True)
class Freewheel:
    """Freewheel path taken when the switch turns off (V and ohm).

    ``diode``: a diode across the coil. ``zener``: diode + Zener in series across the
    coil. ``resistor``: diode + resistor across the coil. ``clamp``: a clamp (TVS) across
    the switch, limiting its voltage to ``clamp_voltage``.

    Split decay (``split_decay``): a bypass switch, driven by its own pin, shorts the
    fast-decay element during the hold -- the Zener or the resistor, or with a clamp it
    closes a diode path across the coil (``diode_drop``) -- so the PWM off-times decay
    slowly; it opens for the release, which then decays fast. ``bypass_resistance``
    (ohm) is the bypass switch's on-resistance; ``bypass_lead`` (s) is how long before
    the main switch's final turn-off the bypass opens (negative: after it; the first
    part of the release then decays slowly).

    Power ratings (W, 0 = not given) of each element as mounted, checked against the
    hold's average power times ``power_derating`` (default :data:`POWER_DERATING`,
    common practice). Single-pulse energy ratings (J, 0 = not given), checked against the
    worst turn-off's energy times ``energy_derating`` (default :data:`ENERGY_DERATING`).
    Tolerances (fractions, 0 = exact) of the diode drop, Zener and clamp voltages: the
    design's envelope spans both ends.
    """

    type: str
    diode_drop: float = 0.0
    zener_voltage: float = 0.0
    resistance: float = 0.0
    clamp_voltage: float = 0.0
    split_decay: bool = False
    bypass_resistance: float = 0.0
    bypass_lead: float = 0.0
    diode_power_rating: float = 0.0
    zener_power_rating: float = 0.0
    resistor_power_rating: float = 0.0
    clamp_power_rating: float = 0.0
    bypass_power_rating: float = 0.0
    power_derating: float = POWER_DERATING
    diode_drop_tolerance: float = 0.0
    zener_voltage_tolerance: float = 0.0
    clamp_voltage_tolerance: float = 0.0
    diode_energy_rating: float = 0.0
    zener_energy_rating: float = 0.0
    resistor_energy_rating: float = 0.0
    clamp_energy_rating: float = 0.0
    energy_derating: float = ENERGY_DERATING


@dataclass(frozen=True)
class Link:
    """Serial link rate in baud."""

    baud: int


@dataclass(frozen=True)
class Tick:
    """Firmware scheduler tick rate in Hz (phase durations are counted in ticks)."""

    rate: float


@dataclass(frozen=True)
class Channels:
    """A board with several drive channels (``[channels]``): ``count`` channels numbered
    1..count; ``timers`` lists the groups of channels that share one PWM timer (one
    prescaler and period, a compare per channel), ``supplies`` the groups that share one
    supply rail, ``freewheels`` the groups whose freewheel element is one shared part
    (e.g. one Zener for a common return). A channel in no group has its own."""

    count: int
    timers: tuple[tuple[int, ...], ...] = ()
    supplies: tuple[tuple[int, ...], ...] = ()
    freewheels: tuple[tuple[int, ...], ...] = ()

    def group(self, kind: str, number: int) -> tuple[int, ...]:
        """The channels that share ``kind`` (``"timers"``, ``"supplies"``, ``"freewheels"``)
        with channel ``number`` (itself alone when it is in no group)."""
        return next((g for g in getattr(self, kind) if number in g), (number,))


@dataclass(frozen=True)
class Board:
    """A driver board profile."""

    name: str
    description: str
    timer: Timer
    adc: Adc
    sense: Sense
    supply_sense: SupplySense | None
    switch: Switch
    freewheel: Freewheel
    link: Link
    tick: Tick
    source: str = ""
    ram: int = 0          # bytes of RAM on the part, 0 = not given
    flash: int = 0        # bytes of program flash, 0 = not given
    core: str = ""        # the processor core (BOARD_CORES), "" = not given
    channels: Channels | None = None   # several drive channels (system files), None = one


@dataclass(frozen=True)
class Latch:
    """A latching (bistable) coil (``[hold] mode = "latch"``): no hold, a set pulse sized
    from ``[pull_in]`` and a reset pulse sized from ``[reset]`` the same way (``current``
    A to unlatch, ``margin`` on the worst reset time, ``current_margin`` on that current
    at the shortest real pulse, ``settle_time`` s after it). ``reset_coil`` is the reset
    winding (``[reset_coil]``, on a second low- or high-side switch) or ``None`` (a full
    bridge reverses the one coil). ``recharge_tolerance`` (a fraction): pulses from a
    capacitor (``supply.source_resistance``) are designed from a bus this much below the
    supply, and the next pulse waits until the capacitor is back there."""

    reset_current: float
    reset_margin: float
    reset_current_margin: float
    reset_settle_time: float
    reset_coil: Coil | None
    recharge_tolerance: float


@dataclass(frozen=True)
class Drive:
    """A drive file resolved against its board: everything the design needs.

    ``switch`` and ``freewheel`` are the effective ones (board values with the drive
    file's overrides applied).
    """

    name: str
    coil: Coil
    supply: Supply
    ambient: Ambient
    thermal: Thermal
    pull_in: PullIn
    hold: Hold
    release: Release
    board: Board
    switch: Switch
    freewheel: Freewheel
    armature: Armature | None = None
    source: str = ""
    duty: Duty | None = None
    #: ``(prescaler, period counts)`` of a timer shared with other channels (a system
    #: file's, :mod:`coildrive.design.system`); None: solved for ``hold.frequency``.
    shared_timer: tuple[int, int] | None = None
    latch: Latch | None = None

    def input_hash(self) -> str:
        """SHA-256 (first 16 hex digits) of the parsed inputs as canonical JSON.

        Formatting and comments in the files do not change it; any value does.
        """
        data = dataclasses.asdict(self)
        data.pop("source", None)
        data["board"].pop("source", None)
        if data.get("duty") is None:   # added later: a file without [duty] keeps its hash
            data.pop("duty", None)
        if data.get("latch") is None:  # likewise a drive that is not a latching coil
            data.pop("latch", None)
        # the board's core picks only the timing figures firmware-driver prints; no design
        # figure reads it, so it leaves the hash (and every design output) as it was
        data["board"].pop("core", None)
        _drop_later_defaults(data)
        text = json.dumps(data, sort_keys=True, separators=(",", ":"))
        return hashlib.sha256(text.encode("utf-8")).hexdigest()[:16]


#: Keys added after the first release: left out of the input hash while they hold their
#: default, so that files which do not use them keep their hash (and headers their bytes).
_LATER_FIELDS = (
    (("coil",), Coil, _DATASHEET_KEYS + ("stated_temp", "flux_current", "flux_linkage",
                                         "seated_current", "seated_linkage",
                                         "eddy_resistance", "eddy_time_constant")),
    (("armature",), Armature, ("open_current", "open_linkage", "seated_current", "seated_linkage")),
    (("hold",), Hold, _CURRENT_MODE_KEYS + ("regulation", "fast_fraction")),
    (("thermal",), Thermal, ("capacity",)),
    (("pull_in",), PullIn, ("current_margin", "settle_time", "compensate")),
    (("supply",), Supply, ("sink", "capacitance", "capacitor_voltage", "source_resistance", "boost",
                           "boost_tolerance", "boost_capacitance", "boost_capacitance_tolerance",
                           "boost_resistance", "boost_power", "boost_efficiency")),
    (("board", "sense"), Sense, ("resistance_tolerance", "gain_tolerance")),
    (("board", "supply_sense"), SupplySense, ("divider_tolerance",)),
    (("switch",), Switch, ("rise_time", "fall_time", "power_rating", "power_derating", "topology")),
    (("board", "switch"), Switch, ("rise_time", "fall_time", "power_rating", "power_derating",
                                   "topology")),
    (("freewheel",), Freewheel, _FREEWHEEL_LATER),
    (("board", "freewheel"), Freewheel, _FREEWHEEL_LATER),
    (("board", "timer"), Timer, ("max_pwm_frequency",)),
    (("board",), Board, ("ram", "flash", "channels")),
    ((), Drive, ("shared_timer",)),
)


def _drop_later_defaults(data: dict) -> None:
    for path, cls, names in _LATER_FIELDS:
        node = data
        for part in path:
            node = node[part] if node is not None else None
        if node is None:  # an optional section the file leaves out
            continue
        defaults = {f.name: f.default for f in dataclasses.fields(cls)}
        for name in names:
            if name in node and node[name] == defaults[name]:
                del node[name]


# --------------------------------------------------------------------------- reading
class _Section:
    """Reads one TOML table, remembering which keys were used, so that unknown keys fail."""

    def __init__(self, source: str, table: Any, name: str, origins: dict[str, str] | None = None):
        if not isinstance(table, dict):
            raise InputError(source, name, f"expected a table [{name}], got {table!r}")
        self.source = source
        self.table = table
        self.name = name
        self.used: set[str] = set()
        self.origins = origins or {}

    def where(self, key: str) -> tuple[str, str]:
        return self.origins.get(key, self.source), f"{self.name}.{key}" if self.name else key

    def _get(self, key: str, default: Any) -> Any:
        self.used.add(key)
        if key in self.table:
            return self.table[key]
        if default is _MISSING:
            src, full = self.where(key)
            raise InputError(src, full, "missing, expected a value here")
        return default

    def fail(self, key: str, message: str) -> InputError:
        src, full = self.where(key)
        return InputError(src, full, message)

    def quantity(self, key: str, dimension: str, default: Any = _MISSING, *,
                 positive: bool = False, nonnegative: bool = False) -> float:
        raw = self._get(key, default)
        src, full = self.where(key)
        value = parse_quantity(raw, dimension, src, full)
        if positive and not value > 0:
            raise InputError(src, full, f"{short_repr(raw)} must be greater than zero")
        if nonnegative and value < 0:
            raise InputError(src, full, f"{short_repr(raw)} must not be negative")
        if full in BOUNDS and BOUNDS[full][2] != dimension:   # the table and the reader disagree
            raise AssertionError(f"BOUNDS[{full!r}] is not a {dimension}")
        if full in BOUNDS and not _in_bounds(value, full):
            raise InputError(src, full, f"{short_repr(raw)} is outside {bounds_text(full)}, "
                             "the range coildrive accepts (docs/file-formats.md)")
        return value

    def fraction(self, key: str, default: Any = _MISSING, *, below_one: bool = True) -> float:
        value = self.quantity(key, "dimensionless", default, nonnegative=True)
        if below_one and not value < 1:
            raise self.fail(key, f"{value:g} must be a fraction below 1 (0.1 means 10 %)")
        return value

    def integer(self, key: str, default: Any = _MISSING, *, low: int, high: int) -> int:
        raw = self._get(key, default)
        if isinstance(raw, bool) or not isinstance(raw, int):
            raise self.fail(key, f"{short_repr(raw)} is not a whole number, expected an integer {low}..{high}")
        if not low <= raw <= high:
            raise self.fail(key, f"{raw} is out of range, expected an integer {low}..{high}")
        return raw

    def integer_list(self, key: str, default: Any = _MISSING, *, low: int, high: int) -> tuple[int, ...]:
        raw = self._get(key, default)
        if not isinstance(raw, (list, tuple)) or not all(
                isinstance(v, int) and not isinstance(v, bool) and low <= v <= high for v in raw):
            raise self.fail(key, f"{short_repr(raw)} is not a list of whole numbers {low}..{high}")
        return tuple(raw)

    def choice(self, key: str, options: tuple[str, ...], default: Any = _MISSING) -> str:
        raw = self._get(key, default)
        if raw not in options:
            raise self.fail(key, f"{short_repr(raw)} is not one of {', '.join(map(repr, options))}")
        return raw

    def boolean(self, key: str, default: Any = _MISSING) -> bool:
        raw = self._get(key, default)
        if not isinstance(raw, bool):
            raise self.fail(key, f"{short_repr(raw)} is not true or false")
        return raw

    def text(self, key: str, default: Any = _MISSING) -> str:
        raw = self._get(key, default)
        if not isinstance(raw, str):
            raise self.fail(key, f"{short_repr(raw)} is not a string")
        return raw

    def finish(self) -> None:
        unknown = sorted(set(self.table) - self.used)
        if unknown:
            key = unknown[0]
            raise self.fail(key, f"unknown key, expected one of: {', '.join(sorted(self.used))}")


def _read_toml(path: Path) -> dict:
    source = str(path)
    text = read_input(path, "a drive or board file (TOML)", MAX_FILE_BYTES)
    try:
        return tomllib.loads(text.decode("utf-8"))
    except UnicodeDecodeError:
        raise InputError(source, "", "is not UTF-8 text, expected a TOML file") from None
    except tomllib.TOMLDecodeError as err:
        raise InputError(source, "", f"not valid TOML ({err})") from None
    except RecursionError:   # tomllib parses nested arrays and inline tables recursively
        raise InputError(source, "", "nests arrays or tables too deeply to read, expected a "
                         "drive or board file (values are numbers or strings)") from None


def _root_sections(source: str, data: dict, allowed_tables: tuple[str, ...],
                   allowed_values: tuple[str, ...]) -> None:
    for key, value in data.items():
        if isinstance(value, dict):
            if key not in allowed_tables:
                raise InputError(source, key,
                                 f"unknown section [{key}], expected one of: {', '.join(allowed_tables)}")
        elif key not in allowed_values:
            raise InputError(source, key,
                             f"unknown key, expected one of: {', '.join(allowed_values)} or a section")


def _table(source: str, data: dict, name: str, required: bool = True) -> dict | None:
    if name not in data:
        if required:
            raise InputError(source, name, f"missing section [{name}]")
        return None
    return data[name]


def _section(source: str, data: dict, name: str, required: bool = True) -> _Section:
    """The ``[name]`` table of the file ``source`` (parsed as ``data``) to read key by key;
    an empty one when it is not ``required`` and missing."""
    table = _table(source, data, name, required)
    return _Section(source, {} if table is None else table, name)


def _merged(board_source: str, board_table: dict | None, drive_source: str,
            drive_table: dict | None) -> tuple[dict, dict[str, str]]:
    """Key-wise merge of a board section with a drive file's override of it."""
    merged: dict = {}
    origins: dict[str, str] = {}
    for src, table in ((board_source, board_table), (drive_source, drive_table)):
        if table is None:
            continue
        if not isinstance(table, dict):
            raise InputError(src, "", f"expected a table, got {table!r}")
        for key, value in table.items():
            merged[key] = value
            origins[key] = src
    return merged, origins


def _read_switch(sec: _Section) -> Switch:
    switch = Switch(
        on_resistance=sec.quantity("on_resistance", "resistance", nonnegative=True),
        max_voltage=sec.quantity("max_voltage", "voltage", positive=True),
        derating=sec.fraction("derating", 0.8, below_one=False),
        rise_time=sec.quantity("rise_time", "time", 0.0, nonnegative=True),
        fall_time=sec.quantity("fall_time", "time", 0.0, nonnegative=True),
        power_rating=sec.quantity("power_rating", "power", 0.0, nonnegative=True),
        power_derating=_power_derating(sec),
        topology=sec.choice("topology", TOPOLOGIES, "low_side"),
    )
    if not 0 < switch.derating <= 1:
        raise sec.fail("derating", f"{switch.derating:g} must be in (0, 1], e.g. 0.8")
    sec.finish()
    return switch


def _read_freewheel(sec: _Section) -> Freewheel:
    kind = sec.choice("type", FREEWHEEL_TYPES)
    needs_diode = kind != "clamp"
    diode = sec.quantity("diode_drop", "voltage", _MISSING if needs_diode else 0.0, nonnegative=True)
    if needs_diode and not diode > 0:
        raise sec.fail("diode_drop", f"{diode:g} V must be greater than zero for a {kind} freewheel path")
    zener = sec.quantity("zener_voltage", "voltage", _MISSING if kind == "zener" else 0.0,
                         nonnegative=True)
    if kind == "zener" and not zener > 0:
        raise sec.fail("zener_voltage", "must be greater than zero for a zener freewheel path")
    resistance = sec.quantity("resistance", "resistance", _MISSING if kind == "resistor" else 0.0,
                              nonnegative=True)
    if kind == "resistor" and not resistance > 0:
        raise sec.fail("resistance", "must be greater than zero for a resistor freewheel path")
    clamp = sec.quantity("clamp_voltage", "voltage", _MISSING if kind == "clamp" else 0.0,
                         nonnegative=True)
    if kind == "clamp" and not clamp > 0:
        raise sec.fail("clamp_voltage", "must be greater than zero for a clamp across the switch")
    split = sec.boolean("split_decay", False)
    if not split:
        for key in _BYPASS_KEYS:
            if key in sec.table:
                raise sec.fail(key, "is only used with split_decay = true (a bypass switch "
                               "across the fast-decay element)")
    if split and kind == "clamp" and not diode > 0:
        raise sec.fail("diode_drop", f"{diode:g} V: split decay with a clamp needs the drop of "
                       "the freewheel diode the bypass switch puts across the coil (> 0)")
    ratings = {key: sec.quantity(key, "power", 0.0, nonnegative=True) for key in
               ("diode_power_rating", "zener_power_rating", "resistor_power_rating",
                "clamp_power_rating", "bypass_power_rating")}
    ratings.update({key: sec.quantity(key, "energy", 0.0, nonnegative=True) for key in _ENERGY_RATINGS})
    tolerances = {key: sec.fraction(key, 0.0) for key in _FREEWHEEL_TOLERANCES}
    fw = Freewheel(kind, diode, zener, resistance, clamp, split_decay=split,
                   bypass_resistance=sec.quantity("bypass_resistance", "resistance", 0.0,
                                                  nonnegative=True),
                   bypass_lead=sec.quantity("bypass_lead", "time", 0.0),
                   power_derating=_power_derating(sec),
                   energy_derating=_derating(sec, "energy_derating", ENERGY_DERATING, "energy"),
                   **ratings, **tolerances)
    sec.finish()
    return fw


def _power_derating(sec: _Section) -> float:
    return _derating(sec, "power_derating", POWER_DERATING, "power")


def _derating(sec: _Section, key: str, default: float, what: str) -> float:
    value = sec.quantity(key, "dimensionless", default)
    if not 0 < value <= 1:
        raise sec.fail(key, f"{value:g} must be in (0, 1], e.g. {default:g} "
                       f"(the fraction of the rated {what} a part may take)")
    return value


def _read_heat_capacity(s: _Section, thermal: Thermal) -> Thermal:
    """``[thermal] capacity`` (J/K) or ``time_constant`` (s, = resistance x capacity): two
    forms of one quantity, so at most one of them."""
    given = [k for k in ("capacity", "time_constant") if k in s.table]
    if len(given) == 2:
        raise s.fail("time_constant", "given together with thermal.capacity, expected one of "
                     "thermal.capacity or thermal.time_constant (two forms of one quantity)")
    if not given:
        return thermal
    key = given[0]
    if thermal.resistance <= 0:
        raise s.fail(key, "needs thermal.resistance above 0 (0 means no self-heating: the coil "
                     "stays at the ambient), expected a coil-to-ambient thermal resistance")
    if key == "capacity":
        return dataclasses.replace(thermal, capacity=s.quantity("capacity", "heat_capacity"))
    tau = s.quantity("time_constant", "time")
    return dataclasses.replace(thermal, capacity=tau / thermal.resistance)


def _read_duty(s: _Section) -> Duty:
    """``[duty]``: ``on_time`` with ``off_time`` or ``actuation_rate`` (not both)."""
    if "off_time" in s.table and "actuation_rate" in s.table:
        raise s.fail("actuation_rate", "given together with duty.off_time, expected one of "
                     "duty.off_time or duty.actuation_rate (two forms of one quantity)")
    on = s.quantity("on_time", "time")
    if "actuation_rate" in s.table:
        rate = s.quantity("actuation_rate", "frequency")
        if not on < 1.0 / rate:
            raise s.fail("on_time", f"{on:g} s is not shorter than the actuation period "
                         f"1 / duty.actuation_rate = {1.0 / rate:g} s, expected an off time after "
                         "each actuation")
        off = 1.0 / rate - on
    elif "off_time" in s.table:
        off = s.quantity("off_time", "time")
    else:
        raise s.fail("off_time", "missing, expected duty.off_time or duty.actuation_rate")
    s.finish()
    return Duty(on, off)


def _read_armature(s: _Section, curve: str | None = None) -> Armature:
    """``[armature]``; ``curve`` names the coil's flux-curve key when the file has one
    (the two inductances then come from the curves: giving them too is an error)."""
    if curve is not None:
        for key in ("inductance_open", "inductance_closed"):
            if key in s.table:
                src, full = s.where(key)
                raise InputError(src, f"{full} and coil.{curve}", "both give the armature's "
                                 "inductance (the curves' slopes); keep the curves, leave the "
                                 "inductances out")
    arm = Armature(
        # with the curves: their first slopes, filled in once the coil is read
        inductance_open=0.0 if curve else s.quantity("inductance_open", "inductance", positive=True),
        inductance_closed=0.0 if curve else s.quantity("inductance_closed", "inductance",
                                                       positive=True),
        stroke=s.quantity("stroke", "length", positive=True),
        mass=s.quantity("mass", "mass", positive=True),
        spring_preload=s.quantity("spring_preload", "force", nonnegative=True),
        spring_rate=s.quantity("spring_rate", "stiffness", nonnegative=True),
        load_force=s.quantity("load_force", "force", 0.0),
        damping=s.quantity("damping", "damping", 0.0, nonnegative=True),
        restitution=s.fraction("restitution", 0.0),
        current_margin=s.quantity("current_margin", "dimensionless", 1.25),
    )
    if curve is None and arm.inductance_closed < arm.inductance_open:
        raise s.fail("inductance_closed", "is below inductance_open, expected the closed "
                     "(seated) inductance to be the larger")
    if not arm.spring_preload + arm.load_force > 0:
        raise s.fail("spring_preload", f"spring_preload + load_force = "
                     f"{arm.spring_preload + arm.load_force:g} N, expected a force > 0 that holds "
                     "the armature on its open stop with no current")
    s.finish()
    return arm


#: Which datasheet voltage of ``[coil]`` gives the current of each section.
_SHEET_CURRENTS = {"pull_in": "pick_up_voltage", "release": "drop_out_voltage"}


def _both(s: _Section, key: str, other: str, what: str) -> InputError:
    """Two forms of the same quantity: one line naming both keys."""
    src, full = s.where(key)
    return InputError(src, f"{full} and coil.{other}", f"both give {what}; keep one of them")


def _read_coil(s: _Section, armature: Armature | None) -> tuple[Coil, dict[str, float]]:
    """``[coil]``, and the currents its datasheet voltages give (by section name).

    Resistance: ``resistance``, or ``rated_voltage^2 / rated_power`` (both at
    ``reference_temp``). The pick-up (must-operate) voltage holds for every part of the
    tolerance band, so the pull-in current is taken at the lowest resistance,
    ``V_pick_up / (R(T_stated) (1 - tol))``: the most any part can need. The drop-out
    (must-release) voltage gives the drop-out current at the highest,
    ``V_drop_out / (R(T_stated) (1 + tol))``: the least, which makes the release the
    longest. ``R(T)`` is copper's (IEC 60028, :mod:`coildrive.copper`).
    """
    from .copper import copper_resistance

    rated = [k for k in ("rated_voltage", "rated_power") if k in s.table]
    if rated and "resistance" in s.table:
        raise _both(s, "resistance", rated[0], "the coil's resistance (rated_voltage^2 / "
                    "rated_power at reference_temp)")
    if rated:
        for key, other in (("rated_voltage", "rated_power"), ("rated_power", "rated_voltage")):
            if key in s.table and other not in s.table:
                raise s.fail(key, f"needs coil.{other} too: the resistance is rated_voltage^2 / "
                             "rated_power (or give coil.resistance instead)")
        rated_v = s.quantity("rated_voltage", "voltage", positive=True)
        rated_p = s.quantity("rated_power", "power", positive=True)
        resistance = rated_v * rated_v / rated_p
        if not _in_bounds(resistance, "coil.resistance"):
            raise s.fail("rated_power", f"gives a resistance of {resistance:g} ohm (rated_voltage^2 / "
                         f"rated_power), outside {bounds_text('coil.resistance')}")
    else:
        resistance = s.quantity("resistance", "resistance", positive=True)
        rated_v = rated_p = 0.0
    reference_temp = s.quantity("reference_temp", "temperature", 20.0)
    tol_r = s.fraction("resistance_tolerance", 0.0)

    def optional(key: str, dimension: str) -> float:
        return s.quantity(key, dimension, positive=True) if key in s.table else 0.0

    pick_up = optional("pick_up_voltage", "voltage")
    drop_out = optional("drop_out_voltage", "voltage")
    stated = None
    if pick_up or drop_out:
        stated = s.quantity("stated_temp", "temperature", reference_temp)
    elif "stated_temp" in s.table:
        raise s.fail("stated_temp", "is the coil temperature of pick_up_voltage and "
                     "drop_out_voltage; give one of them, or leave stated_temp out")
    if pick_up and rated_v and pick_up > rated_v:
        raise s.fail("pick_up_voltage", f"{pick_up:g} V is above rated_voltage ({rated_v:g} V), "
                     "expected the pick-up (must-operate) voltage below the rating")
    if drop_out and pick_up and drop_out >= pick_up:
        raise s.fail("drop_out_voltage", f"{drop_out:g} V is not below pick_up_voltage "
                     f"({pick_up:g} V), expected drop-out < pick-up")
    sheet: dict[str, float] = {}
    if stated is not None:
        r_stated = float(copper_resistance(resistance, reference_temp, stated))
        for section, voltage, r_end in (("pull_in", pick_up, r_stated * (1.0 - tol_r)),
                                        ("release", drop_out, r_stated * (1.0 + tol_r))):
            if not voltage:
                continue
            value = voltage / r_end
            key = _SHEET_CURRENTS[section]
            if not _in_bounds(value, f"{section}.current"):
                raise s.fail(key, f"gives a {section.replace('_', '-')} current of {value:g} A, "
                             f"outside {bounds_text(section + '.current')}")
            sheet[section] = value
    table = _read_flux_curve(s, armature)
    eddy = [k for k in ("eddy_resistance", "eddy_time_constant") if k in s.table]
    if len(eddy) == 2:
        raise _both(s, "eddy_resistance", "eddy_time_constant", "the eddy-current term "
                    "(eddy_time_constant = inductance / eddy_resistance)")
    seated = _read_seated_curve(s, armature, table)
    coil = Coil(
        resistance=resistance,
        reference_temp=reference_temp,
        inductance=table[1][1] / table[0][1] if table else
        s.quantity("inductance", "inductance",
                   _MISSING if armature is None else armature.inductance_closed, positive=True),
        resistance_tolerance=tol_r,
        inductance_tolerance=s.fraction("inductance_tolerance", 0.0),
        tolerance_distribution=s.choice("tolerance_distribution", DISTRIBUTIONS, "uniform"),
        rated_voltage=rated_v, rated_power=rated_p, pick_up_voltage=pick_up,
        drop_out_voltage=drop_out, stated_temp=stated,
        operate_time=optional("operate_time", "time"), release_time=optional("release_time", "time"),
        flux_current=table[0] if table else (), flux_linkage=table[1] if table else (),
        seated_current=seated[0] if seated else (), seated_linkage=seated[1] if seated else (),
    )
    if eddy:
        tau = optional("eddy_time_constant", "time")
        r_e = coil.inductance / tau if tau else optional("eddy_resistance", "resistance")
        if not _in_bounds(r_e, "coil.eddy_resistance"):
            raise s.fail(eddy[0], f"gives an eddy resistance of {r_e:g} ohm (inductance / "
                         f"eddy_time_constant), outside {bounds_text('coil.eddy_resistance')}")
        coil = dataclasses.replace(coil, eddy_resistance=r_e, eddy_time_constant=tau)
    s.finish()
    return coil, sheet


#: Points a flux-linkage table may have.
FLUX_POINTS = (3, 200)


def _read_flux_curve(s: _Section, armature: Armature | None):
    """``flux_current`` and ``flux_linkage``: ``(currents, fluxes)`` (A, Wb), or ``None``."""
    keys = [k for k in ("flux_current", "flux_linkage") if k in s.table]
    if not keys:
        return None
    if "inductance" in s.table:
        raise _both(s, "inductance", keys[0], "the coil's inductance (the curve's slope)")
    return _read_table(s, "flux_current", "flux_linkage")


def _read_seated_curve(s: _Section, armature: Armature | None, table):
    """``seated_current`` and ``seated_linkage`` (A, Wb): the seated coil's curve, needed
    with ``[armature]`` and a flux-linkage curve, an error anywhere else; ``None`` when
    there is none. The open curve must lie below it (the gap only adds reluctance)."""
    keys = [k for k in ("seated_current", "seated_linkage") if k in s.table]
    if armature is None or table is None:
        if keys:
            raise s.fail(keys[0], "is the seated curve of a moving armature's saturating coil: "
                         "expected [armature] and coil.flux_current/flux_linkage (the open "
                         "curve) with it, or leave seated_current/seated_linkage out")
        return None
    if not keys:
        raise s.fail("flux_current", "with [armature] is the open (armature blocked open) curve; "
                     "expected the seated coil's too, as coil.seated_current and "
                     "coil.seated_linkage (fit --flux-curve --seated prints them)")
    seated = _read_table(s, "seated_current", "seated_linkage")
    _check_open_below_seated(s, table, seated)
    return seated


def _check_open_below_seated(s: _Section, open_, seated) -> None:
    """The open curve's flux at or below the seated one's at every current of both tables
    and at ten times the larger last one (each table read straight between its points and
    past its end at its last segment's slope), the first slopes strictly: the closing
    force then grows with the flux linkage (docs/coil-model.md)."""
    import numpy as np

    def psi(table, i):
        x, y = (np.asarray(c, float) for c in table)
        end = (y[-1] - y[-2]) / (x[-1] - x[-2])
        return np.where(i <= x[-1], np.interp(i, x, y), y[-1] + end * (i - x[-1]))

    grid = np.union1d(open_[0], seated[0])[1:]
    grid = np.append(grid, 10.0 * grid[-1])
    gap = psi(seated, grid) - psi(open_, grid)
    first = seated[1][1] / seated[0][1] > open_[1][1] / open_[0][1]
    if not first or np.any(gap < 0):
        at = float(grid[int(np.argmin(gap))]) if first else 0.0
        raise s.fail("seated_linkage", f"lies below the open curve (coil.flux_linkage) near "
                     f"{at:g} A, expected the seated coil's flux linkage above the open one's at "
                     "every current (the gap only adds reluctance)")


def _read_table(s: _Section, current_key: str, flux_key: str):
    """A current/flux-linkage table from two keys of ``[coil]``: ``(currents, fluxes)``."""
    for key, other in ((current_key, flux_key), (flux_key, current_key)):
        if other not in s.table:
            raise s.fail(key, f"needs coil.{other} too (the table's other column)")
    columns = []
    for key, dimension in ((current_key, "current"), (flux_key, "flux_linkage")):
        raw = s._get(key, _MISSING)
        src, full = s.where(key)
        low, high = FLUX_POINTS
        if not isinstance(raw, list) or not low <= len(raw) <= high:
            raise s.fail(key, f"{short_repr(raw)} is not a list of {low}..{high} values")
        values = tuple(parse_quantity(x, dimension, src, f"{full}[{n}]") for n, x in enumerate(raw))
        if not all(_in_bounds(x, full) for x in values):
            raise s.fail(key, f"has a value outside {bounds_text(full)}")
        if values[0] != 0 or not all(b > a for a, b in zip(values, values[1:])):
            raise s.fail(key, "must start at 0 and rise at every point (a flux-linkage curve is "
                         "monotone: one current for each flux)")
        columns.append(values)
    if len(columns[0]) != len(columns[1]):
        raise s.fail(flux_key, f"has {len(columns[1])} values for the {len(columns[0])} of "
                     f"coil.{current_key}, expected one flux per current")
    slope = columns[1][1] / columns[0][1]
    if not _in_bounds(slope, "coil.inductance"):
        raise s.fail(flux_key, f"starts with a slope of {slope:g} H, outside "
                     f"{bounds_text('coil.inductance')}")
    return columns[0], columns[1]


def _mechanics_currents(arm: Armature, coil: Coil) -> dict[str, float]:
    """Currents (A) the mechanics need, for keys a drive file leaves out: pull-in and hold
    are the static force-balance currents at the lowest inductance of the tolerance band
    times ``current_margin``; the drop-out is the nominal stay current (no margin: it is
    a prediction, not a requirement)."""
    from .model import magnet

    lc, beta = magnet.fit_gap(arm.inductance_open, arm.inductance_closed, arm.stroke)
    low = lc * (1.0 - coil.inductance_tolerance)
    mech = (arm.stroke, arm.spring_preload, arm.spring_rate, arm.load_force)
    through, _ = magnet.stroke_current(low, beta, *mech)
    return {"pull_in": arm.current_margin * float(through),
            "hold": arm.current_margin * float(magnet.stay_current(low, beta, *mech)),
            "release": float(magnet.stay_current(lc, beta, *mech))}


def _read_regulation(s: _Section, hold: Hold) -> Hold:
    """``[hold] regulation``: what the firmware does in a voltage-mode hold (a current-mode
    hold regulates the current itself and reports ``"current"``)."""
    if hold.mode == "current":
        if "regulation" in s.table and s.table["regulation"] != "current":
            raise s.fail("regulation", "a current-mode hold regulates the current itself; leave "
                         "regulation out (or \"current\") with mode = \"current\"")
        s.used.add("regulation")
        return dataclasses.replace(hold, regulation="current")
    return dataclasses.replace(hold, regulation=s.choice("regulation", REGULATIONS, "supply_table"))


def _check_regulation(s: _Section, hold: Hold, board: Board) -> Hold:
    """Without supply sensing the firmware cannot look the duty up: the default is then
    ``"fixed"``, and ``"supply_table"`` is an error naming the key."""
    if board.supply_sense is not None or hold.regulation != "supply_table":
        return hold
    if "regulation" in s.table:
        raise s.fail("regulation", f"\"supply_table\" needs the supply measured, but board "
                     f"{board.name!r} has no [supply_sense]; use \"fixed\" or add the divider")
    return dataclasses.replace(hold, regulation="fixed")


def _read_current_mode(s: _Section, hold: Hold) -> Hold:
    """The current-mode keys of ``[hold]`` (rejected with ``mode = "voltage"``)."""
    if hold.mode != "current":
        for key in _CURRENT_MODE_KEYS:
            if key in s.table:
                raise s.fail(key, "is only used with mode = \"current\" (current-mode hold)")
        return hold
    control = s.choice("control", CURRENT_CONTROLS, "hysteretic")
    band = s.quantity("band", "current", 0.0, nonnegative=True)
    off_time = s.quantity("off_time", "time", 0.0, nonnegative=True)
    if control != "hysteretic" and "band" in s.table:
        raise s.fail("band", f"is for control = \"hysteretic\"; control = \"{control}\" uses off_time")
    if control != "off_time" and "off_time" in s.table:
        raise s.fail("off_time", f"is for control = \"off_time\"; control = \"{control}\" uses band")
    f_min = s.quantity("min_frequency", "frequency", 20_000.0, positive=True)
    f_max = s.quantity("max_frequency", "frequency", 0.0, nonnegative=True)
    if f_max and f_max <= f_min:
        raise s.fail("max_frequency", f"{f_max:g} Hz is not above hold.min_frequency ({f_min:g} Hz)")
    delay = s.quantity("sense_delay", "time", 0.0, nonnegative=True)
    return dataclasses.replace(hold, control=control, band=band, off_time=off_time,
                               min_frequency=f_min, max_frequency=f_max, sense_delay=delay)


def load_board(path: str | Path) -> Board:
    """Read a board file. Raises :class:`InputError` naming the key on bad input."""
    path = Path(path)
    source = str(path)
    data = _read_toml(path)
    tables = ("timer", "adc", "sense", "supply_sense", "switch", "freewheel", "link", "tick",
              "channels")
    _root_sections(source, data, tables, ("name", "description", "ram", "flash", "core"))
    root = _Section(source, {k: v for k, v in data.items() if not isinstance(v, dict)}, "")
    name = root.text("name")
    description = root.text("description", "")

    s = _section(source, data, "timer")
    timer = Timer(s.quantity("clock", "frequency", positive=True),
                  s.integer("bits", low=8, high=32),
                  s.integer("prescaler_max", 1, low=1, high=2**32 - 1),
                  s.integer_list("prescalers", (), low=1, high=2**32 - 1),
                  s.quantity("max_pwm_frequency", "frequency", 0.0, nonnegative=True))
    if timer.prescalers and max(timer.prescalers) > timer.prescaler_max:
        raise s.fail("prescalers", f"{max(timer.prescalers)} is above timer.prescaler_max "
                     f"({timer.prescaler_max})")
    s.finish()
    s = _section(source, data, "adc")
    adc = Adc(s.integer("bits", low=6, high=24),
              s.quantity("reference", "voltage", positive=True),
              s.quantity("sample_rate", "frequency", positive=True))
    s.finish()
    s = _section(source, data, "sense")
    sense = Sense(s.quantity("resistance", "resistance", positive=True),
                  s.quantity("gain", "dimensionless", 1.0, positive=True),
                  s.choice("position", SENSE_POSITIONS),
                  s.fraction("resistance_tolerance", 0.0), s.fraction("gain_tolerance", 0.0))
    s.finish()
    supply_sense = None  # a board without [supply_sense] cannot measure its supply
    if "supply_sense" in data:
        s = _section(source, data, "supply_sense")
        supply_sense = SupplySense(s.quantity("divider", "dimensionless"),
                                   s.fraction("divider_tolerance", 0.0))
    s.finish()
    switch = _read_switch(_section(source, data, "switch"))
    freewheel = _read_freewheel(_section(source, data, "freewheel"))
    s = _section(source, data, "link")
    link = Link(s.integer("baud", low=300, high=100_000_000))
    s.finish()
    s = _section(source, data, "tick")
    tick = Tick(s.quantity("rate", "frequency", positive=True))
    s.finish()
    core = root.choice("core", BOARD_CORES, "") if "core" in root.table else ""
    channels = _read_channels(_section(source, data, "channels")) if "channels" in data else None
    return Board(name, description, timer, adc, sense, supply_sense, switch, freewheel, link,
                 tick, source, _memory_size(root, "ram"), _memory_size(root, "flash"), core,
                 channels)


#: Most channels a board may have.
MAX_CHANNELS = 64


def _read_channels(s: _Section) -> Channels:
    """``[channels]``: ``count`` and the groups (lists of channel numbers) sharing a timer,
    a supply rail or a freewheel part; each channel in at most one group of a kind."""
    count = s.integer("count", low=1, high=MAX_CHANNELS)
    groups = {}
    for key in ("timers", "supplies", "freewheels"):
        raw = s._get(key, [])
        if not isinstance(raw, list) or not all(isinstance(g, list) and g for g in raw):
            raise s.fail(key, f"{short_repr(raw)} is not a list of channel lists, expected e.g. "
                         "[[1, 2, 3], [4, 5]]")
        seen: set[int] = set()
        for g in raw:
            for n in g:
                if isinstance(n, bool) or not isinstance(n, int) or not 1 <= n <= count:
                    raise s.fail(key, f"{short_repr(n)} is not a channel number 1..{count} "
                                 "(channels.count)")
                if n in seen:
                    raise s.fail(key, f"channel {n} is in two groups, expected each channel in "
                                 "at most one")
                seen.add(n)
        groups[key] = tuple(tuple(g) for g in raw)
    s.finish()
    return Channels(count, **groups)


#: The board file's ``core`` values: the cores whose handler timings firmware-driver knows.
BOARD_CORES = ("avr", "cortex-m0plus", "cortex-m3", "cortex-m4")

_MEMORY_UNITS = {"": 1, "B": 1, "kB": 1000, "MB": 1000**2, "KiB": 1024, "MiB": 1024**2}


def _memory_size(section: _Section, key: str) -> int:
    """Bytes: a whole number, or a string with B, kB, MB (SI) or KiB, MiB (IEC 80000-13)."""
    raw = section._get(key, 0)
    match = re.fullmatch(r"\s*(\d+(?:\.\d*)?)\s*(B|kB|MB|KiB|MiB)?\s*", raw) if isinstance(raw, str) else None
    value = (float(match[1]) * _MEMORY_UNITS[match[2] or ""] if match
             else raw if isinstance(raw, int) and not isinstance(raw, bool) else -1)
    if not (value >= 0 and value == int(value)):
        raise section.fail(key, f"{raw!r} is not a memory size, expected whole bytes such as "
                           "2048 or \"2 KiB\" (units B, kB, MB, KiB, MiB)")
    return int(value)


def resolve_board(spec: str, relative_to: Path | None = None) -> Path:
    """Find a board by bundled name or by path (relative paths against ``relative_to``)."""
    boards = bundled_boards()
    if spec in boards:
        return boards[spec]
    candidate = Path(spec)
    if not candidate.is_absolute() and relative_to is not None:
        candidate = relative_to / candidate
    if candidate.is_file():
        return candidate
    raise InputError("", "", f"unknown board {spec!r}: not a bundled board ({', '.join(boards)}) "
                     "and no such file")


def _read_boost(s: "_Section") -> tuple:
    """The ``[supply]`` boost keys, in :class:`Supply`'s order (all 0 without ``boost``)."""
    boost = s.quantity("boost", "voltage", 0.0, nonnegative=True)
    keys = ("boost_tolerance", "boost_capacitance", "boost_capacitance_tolerance", "boost_resistance",
            "boost_power", "boost_efficiency")
    if not boost > 0:
        for key in keys:
            if key in s.table:
                raise s.fail(key, "given without supply.boost, expected the boost voltage too")
        return (0.0,) * 7
    cap = s.quantity("boost_capacitance", "capacitance", 0.0, nonnegative=True)
    power = s.quantity("boost_power", "power", 0.0, nonnegative=True)
    if cap > 0 and not power > 0:
        raise s.fail("boost_power", "missing: a boost capacitor is recharged between actuations, "
                     "expected the charging power (e.g. \"10 W\")")
    return (boost, s.fraction("boost_tolerance", 0.0), cap,
            s.fraction("boost_capacitance_tolerance", 0.0),
            s.quantity("boost_resistance", "resistance", 0.0, nonnegative=True), power,
            s.fraction("boost_efficiency", 0.0, below_one=False))


def _boosted_latch_refusal(coil: Coil, switch: Switch, supply: Supply, armature: Armature | None,
                           latch: "Latch | None") -> tuple[str, str] | None:
    """``(key, why)`` where a latching coil's pulses from the boost are not modelled, else
    ``None``: they are (:mod:`coildrive.design.latch_boost`) for a linear coil or a
    flux-linkage curve (the set winding's; an eddy term on either winding too: the boosted
    peak's runs of :mod:`coildrive.model.flux_boost`), a reset winding on a second low- or
    high-side switch, or one coil on a full bridge whose high-side rail the boost switch
    feeds (both polarities; a boost capacitor, which takes each fast decay back through the
    boost switch's body diode: a linear coil's closed form, a curve's or an eddy term's runs
    of :func:`coildrive.model.flux_bus_decay.boost_return`), a stiff or a drooping main supply (either way
    the pulses draw nothing from it, the boost converter's recharges do:
    :func:`coildrive.design.latch_boost.main_bus`) and no settle time after the reset pulse;
    with an ``[armature]`` a linear coil and its reset winding on a stiff or a drooping main
    supply (the set pulse's seat run from the boost capacitor: the design refuses in one
    line where it is not on the seat when the current reaches the threshold,
    :func:`coildrive.design.latch_boost.armature_pulse`; the main bus sees only the
    converter's recharge of the run's energy), an eddy term on the set winding too (from a
    boost capacitor its loss is a state of that run; from an ideal boost it follows from the
    run's own integrals: :func:`coildrive.model.armature_boost.run_eddy_loss`) and on the
    reset winding (a still coil's pulse, the catch tripping where its magnetising current
    reaches ``reset.current``); or the set winding's open and seated flux-linkage curves from
    a boost capacitor or an ideal boost (the seat run over the curves:
    :func:`coildrive.model.armature_runs.pull_in` with a trip, the capacitor a state or an
    ideal boost a stiff source whose resting stretches are the curves' closed-form rise; the
    tick after the threshold the seated curve held on the seat,
    :func:`coildrive.model.armature_boost.seated_on`), an eddy term on the set winding too
    (the threshold on the terminal current; from the capacitor the eddy loss a state of the
    flights, ``pull_in``'s ``eddy_loss``; from an ideal boost it follows from the run's own
    integrals)."""
    if switch.topology == "full_bridge" and not supply.boost_capacitance > 0:
        return "supply.boost_capacitance", ("a latching coil on a full bridge from an ideal boost (each fast "
                                            "decay returns into the boost capacitor: give its capacitance)")
    if latch is not None and latch.reset_settle_time > 0:
        return "reset.settle_time", ("a reset settle time (each pulse from the boost ends at its current "
                                     "threshold, not at a time after it)")
    return None


def _boosted_curves_refusal(coil: Coil, switch: Switch, freewheel: Freewheel, supply: Supply, hold: Hold,
                            duty) -> tuple[str, str] | None:
    """``(key, why)`` where a moving armature over its open and seated flux-linkage curves
    is not modelled with the boosted peak, else ``None``: it is
    (:func:`coildrive.model.armature_runs.pull_in` with a trip, the boost capacitor a state
    or an ideal boost a stiff source; :func:`coildrive.model.armature_boost.curve_window` the
    conversion after the threshold) from a boost capacitor on one low- or high-side switch
    with any freewheel (a clamp across the switch, split decay too: the hold's flights
    through the hold path, the release's through the release path) or on a full bridge with
    a slow-decay hold (the release through the body diodes), a stiff main supply, a
    voltage-mode fixed or supply-table hold (or a current-mode one where the armature seats
    within the peak at every corner:
    :func:`coildrive.design.boost_armature.require_seated_in_peak`), no eddy term; an on/off
    cycle too (the peak's heat the run's copper integral, the conversion after the threshold
    flown: :func:`coildrive.design.boost_armature.peak_heat`). From an ideal boost, with an
    eddy term (the threshold on the terminal current) or on a drooping main supply (the
    hold's flights on the main bus from the hand-over,
    :func:`coildrive.design.supply.handover_bus`): on one switch with a diode, Zener or
    resistor freewheel (no split decay) under a voltage-mode fixed or supply-table hold
    without an on/off cycle -- each of the two sets is checked against its own references,
    their mixtures are not and are refused."""
    what = "a moving armature over its open and seated flux-linkage curves"
    if switch.topology == "full_bridge" and hold.fast_fraction > 0:
        return "hold.fast_fraction", (f"{what} and a full bridge's mixed-decay hold (on a full bridge a "
                                      "slow-decay hold only)")
    if hold.regulation == "closed_loop":
        return ("hold.regulation", f"{what} under a closed-loop hold (a voltage-mode fixed or supply-table "
                "hold, or a current-mode one seated within the peak)")
    wider = [(key, text) for key, text, given in (
        ("supply.boost_capacitance", "an ideal boost", not supply.boost_capacitance > 0),
        ("coil.eddy_resistance", "an eddy-current term", bool(coil.eddy_resistance)),
        ("supply.source_resistance", "a drooping main supply", supply.droops)) if given]
    other = [(key, text) for key, text, given in (
        ("switch.topology", "a full bridge", switch.topology == "full_bridge"),
        ("freewheel.type", "a clamp across the switch", freewheel.type == "clamp"),
        ("freewheel.split_decay", "split decay", bool(freewheel.split_decay)),
        ("hold.mode", "a current-mode hold", hold.mode == "current"),
        ("duty", "an on/off cycle ([duty])", duty is not None)) if given]
    if wider and other:
        return other[0][0], (f"{what} with {wider[0][1]} and {other[0][1]} together (either is designed "
                             "alone: from an ideal boost, with an eddy term or on a drooping main supply "
                             "on one switch with a diode, Zener or resistor freewheel under a voltage-mode "
                             "fixed or supply-table hold; a full bridge, a clamp or split decay, a "
                             "current-mode hold or an on/off cycle from a boost capacitor, no eddy term, "
                             "a stiff main supply)")
    return None


def _check_boost(source: str, fw_origins: dict, coil: Coil, switch: Switch, freewheel: Freewheel,
                 supply: Supply, hold: Hold, pull_in: PullIn, armature: Armature | None,
                 duty=None, latch: "Latch | None" = None) -> None:
    """What the boosted peak (``supply.boost``) is modelled with: a linear coil or a
    flux-linkage curve (an eddy term too, either way), a low-side
    or a high-side switch or a full bridge (the boost switch feeding leg A's high side, the
    release into the main bus: :func:`_check_bridge` says what a bridge takes), a
    diode/zener/resistor freewheel (split decay too) or a clamp across a low-side or a
    high-side switch, a stiff or a drooping main supply (the main bus feeds the hold from
    the hand-over: :func:`coildrive.design.supply.handover_bus`, a linear coil, a curve or
    an eddy term; on a full bridge every turn-off's fast decay returns into it, the boost
    converter idle or drawing: :mod:`coildrive.design.bridge_bus`, a linear coil or a curve,
    an eddy term on a linear coil (on a supply that cannot sink
    :func:`coildrive.model.bus_decay.eddy_decay_drawn_no_sink`), or on a curve on a supply
    that sinks; with a moving armature, a linear coil (an eddy
    term too), the hold's flight on it -- with a clamp across the switch,
    whose off-times draw from the bus
    (:meth:`coildrive.model.armature.ArmatureParams.clamped`), or with split decay only its
    release (:func:`coildrive.design.boost_armature.clamp_draws`); on a full bridge its release
    into the bus with the converter idle or drawing,
    :func:`coildrive.model.armature_bus_release.release_over`, a slow-decay hold), a PWM
    hold from the main supply (voltage mode, fixed, supply table or closed loop; or current
    mode), a peak that ends at its threshold. A moving armature
    (:mod:`coildrive.model.armature_boost`): a linear coil (an eddy term too; or its open
    and seated flux-linkage curves where :func:`_boosted_curves_refusal` allows them), a
    voltage-mode hold (fixed or supply table; on a full bridge slow decay or mixed decay,
    the flights after the threshold taking each off-time's fast part through the body
    diodes; or the closed loop, which carries an armature in flight with its own PI:
    :func:`coildrive.design.boost_armature.loop_pull_in`, an eddy term too: its conversions
    of the terminal current) or a current-mode hold -- its comparator carrying an armature
    still in flight at the threshold (:func:`coildrive.design.boost_armature.threshold_pull_in`,
    a linear coil, an eddy term too); with an eddy term or a bouncing seat on a drooping
    main supply where the design finds the armature seated within the peak at every corner
    (:func:`coildrive.design.boost_armature.require_seated_in_peak`) --, a bouncing seat (``restitution``;
    an eddy term too: the conversion after the threshold flown, :func:`coildrive.model.armature_boost.window_flight`),
    an on/off cycle (the peak's heat is the run's copper integral, with an eddy term plus its core loss
    bounded by the first law: :func:`coildrive.design.boost_armature.peak_heat`).
    A latching coil's set and reset pulses from the boost, each ending at its own threshold
    (:mod:`coildrive.design.latch_boost`; a linear coil or a curve, an eddy term too; on a
    full bridge too, the boost feeding both legs' high side and each fast decay
    returning into the boost capacitor; a clamp across the switch on a stiff or a drooping
    main supply, whose decay draws on it: :func:`coildrive.design.latch_boost.main_bus`): what
    :func:`_boosted_latch_refusal` allows.
    Anything else is refused in one line."""
    if not supply.boosted:
        return
    if supply.boost * (1.0 - supply.boost_tolerance) <= supply.max:
        raise InputError(source, "supply.boost", f"{supply.boost:g} V less its tolerance is not above "
                         f"supply.max ({supply.max:g} V), expected a higher voltage than the main supply")
    if supply.droops and supply.boost_power > 0 and not supply.boost_efficiency > 0:
        raise InputError(source, "supply.boost_efficiency", "missing: on a drooping main supply the boost "
                         "converter draws boost_power / its efficiency from the main bus, expected it "
                         "(e.g. 0.85)")
    why = None
    if (supply.droops and switch.topology == "full_bridge" and not supply.sink
            and coil.eddy_resistance and coil.flux_current):
        key, why = "supply.sink", ("a drooping main supply that cannot sink on a full bridge with an "
                                   "eddy-current term on a flux-linkage curve (the release into the "
                                   "drooping bus with the converter drawing and the feed blocking is a "
                                   "linear coil's, a curve's or an eddy term's on a linear coil)")
    elif armature is not None and coil.flux_current and hold.mode != "latch" and (
            refused := _boosted_curves_refusal(coil, switch, freewheel, supply, hold, duty)):
        key, why = refused
    elif hold.mode == "latch" and (refused := _boosted_latch_refusal(coil, switch, supply, armature, latch)):
        key, why = refused
    elif armature is not None and supply.droops and hold.fast_fraction > 0:
        key, why = "hold.fast_fraction", ("a moving armature, a full bridge's mixed-decay hold and a drooping main "
                                          "supply together (the hold's fast parts into the bus with the boost "
                                          "converter drawing from it; on a stiff main supply it is designed)")
    elif pull_in.compensate:
        key, why = "pull_in.compensate", ("a supply-compensated peak (the boosted peak runs from the boost, "
                                          "not the main supply, and ends at its threshold: nothing to compensate)")
    elif pull_in.settle_time > 0:
        key, why = "pull_in.settle_time", ("a settle time (the boosted peak ends at its current threshold, "
                                           "not at a time after the pull-in)")
    if why is not None:
        raise InputError(source, key, f"the boosted peak (supply.boost) is not modelled with {why}: "
                         "expected boost left out, or a linear coil or a flux-linkage curve (an eddy term "
                         "too), a low-side or "
                         "high-side switch or a "
                         "full bridge, a "
                         "diode/zener/resistor freewheel (split decay too) or a clamp, a stiff "
                         "main supply (or a drooping one; on a full bridge a linear coil or a curve, an eddy "
                         "term on a linear coil, or on a curve on a supply that sinks; with [armature] a "
                         "linear coil, an eddy term too (or its open and seated flux-linkage curves from a "
                         "boost capacitor or an ideal boost on one switch, a diode/zener/resistor freewheel, a "
                         "voltage-mode fixed or supply-table hold; or from a boost capacitor on a stiff main "
                         "supply a clamp, split decay, a current-mode hold or an on/off cycle, on a full bridge "
                         "a slow-decay one), a clamp (split decay too), on a full bridge a slow-decay hold), a "
                         "voltage-mode or current-mode hold, a peak without compensate or settle_time; a "
                         "latching coil: a linear coil or a curve (an eddy term too) and its reset winding, or on a "
                         "full bridge with a boost capacitor; a stiff or a "
                         "drooping main supply, no reset settle_time; with [armature] a "
                         "linear coil (an eddy term on either winding too) or its open and seated curves from a boost "
                         "capacitor or an ideal boost (an eddy term too), seated by the set pulse's threshold")


def _check_bridge(source: str, fw_origins: dict, switch: Switch, freewheel: Freewheel,
                  supply: Supply, hold: Hold, coil: Coil, armature=None) -> None:
    """What a full bridge needs: its freewheel path is its switches' body diodes (type
    "diode", no split decay: the bridge decays slowly and fast by itself), mixed decay under
    a fixed, supply-table or closed-loop hold, or a current-mode hold (the fixed off-time:
    each off-time's first ``fast_fraction`` fast, the rest slow; hysteretic: each off-time
    fast for a fixed one-shot time, ``fast_fraction`` x the slow-decay off-time at the
    nominal point; a linear coil, an eddy term, a flux-linkage curve or both, on a stiff
    or a drooping main supply, an ``[armature]`` too (seated in the hold), or after a
    boosted peak (the hold from the hand-over) -- a boosted peak with an ``[armature]`` is
    not modelled with it),
    and with a supply that cannot sink the returned
    energy, the bulk capacitance. (The supply's ``sink`` and
    ``capacitance`` keys mean nothing to the other topologies, which return no energy.)"""
    if switch.topology != "full_bridge":
        if hold.fast_fraction > 0:
            raise InputError(source, "hold.fast_fraction", f"{hold.fast_fraction:g} with switch.topology = "
                             f"{switch.topology!r}: mixed decay needs a full bridge, expected 0 or "
                             "the key left out")
        return
    if freewheel.type != "diode":
        raise InputError(fw_origins.get("type", source), "freewheel.type",
                         f"{freewheel.type!r} with switch.topology = \"full_bridge\": the bridge's body "
                         "diodes are its freewheel path, expected type = \"diode\" (diode_drop = the "
                         "body diode's drop)")
    if freewheel.split_decay:
        raise InputError(fw_origins.get("split_decay", source), "freewheel.split_decay",
                         "a full bridge decays slowly in the hold and fast at the release by itself: "
                         "expected split_decay left out")
    if hold.regulation == "current" and hold.fast_fraction > 0 and supply.boosted and armature is not None:
        raise InputError(source, "hold.fast_fraction", f"{hold.fast_fraction:g} with hold.mode = "
                         "\"current\" and a boosted peak and an [armature] together (supply.boost with "
                         "[armature]): a full bridge's current-mode mixed decay is modelled with an "
                         "[armature] or after a boosted peak, not both; expected 0 or the key left out "
                         "(or a fixed, supply-table or closed-loop hold)")
    if not supply.sink and not supply.capacitance > 0:
        raise InputError(source, "supply.capacitance", "missing: with sink = false the returned "
                         "energy lands on the bulk capacitance, expected its value (e.g. \"470 uF\")")


def load_drive(path: str | Path, board: str | Path | None = None) -> Drive:
    """Read a drive file and its board.

    Parameters
    ----------
    path : path of the drive file (TOML).
    board : bundled board name or path; overrides the file's ``board`` key.
    """
    path = Path(path)
    source = str(path)
    data = _read_toml(path)
    tables = ("coil", "supply", "ambient", "thermal", "pull_in", "hold", "release", "armature",
              "switch", "freewheel", "duty", "reset", "reset_coil")
    _root_sections(source, data, tables, ("board",))
    if board is not None:
        try:
            board_path = resolve_board(str(board), Path.cwd())
        except InputError as err:
            raise InputError("--board", "", err.message) from None
    else:
        if "board" not in data:
            raise InputError(source, "board", "missing, expected a bundled board name or a board "
                             "file path (or give --board)")
        spec = data["board"]
        if not isinstance(spec, str):
            raise InputError(source, "board", f"{spec!r} is not a string")
        try:
            board_path = resolve_board(spec, path.parent)
        except InputError as err:
            raise InputError(source, "board", err.message) from None
    brd = load_board(board_path)

    coil_keys = data.get("coil") if isinstance(data.get("coil"), dict) else {}
    curve_key = next((k for k in ("flux_current", "flux_linkage") if k in coil_keys), None)
    armature = (_read_armature(_section(source, data, "armature"), curve_key)
                if "armature" in data else None)
    coil, sheet = _read_coil(_section(source, data, "coil"), armature)
    if armature is not None and coil.seated_current:
        # the armature's two inductances: the curves' first slopes (small-signal)
        armature = dataclasses.replace(
            armature, inductance_open=coil.flux_linkage[1] / coil.flux_current[1],
            inductance_closed=coil.seated_linkage[1] / coil.seated_current[1],
            open_current=coil.flux_current, open_linkage=coil.flux_linkage,
            seated_current=coil.seated_current, seated_linkage=coil.seated_linkage)
    s = _section(source, data, "supply")
    supply = Supply(s.quantity("min", "voltage", positive=True),
                    s.quantity("nominal", "voltage", positive=True),
                    s.quantity("max", "voltage", positive=True),
                    s.boolean("sink", True),
                    s.quantity("capacitance", "capacitance", 0.0, nonnegative=True),
                    s.quantity("capacitor_voltage", "voltage", 0.0, nonnegative=True),
                    s.quantity("source_resistance", "resistance", 0.0, nonnegative=True),
                    *_read_boost(s))
    if supply.droops and not supply.capacitance > 0:
        raise s.fail("capacitance", "missing: with source_resistance the bus droops onto the bulk "
                     "capacitor at the board, expected its value (e.g. \"470 uF\")")
    if supply.min > supply.max:
        raise s.fail("min", f"{supply.min:g} V is above supply.max ({supply.max:g} V), expected min <= max")
    if not supply.min <= supply.nominal <= supply.max:
        raise s.fail("nominal", f"{supply.nominal:g} V is outside min..max "
                     f"({supply.min:g}..{supply.max:g} V)")
    s.finish()
    s = _section(source, data, "ambient")
    ambient = Ambient(s.quantity("min", "temperature"), s.quantity("max", "temperature"))
    if ambient.min > ambient.max:
        raise s.fail("min", f"{ambient.min:g} degC is above ambient.max ({ambient.max:g} degC), "
                     "expected min <= max")
    s.finish()
    s = _section(source, data, "thermal")
    thermal = Thermal(s.quantity("resistance", "thermal_resistance", nonnegative=True),
                      s.quantity("max_coil_temp", "temperature"))
    if thermal.max_coil_temp <= ambient.max:
        raise s.fail("max_coil_temp", f"{thermal.max_coil_temp:g} degC is not above ambient.max "
                     f"({ambient.max:g} degC), expected the coil's temperature limit")
    thermal = _read_heat_capacity(s, thermal)
    s.finish()
    duty = _read_duty(_section(source, data, "duty")) if "duty" in data else None
    # With [armature], the currents the file leaves out come from the force balance.
    need = (None if armature is None else {} if armature.seated_current else
            _mechanics_currents(armature, coil))
    derived: list[str] = []

    def current(sec_: _Section, key: str, mech: float | None) -> float:
        if sec_.name in sheet:   # from the coil's datasheet voltages
            voltage_key = _SHEET_CURRENTS[sec_.name]
            if key in sec_.table:
                raise _both(sec_, key, voltage_key, f"the {sec_.name.replace('_', '-')} current")
            sec_.used.add(key)
            return sheet[sec_.name]
        if need is None or key in sec_.table:
            return sec_.quantity(key, "current", positive=True)
        if armature.seated_current:
            raise sec_.fail(key, "missing: with the coil's two curves (coil.seated_current) the "
                            "force-balance currents are not filled in; give a value (design "
                            "shows the mechanics' own)")
        sec_.used.add(key)
        if not mech > 0:
            raise sec_.fail(key, "missing, and the mechanics need none (spring + load do not "
                            "push the seated armature open): give a value")
        if not mech < float("inf"):
            raise sec_.fail(key, "missing, and the mechanics cannot give it: with "
                            "armature.inductance_open = inductance_closed there is no magnetic "
                            "force; give a value")
        derived.append(f"{sec_.name}.{key}")
        return mech

    optional = armature is not None
    s = _section(source, data, "pull_in", required=not (optional or "pull_in" in sheet))
    pull_in = PullIn(current(s, "current", None if need is None else need.get("pull_in")),
                     s.quantity("margin", "dimensionless", 1.5),
                     # with [armature] the seat time comes from the force balance itself and
                     # pull_in.current carries armature.current_margin: no second margin by default
                     s.quantity("current_margin", "dimensionless",
                                1.0 if armature is not None else PULL_IN_CURRENT_MARGIN),
                     s.quantity("settle_time", "time", 0.0, nonnegative=True),
                     s.boolean("compensate", False))
    if pull_in.compensate and brd.supply_sense is None:
        raise s.fail("compensate", f"a supply-compensated peak needs the supply measured, but board "
                     f"{brd.name!r} has no [supply_sense]")
    s.finish()
    s = _section(source, data, "hold")
    if s.table.get("mode") == "latch":
        hold, release, latch = _read_latch(source, data, s, pull_in)
        return _latch_drive(source, path, data, brd, coil, sheet, supply, ambient, thermal, pull_in,
                            hold, release, armature, duty, latch)
    for name in ("reset", "reset_coil"):
        if name in data:
            raise InputError(source, name, f"[{name}] is for a latching coil only, expected it left "
                             "out (or [hold] mode = \"latch\")")
    hold = Hold(current(s, "current", None if need is None else need.get("hold")),
                s.quantity("frequency", "frequency", positive=True),
                s.choice("mode", HOLD_MODES, "voltage"),
                s.fraction("frequency_tolerance", 0.01))
    hold = _read_current_mode(s, hold)
    hold = _check_regulation(s, _read_regulation(s, hold), brd)
    hold = dataclasses.replace(hold, fast_fraction=s.fraction("fast_fraction", 0.0, below_one=False))
    if not hold.fast_fraction <= 1.0:
        raise s.fail("fast_fraction", f"{hold.fast_fraction:g} is more than the whole off-time, "
                     "expected 0..1")
    if hold.current >= pull_in.current:
        what = " (derived from the mechanics)" if "hold.current" in derived else ""
        raise s.fail("current", f"{hold.current:g} A{what} is not below pull_in.current "
                     f"({pull_in.current:g} A), expected hold < pull-in")
    s.finish()
    s = _section(source, data, "release", required=not (optional or "release" in sheet))
    release = Release(current(s, "current", None if need is None else need.get("release")))
    if release.current >= hold.current:
        what = " (derived from the mechanics)" if "release.current" in derived else ""
        raise s.fail("current", f"{release.current:g} A{what} drop-out is not below hold.current "
                     f"({hold.current:g} A), expected drop-out < hold")
    s.finish()
    if armature is not None and derived:
        armature = dataclasses.replace(armature, derived=tuple(derived))

    return _finish_drive(source, path, data, brd, coil, supply, ambient, thermal, pull_in, hold,
                         release, armature, duty)


def _read_latch(source: str, data: dict, s: "_Section", pull_in: PullIn) -> tuple[Hold, Release, Latch]:
    """``[hold] mode = "latch"`` (its only other key ``recharge_tolerance``), ``[reset]`` and
    the optional ``[reset_coil]``: the hold and release a latching coil does not have (zero
    currents, never read) and its :class:`Latch`."""
    s.choice("mode", HOLD_MODES)
    tol = s.fraction("recharge_tolerance", 0.01)
    if not tol > 0:
        raise s.fail("recharge_tolerance", "0 would wait for ever for the capacitor, expected a "
                     "fraction above 0 (0.01 = within 1 % of the supply)")
    s.finish()
    if "release" in data:
        raise InputError(source, "release", "a latching coil stays where its last pulse put it (no "
                         "drop-out current): expected [release] left out; the reset pulse is [reset]")
    r = _section(source, data, "reset")
    reset = (r.quantity("current", "current", positive=True), r.quantity("margin", "dimensionless", 1.5),
             r.quantity("current_margin", "dimensionless", PULL_IN_CURRENT_MARGIN),
             r.quantity("settle_time", "time", 0.0, nonnegative=True))
    r.finish()
    reset_coil = None
    if "reset_coil" in data:
        c = _section(source, data, "reset_coil")
        for key in ("rated_voltage", "rated_power", "pick_up_voltage", "drop_out_voltage",
                    "flux_current", "flux_linkage", "operate_time", "release_time", "stated_temp"):
            if key in c.table:
                raise c.fail(key, "the reset winding takes resistance, reference_temp, inductance and "
                             "their tolerances only, expected this key left out")
        reset_coil, _ = _read_coil(c, None)
        c.finish()
    return (Hold(0.0, 0.0, "latch"), Release(0.0),
            Latch(*reset, reset_coil=reset_coil, recharge_tolerance=tol))


def _latch_drive(source, path, data, brd, coil, sheet, supply, ambient, thermal, pull_in, hold,
                 release, armature, duty, latch) -> Drive:
    """A latching coil's :class:`Drive`: what it is not designed with is refused in one line.
    A moving armature takes a linear coil or its open and seated flux-linkage curves, either
    with an eddy-current term (:func:`coildrive.design.latch.seat_run`)."""
    why = None
    if coil.drop_out_voltage:
        key, why = "coil.drop_out_voltage", ("a drop-out voltage: it stays where its last pulse put it "
                                             "(give the reset pulse's current in [reset])")
    elif coil.operate_time or coil.release_time:
        key = "coil.operate_time" if coil.operate_time else "coil.release_time"
        why = ("the datasheet's operate or release time: they time a monostable coil's peak and "
               "release, which it does not have")
    elif thermal.resistance > 0 and not thermal.capacity > 0:
        key, why = "thermal.capacity", ("no heat capacity (the pulses' heat and the interval between "
                                        "them need it: give thermal.capacity or time_constant)")
    if why is not None:
        raise InputError(source, key, f"a latching coil ([hold] mode = \"latch\") is not designed with {why}")
    return _finish_drive(source, path, data, brd, coil, supply, ambient, thermal, pull_in, hold,
                         release, armature, duty, latch)


def _check_latch(source: str, switch: Switch, freewheel: Freewheel, latch: Latch,
                 armature: Armature | None = None, supply: Supply | None = None) -> None:
    """A latching coil's circuit: a full bridge reverses one coil (no [reset_coil]); one
    switch per winding (low or high side) needs the reset winding. A moving armature is
    the mechanically latched one (a catch holds it seated, the reset winding trips the
    catch): with a reset winding only, since reversing one coil unlatches only a
    permanent-magnet armature, which the armature model does not have. A clamp across the
    switch (each decay draws from the bus: the pulse energies take it; on the drooping bus
    the clamped decay's draw on the capacitor: a linear coil's in closed form, a
    flux-linkage curve's or an eddy term's by the stepped or closed-form runs of
    :func:`coildrive.model.flux_bus_decay.clamp_decay`; with a moving armature from the set
    pulse's seat run's end state, the seated coil decaying:
    :func:`coildrive.design.latch.clamp_decays_from_full`)."""
    if switch.topology == "full_bridge" and latch.reset_coil is not None:
        raise InputError(source, "reset_coil", "a full bridge resets the one coil with the other "
                         "polarity: expected [reset_coil] left out (or a low- or high-side board)")
    if armature is not None and switch.topology == "full_bridge":
        raise InputError(source, "armature", "a latching coil reset by reversing the one coil is held "
                         "by a permanent magnet, which the armature model does not have: expected "
                         "[armature] left out, or a reset winding ([reset_coil]) on a low- or "
                         "high-side board (a catch that the reset winding trips)")
    if freewheel.split_decay:
        raise InputError(source, "freewheel.split_decay", "a latching coil has no hold to decay slowly "
                         "in: expected split_decay left out")
    if switch.topology != "full_bridge" and latch.reset_coil is None:
        raise InputError(source, "reset_coil", f"missing: a {switch.topology.replace('_', '-')} switch "
                         "drives one polarity, so a latching coil needs its reset winding ([reset_coil]) "
                         "on a second switch, or a full bridge")


def _finish_drive(source, path, data, brd, coil, supply, ambient, thermal, pull_in, hold, release,
                  armature, duty, latch=None) -> Drive:
    """The drive's switch and freewheel path (the board's, with the drive file's
    overrides), the checks that need them, and the :class:`Drive`."""
    merged, origins = _merged(brd.source, dataclasses.asdict(brd.switch), source,
                              data.get("switch"))
    switch = _read_switch(_Section(source, merged, "switch", origins))
    fw_board = dataclasses.asdict(brd.freewheel)
    fw_drive = data.get("freewheel")
    if isinstance(fw_drive, dict) and "type" in fw_drive and fw_drive["type"] != brd.freewheel.type:
        fw_board = {}  # a different freewheel type: the board's values do not apply
    else:
        fw_board = {k: v for k, v in fw_board.items() if k == "type" or v}
    merged, origins = _merged(brd.source, fw_board, source, fw_drive)
    freewheel = _read_freewheel(_Section(source, merged, "freewheel", origins))
    _check_bridge(source, origins, switch, freewheel, supply, hold, coil, armature)
    _check_boost(source, origins, coil, switch, freewheel, supply, hold, pull_in, armature, duty, latch)
    if freewheel.type == "clamp" and freewheel.clamp_voltage <= supply.max:
        raise InputError(origins.get("clamp_voltage", source), "freewheel.clamp_voltage",
                         f"{freewheel.clamp_voltage:g} V is not above supply.max ({supply.max:g} V): "
                         "the clamp would conduct with the switch off")
    if latch is not None:
        _check_latch(source, switch, freewheel, latch, armature, supply)
    return Drive(path.stem, coil, supply, ambient, thermal, pull_in, hold, release, brd, switch,
                 freewheel, armature, source, duty, latch=latch)
