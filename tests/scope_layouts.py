"""Scope records made from the project's synthetic waveforms, written as CSV files the way
a few common oscilloscope layouts write them (invented data; the layouts are generic:
a plain two-column table, a preamble with a units row, a sample index with a stated
increment, a semicolon table with decimal commas, and a preamble beside the data).

A record samples the model actuation (coildrive.bench.synth.actuation_waveform) at the
scope's rate: the coil current as a current probe sees it (in the coil lead: always),
the gate (switch) state, the switch-node voltage and the supply, with Gaussian noise and
the vertical quantisation of a 12-bit scope.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from coildrive.bench.synth import _switch_state, actuation_waveform, operating_point
from coildrive.design import firmware_setting


@dataclass
class Record:
    t: np.ndarray        # s, uniform
    current: np.ndarray  # A
    gate: np.ndarray     # V (0 / 5)
    node: np.ndarray     # V
    supply: np.ndarray   # V
    dt: float
    on_times: list


def _quantise(x: np.ndarray, full_scale: float, bits: int = 12) -> np.ndarray:
    """A 12-bit scope's vertical steps over +/- full_scale."""
    step = 2.0 * full_scale / 2**bits
    return np.round(x / step) * step


def scope_record(design, *, rate: float = 500e3, actuations: int = 2, hold_time: float = 0.02,
                 idle: float = 0.004, resistance_scale: float = 1.0, inductance_scale: float = 1.0,
                 noise_a: float = 0.002, seed: int = 1, supply: float | None = None,
                 coil_temp: float | None = None, duration: float | None = None) -> Record:
    """``actuations`` model actuations separated by ``idle`` s, sampled at ``rate``;
    ``duration`` (s) cuts the record there (a scope's record ends where it ends)."""
    drive = design.drive
    v, temp = operating_point(drive, supply, coil_temp)
    duty, peak = firmware_setting(design, v)  # what the firmware runs at this supply
    w = actuation_waveform(drive, v, temp, peak, duty,
                           design.hold.frequency_hz, hold_time, resistance_scale=resistance_scale,
                           inductance_scale=inductance_scale)
    length = float(w.events["zero"])
    rng = np.random.default_rng(seed)
    dt = 1.0 / rate
    on_times = [idle + k * (length + idle) + rng.uniform(0, dt) for k in range(actuations)]
    total = on_times[-1] + length + idle if duration is None else duration
    t = np.arange(int(math.ceil(total / dt))) * dt
    cur = np.zeros(t.size)
    gate = np.zeros(t.size)
    node = np.full(t.size, v)
    for t_on in on_times:
        inside = (t >= t_on) & (t < t_on + length)
        rel = t[inside] - t_on
        cur[inside] = np.interp(rel, w.time, w.current)
        gate[inside] = np.where(_switch_state(w, rel), 5.0, 0.0)
        node[inside] = np.interp(rel, w.time, w.switch_voltage)
    top = float(cur.max()) * 1.25 + 0.05
    cur = _quantise(cur + rng.normal(0, noise_a, t.size), top)
    vtop = float(node.max()) * 1.2
    return Record(t, cur, _quantise(gate + rng.normal(0, 0.05, t.size), 6.0),
                  _quantise(node + rng.normal(0, 0.1, t.size), vtop),
                  _quantise(np.full(t.size, v) + rng.normal(0, 0.05, t.size), 2 * v), dt, on_times)


def _idle_rows(rec: Record, width: int) -> slice:
    """``width`` rows in the idle time 1.5 ms before the second switch-on (or half-way to
    the first): where a glitch or a gap leaves every actuation whole."""
    mid = rec.on_times[1] - 0.0015 if len(rec.on_times) > 1 else rec.on_times[0] / 2
    k = int(mid / rec.dt)
    return slice(k, k + width)


def write_plain_seconds(rec: Record, path) -> None:
    """Two columns, one header row with units in brackets, time in s; a gap of 40 rows
    (the record has a hole in the idle time)."""
    keep = np.ones(rec.t.size, bool)
    keep[_idle_rows(rec, 40)] = False
    lines = ["Time (s),Current (A)"]
    lines += [f"{a:.7e},{b:.5e}" for a, b in zip(rec.t[keep], rec.current[keep])]
    path.write_text("\n".join(lines) + "\n")


def write_preamble_units_row(rec: Record, path, probe_v_per_a: float = 0.1) -> None:
    """A key,value preamble, a row of channel names and a row of units; the current as a
    probe's volts (``probe_v_per_a`` V per A), gate, switch node and supply channels;
    glitches: an over-range sample and a row written twice."""
    head = ["Model,BenchScope 4",
            "Record Length," + str(rec.t.size),
            f"Sample Interval,{rec.dt:.6e}",
            "Trigger Point,0",
            "",
            "TIME,CH1,CH2,CH3,CH4",
            "s,V,V,V,V"]
    probe = rec.current * probe_v_per_a
    rows = [f"{a:.6e},{b:.4e},{c:.3f},{d:.3f},{e:.3f}"
            for a, b, c, d, e in zip(rec.t, probe, rec.gate, rec.node, rec.supply)]
    k = _idle_rows(rec, 1).start
    rows[k] = rows[k].split(",")[0] + ",9.9e37," + ",".join(rows[k].split(",")[2:])
    rows.insert(k + 10, rows[k + 10])       # the same row twice
    path.write_text("\r\n".join(head + rows) + "\r\n")


def write_index_increment(rec: Record, path) -> None:
    """Sample index in the first column, the increment stated beside the column names,
    units ``Sequence``/``Volt`` (a probe of 1 V per A: ``--current-scale 1``) and a gate
    channel; glitches: an empty and a ``nan`` current cell."""
    head = ["X,CH1,CH2,Start,Increment,",
            f"Sequence,Volt,Volt,{-rec.on_times[0]:.6e},{rec.dt:.6e},"]
    cur = [f"{x:.4e}" for x in rec.current]
    k = _idle_rows(rec, 1).start
    cur[k], cur[k + 5] = "", "nan"
    rows = [f"{n},{c},{g:.2f}," for n, (c, g) in enumerate(zip(cur, rec.gate))]
    path.write_text("\n".join(head + rows) + "\n")


def write_semicolon_decimal_comma(rec: Record, path) -> None:
    """Semicolons with decimal commas, time in ms and current in mA; a gap of 25 rows."""
    keep = np.ones(rec.t.size, bool)
    keep[_idle_rows(rec, 25)] = False
    lines = ["Time [ms];I coil [mA]"]
    lines += [f"{a * 1e3:.6f};{b * 1e3:.2f}".replace(".", ",") for a, b in zip(rec.t[keep], rec.current[keep])]
    path.write_text("\n".join(lines) + "\n")


def write_preamble_beside(rec: Record, path) -> None:
    """Settings in the first three columns of the first rows, the data in columns 4 and 5
    (time in s, the probe's volts at 100 mV/A); a gap of 30 rows."""
    keep = np.ones(rec.t.size, bool)
    keep[_idle_rows(rec, 30)] = False
    settings = [("Record Length", f"{int(keep.sum())}", "Points"), ("Sample Interval", f"{rec.dt:.6e}", "s"),
                ("Trigger Point", "0", "Samples"), ("Source", "CH1", ""), ("Vertical Units", "V", ""),
                ("Horizontal Units", "s", "")]
    rows = []
    for n, (a, b) in enumerate(zip(rec.t[keep], rec.current[keep] * 0.1)):
        s = settings[n] if n < len(settings) else ("", "", "")
        rows.append(f"{s[0]},{s[1]},{s[2]},{a:.9f},{b:.5f},")
    path.write_text("\n".join(rows) + "\n")


LAYOUTS = {
    # name: (writer, extra options for check/fit)
    "plain-seconds": (write_plain_seconds, []),
    "preamble-units-row": (write_preamble_units_row,
                           ["--columns", "time=TIME,current=CH1,switch=CH2,node=CH3,supply=CH4",
                            "--current-scale", "100 mV/A"]),
    "index-increment": (write_index_increment, ["--columns", "time=X,current=CH1,switch=CH2",
                                                "--current-scale", "1 A/V"]),
    "semicolon-decimal-comma": (write_semicolon_decimal_comma, []),
    "preamble-beside": (write_preamble_beside, ["--current-scale", "10 A/V"]),
}


def write_bench_doc_records(folder) -> list[str]:
    """The records docs/bench.md's scope example reads (and the README's one line of it),
    written into ``folder``: the demo valve's coil at 35 degC, seed 2, as ``scope.csv``
    (the four-channel layout with a units row), ``scope-wrong.csv`` (the same with 40 %
    more resistance) and ``stopped.csv`` (two columns, ending half-way through a third
    actuation). Returns the file names."""
    from coildrive.config import load_drive
    from coildrive.design import design
    from coildrive.resources import example

    demo = design(load_drive(example("demo-valve")))
    write_preamble_units_row(scope_record(demo, coil_temp=35.0, seed=2), folder / "scope.csv")
    write_preamble_units_row(scope_record(demo, coil_temp=35.0, seed=2, resistance_scale=1.4),
                             folder / "scope-wrong.csv")
    full = scope_record(demo, coil_temp=35.0, seed=2)
    length = full.on_times[1] - full.on_times[0]
    write_plain_seconds(scope_record(demo, coil_temp=35.0, seed=2, actuations=3,
                                     duration=full.on_times[1] + 1.5 * length), folder / "stopped.csv")
    return ["scope.csv", "scope-wrong.csv", "stopped.csv"]
