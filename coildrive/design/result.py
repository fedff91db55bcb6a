"""The Design result: plain data that every output (table, JSON, header, plot) reads.

Nothing here computes physics; :func:`coildrive.design.design` fills it in. SI units,
temperatures in degC; a figure names the corner it came from.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field

from .. import __version__
from ..config import Drive
from ..jsondoc import document_head, json_ready

#: What the freewheel elements are called in tables and check details.
ELEMENT_NAMES = {"diode": "freewheel diode", "zener": "Zener", "resistor": "freewheel resistor",
                 "clamp": "clamp", "bypass": "bypass switch"}


@dataclass(frozen=True)
class Thresholds:
    """A current-mode setting. Currents in A (code x LSB), times in s.

    ``lower_code`` is 0 for the off-time control; ``off_*`` are 0 for hysteretic.
    """

    control: str
    lsb_a: float
    lower_code: int
    upper_code: int
    off_time_s: float
    off_prescaler: int
    off_ticks: int
    off_time_target_s: float
    delay_s: float
    sized: bool

    @property
    def lower_a(self) -> float:
        return self.lower_code * self.lsb_a

    @property
    def upper_a(self) -> float:
        return self.upper_code * self.lsb_a


@dataclass(frozen=True)
class ClosedLoopResult:
    """The closed-loop average-current hold (``[hold] regulation = "closed_loop"``): an
    integer PI loop once a PWM period on the current sample (see
    :mod:`coildrive.design.hold_closed_loop` and :mod:`coildrive.design.loop_gains`).

    ``sample_point``: where in the period the current is converted. The set-point is an
    ADC code of the current-sense channel (``setpoint_a`` A as the channel reads it).
    Gains in timer counts of compare per ADC code (``ki`` per PWM period), as designed
    (``kp``, ``ki``) and as the driver's integers (``kp_q / 2^gain_shift``...), with their
    relative rounding. The loop's output stays within ``min_compare .. max_compare``
    counts; the integrator within ``integrator_min .. integrator_max`` (counts x
    ``2^gain_shift``) and starts each hold at ``preload_compare``. Margins over the
    corners: crossover (Hz), phase margin (degrees), gain margin (dB), each with the
    corner where it is worst; ``settling_time_s`` the slowest corner's 5 % settling after a
    step at the plant input (a supply step). Quantisation: one ADC code of current
    (``current_lsb_a``), one compare count (``duty_step_current_a``, the largest over the
    corners) and the larger of the two (``smallest_step_a``). ``min_duty``/``max_duty``:
    the duty the loop settles at over the corners; ``saturated_corners`` where it would
    need more than ``max_duty_limit`` (or less than the least on-time allows).
    ``plants``: the linearised plant ``k V_g / (R_eff + s L)`` (``vg_v``, ``r_eff_ohm``,
    ``inductance_h``, ``sensed_fraction`` = ``k``: 1, or with an eddy term the terminal
    current's share of the magnetising current's change in the sampled segment, ``vg_v``
    and ``r_eff_ohm`` then the Thevenin pairs') with its crossover, margins and settling time at the corners that
    name a figure above (``role``: designed, lowest crossover, lowest phase margin,
    slowest settling), for the reader to check with a tool of their own.
    """

    sample_point: str
    setpoint_code: int
    setpoint_a: float
    bandwidth_hz: float
    design_corner: str
    kp: float
    ki: float
    gain_shift: int
    kp_q: int
    ki_q: int
    kp_rounding: float
    ki_rounding: float
    min_compare: int
    max_compare: int
    max_duty_limit: float
    integrator_min: int
    integrator_max: int
    preload_compare: int
    crossover_hz: float
    crossover_min_hz: float
    crossover_min_corner: str
    crossover_max_hz: float
    crossover_max_corner: str
    phase_margin_deg: float
    phase_margin_corner: str
    gain_margin_db: float
    gain_margin_corner: str
    settling_time_s: float
    settling_corner: str
    current_lsb_a: float
    duty_step_current_a: float
    smallest_step_a: float
    min_duty: float
    min_duty_corner: str
    max_duty: float
    max_duty_corner: str
    saturated_corners: int
    corners: int
    plants: list = field(default_factory=list)


@dataclass(frozen=True)
class CurrentModeResult:
    """The ``current_mode`` object of the design JSON (SI, Hz, degC). The switching range,
    the duties and the shortest segment cover every coil temperature from cold (the
    ambient) to settled at each corner (:mod:`coildrive.design.current_sweep`): each
    extreme names its corner (``*_corner``, the corner grid's label) and the coil's
    temperature there (``*_coil_temp_c``). A full bridge's mixed decay (the fixed off-time):
    ``off_fast_ticks``, the off-timer counts of each off-time's fast part
    (``round(fast_fraction x off_ticks)``), ``fast_time_s`` its time; under hysteretic control
    the one-shot's counts at ``off_prescaler`` and time (the fast part ends there or at the
    lower threshold). The keys only then."""

    control: str
    sense_position: str
    code_current_a: float
    lower_code: int | None
    lower_a: float | None
    upper_code: int
    upper_a: float
    band_codes: int | None
    band_a: float | None
    off_time_s: float | None
    off_time_target_s: float | None
    off_prescaler: int | None
    off_ticks: int | None
    sized_from_frequency: bool
    sense_delay_s: float
    nominal_frequency_hz: float
    min_frequency_hz: float
    min_frequency_corner: str
    max_frequency_hz: float
    max_frequency_corner: str
    min_frequency_coil_temp_c: float
    max_frequency_coil_temp_c: float
    allowed_min_frequency_hz: float
    allowed_max_frequency_hz: float
    allowed_max_source: str
    min_duty: float
    max_duty: float
    shortest_segment_s: float
    regulated_corners: int
    corners: int
    off_fast_ticks: int | None = None
    fast_time_s: float | None = None


@dataclass(frozen=True)
class Check:
    """One design check. ``severity`` is ``"error"`` (fails the design) or ``"warning"``."""

    name: str
    ok: bool
    detail: str
    severity: str = "error"


@dataclass(frozen=True)
class Corner:
    """Figures at one operating corner. SI units, temperatures in degC.

    ``switch_node_voltage_v`` (a topology whose switch node is not the switch voltage,
    :mod:`coildrive.model.topology`; ``None`` for a low-side switch): the node against
    ground at the turn-offs that give ``peak_switch_voltage_v``."""

    label: str
    supply_v: float
    ambient_c: float
    coil_temp_c: float
    resistance_ohm: float
    inductance_h: float
    pull_in_time_s: float
    peak_end_current_a: float
    hold_mean_current_a: float
    hold_ripple_a: float
    hold_rms_current_a: float
    hold_conduction: str
    coil_power_w: float
    release_time_s: float
    release_zero_time_s: float
    peak_switch_voltage_v: float
    release_energy_j: float
    armature: dict | None = None
    freewheel_power_w: float = math.nan
    switch_power_w: float = math.nan
    hold_duty: float = math.nan
    switch_node_voltage_v: float | None = None


#: Per-corner keys added with an ``[armature]`` (flattened into each JSON corner).
ARMATURE_CORNER_KEYS = (
    "seat_time_s", "impact_time_s", "dip_current_a", "dip_time_s", "dip_depth_a",
    "start_time_s", "bounces", "release_unlatch_time_s", "release_open_time_s",
    "start_current_a", "stay_current_a", "stroke_current_a", "hold_force_current_a",
    "hold_force_margin", "hold_lift_m", "armature_status", "release_status",
)


@dataclass(frozen=True)
class ArmatureResult:
    """The moving armature across the corners (``design --json`` key ``armature``).

    Fit: ``equivalent_gap_m`` (g0) and ``force_constant_h_m`` (K) of
    ``L(x) = K / (x + g0)``. Currents (A) the mechanics need, largest over the corners
    (the lowest inductance of the tolerance band): ``start_current_a`` (off the open
    stop), ``stroke_current_a`` (over the whole stroke, at gap ``stroke_current_gap_m``),
    ``stay_current_a`` (to stay seated; also the predicted drop-out). Margins are the
    file's (or derived) current over that need. Times in s, worst corner named.
    """

    inductance_open_h: float
    inductance_closed_h: float
    stroke_m: float
    equivalent_gap_m: float
    force_constant_h_m: float
    slope_open_h_m: float
    slope_closed_h_m: float
    current_margin: float
    derived: list[str]
    start_current_a: float
    stroke_current_a: float
    stroke_current_gap_m: float
    stay_current_a: float
    dropout_current_a: float
    pull_in_current_margin: float
    hold_current_margin: float
    seat_time_s: float
    seat_corner: str
    seat_time_min_s: float
    dip_current_a: float
    dip_time_s: float
    dip_current_min_a: float
    release_open_time_s: float
    release_corner: str
    hold_force_current_a: float
    hold_force_margin: float
    hold_force_corner: str
    hold_force_basis: str
    hottest_low_supply_corner: str
    hottest_low_supply_margin: float
    hold_lift_max_m: float
    seated_corners: int
    opened_corners: int
    corners: int
    #: A boosted peak (``supply.boost``): the corners whose armature rests on the seat by the
    #: end of the peak (the current threshold; the rest seat in the hold), and the window it
    #: must seat in (s from switch-on: ``pull_in.margin`` x the longest boosted peak); else
    #: ``None``.
    seated_in_peak_corners: int | None = None
    seat_window_s: float | None = None


@dataclass(frozen=True)
class PullInResult:
    """Pull-in: worst-corner time to the pull-in current and the chosen peak duration.

    The peak is the longest of: the worst pull-in time x ``margin`` (``time_margin_ticks``),
    and the time the shortest real peak (``shortest_peak_s``: ``peak_ticks - 1`` ticks, a
    tick-based phase may start anywhere in a tick; or the reference driver's switch lag
    below ``peak_ticks`` where that is longer, design/peak.py) needs to carry
    ``current_margin`` x the pull-in current
    (``force_current_a``) at the worst corner, plus ``settle_time_s``
    (``force_margin_ticks``); ``governed_by`` names which. ``shortest_peak_current_a`` is
    the current at the end of the shortest real peak at ``force_corner``. Where the
    current is never reached, the times and ticks are ``None`` and ``not_reached`` says
    what is not reached where and why. ``compensated``: the peak is looked up against the
    supply (``Design.peak_table``); ``peak_ticks`` is then its longest entry.
    ``longest_peak_s``: the longest real full-on time the driver may run (``peak_ticks`` and
    its switch's lead; the longest entry's), the one the end current and the heat take.
    """

    current_a: float
    time_s: float | None
    worst_corner: str
    margin: float
    peak_time_s: float | None
    peak_ticks: int | None
    peak_end_current_max_a: float
    peak_end_corner: str = ""
    current_margin: float = 1.0
    force_current_a: float = 0.0
    force_time_s: float | None = None
    force_corner: str = ""
    settle_time_s: float = 0.0
    time_margin_ticks: int | None = None
    force_margin_ticks: int | None = None
    governed_by: str = ""
    shortest_peak_s: float | None = None
    shortest_peak_current_a: float | None = None
    compensated: bool = False
    not_reached: str | None = None
    longest_peak_s: float | None = None


@dataclass(frozen=True)
class HoldResult:
    """Hold: the duty as the timer makes it and the currents it gives across corners.

    Heat outside the coil (W, :mod:`coildrive.model.losses`): ``freewheel_power_w`` is
    the freewheel path's total at its worst corner, ``freewheel_elements_w`` each
    element's largest over the corners, ``switch_power_w`` conduction + switching
    estimate at the switch's worst corner; ``decay_path`` names the hold's freewheel
    path. ``split_decay_saving`` says what split decay would change (``None`` with a
    diode path or with split decay fitted); see docs/design-method.md.
    """

    mode: str
    current_a: float
    frequency_hz: float
    duty: float
    compare_ticks: int
    min_mean_current_a: float
    min_corner: str
    max_mean_current_a: float
    max_corner: str
    ripple_a: float
    current_step_a: float
    coil_power_w: float
    coil_temp_c: float
    hottest_corner: str
    discontinuous_corners: int
    freewheel_power_w: float = math.nan
    freewheel_power_corner: str = ""
    freewheel_elements_w: dict = field(default_factory=dict)
    switch_power_w: float = math.nan
    switch_conduction_w: float = math.nan
    switch_switching_w: float = math.nan
    switch_power_corner: str = ""
    decay_path: str = ""
    split_decay_saving: dict | None = None
    current_mode: CurrentModeResult | None = None
    thresholds: Thresholds | None = None
    regulation: str = "fixed"
    coil_power_corner: str = ""
    closed_loop: ClosedLoopResult | None = None


@dataclass(frozen=True)
class SplitDecayResult:
    """Split decay: the hold takes the slow path, the release the fast one.

    ``bypass_lead_s`` is the board's ``bypass_lead`` (s; > 0: the bypass opens before the
    main switch's final turn-off, < 0: after it); as PWM-timer counts (one count =
    ``1 / count_rate_hz`` s) ``lead_counts`` before the final turn-off (rounded up) or
    ``lag_counts`` after it (rounded down), one of them zero. ``on_time_counts`` is the
    hold's on-time, within which a leading bypass must open.
    """

    hold_path: str
    release_path: str
    bypass_resistance_ohm: float
    bypass_lead_s: float
    count_rate_hz: float
    lead_counts: int
    lag_counts: int
    on_time_counts: int


@dataclass(frozen=True)
class ReleaseResult:
    """Release from the top of the hold ripple through the freewheel path."""

    freewheel: str
    dropout_current_a: float
    time_s: float
    zero_time_s: float
    worst_corner: str
    lockout_ticks: int
    peak_switch_voltage_v: float
    switch_limit_v: float
    switch_rating_v: float
    energy_j: float
    turn_offs: list = field(default_factory=list)
    worst_turn_off: str = ""


@dataclass(frozen=True)
class EddyResult:
    """The eddy-current term (``design --json`` key ``eddy``; docs/coil-model.md).

    ``resistance_ohm`` across the magnetising branch, ``time_constant_s`` its ``L / R_e``
    with the small-signal inductance, ``given`` the file key it came from.
    ``switch_on_step_a``: the terminal current's step at switch-on, ``V / (R_on + R_e)``,
    at its highest corner (``step_corner``). ``block_current_a``: the magnetising current
    at which the release path stops conducting (``V_off / R_e``; the flux then dies
    through ``R_e``), its highest. ``release_eddy_energy_j``: the eddy resistance's share
    of the release from the top of the hold ripple, at its worst corner
    (``release_corner``), beside ``release_freewheel_energy_j``, the freewheel elements'
    there. ``flux_outlasts_s``: how much longer the flux takes to fall to the drop-out
    current than the terminal current takes to reach zero (0 when it does not). On a
    full bridge on the drooping bus these four are the fast decay's into the bus (the
    worst over the starting buses; a moving armature's run into it), the block current
    ``(v + 2 V_d) / R_e`` with the bus at the block.
    ``hold_eddy_power_w``: the eddy resistance's power in the hold, at its worst corner
    (``hold_corner``)."""

    resistance_ohm: float
    time_constant_s: float
    given: str
    switch_on_step_a: float
    step_corner: str
    block_current_a: float
    release_eddy_energy_j: float
    release_freewheel_energy_j: float
    release_corner: str
    flux_outlasts_s: float
    hold_eddy_power_w: float
    hold_corner: str


@dataclass(frozen=True)
class BridgeResult:
    """A full bridge's decay paths and the energy its fast decay returns to the supply
    (``design --json`` key ``topology.bridge``). Energies in J, voltages in V.

    ``returned_per_release_j``: back to the bus at the release from the top of the hold
    ripple (its worst corner ``release_corner``); ``returned_worst_j`` over every turn-off
    (``worst_event``, ``worst_corner``); ``returned_per_hold_period_j``: 0 when the hold's
    off-times decay slowly (``hold_decay`` ``"slow"``) and return nothing; with mixed decay
    (``hold_decay`` ``"mixed"``, ``hold_fast_fraction`` of each off-time fast) the most the
    fast parts return in one PWM period, at ``hold_period_corner``. With ``sink`` false the returned charge
    lands on ``capacitance_f``: the bus rises from the supply to ``pumped_bus_v`` (the
    highest over every turn-off and corner, ``pump_event``, ``pump_corner``; ``pump_up_v``
    its rise there; with a mixed-decay hold, no armature, at least the energy bound
    :func:`coildrive.design.bridge_bus.no_sink_top` at the end of the hold and the trip),
    and the switches see up to ``pumped_switch_voltage_v``.
    ``switches_on`` names the switches on in each phase (``peak``, ``hold_on``,
    ``hold_decay``, ``release``; :data:`coildrive.model.bridge.PHASES`): what the header
    and the reference driver switch. With a boosted peak (``[supply] boost``) the boost
    switch has its own pin beside these four (the header's boost constants), and
    ``boost_return_bound_v`` bounds the boost capacitor's voltage had the fast decay's
    return reached it through the boost switch's body diode (a bridge wired with both legs
    on the boosted rail): every turn-off's energy onto the capacitor less its tolerance
    from the boost at full charge (``boost_return_event``, ``boost_return_corner``). In the
    circuit coildrive designs it cannot (docs/design-method.md, "Boosted peak").
    """

    hold_decay: str
    release_decay: str
    returned_per_release_j: float
    release_corner: str
    returned_worst_j: float
    worst_event: str
    worst_corner: str
    returned_per_hold_period_j: float
    sink: bool
    capacitance_f: float
    capacitor_rating_v: float
    pumped_bus_v: float | None = None
    pump_up_v: float | None = None
    pump_event: str | None = None
    pump_corner: str | None = None
    pumped_switch_voltage_v: float | None = None
    switches_on: dict[str, list[str]] = field(default_factory=dict)
    hold_fast_fraction: float | None = None
    hold_period_corner: str | None = None
    boost_return_bound_v: float | None = None
    boost_return_event: str | None = None
    boost_return_corner: str | None = None


@dataclass(frozen=True)
class SupplyResult:
    """The drooping bus (``[supply] source_resistance`` and ``capacitance``): the lowest bus
    during the peak (V, its corner, s after switch-on, and the droop below that corner's
    supply), the firmware's supply-sense reading of it and its supply-min code (``None``
    on a board without a supply sense), the energy the capacitor gives up down to the
    lowest bus (J, largest over the corners), and the capacitor's RMS ripple current in
    the hold (A, largest over the corners; ``ripple_method`` says how); ``hold_droop_v``:
    the bus's steady droop in the hold, ``R_s`` x the source's average current (V, largest
    over the corners; the hold figures are computed on the undrooped supply).
    A full bridge: ``highest_bus_v``, the bus at its highest as a fast decay pushes the
    coil's current back through ``R_s`` (V, over every turn-off, corner and starting bus;
    ``highest_bus_event``, ``highest_bus_corner``); ``None`` otherwise.
    A boosted peak (the main bus feeds only the hold): the lowest bus is after the
    hand-over, ``lowest_bus_time_s`` still from switch-on; ``handover_current_a`` the coil
    current there at the lowest bus's corner, ``lowest_bus_method`` how it is found and
    ``converter_draw_w`` what the boost converter draws from the bus meanwhile (W);
    ``None`` otherwise."""

    source_resistance_ohm: float
    capacitance_f: float
    lowest_bus_v: float
    lowest_bus_corner: str
    lowest_bus_time_s: float
    droop_v: float
    lowest_bus_code: int | None
    supply_min_code: int | None
    capacitor_energy_j: float
    capacitor_energy_corner: str
    ripple_current_a: float
    ripple_corner: str
    ripple_method: str
    hold_droop_v: float
    highest_bus_v: float | None = None
    highest_bus_event: str | None = None
    highest_bus_corner: str | None = None
    handover_current_a: float | None = None
    lowest_bus_method: str | None = None
    converter_draw_w: float | None = None


@dataclass(frozen=True)
class BoostResult:
    """The boosted peak (``[supply] boost``): the boost at its nominal, lowest and highest
    (V), its capacitor (F; 0 = an ideal source) and path resistance (ohm), charging power
    (W; 0 = not given); the threshold (A), its ADC code and the highest true current that
    code trips at (A); the worst corner's time until the firmware sees the threshold (s:
    the highest trip current, one conversion -- one PWM period -- late, the boost at its lowest; ``None`` when a
    corner never gets there: ``reachable_current_a`` is the most the boost at its lowest
    drives) and the fastest time to the threshold; the time-out (ticks, s); the highest
    current at the end of the peak (A; one PWM period late); the boost capacitor at the end
    of the peak at its lowest (V), the main supply there and the droop from the lowest
    charge (V); the energy drawn per
    actuation (J), the capacitor's stored energy at full charge (J), the recharge time at
    ``power_w`` and the shortest actuation interval it allows (s, switch-on to switch-on;
    ``None`` without a power); the switch's voltage turning off the end current from the
    boost at full charge (V, checked) and at the capacitor's voltage at the end."""

    boost_v: float
    boost_min_v: float
    boost_max_v: float
    capacitance_f: float
    capacitance_min_f: float
    boost_resistance_ohm: float
    power_w: float
    threshold_a: float
    threshold_code: int
    trip_max_a: float
    code_fits: bool
    time_to_threshold_s: float | None
    time_to_threshold_corner: str
    fastest_time_s: float
    fastest_corner: str
    timeout_ticks: int | None
    timeout_s: float | None
    reachable_current_a: float
    end_current_max_a: float
    end_current_corner: str
    lowest_boost_v: float | None
    lowest_boost_corner: str
    main_supply_there_v: float
    droop_v: float | None
    energy_j: float
    energy_corner: str
    stored_energy_j: float
    recharge_time_s: float | None
    min_interval_s: float | None
    switch_voltage_v: float
    switch_voltage_corner: str
    end_switch_voltage_v: float


@dataclass(frozen=True)
class TopologyResult:
    """Where the switch sits, for a topology other than the low-side switch (``design
    --json`` key ``topology``; absent for a low-side switch, whose switch node is the
    drain and whose figures are all in ``release``).

    ``lowest_node_voltage_v`` is the lowest voltage of the switch node against ground at
    any turn-off (end of hold, end of peak, over-current trip, every hold off-time), at
    ``lowest_node_corner`` on ``lowest_node_event`` (``None`` for a full bridge, which has
    ``bridge`` instead). ``sense_place`` says where ``sense_position`` puts the resistor.
    """

    name: str
    switch_node: str
    sense_position: str
    sense_place: str
    lowest_node_voltage_v: float | None = None
    lowest_node_corner: str | None = None
    lowest_node_event: str | None = None
    bridge: BridgeResult | None = None


@dataclass(frozen=True)
class TimerResult:
    """PWM timer registers. ``prescaler`` and ``period_ticks`` are divide ratio and counts."""

    clock_hz: float
    bits: int
    prescaler: int
    period_ticks: int
    compare_ticks: int
    frequency_hz: float
    target_hz: float
    frequency_error: float


@dataclass(frozen=True)
class AdcThresholds:
    """Current thresholds as ADC codes of the current-sense channel, and their currents (A)."""

    volts_per_amp: float
    full_scale_current_a: float
    pull_in_code: int
    hold_code: int
    over_current_code: int
    over_current_a: float
    open_load_code: int
    open_load_a: float
    supply_min_code: int
    supply_max_code: int
    healthy_max_current_a: float = 0.0
    healthy_max_corner: str = ""
    trip_current_a: float = 0.0
    reading_low: float = 1.0
    reading_high: float = 1.0


@dataclass(frozen=True)
class RiseCheck:
    """The fast-rise diagnostic (shorted turns): the current passing ``code`` sooner after
    switch-on than any healthy coil of the envelope can make it pass.

    The driver counts conversions (one a PWM period, ``conversion_hz``) from the
    switch-on to the first one at or above ``code`` (``current_a`` as the channel reads
    it); ``n`` of them at a supply-sense reading ``s`` is a fault when
    ``n x s < limit`` (``n < limit`` on a board that does not sense its supply,
    ``by_supply`` False): the rise time scales with 1/V. ``fastest_s`` is the healthy
    rise to the code (the reading
    high by the channel's tolerance and ``noise_codes``) at the corner that sets the
    limit, ``fastest_corner``; ``fastest_product`` its conversions x lowest supply reading; ``limit`` is ``margin`` of that.
    ``trip_inductance_factor``: with an inductance below this fraction of the rise's
    nominal (``inductance_h``), the check trips at every supply and temperature of the
    envelope (a conversion late, the reading low, the supply read high). ``limit`` 0:
    the check is off (``why_off`` says why). See docs/firmware.md.
    """

    code: int
    current_a: float
    conversion_hz: float
    by_supply: bool
    limit: int
    margin: float
    noise_codes: int
    fastest_s: float
    fastest_product: float
    fastest_corner: str
    inductance_h: float
    trip_inductance_factor: float
    why_off: str = ""


@dataclass(frozen=True)
class SeatCheck:
    """The driver's seat detector (``[armature]`` drives): the dip's fall and climb in ADC
    codes (``dip_codes``), the true current the climb may need (``climb_a``), and the
    longest time it takes after the seat over the corners (``climb_s``, at
    ``climb_corner``): the stuck check waits that long past the latest seat.
    ``unseen_corners``: seated corners where the current cannot climb that far."""

    dip_codes: int
    climb_a: float
    climb_s: float
    climb_corner: str
    unseen_corners: int


@dataclass(frozen=True)
class DutyTable:
    """Supply-compensated hold: compare value for each supply-sense ADC code (ascending).

    Firmware takes the last entry whose code is <= the measured code (the first entry
    below it); each entry holds the current at every corner up to the next entry's supply.
    """

    supply_v: list[float]
    adc_codes: list[int]
    compare_ticks: list[int]
    design_supply_v: list[float] = field(default_factory=list)


@dataclass(frozen=True)
class PeakTable:
    """Supply-compensated peak: scheduler ticks for each supply-sense ADC code (ascending),
    looked up like the duty table. ``design_supply_v`` is the lowest bus voltage that can
    read each code (the divider at its tolerance end), where each entry pulls in."""

    supply_v: list[float]
    adc_codes: list[int]
    peak_ticks: list[int]
    design_supply_v: list[float] = field(default_factory=list)


@dataclass(frozen=True)
class ThermalCycleResult:
    """The coil over its on/off cycle (``design --json`` key ``thermal_cycle``, present
    when the file gives ``[duty]`` or ``thermal.capacity``/``time_constant``). SI, degC.

    ``cycle`` (with both): the periodic steady state at its hottest heating point --
    ``hottest_c`` (end of an on-time; the envelope's hot coil), ``coolest_c`` (start of
    one), the mean coil power over an on-time there and the copper heat of one
    actuation's peak, hold and release (J). ``freewheel`` (with ``[duty]``): the end of
    hold's turn-off energy into the freewheel elements (J, worst corner) x the actuation
    rate, the hold's freewheel power (worst corner) x the hold's share of the cycle, and
    their sum (``average_power_w``); per element ``elements_average_w``. ``cold_start`` / ``warm_start`` (with a heat
    capacity; the warm one with ``[duty]``): the coil held on from the ambient / from the
    cycle's coolest point, at the heating point that reaches ``max_coil_temp_c`` first:
    ``time_to_limit_s`` (``None``: never), the start, and the heat line it climbs under
    (``heat_w + heat_slope_w_k x (T - ambient_c)``, from ``start_rise_k`` above ambient).
    ``continuous_hold_c``: what a continuous hold settles at, for comparison.
    """

    max_coil_temp_c: float
    continuous_hold_c: float
    continuous_hold_corner: str
    capacity_j_k: float | None
    time_constant_s: float | None
    on_time_s: float | None
    off_time_s: float | None
    actuation_rate_hz: float | None
    cycle: dict | None
    freewheel: dict | None
    cold_start: dict | None
    warm_start: dict | None


class Verdict:
    """A design's verdict from its ``checks`` (a list of :class:`Check`)."""

    checks: list[Check]

    @property
    def ok(self) -> bool:
        """True when no error-severity check failed."""
        return all(c.ok for c in self.checks if c.severity == "error")

    @property
    def failed(self) -> list[Check]:
        return [c for c in self.checks if not c.ok and c.severity == "error"]


@dataclass(frozen=True)
class Design(Verdict):
    """One design result: every output (table, JSON, header, plot) is made from this."""

    drive: Drive
    pull_in: PullInResult
    hold: HoldResult
    release: ReleaseResult
    timer: TimerResult
    adc: AdcThresholds
    duty_table: DutyTable
    corners: list[Corner]
    nominal: Corner
    checks: list[Check]
    cautions: list[str]
    monte_carlo: dict | None = None
    version: str = __version__
    input_hash: str = ""
    worst_corner_index: int = 0
    actuation_points: tuple = ()
    peak_table: PeakTable | None = None
    armature: ArmatureResult | None = None
    split_decay: SplitDecayResult | None = None
    thermal_cycle: ThermalCycleResult | None = None
    topology: TopologyResult | None = None
    rise_check: RiseCheck | None = None
    seat_check: SeatCheck | None = None
    datasheet: object | None = None   # design.datasheet.DatasheetResult, with datasheet inputs
    supply: SupplyResult | None = None
    boost: BoostResult | None = None

    eddy: EddyResult | None = None

    def to_dict(self) -> dict:
        """Plain JSON-ready dict (the ``design --json`` document)."""
        hold = asdict(self.hold)
        current_mode = hold.pop("current_mode")
        closed_loop = hold.pop("closed_loop")
        hold.pop("thresholds")
        out = {
            **document_head(self.drive, self.version, self.input_hash),
            "ok": self.ok,
            "pull_in": asdict(self.pull_in),
            "hold": hold,
            "release": asdict(self.release),
            "timer": asdict(self.timer),
            "adc": asdict(self.adc),
            "duty_table": asdict(self.duty_table),
            "nominal": asdict(self.nominal),
            "corners": [_corner_dict(c) for c in self.corners],
            "checks": [asdict(c) for c in self.checks],
            "cautions": list(self.cautions),
        }
        out["nominal"] = _corner_dict(self.nominal)
        if self.topology is not None:
            topo = asdict(self.topology)
            if topo["bridge"] is None:
                del topo["bridge"]
            else:   # mixed decay's and a boost's keys only where used (older outputs keep their bytes)
                for key in ("hold_fast_fraction", "hold_period_corner", "boost_return_bound_v",
                            "boost_return_event", "boost_return_corner"):
                    if topo["bridge"][key] is None:
                        del topo["bridge"][key]
            out["topology"] = topo
        if self.supply is not None:
            out["supply"] = asdict(self.supply)
            for key in ("handover_current_a", "lowest_bus_method", "converter_draw_w"):
                if out["supply"][key] is None:    # a boost's keys only with a boost (older outputs keep their bytes)
                    del out["supply"][key]
        if self.boost is not None:
            out["boost"] = asdict(self.boost)
        if self.armature is not None:
            out["armature"] = asdict(self.armature)
        if self.split_decay is not None:
            out["split_decay"] = asdict(self.split_decay)
        if self.datasheet is not None:
            out["datasheet"] = asdict(self.datasheet)
        if self.peak_table is not None:
            out["peak_table"] = asdict(self.peak_table)
        if current_mode is not None:
            for key in ("off_fast_ticks", "fast_time_s"):   # mixed decay's only (older outputs keep their bytes)
                if current_mode[key] is None:
                    del current_mode[key]
            out["current_mode"] = current_mode
        if closed_loop is not None:
            out["closed_loop"] = closed_loop
        if self.thermal_cycle is not None:
            out["thermal_cycle"] = asdict(self.thermal_cycle)
        if self.monte_carlo is not None:
            out["monte_carlo"] = self.monte_carlo
        if self.rise_check is not None:
            out["rise_check"] = asdict(self.rise_check)
        if self.seat_check is not None:
            out["seat_check"] = asdict(self.seat_check)
        if self.eddy is not None:
            out["eddy"] = asdict(self.eddy)
        return json_ready(out)


def _corner_dict(c: Corner) -> dict:
    """A corner as JSON: the armature figures, when there are any, flattened in."""
    d = asdict(c)
    if d["switch_node_voltage_v"] is None:  # a low-side switch: its node is the switch voltage
        del d["switch_node_voltage_v"]
    arm = d.pop("armature")
    if arm is not None:
        d.update(arm)
    return d


@dataclass(frozen=True)
class ActuationPoint:
    """An operating point whose actuation the plot draws (``design_waveforms``): its
    name (``"nominal"``, ``"worst"``) and label, V, degC, tolerance factors, and the hold
    length shown (s)."""

    name: str
    label: str
    supply_v: float
    coil_temp_c: float
    r_factor: float
    l_factor: float
    hold_time_s: float


@dataclass(frozen=True)
class SystemChannel:
    """One channel of a system: its name (the header prefix in capitals), the board's
    channel number, its drive file, its peak's start after the first channel's
    (``offset_ticks`` scheduler ticks, ``offset_s`` s; ``offset_fixed``: the system file
    gave it), the figures its rail-current bound reads (``bound``, SI, see
    :func:`coildrive.design.system.draw_bound`) and its Design."""

    name: str
    number: int
    drive_file: str
    offset_ticks: int
    offset_s: float
    offset_fixed: bool
    bound: dict
    design: Design


@dataclass(frozen=True)
class SystemResult:
    """Several channels on one board designed together (:mod:`coildrive.design.system`;
    ``design --json`` key ``system``). ``current_limit_a`` (0: not given) and the least
    ``stagger_ticks`` between the peaks that keeps every rail within it (``stagger_search``
    says how it was found); ``timers``: each shared timer (its channels, prescaler, period,
    frequency, each channel's compare); ``rails``: each shared supply rail (its channels,
    the bound of their current with the peaks together and staggered, the holds' average
    current, and with a source resistance the lowest bus together and staggered);
    ``heat``: W per channel, in each shared freewheel part and on the board; the channels
    in file order; the system's own checks (each channel's are in its Design)."""

    name: str
    source: str
    board: str
    current_limit_a: float
    stagger_ticks: int
    stagger_search: str
    timers: list
    rails: list
    heat: dict
    channels: list
    checks: list

    @property
    def ok(self) -> bool:
        return (all(c.ok for c in self.checks if c.severity == "error")
                and all(ch.design.ok for ch in self.channels))

    @property
    def failed(self) -> list[str]:
        """Failed checks, channel ones as ``name.check``."""
        return ([c.name for c in self.checks if not c.ok and c.severity == "error"]
                + [f"{ch.name}.{c.name}" for ch in self.channels for c in ch.design.failed])

    def to_dict(self) -> dict:
        """The ``design --json`` document of a system file: ``{"ok", "system": {...}}``."""
        return json_ready({
            "ok": self.ok,
            "version": __version__,
            "system": {
                "name": self.name, "file": self.source, "board": self.board,
                "current_limit_a": self.current_limit_a, "stagger_ticks": self.stagger_ticks,
                "stagger_search": self.stagger_search,
                "tick_rate_hz": self.channels[0].design.drive.board.tick.rate,
                "timers": self.timers, "rails": self.rails, "heat": self.heat,
                "checks": [asdict(c) for c in self.checks],
                "channels": [{"name": c.name, "board_channel": c.number, "drive_file": c.drive_file,
                              "offset_ticks": c.offset_ticks, "offset_s": c.offset_s,
                              "offset_fixed": c.offset_fixed, "bound": c.bound,
                              "design": c.design.to_dict()} for c in self.channels],
            },
        })
