"""Terminal report of a Design (rich tables). Reads the Design only; computes nothing."""

from __future__ import annotations

from rich.console import Console
from rich.markup import escape
from rich.table import Table

from ..console import print_cautions, print_verdict
from ..units import format_si
from .peak import allowance_words, lag_governs
from .result import ELEMENT_NAMES, Design
from .supply import CLAMP_RIPPLE_METHOD, HANDOVER_PWM, MIXED_RIPPLE_METHOD
from .thermal_cycle import duration_text


def _ms(seconds: float) -> str:
    return format_si(seconds, "s")


def _short_words(d: Design) -> str:
    """The shortest real peak: one tick short, or the driver's switch lag short where that
    is longer (design/peak.py's switch_lag)."""
    p = d.pull_in
    if not lag_governs(p, d.drive.board.tick.rate):
        return f"{p.peak_ticks - 1} ticks"
    return f"{p.peak_ticks} ticks less the switch lag, {_ms(p.shortest_peak_s)}"


def summary_table(d: Design) -> Table:
    """The main figures with the corner that gave each."""
    t = Table(title=f"coildrive design: {d.drive.name} on {d.drive.board.name}", show_lines=False)
    t.add_column("figure")
    t.add_column("value", justify="right")
    t.add_column("where / how")
    h, r, tm, a = d.hold, d.release, d.timer, d.adc
    rows = [*_topology_rows(d), *_datasheet_rows(d), *_tolerance_rows(d), *_pull_in_rows(d), *_supply_rows(d),
        ("hold frequency", format_si(h.frequency_hz, "Hz", 6),
         f"prescaler {tm.prescaler}, period {tm.period_ticks} counts ({tm.frequency_error:+.3%})"),
        ("hold regulation", h.regulation.replace("_", " "), _regulation_how(d)),
        ("hold duty", f"{h.duty:.4f}", (f"compare {tm.compare_ticks}; 1 count = {h.current_step_a * 1e3:.3g} mA"
                                        if h.regulation != "closed_loop" else
                                        f"the largest the loop settles at; each hold starts at compare "
                                        f"{tm.compare_ticks}")
         + ("; the table's first entry (safe at every supply)" if h.regulation == "supply_table" else "")),
        ("hold mean current", f"{h.min_mean_current_a:.4g} .. {h.max_mean_current_a:.4g} A",
         f"min at {h.min_corner}; max at {h.max_corner}"),
        ("hold ripple (p-p)", f"<= {h.ripple_a * 1e3:.4g} mA",
         f"{h.discontinuous_corners} corner(s) discontinuous" if h.discontinuous_corners else "continuous conduction"),
        ("coil power / temperature", f"{h.coil_power_w:.3g} W / " + (f"{h.coil_temp_c:.1f} degC"
                                                                     if h.coil_temp_c == h.coil_temp_c and h.coil_temp_c < 1e300 else "runaway"),
         f"hottest coil, both at {h.coil_power_corner or h.hottest_corner}"),
        *_thermal_rows(d),
        *_loss_rows(d),
        ("release time", _ms(r.time_s), f"to {r.dropout_current_a:.4g} A via {r.freewheel}; zero after {_ms(r.zero_time_s)}"),
        *_turn_off_rows(d),
        *_eddy_rows(d),
        ("peak switch voltage", f"{r.peak_switch_voltage_v:.4g} V",
         f"every turn-off; limit {r.switch_limit_v:.4g} V ({r.switch_rating_v:.4g} V rating, derated)"),
        ("ADC thresholds", f"{a.pull_in_code}/{a.hold_code}/{a.over_current_code}/{a.open_load_code}",
         f"pull-in / hold / over-current ({a.over_current_a:.4g} A, above {a.healthy_max_current_a:.4g} A "
         f"healthy at {a.healthy_max_corner}) / open-load codes"),
    ]
    if d.armature is not None:
        rows = _armature_rows(d, rows)
    for row in rows:
        t.add_row(*(escape(c) for c in row))
    return t


def _topology_rows(d: Design) -> list:
    """Where the switch sits and how low its node swings (none for a low-side switch)."""
    t = d.topology
    if t is None:
        return []
    b = t.bridge
    if b is not None:
        if b.hold_decay == "mixed":
            hold = (f"mixed decay ({b.hold_fast_fraction:.0%} of each off-time fast, the rest slow "
                    "through two low-side switches)")
            period = (f"per hold period {b.returned_per_hold_period_j * 1e6:.4g} uJ "
                      f"({b.hold_period_corner})")
        else:
            hold = "slow decay (two low-side switches)"
            period = f"per hold period {b.returned_per_hold_period_j:g} J (slow decay)"
        rows = [("switch topology", "full bridge",
                 f"sense {t.sense_place}; hold: {hold}, release: fast "
                 "decay (body diodes into the supply)"),
                ("energy back to the supply", f"{b.returned_per_release_j * 1e3:.4g} mJ",
                 f"per release ({b.release_corner}); up to {b.returned_worst_j * 1e3:.4g} mJ at the "
                 f"{b.worst_event}; {period}")]
        if b.boost_return_bound_v is not None:
            rows.append(("return into the boost", "none",
                         "Q3 returns into the main bus; were both legs on the boosted rail, the "
                         f"boost capacitor would rise to at most {b.boost_return_bound_v:.4g} V "
                         f"({b.boost_return_event}, {b.boost_return_corner})"))
        if not b.sink:
            rows.append(("bus pump-up", f"+{b.pump_up_v:.4g} V",
                         f"to {b.pumped_bus_v:.4g} V on {b.capacitance_f * 1e6:.4g} uF ({b.pump_event}, "
                         f"{b.pump_corner}); switches up to {b.pumped_switch_voltage_v:.4g} V"))
        return rows
    return [("switch topology", t.name.replace("_", " "),
             f"sense {t.sense_place}; the {t.switch_node} swings to {t.lowest_node_voltage_v:.4g} V "
             f"at turn-off ({t.lowest_node_event}, {t.lowest_node_corner})")]


def _datasheet_rows(d: Design) -> list:
    """Values taken from the coil's datasheet, each with its arithmetic."""
    sheet = d.datasheet
    if sheet is None:
        return []
    rows = [(f"{v.key} (datasheet)", format_si(v.value, v.unit, 4), v.source) for v in sheet.derived]
    if sheet.release_estimate_s is not None:
        rows.append(("armature open (estimate)", _ms(sheet.release_estimate_s),
                     f"current to drop-out + the datasheet's release time "
                     f"{_ms(sheet.release_time_s)}"))
    return rows


def _tolerance_rows(d: Design) -> list:
    """The tolerances beyond the coil's R and L, where the files give them."""
    b, fw = d.drive.board, d.drive.freewheel
    given = [("diode drop", fw.diode_drop_tolerance), ("Zener voltage", fw.zener_voltage_tolerance),
             ("clamp voltage", fw.clamp_voltage_tolerance), ("sense resistor", b.sense.resistance_tolerance),
             ("sense gain", b.sense.gain_tolerance),
             ("supply divider", b.supply_sense.divider_tolerance if b.supply_sense else 0.0)]
    parts = [f"{name} +/-{t:.3g}" for name, t in given if t > 0]
    return [("tolerances", ", ".join(parts), "both ends are corners of the envelope")] if parts else []


def _pull_in_rows(d: Design) -> list:
    """Pull-in and the peak: both margins, or what is not reached, where and why."""
    p = d.pull_in
    if p.peak_ticks is None:
        return [("pull-in", "not reached", p.not_reached or "")]
    if d.boost is not None:
        return [
            ("pull-in time (worst)", _ms(p.time_s), f"to {p.current_a:.4g} A at {p.worst_corner}, from the boost"),
            *_boost_rows(d),
            ("current at end of peak", f"<= {p.peak_end_current_max_a:.4g} A", f"at {p.peak_end_corner}"),
        ]
    force = (f"{p.current_margin:g} x pull-in = {p.force_current_a:.4g} A by the shortest peak "
             f"({_short_words(d)}): {p.shortest_peak_current_a:.4g} A at {p.force_corner}"
             if p.force_time_s is not None else
             f"{p.current_margin:g} x pull-in = {p.force_current_a:.4g} A not reached at {p.force_corner}")
    return [
        ("pull-in time (worst)", _ms(p.time_s), f"to {p.current_a:.4g} A at {p.worst_corner}"),
        ("peak phase", _ms(p.peak_time_s),
         f"{p.peak_ticks} ticks, set by the {p.governed_by}"
         + ("; looked up against the supply (the longest entry)" if p.compensated else "")),
        ("  time margin", f"x{p.margin:g}", f"{p.time_margin_ticks} ticks = worst pull-in x {p.margin:g}, {allowance_words(p, d.drive.board.tick.rate)}"),
        ("  force margin", f"x{p.current_margin:g} current", force
         + (f"; + settle {_ms(p.settle_time_s)}" if p.settle_time_s > 0 else "")),
        ("current at end of peak", f"<= {p.peak_end_current_max_a:.4g} A", f"at {p.peak_end_corner}"),
    ]


def _boost_rows(d: Design) -> list:
    """The boosted peak: threshold, time-out, droop, energy and recharge, switch voltage."""
    b = d.boost
    cap = (f"{b.capacitance_f * 1e6:.4g} uF (min {b.capacitance_min_f * 1e6:.4g} uF)" if b.capacitance_f > 0
           else "an ideal source")
    rows = [
        ("boost", f"{b.boost_v:.4g} V", f"{b.boost_min_v:.4g}..{b.boost_max_v:.4g} V, {cap}, "
         f"path {b.boost_resistance_ohm:.4g} ohm"),
        ("peak threshold", f"{b.threshold_a:.4g} A", f"{d.pull_in.current_margin:g} x pull-in; ADC code "
         f"{b.threshold_code} (trips by {b.trip_max_a:.4g} A with the chain reading low)"),
    ]
    if b.time_to_threshold_s is None:
        return rows + [("  longest peak", "not reached",
                        f"the boost at its lowest drives at most {b.reachable_current_a:.4g} A")]
    rows += [
        ("  longest peak", _ms(b.time_to_threshold_s),
         f"until the threshold is seen (trip by {b.trip_max_a:.4g} A, one conversion = one PWM period late) at "
         f"{b.time_to_threshold_corner}; fastest to {b.threshold_a:.4g} A {_ms(b.fastest_time_s)}"),
        ("  peak time-out", _ms(b.timeout_s), f"{b.timeout_ticks} ticks = longest peak x {d.pull_in.margin:g}, +1 tick"),
        ("  boost at end of peak", f">= {b.lowest_boost_v:.4g} V",
         f"droops {b.droop_v:.4g} V at {b.lowest_boost_corner} (main supply {b.main_supply_there_v:.4g} V)"),
        ("  boost energy / actuation", f"{b.energy_j * 1e3:.4g} mJ", f"at {b.energy_corner}"),
    ]
    if b.recharge_time_s is not None:
        rows.append(("  boost recharge", _ms(b.recharge_time_s),
                     f"at {b.power_w:.4g} W; shortest actuation interval {_ms(b.min_interval_s)}"))
    rows.append(("  switch at peak turn-off", f"{b.switch_voltage_v:.4g} V",
                 f"boost at full charge + freewheel at {b.end_current_max_a:.4g} A "
                 f"({b.end_switch_voltage_v:.4g} V from the capacitor's voltage at the end)"))
    return rows


#: The capacitor ripple's approximation in the table, by ``SupplyResult.ripple_method``.
_RIPPLE_PLAIN = "mean x sqrt(D(1-D)), coil ripple neglected"
_RIPPLE_SHORT = {MIXED_RIPPLE_METHOD: "mean x sqrt(D + F - (F-D)^2), F the fast share, coil ripple neglected",
                 CLAMP_RIPPLE_METHOD: "the coil's ripple / (2 sqrt 3): the clamp draws in the off-times"}


def _supply_rows(d: Design) -> list:
    """The drooping bus: lowest bus in the peak, the capacitor's energy and ripple current."""
    s = d.supply
    if s is None:
        return []
    read = ("" if s.lowest_bus_code is None else
            f"; supply sense reads {s.lowest_bus_code} (supply-min code {s.supply_min_code})")
    boosted = s.handover_current_a is not None
    phase = "after the hand-over" if boosted else "in the peak"
    how = ("" if not boosted else
           f"; hand-over at {s.handover_current_a:.4g} A, converter {s.converter_draw_w:.4g} W, "
           + ("the hold's PWM run exactly" if s.lowest_bus_method == HANDOVER_PWM else "a floor (bound)"))
    return [
        (f"lowest bus {phase}", f"{s.lowest_bus_v:.4g} V",
         f"droops {s.droop_v:.4g} V at {s.lowest_bus_corner}, {_ms(s.lowest_bus_time_s)} in "
         f"(source {s.source_resistance_ohm:.4g} ohm, {s.capacitance_f * 1e6:.4g} uF){read}{how}"),
        (f"capacitor energy {phase}", f"{s.capacitor_energy_j * 1e3:.4g} mJ",
         f"down to the lowest bus, at {s.capacitor_energy_corner}"),
        ("capacitor ripple in the hold", f"{s.ripple_current_a * 1e3:.4g} mA rms",
         f"at {s.ripple_corner} ({_RIPPLE_SHORT.get(s.ripple_method, _RIPPLE_PLAIN)}); the hold's bus "
         f"sits up to {s.hold_droop_v * 1e3:.4g} mV low"),
    ] + ([] if s.highest_bus_v is None else [
        ("highest bus at a turn-off", f"{s.highest_bus_v:.4g} V",
         f"the bridge's fast decay back through the source resistance ({s.highest_bus_event}, "
         f"{s.highest_bus_corner})")])


def _regulation_how(d: Design) -> str:
    h = d.hold
    if h.regulation == "supply_table":
        t = d.duty_table
        return (f"{len(t.adc_codes)} entries, compare {min(t.compare_ticks)}..{max(t.compare_ticks)}, "
                "each at the lowest supply that reads its code")
    if h.regulation == "current":
        return "current-mode thresholds (table below)"
    if h.regulation == "closed_loop":
        return (f"PI loop on the current sampled in the {h.closed_loop.sample_point}, once a PWM "
                "period (table below)")
    return "one compare value at every supply"


def _eddy_rows(d: Design) -> list:
    """The eddy-current term: its step, where the release stops conducting, its energy."""
    e = d.eddy
    if e is None:
        return []
    src = ("" if e.given == "coil.eddy_resistance" else
           f" (L / {format_si(e.time_constant_s, 's')}, {e.given})")
    return [("eddy resistance", format_si(e.resistance_ohm, "ohm", 4),
             f"across the magnetising branch{src}; tau = L / R_e = {format_si(e.time_constant_s, 's')}"),
            ("switch-on step", f"{e.switch_on_step_a:.4g} A", f"V / (R_on + R_e) at {e.step_corner}"),
            ("eddy energy: release", format_si(e.release_eddy_energy_j, "J"),
             f"beside {format_si(e.release_freewheel_energy_j, 'J')} in the freewheel path at "
             f"{e.release_corner}; the path stops conducting below {e.block_current_a:.4g} A of "
             f"magnetising current, the flux reaches drop-out up to {_ms(e.flux_outlasts_s)} later"),
            ("eddy power: hold", f"{e.hold_eddy_power_w:.3g} W",
             f"in the core (part of the coil power) at {e.hold_corner}")]


def _turn_off_rows(d: Design) -> list:
    """Every turn-off: its current, switch voltage and energy (worst corners)."""
    return [(f"turn-off: {o['event']}", format_si(o["energy_j"], "J"),
             f"from {o['current_a']:.4g} A ({o['current_corner']}); switch {o['switch_voltage_v']:.4g} V")
            for o in d.release.turn_offs]


def _thermal_rows(d: Design) -> list:
    """With ``[duty]`` or a heat capacity: the cycle, the heat of one actuation, the
    freewheel's average power and the on-time to the coil's limit."""
    t = d.thermal_cycle
    if t is None:
        return []
    rows = []
    if t.on_time_s is not None:
        rows.append(("on/off cycle", f"{duration_text(t.on_time_s)} / {duration_text(t.off_time_s)}",
                     f"{t.actuation_rate_hz * 60:.4g} actuations a minute"))
    if t.capacity_j_k is not None:
        rows.append(("coil heat capacity", f"{t.capacity_j_k:.4g} J/K",
                     f"time constant {duration_text(t.time_constant_s)} with {d.drive.thermal.resistance:g} K/W"))
    c = t.cycle
    if c is not None:
        rows.append(("coil over the cycle", f"{c['coolest_c']:.1f} .. {c['hottest_c']:.1f} degC",
                     f"periodic steady state at {c['corner']}; a continuous hold would settle at "
                     f"{t.continuous_hold_c:.1f} degC"))
        rows.append(("  heat per actuation", format_si(c['peak_energy_j'] + c['hold_energy_j']
                                                       + c['release_energy_j'], "J"),
                     f"in the copper: peak {format_si(c['peak_energy_j'], 'J')} + hold "
                     f"{format_si(c['hold_energy_j'], 'J')} + release {format_si(c['release_energy_j'], 'J')}"))
    fw = t.freewheel
    if fw is not None:
        parts = ", ".join(f"{ELEMENT_NAMES[n]} {format_si(w, 'W')}" for n, w in fw["release_elements_w"].items())
        rows.append(("freewheel average power", format_si(fw["average_power_w"], "W"),
                     f"releases {format_si(fw['release_energy_j'], 'J')} x {t.actuation_rate_hz:.4g}/s = "
                     f"{format_si(fw['release_power_w'], 'W')} ({parts}) + hold share "
                     f"{format_si(fw['hold_power_w'], 'W')}"))
    for name, s in (("cold start", t.cold_start), ("warm start", t.warm_start)):
        if s is not None:
            rows.append((f"on-time to {t.max_coil_temp_c:g} degC ({name})", duration_text(s["time_to_limit_s"]),
                         f"held on from {s['start_c']:.1f} degC at {s['corner']}"))
    return rows


def _loss_rows(d: Design) -> list:
    """Hold powers in the freewheel path and the switch; split decay, or what it would save."""
    h = d.hold
    if h.freewheel_elements_w is None or h.freewheel_power_w != h.freewheel_power_w:  # nan: none
        return []
    names = ELEMENT_NAMES
    parts = ", ".join(f"{names[n]} {w:.3g} W" for n, w in h.freewheel_elements_w.items()) or "none"
    sw = d.drive.switch
    how = (f"conduction {h.switch_conduction_w:.3g} W + switching {h.switch_switching_w:.3g} W"
           if sw.rise_time > 0 or sw.fall_time > 0 else "conduction (no rise/fall times: switching not estimated)")
    rows = [
        ("hold freewheel power", f"{h.freewheel_power_w:.3g} W",
         f"{parts} via {h.decay_path}; at {h.freewheel_power_corner}"),
        ("hold switch power", f"{h.switch_power_w:.3g} W", f"{how}; at {h.switch_power_corner}"),
    ]
    s = d.split_decay
    if s is not None:
        when = (f"{s.lead_counts} counts before the final turn-off" if s.bypass_lead_s > 0 else
                f"{s.lag_counts} counts after the final turn-off" if s.bypass_lead_s < 0 else
                "with the final turn-off")
        rows.append(("split decay", "hold slow / release fast",
                     f"hold via {s.hold_path}, release via {s.release_path}; bypass opens "
                     f"{format_si(abs(s.bypass_lead_s), 's')} = {when}"))
    sv = h.split_decay_saving
    if sv:
        assumed = (f"; assuming a {sv['assumed_diode_drop_v']:g} V freewheel diode"
                   if sv.get("assumed_diode_drop_v") else "")
        if "min_frequency_split_hz" in sv:  # current mode: the switching frequency changes too
            assumed = (f"; the current-mode hold would then switch at "
                       f"{sv['min_frequency_split_hz'] / 1e3:.4g}..{sv['max_frequency_split_hz'] / 1e3:.4g} kHz"
                       + assumed)
        rows.append((
            "split decay would save", f"{sv['freewheel_power_w']:.3g} W",
            f"the {names[sv['fast_element']]} takes {sv['fast_element_power_w']:.3g} W of the hold; "
            f"with a bypass during the hold: duty {h.duty:.4f} -> {sv['duty_split']:.4f} "
            f"({sv['duty_change']:+.4f}), ripple {h.ripple_a * 1e3:.4g} -> {sv['ripple_split_a'] * 1e3:.4g} mA "
            f"({sv['ripple_change_a'] * 1e3:+.3g} mA), coil {sv['coil_power_change_w']:+.3g} W; "
            f"costs one pin and a switch{assumed}"))
    return rows


def _armature_rows(d: Design, rows: list) -> list:
    """With an ``[armature]``: pull-in and release are armature moments, plus the
    mechanics' currents and margins."""
    a, p, r = d.armature, d.pull_in, d.release
    out = []
    for row in rows:
        if row[0].startswith("pull-in time"):
            where = ""
            if a.seated_in_peak_corners is not None:   # a boosted peak: in it, or in the hold after
                where = (f"; within the boosted peak at {a.seated_in_peak_corners} of {a.corners} "
                         f"corners, the rest in the hold; window {_ms(a.seat_window_s)}")
            out.append(("armature seated (worst)", _ms(a.seat_time_s),
                        f"at {a.seat_corner}; earliest {_ms(a.seat_time_min_s)}{where}"))
            out.append(("current dip (seat moment)", f"{a.dip_current_a:.4g} A at {_ms(a.dip_time_s)}",
                        f"worst corner; lowest dip {a.dip_current_min_a:.4g} A"))
        elif row[0].startswith("release time"):
            out.append(("armature open after off", _ms(r.time_s),
                        f"at {r.worst_corner} via {r.freewheel}; current zero after {_ms(r.zero_time_s)}"))
        else:
            out.append(row)
        if row[0].startswith("peak phase"):
            derived = f" (derived: {', '.join(a.derived)})" if a.derived else ""
            out.append(("mechanics need", f"{a.start_current_a:.4g} / {a.stroke_current_a:.4g} / "
                        f"{a.stay_current_a:.4g} A",
                        "start (open gap) / whole stroke / stay seated (closed gap), lowest L"))
            out.append(("current margins", f"x{a.pull_in_current_margin:.3g} / x{a.hold_current_margin:.3g}",
                        f"pull-in {p.current_a:.4g} A / hold {d.hold.current_a:.4g} A over the need{derived}"))
        if row[0].startswith("hold mean current"):
            out.append(("hold force margin", f"x{a.hold_force_margin:.3g}",
                        f"at {a.hold_force_corner}; x{a.hottest_low_supply_margin:.3g} hottest at lowest supply"))
    return out


def checks_table(d: Design) -> Table:
    t = Table(title="checks")
    t.add_column("check")
    t.add_column("result")
    t.add_column("detail")
    for c in d.checks:
        if c.ok:
            mark = "[green]ok[/green]"
        elif c.severity == "error":
            mark = "[bold red]FAIL[/bold red]"
        else:
            mark = "[yellow]warn[/yellow]"
        t.add_row(c.name, mark, escape(c.detail))
    return t


def monte_carlo_table(mc: dict) -> Table:
    levels = mc["percentiles"]
    t = Table(title=f"Monte Carlo: {mc['samples']} samples ({mc['distribution']} tolerances, seed {mc['seed']})")
    t.add_column("figure")
    for q in levels:
        t.add_column(f"p{q:g}", justify="right")
    t.add_column("max", justify="right")
    units = {"pull_in_time_s": "s", "hold_mean_current_a": "A", "hold_ripple_a": "A",
             "coil_temp_c": "degC", "release_time_s": "s"}
    for key, unit in units.items():
        vals = mc[key]["values"] + [mc[key]["max"]]
        cells = ["-" if v is None else (f"{v:.1f} degC" if unit == "degC" else format_si(v, unit))
                 for v in vals]
        t.add_row(key, *cells)
    f = mc["failures"]
    t.caption = (f"pull-in later than the peak: {f['pull_in_late']}, hold short: {f['hold_short']}, "
                 f"coil too hot: {f['coil_too_hot']}")
    return t


def print_design(d: Design, console: Console | None = None) -> None:
    """Print the summary, checks, Monte Carlo (if any) and cautions."""
    console = console or Console()
    console.print(summary_table(d))
    if d.hold.current_mode is not None:
        console.print(current_mode_table(d))
    if d.hold.closed_loop is not None:
        console.print(closed_loop_table(d))
    console.print(checks_table(d))
    if d.monte_carlo is not None:
        console.print(monte_carlo_table(d.monte_carlo))
    print_cautions(console, d.cautions)
    print_verdict(console, d.ok, "design ok", "design FAILED", [c.name for c in d.failed])


def current_mode_table(design: Design) -> Table:
    """rich table of the current-mode thresholds and switching range."""
    r = design.hold.current_mode
    t = Table(title=f"current-mode hold ({r.control})")
    t.add_column("figure")
    t.add_column("value", justify="right")
    t.add_column("where / how")
    if r.control == "hysteretic":
        t.add_row("thresholds", f"{r.lower_code} / {r.upper_code} codes",
                  f"{r.lower_a:.4g} / {r.upper_a:.4g} A, band {r.band_codes} codes"
                  + (" (sized from hold.frequency)" if r.sized_from_frequency else ""))
    else:
        t.add_row("peak threshold", f"{r.upper_code} code", f"{r.upper_a:.4g} A")
        t.add_row("off time", f"{r.off_time_s * 1e6:.5g} us",
                  f"{r.off_ticks} ticks at prescaler {r.off_prescaler}"
                  + (" (sized from hold.frequency)" if r.sized_from_frequency else ""))
    t.add_row("switching frequency", f"{r.min_frequency_hz:.0f} .. {r.max_frequency_hz:.0f} Hz",
              f"nominal {r.nominal_frequency_hz:.0f} Hz; allowed {r.allowed_min_frequency_hz:.0f}.."
              f"{r.allowed_max_frequency_hz:.0f} Hz; the coil cold to settled")
    t.add_row("switch-on fraction", f"{r.min_duty:.3f} .. {r.max_duty:.3f}",
              "over the corners, the coil cold to settled")
    t.add_row("sense", r.sense_position, f"delay {r.sense_delay_s * 1e6:.3g} us; one code "
              f"{r.code_current_a * 1e3:.4g} mA")
    return t


def closed_loop_table(design: Design) -> Table:
    """rich table of the closed-loop hold: gains, margins and quantisation limits."""
    r = design.hold.closed_loop
    t = Table(title="closed-loop hold (PI on the sampled current)")
    t.add_column("figure")
    t.add_column("value", justify="right")
    t.add_column("where / how")
    rows = [
        ("set-point", f"{r.setpoint_code} codes", f"{r.setpoint_a:.4g} A as the channel reads it; "
         f"sampled in the {r.sample_point}"),
        ("gains", f"Kp {r.kp:.4g}, Ki {r.ki:.4g}", f"counts per code (Ki per period); in the driver "
         f"{r.kp_q} and {r.ki_q} / 2^{r.gain_shift} (rounding {r.kp_rounding:.2%}, {r.ki_rounding:.2%})"),
        ("crossover", f"{r.crossover_min_hz:.4g} .. {r.crossover_max_hz:.4g} Hz",
         f"designed {r.bandwidth_hz:.4g} Hz at {r.design_corner}; lowest at {r.crossover_min_corner}"),
        ("phase margin", f"{r.phase_margin_deg:.1f} deg", f"lowest, at {r.phase_margin_corner}"),
        ("gain margin", f"{r.gain_margin_db:.1f} dB", f"lowest, at {r.gain_margin_corner}"),
        ("settling time", _ms(r.settling_time_s),
         f"to 5 % of a supply step's deviation, slowest at {r.settling_corner}"),
        ("loop duty", f"{r.min_duty:.4f} .. {r.max_duty:.4f}",
         f"limits {r.min_compare}..{r.max_compare} counts; {r.saturated_corners} of {r.corners} "
         "corners saturated"),
        ("quantisation", f"{r.smallest_step_a * 1e3:.3g} mA",
         f"smallest current step: one code {r.current_lsb_a * 1e3:.3g} mA, one compare count "
         f"{r.duty_step_current_a * 1e3:.3g} mA"),
    ]
    for row in rows:
        t.add_row(*(escape(c) for c in row))
    return t
