"""The driver circuit at element level, for the reference tests (ngspice, scipy, textbook).

The reference tests must not lean on :mod:`coildrive.model.circuit` to describe the
circuit they check it against. Here the element values come straight from the parsed
drive and board (copper by the IEC 60028 law, written out again), and the loop
equations are Kirchhoff's voltage law around the topology of DESIGN.md, written out by
hand:

* switch on: ``V_bus = (R_coil + R_sense + R_switch) i + L di/dt`` (the sense resistor
  carries the coil current wherever it sits);
* freewheel path across the coil (diode, diode + Zener, diode + resistor):
  ``0 = (R_coil [+ R_sense in the coil path] + R_fw) i + V_d [+ V_z] + L di/dt``;
* clamp from the drain to ground, supply still connected:
  ``V_bus = (R_coil [+ R_sense in the coil path]) i + V_clamp + L di/dt``.

With a high-side switch (``topology="high_side"``) the switch sits between the supply
(through the sense resistor when it is in the supply leg) and the coil's top terminal,
the switch node; the coil returns to ground (through the sense resistor when it is in
the coil return); the freewheel path runs from ground up to the node, and a clamp from
the bus to the node. The loop equations above are the same (the same elements in the
same loops); the node sits at ``V_bus - V_switch``: ``-(V_d [+ V_z] + R_fw i)``
freewheeling, ``V_bus - V_clamp`` with the clamp.

The fixtures write their own board and drive files, so that a change to a bundled board
cannot change what these references check.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from coildrive.config import Drive, load_drive

#: Annealed copper, temperature coefficient of resistance at 20 degC, 1/K (IEC 60028).
IEC60028_ALPHA_20 = 0.00393

#: Freewheel paths used by the references (invented values of a usual size).
FREEWHEELS = {
    "diode": {"type": "diode", "diode_drop": "0.8 V"},
    "zener": {"type": "zener", "diode_drop": "0.9 V", "zener_voltage": "33 V"},
    "resistor": {"type": "resistor", "diode_drop": "0.8 V", "resistance": "33 ohm"},
    "clamp": {"type": "clamp", "clamp_voltage": "75 V"},
}

#: (freewheel, sense position) pairs: every freewheel type, both sense positions covered.
CASES = [
    ("diode", "switch"),
    ("diode", "coil"),
    ("zener", "coil"),
    ("resistor", "coil"),
    ("clamp", "switch"),
    ("clamp", "coil"),
]
CASE_IDS = [f"{fw}-sense-{pos}" for fw, pos in CASES]

#: A coil like a 24 V valve's (invented): long time constant, continuous conduction at 25 kHz.
SLOW_COIL = {"resistance": "22 ohm", "inductance": "60 mH", "frequency": "25 kHz"}
#: A small, fast coil (invented) at a low PWM rate: the current reaches zero every period.
FAST_COIL = {"resistance": "22 ohm", "inductance": "2 mH", "frequency": "2 kHz"}


def _toml_value(value) -> str:
    return f'"{value}"' if isinstance(value, str) else repr(value)


def write_board(folder: Path, freewheel: str, sense_position: str, *,
                sense_resistance: str = "0.1 ohm", on_resistance: str = "35 mohm",
                max_voltage: str = "150 V", tick_rate: str = "10 kHz",
                topology: str | None = None) -> Path:
    """An invented board file with the named freewheel path and sense position (and
    switch topology; ``None`` leaves the key out: a low-side switch)."""
    fw = "\n".join(f"{k} = {_toml_value(v)}" for k, v in FREEWHEELS[freewheel].items())
    path = folder / f"board-{freewheel}-{sense_position}{'-' + topology if topology else ''}.toml"
    where = f'topology = "{topology}"\n' if topology else ""
    path.write_text(f"""\
name = "ref-{freewheel}-{sense_position}"
description = "reference-test board"

[timer]
clock = "84 MHz"
bits = 16
prescaler_max = 65536

[adc]
bits = 12
reference = "3.3 V"
sample_rate = "200 kHz"

[sense]
resistance = "{sense_resistance}"
gain = 20
position = "{sense_position}"

[supply_sense]
divider = 21

[switch]
{where}on_resistance = "{on_resistance}"
max_voltage = "{max_voltage}"

[freewheel]
{fw}

[link]
baud = 921600

[tick]
rate = "{tick_rate}"
""")
    return path


def write_drive(folder: Path, board: Path, *, resistance: str = "22 ohm",
                reference_temp: str = "20 degC", inductance: str = "60 mH",
                frequency: str = "25 kHz", supply: tuple[str, str, str] = ("20 V", "24 V", "28 V"),
                pull_in: str = "0.55 A", hold: str = "0.22 A", release: str = "0.10 A",
                thermal_resistance: str = "14 K/W", name: str = "ref-drive") -> Path:
    """An invented drive file (a 24 V valve-like coil unless told otherwise)."""
    path = folder / f"{name}.toml"
    path.write_text(f"""\
board = "{board}"

[coil]
resistance = "{resistance}"
reference_temp = "{reference_temp}"
inductance = "{inductance}"
resistance_tolerance = 0.07
inductance_tolerance = 0.15

[supply]
min = "{supply[0]}"
nominal = "{supply[1]}"
max = "{supply[2]}"

[ambient]
min = "-10 degC"
max = "50 degC"

[thermal]
resistance = "{thermal_resistance}"
max_coil_temp = "180 degC"

[pull_in]
current = "{pull_in}"
margin = 1.5

[hold]
current = "{hold}"
frequency = "{frequency}"

[release]
current = "{release}"
""")
    return path


def reference_drive(folder: Path, freewheel: str, sense_position: str,
                    topology: str | None = None, **drive) -> Drive:
    """Load a drive on an invented board with the given freewheel path, sense position and
    switch topology (``None``: the key left out, a low-side switch)."""
    board = write_board(folder, freewheel, sense_position, topology=topology)
    return load_drive(write_drive(folder, board, **drive))


@dataclass(frozen=True)
class Parts:
    """Element values of the circuit at one operating point. SI units."""

    v_bus: float
    r_coil: float
    inductance: float
    r_switch: float
    r_sense: float
    sense_in_coil_path: bool
    freewheel: str
    v_diode: float
    v_zener: float
    r_fw: float
    v_clamp: float
    high_side: bool = False

    def on(self) -> tuple[float, float]:
        """``(V, R)`` with ``L di/dt = V - R i`` while the switch is on."""
        return self.v_bus, self.r_coil + self.r_sense + self.r_switch

    def off(self) -> tuple[float, float]:
        """``(V, R)`` with ``L di/dt = V - R i`` while the current freewheels (``i > 0``)."""
        r = self.r_coil + (self.r_sense if self.sense_in_coil_path else 0.0)
        if self.freewheel == "clamp":
            return self.v_bus - self.v_clamp, r
        return -(self.v_diode + self.v_zener), r + self.r_fw

    def supply_during_off(self) -> bool:
        """Whether the supply drives the freewheel loop (only for a clamp across the switch)."""
        return self.freewheel == "clamp"

    def drain_voltage_off(self, current: float) -> float:
        """Drain (switch) voltage while ``current`` A freewheels: KVL around the freewheel path."""
        if self.freewheel == "clamp":
            return self.v_clamp
        return self.v_bus + self.v_diode + self.v_zener + self.r_fw * current

    def node_voltage_off(self, current: float) -> float:
        """Switch node to ground while ``current`` A freewheels: the drain for a low-side
        switch; for a high-side one the source, KVL from ground up the freewheel path
        (``-(V_d + V_z + R_fw i)``) or down from the bus across the clamp."""
        if not self.high_side:
            return self.drain_voltage_off(current)
        if self.freewheel == "clamp":
            return self.v_bus - self.v_clamp
        return -(self.v_diode + self.v_zener + self.r_fw * current)

    def element_energy(self, charge: float, square: float) -> float:
        """Energy in J into the freewheel element(s) (diode, Zener, resistor; or the clamp)
        over a freewheel segment with ``int i dt = charge`` and ``int i^2 dt = square``."""
        if self.freewheel == "clamp":
            return self.v_clamp * charge
        return (self.v_diode + self.v_zener) * charge + self.r_fw * square


def iec60028_resistance(r_ref: float, t_ref: float, temp: float) -> float:
    """Copper resistance at ``temp`` degC: linear about 20 degC with alpha_20 (IEC 60028)."""
    return r_ref * (1.0 + IEC60028_ALPHA_20 * (temp - 20.0)) / (1.0 + IEC60028_ALPHA_20 * (t_ref - 20.0))


def parts(drive: Drive, supply: float, coil_temp: float, r_factor: float = 1.0,
          l_factor: float = 1.0) -> Parts:
    """The element values of ``drive``'s circuit at one operating point."""
    coil, board, fw = drive.coil, drive.board, drive.freewheel
    return Parts(
        v_bus=float(supply),
        r_coil=iec60028_resistance(coil.resistance, coil.reference_temp, coil_temp) * r_factor,
        inductance=coil.inductance * l_factor,
        r_switch=drive.switch.on_resistance,
        r_sense=board.sense.resistance,
        sense_in_coil_path=board.sense.position == "coil",
        freewheel=fw.type,
        v_diode=fw.diode_drop,
        v_zener=fw.zener_voltage,
        r_fw=fw.resistance,
        v_clamp=fw.clamp_voltage,
        high_side=drive.switch.topology == "high_side",
    )


#: The operating point the references use: low supply, hot coil, R +7 %, L +15 %.
POINT = {"supply": 20.0, "coil_temp": 85.0, "r_factor": 1.07, "l_factor": 1.15}
