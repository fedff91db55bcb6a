"""A boosted peak on a full bridge with a current-mode hold in mixed decay
(``supply.boost``, ``hold.mode = "current"``, ``hold.fast_fraction`` > 0): the peak from
the boost capacitor ends at its threshold, and the hold from the main supply starts with
an off-time from the hand-over current -- all four open for the fast part (the one-shot's
time, or ``fast_fraction`` of the fixed off-time; the current back into the main bus
through Q2's and Q3's body diodes), then Q2 + Q4 -- and runs on its thresholds.

Outside reference: ngspice (batch mode) of the element-level circuit of
tests/test_boost_bridge.py (the boost capacitor with its charge behind ``Q_b`` on leg A's
rail, the main supply behind its diode, Q3's drain on the main bus through an ammeter, the
four switches as voltage-controlled switches with their body diodes), its gates played from
`coildrive simulate`'s switch columns (``boost_on`` too). Checked within 1 %: the current at
the hand-over, at the end of the first fast part and at the first on-edge of the hold (the
first off-time, fast then slow, from the boosted end current), at the final turn-off, and
the energy the hold's fast parts return into the main bus (``int V_main i dt`` over the
hold where the current flows back into the source, against ``V_main`` x the CSV's current
integrated over its all-open samples).
"""

from __future__ import annotations

import numpy as np
import pytest

from conftest import run_cli
from ngspice_run import run
from test_boost_bridge import _elements, _netlist, _variant
from test_reference_ngspice_bridge import column_gate

CONTROLS = {"hysteretic": "fast_fraction = 0.3\n", "off_time": 'control = "off_time"\nfast_fraction = 0.3\n'}


def _mixed(tmp_path, control):
    """tests/test_boost_bridge.py's boosted fuel valve on the bridge, held in current mode
    with mixed decay."""
    path = _variant(tmp_path)
    text = path.read_text()
    assert 'frequency = "50 kHz"' in text
    path.write_text(text.replace('frequency = "50 kHz"', 'frequency = "50 kHz"\nmode = "current"\n'
                                 + CONTROLS[control], 1))
    return path


@pytest.mark.ngspice
@pytest.mark.parametrize("control", list(CONTROLS))
def test_hold_after_the_hand_over_against_ngspice(tmp_path, control):
    from coildrive.config import load_drive
    from coildrive.design import design
    from coildrive.model.circuit import loop

    path = _mixed(tmp_path, control)
    drive = load_drive(path)
    d = design(drive)
    assert d.hold.thresholds.control == control and drive.hold.fast_fraction == 0.3, "precondition"
    s, supply, temp = drive.supply, 12.0, 40.0
    csv = tmp_path / "act.csv"
    r = run_cli("simulate", str(path), "--supply", f"{supply:g}", "--coil-temp", f"{temp:g}",
                "--hold-time", "1.5 ms", "--csv", str(csv))
    assert r.returncode == 0, r.stderr
    w = np.genfromtxt(csv, delimiter=",", names=True)
    t, on, i = w["time_s"], w["switch_on"], w["current_a"]
    names = ("boost", "high_a", "low_a", "high_b", "low_b")
    change = np.nonzero(np.any([np.diff(w[f"{n}_on"]) for n in names], axis=0))[0]
    # every edge sits on the last sample of the part it ends (the hold's segments sample
    # from after their start)
    edges = [float(t[k]) for k in change]
    gates = {name: column_gate(w[f"{name}_on"], change, edges, name == "low_b") for name in names}
    t_peak, t_fast_end, t_off = edges[0], edges[1], edges[-1]
    open_ = (w["high_a_on"] + w["low_a_on"] + w["high_b_on"] + w["low_b_on"]) == 0
    assert w["boost_on"][change[0]] == 1 and open_[change[0] + 1], "the hold starts all four open"
    assert w["low_b_on"][change[1] + 1] == 1, "then Q2 + Q4"
    t_first_on = float(t[np.flatnonzero((t > t_peak) & (on == 1))[0]])
    hold = (t >= t_peak) & (t <= t_off)
    k = hold & open_ & (i > 0)
    runs = np.split(np.flatnonzero(k), np.flatnonzero(np.diff(np.flatnonzero(k)) > 1) + 1)
    # (each run of all-open samples from the turn-off's sample before it)
    q_fast = sum(np.trapezoid(i[r_[0] - 1:r_[-1] + 1], t[r_[0] - 1:r_[-1] + 1]) for r_ in runs)
    lp = loop(drive, supply, temp)
    e = _elements(drive, lp, supply, s.boost, s.boost_capacitance)
    step = 2e-8
    res = run(tmp_path, "boost-bridge-cm-mixed", _netlist(
        "boosted peak, current-mode mixed-decay hold", e, gates, t_off + 2e-6, step, [
            f"meas tran ipeak FIND i(VM) AT={t_peak!r}", f"meas tran ifast FIND i(VM) AT={t_fast_end!r}",
            f"meas tran ion FIND i(VM) AT={t_first_on!r}", f"meas tran ioff FIND i(VM) AT={t_off!r}",
            "let pback = (pret + abs(pret)) / 2",   # the power back into the main source only
            f"meas tran eret INTEG pback from={t_peak!r} to={t_off!r}"]))

    def model(at):
        return float(np.interp(at, t, i))

    print(f"{control}: hand-over {res['ipeak']:.6g}/{model(t_peak):.6g} A, first fast part's end "
          f"{res['ifast']:.6g}/{model(t_fast_end):.6g} A, first on {res['ion']:.6g}/{model(t_first_on):.6g} A, "
          f"final turn-off {res['ioff']:.6g}/{model(t_off):.6g} A, returned {res['eret']:.6g}/"
          f"{supply * q_fast:.6g} J (ngspice/model)")
    # ngspice transient, within 1 %
    for name, at in (("ipeak", t_peak), ("ifast", t_fast_end), ("ion", t_first_on), ("ioff", t_off)):
        assert res[name] == pytest.approx(model(at), rel=0.01), name
    assert supply * q_fast > 0 and res["eret"] == pytest.approx(supply * q_fast, rel=0.01)


@pytest.mark.compiler
def test_virtual_device_and_compiled_driver_pass_check(tmp_path):
    """Plumbing (the devices share the design's physics), hysteretic: the virtual device's
    capture passes check at both ends of the envelope (a coil of twice the inductance fails
    it: its release takes twice as long; the regulated hold and the boost's threshold hide
    a resistance), and the compiled reference driver in the loop (gcc; the boost switch, the
    threshold, the one-shot's fast part) passes check at 16 V cold and 9 V hot."""
    from test_armature_current_mode import bridge_firmware_checks
    from test_bridge_current import device_checks

    from coildrive.config import load_drive
    from coildrive.design import design

    d = design(load_drive(_mixed(tmp_path, "hysteretic")))
    device_checks(d, tmp_path, dict(inductance_scale=2.0))
    bridge_firmware_checks(d, tmp_path, ((16.0, -40.0), (9.0, 90.0)))
