"""Running ngspice for the reference tests, and the device they share.

Reference: ngspice (batch mode, ``ngspice -b``). :func:`run` writes a netlist, runs it and
returns its ``meas`` results; :func:`knee` is the constant-drop one-way device of the
model's law (no current below its knee, 1 mohm beyond), which tests/test_reference_ngspice.py
explains and the high-side references reuse.
"""

from __future__ import annotations

import re
import subprocess
from pathlib import Path

from conftest import require_tool

G_ON = 1e3  # S, on-conductance of the piecewise-linear devices (1 mohm)
G_OFF = 1e-9  # S, off-conductance of the piecewise-linear devices
OPTIONS = ".options reltol=1e-6 abstol=1e-9 vntol=1e-6"

_RESULT = re.compile(r"^(\w+)\s*=\s*([-+0-9.eE]+)", re.M)


def knee(name: str, plus: str, minus: str, voltage: float) -> str:
    """A piecewise-linear one-way device from ``plus`` to ``minus`` with a knee at ``voltage`` V."""
    v = f"V({plus},{minus})"
    return (f"{name} {plus} {minus} I = {v} > {voltage!r} ? ({v} - {voltage!r}) * {G_ON!r} + "
            f"{voltage * G_OFF!r} : {v} * {G_OFF!r}")


def decay_case(drive, lp) -> tuple[float, float, float, float]:
    """The model's side of a reference release: the switch on from zero for 1.5 x the
    pull-in time, then off. ``(on-time s, current at turn-off A, time to drop-out s, time
    to zero s)`` through the loop ``lp`` (:func:`coildrive.model.circuit.loop`)."""
    from coildrive.model.rl import decay_time, rise_current, rise_time

    t_on = 1.5 * float(rise_time(drive.pull_in.current, 0.0, lp.v_on, lp.r_on, lp.inductance))
    i0 = float(rise_current(t_on, 0.0, lp.v_on, lp.r_on, lp.inductance))
    t_drop = float(decay_time(drive.release.current, i0, lp.r_off, lp.v_off, lp.inductance))
    t_zero = float(decay_time(0.0, i0, lp.r_off, lp.v_off, lp.inductance))
    return t_on, i0, t_drop, t_zero


def run(tmp_path: Path, name: str, text: str, timeout: float = 60) -> dict[str, float]:
    """Run ngspice in batch mode on ``text``; return the ``meas`` results by name."""
    ngspice = require_tool("ngspice")
    cir = tmp_path / f"{name}.cir"
    cir.write_text(text)
    proc = subprocess.run([ngspice, "-b", str(cir)], capture_output=True, text=True, timeout=timeout,
                          cwd=tmp_path)
    out = proc.stdout + proc.stderr
    assert proc.returncode == 0, f"ngspice failed on {cir}:\n{out}"
    for bad in ("Timestep too small", "failed!", "rror"):
        assert bad not in out, f"ngspice reported {bad!r} on {cir}:\n{out}"
    return {k: float(v) for k, v in _RESULT.findall(out)}
