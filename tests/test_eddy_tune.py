"""``coildrive tune`` (the offline sweep) with an eddy-current term.

The sweep evaluates every hold on the eddy term's exact orbit (coildrive/model/eddy.py)
and heats the coil with its copper and the core's eddy loss. Checked here:

* the ``[hold]`` the sweep prints, pasted into the drive file, designs to the printed
  frequency, prescaler, period and compare (as tests/test_tune.py does for every example);
* the recommended hold at the corner where its mean current is lowest, against ngspice
  (the netlist of tests/test_eddy_ngspice.py: a resistor across the inductor, a 0 V
  ammeter in the magnetising branch): the mean and ripple of the terminal current, and
  the copper and eddy powers that set the coil temperature the sweep settled at, 1 % each.
"""

from __future__ import annotations

import math
import re

import pytest

from circuit_reference import parts, reference_drive
from conftest import EXAMPLES, run_cli
from coildrive.config import load_drive
from coildrive.design import design
from coildrive.tune.sweep import TuneOptions, tune
from test_eddy_coil import _example_drive
from test_eddy_ngspice import R_EDDY, _eddy_netlist, _with_eddy
from test_reference_ngspice import _netlist, _run
from test_tune import _paste_hold, printed_hold

#: A short sweep: two levels over 20..30 kHz, one exactly re-evaluated setting.
OPTIONS = TuneOptions(levels=2, min_frequency=20e3, max_frequency=30e3, top=1)


def test_the_pasted_hold_designs_to_the_printed_figures(tmp_path):
    """The printed [hold] of an eddy-term coil, pasted and designed (coildrive.design), gives
    the printed timer counts; the sweep's coil power is the design's (copper + eddy loss)."""
    path = _example_drive(tmp_path, 'eddy_time_constant = "20 us"',
                          EXAMPLES / "reagent-valve-zener-24v.toml")
    drive = load_drive(path)
    r = tune(drive, OPTIONS)
    rec = r.recommendation
    assert rec is not None, r.explanation
    section = printed_hold(r)
    path.write_text(_paste_hold(path.read_text(), section))
    d = design(load_drive(path))
    assert (d.hold.frequency_hz, d.timer.prescaler, d.timer.period_ticks, d.timer.compare_ticks) == (
        rec.frequency_hz, rec.prescaler, rec.period_ticks, rec.compare_ticks)
    assert d.eddy is not None and d.eddy.hold_eddy_power_w > 0.05, "precondition: a real eddy loss"
    assert rec.coil_power_w == pytest.approx(d.hold.coil_power_w, rel=1e-9)
    assert rec.coil_temp_c == pytest.approx(d.hold.coil_temp_c, abs=1e-3)


def test_tune_cli_prints_a_hold_for_an_eddy_coil(tmp_path):
    path = _example_drive(tmp_path, 'eddy_time_constant = "20 us"',
                          EXAMPLES / "reagent-valve-zener-24v.toml")
    r = run_cli("tune", str(path), "--levels", "2", "--min-frequency", "24 kHz",
                "--max-frequency", "26 kHz")
    assert r.returncode == 0, r.stderr
    assert "[hold]" in r.stdout, r.stdout


def _corner(label: str) -> dict:
    """Supply, tolerance factors and (if named) coil temperature of a corner's label."""
    sup = float(re.match(r"([\d.]+) V", label).group(1))
    r = re.search(r"R([+-]\d+)%", label)
    l = re.search(r"L([+-]\d+)%", label)
    coil = re.search(r"coil ([-\d.]+) degC", label)
    return dict(supply=sup, r_factor=1.0 + (int(r.group(1)) / 100 if r else 0.0),
                l_factor=1.0 + (int(l.group(1)) / 100 if l else 0.0),
                coil_temp=float(coil.group(1)) if coil else None)


def _ngspice_hold(tmp_path, drive, point, duty, f, name):
    """ngspice's last period of the hold at ``point``: terminal mean, ripple, and the
    copper and eddy powers (W)."""
    p = parts(drive, **point)
    period = 1.0 / f
    r_min = p.r_coil + p.r_switch
    tau = drive.coil.inductance * point["l_factor"] / r_min
    tstop = max(4, math.ceil(12.0 * tau * f)) * period
    window = f"from={tstop - period!r} to={tstop!r}"
    measures = [f"let peddy = (v(n1) - v(n2))^2 / {R_EDDY!r}",
                f"let pcu = i(VM)^2 * {p.r_coil!r}",
                f"meas tran iavg AVG i(VM) {window}", f"meas tran imax MAX i(VM) {window}",
                f"meas tran imin MIN i(VM) {window}", f"meas tran pe AVG peddy {window}",
                f"meas tran pc AVG pcu {window}"]
    text = _eddy_netlist(_netlist(p, "eddy tune", duty * period, period, tstop, period / 100, measures),
                         None, False)
    return _run(tmp_path, name, text)


@pytest.mark.ngspice
def test_tuned_hold_against_ngspice(tmp_path):
    """The recommendation against ngspice transients of the circuit (tests/
    test_eddy_ngspice.py's netlist, ``R_e`` = 300 ohm), at the two corners the sweep names:
    where the mean current is lowest (the design's hot coil at the lowest supply) its mean
    terminal current; at the hottest coil ``T = T_a + R_th (P_copper + P_eddy)`` with
    ngspice's copper and eddy powers at the temperature printed. 1 % each."""
    reference_drive(tmp_path, "zener", "coil")
    path = tmp_path / "ref-drive.toml"
    # a fixed compare: every corner runs the printed duty (a supply table's would vary)
    path.write_text(path.read_text().replace("[hold]\n", '[hold]\nregulation = "fixed"\n'))
    drive = _with_eddy(path)
    # the eddy steps at each edge make the terminal ripple large: allow it
    r = tune(drive, TuneOptions(levels=2, min_frequency=20e3, max_frequency=30e3, top=1,
                                max_ripple=0.3))
    rec = r.recommendation
    assert rec is not None, r.explanation
    duty, f = rec.compare_ticks / rec.period_ticks, float(rec.frequency_hz)
    path.write_text(_paste_hold(path.read_text(), r.hold_section()))
    d = design(load_drive(path))
    assert d.hold.min_mean_current_a == pytest.approx(rec.min_mean_current_a, rel=1e-9)

    low = _corner(d.hold.min_corner)
    assert low["coil_temp"] is not None, d.hold.min_corner
    res = _ngspice_hold(tmp_path, drive, low, duty, f, "eddy-tune-low")
    print(f"tuned {rec.frequency_hz} Hz, compare {rec.compare_ticks}/{rec.period_ticks}; lowest mean at "
          f"{d.hold.min_corner}: {rec.min_mean_current_a:.6e} A, ngspice {res['iavg']:.6e} A")
    assert res["iavg"] == pytest.approx(rec.min_mean_current_a, rel=0.01)

    hot = _corner(rec.hottest_corner)
    ambient = float(re.search(r", ([-\d.]+) degC", rec.hottest_corner).group(1))
    hot["coil_temp"] = rec.coil_temp_c
    res = _ngspice_hold(tmp_path, drive, hot, duty, f, "eddy-tune-hot")
    t_ng = ambient + drive.thermal.resistance * (res["pc"] + res["pe"])
    print(f"hottest at {rec.hottest_corner}: {rec.coil_temp_c:.4f} degC ({rec.coil_power_w:.6e} W); ngspice "
          f"copper {res['pc']:.6e} W + eddy {res['pe']:.6e} W -> {t_ng:.4f} degC")
    assert res["pe"] > 0.1 * res["pc"], "precondition: the eddy loss is a real part of the heat"
    assert res["pc"] + res["pe"] == pytest.approx(rec.coil_power_w, rel=0.01)
    assert t_ng - ambient == pytest.approx(rec.coil_temp_c - ambient, rel=0.01)
