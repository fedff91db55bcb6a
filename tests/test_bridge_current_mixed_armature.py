"""A full bridge's current-mode hold with mixed decay and a moving ``[armature]``
(``hold.mode = "current"``, ``hold.fast_fraction`` > 0): the peak is the armature's run, the
hold the thresholds' segments on the seated coil with each off-time's fast part first
(all four open, the current into the bus through two body diodes; the fixed off-time's
``fast_fraction`` of it, hysteretic the one-shot or to the lower threshold), then Q2 + Q4;
the release the run into the bus until the armature is back on its open stop.

Outside reference: scipy's ``solve_ivp`` (DOP853, rtol 1e-11) of the armature's equations
written afresh (tests/test_armature_current_mode.py's ``reference``, tests/armature_equations.py:
``lam = L(x) i``, ``dlam/dt = V - R i``, the co-energy pull, spring, load, damping, dead
stops) with the hold's three paths switched by events at the thresholds and the timed fast
part: the seat, every switching edge of the hold, the final turn-off and the open stop of
`simulate`'s CSV; the design's hold mean, RMS and duty on the seated coil and its release
at the worst pull-in corner. The virtual device shares the design's physics: plumbing.
"""

from __future__ import annotations

import numpy as np
import pytest

from conftest import run_cli
from test_armature_current_mode import (_bridge_file, _point, bridge_csv_against_solve_ivp, bridge_firmware_checks,
                                        device_check, reference)
from coildrive.config import load_drive
from coildrive.design import design
from coildrive.design.corners import corner_grid
from coildrive.model.circuit import loop

CONTROLS = {"hysteretic": "fast_fraction = 0.3\n", "off_time": 'control = "off_time"\nfast_fraction = 0.3\n'}


def _designed(folder, control):
    path = _bridge_file(folder)
    path.write_text(path.read_text().replace('mode = "current"\n', 'mode = "current"\n' + CONTROLS[control]))
    d = design(load_drive(path))
    assert d.hold.thresholds.control == control and d.hold.thresholds.delay_s == 0.0, "precondition"
    return control, path, d


@pytest.fixture(scope="module", params=list(CONTROLS))
def designed(request, tmp_path_factory):
    return _designed(tmp_path_factory.mktemp("bcma"), request.param)


@pytest.fixture(scope="module")
def hysteretic(tmp_path_factory):
    """(the device and the driver in the loop take the hysteretic control: its one-shot and
    the threshold met in either part)"""
    return _designed(tmp_path_factory.mktemp("bcmh"), "hysteretic")


def _fast(drive, supply, temp, th, r_factor=1.0, l_factor=1.0):
    """The fast part ``(R_f, V_f, t_f)`` at a point: the bridge's release path (two body
    diodes into the bus) for the one-shot's time or ``fast_fraction`` of the off-time."""
    f = loop(drive, np.array([supply]), np.array([temp]), np.array([r_factor]), np.array([l_factor]),
             path="release")
    t_f = th.off_time_s if th.control == "hysteretic" else drive.hold.fast_fraction * th.off_time_s
    return float(f.r_off[0]), float(f.v_off[0]), t_f


def _simulated(path, tmp_path, supply: str, temp: str, hold: str):
    """`coildrive simulate` (a subprocess) of ``path``: ``(columns, time s, switch_on)``."""
    csv = tmp_path / "w.csv"
    r = run_cli("simulate", str(path), "--supply", supply, "--coil-temp", temp, "--hold-time", hold,
                "--csv", str(csv))
    assert r.returncode == 0, r.stderr
    w = np.genfromtxt(csv, delimiter=",", names=True)
    return w, w["time_s"], w["switch_on"]


def test_simulate_csv_against_solve_ivp(designed, tmp_path):
    """`coildrive simulate` (a subprocess) at 24 V, 20 degC, 8 ms of hold: the seat, every
    switching edge of the hold within 1e-9 s and the open stop within 1e-6 against solve_ivp
    (module docstring); in the hold the fast parts all four open, then Q2 + Q4."""
    _, path, d = designed
    states = bridge_csv_against_solve_ivp(path, d, tmp_path, _fast(d.drive, 24.0, 20.0, d.hold.thresholds)[2])
    assert states == {(1, 1, 0, 0, 1), (0, 0, 1, 0, 1), (0, 0, 0, 0, 0)}, states


def test_design_against_solve_ivp_at_the_worst_corner(designed):
    """At the worst pull-in corner (low supply, hot coil): the hold's mean, RMS and duty on
    the seated coil within 1e-6 and the release from the top of the band within 1e-5 of
    solve_ivp (module docstring); the armature seats, holds and releases."""
    control, _, d = designed
    drive, th = d.drive, d.hold.thresholds
    grid, k = corner_grid(drive), d.worst_corner_index
    c = d.corners[k]
    rf, lf = float(grid.r_factor[k]), float(grid.l_factor[k])
    g = _point(drive, c.supply_v, c.coil_temp_c, rf, lf)
    fast = _fast(drive, c.supply_v, c.coil_temp_c, th, rf, lf)
    ref = reference(g, th.lower_a if control == "hysteretic" else 0.0, th.upper_a, d.pull_in.peak_time_s, 4e-3,
                    0.0 if control == "hysteretic" else th.off_time_s, release=fast[:2], fast=fast)
    row = d.to_dict()["corners"][k]
    assert row["armature_status"] == "seated" and row["release_status"] == "opens"
    for name, want in (("hold_mean_current_a", ref["mean"]), ("hold_rms_current_a", ref["rms"]),
                       ("hold_duty", ref["duty"])):
        print(f"{control}: {name} {row[name]:.8g} vs {want:.8g} ({row[name] / want - 1:+.1e})")
        assert row[name] == pytest.approx(want, rel=1e-6), name
    print(f"{control}: release {row['release_time_s']:.8g} vs {ref['open'] - ref['off']:.8g} s")
    assert row["release_time_s"] == pytest.approx(ref["open"] - ref["off"], rel=1e-5)
    names = {ch["name"]: ch["ok"] for ch in d.to_dict()["checks"]}
    assert all(names[n] for n in ("armature_seats", "armature_hold", "armature_releases")), names


def test_virtual_device_runs_it_and_check_passes(hysteretic, tmp_path):
    """The virtual device (the design's model) at both ends of the envelope (plumbing)."""
    device_check(hysteretic[2], tmp_path, corners=((20.0, 60.0), (28.0, -10.0)), can_fail=False)


@pytest.mark.compiler
def test_compiled_driver_in_the_loop_passes_check(hysteretic, tmp_path):
    """gcc: the compiled reference driver in the loop (its one-shot opening all four for
    the fast part, then Q2 + Q4) with the armature's pull-in at 28 V cold and 20 V hot:
    `check` passes, the seat included (plumbing: the device shares the design's model)."""
    for _, rep in bridge_firmware_checks(hysteretic[2], tmp_path, ((28.0, -10.0), (20.0, 60.0))):
        assert {i.name: i.status for i in rep.items}["seated_time"] == "pass"


def test_on_the_drooping_bus_the_release_starts_above_the_source(tmp_path):
    """On a 1.5 ohm cable (100 uF) with a supply that sinks: the fast parts lift the release's
    starting buses above the source (the current-mode rise bound, checked against solve_ivp
    in tests/test_bridge_current_mixed_droop.py), so the highest bus is above the slow-decay
    hold's; `simulate` (a subprocess) rides the bus at the release, the hold's fast parts
    all four open (plumbing)."""
    path = _bridge_file(tmp_path, droop=True)
    text = path.read_text().replace("sink = false", "sink = true")
    (tmp_path / "slow.toml").write_text(text)
    slow = design(load_drive(tmp_path / "slow.toml"))
    path.write_text(text.replace('mode = "current"\n', 'mode = "current"\n' + CONTROLS["off_time"]))
    d = design(load_drive(path))
    high, high0 = d.supply.highest_bus_v, slow.supply.highest_bus_v
    print(f"highest bus {high:.5g} V (mixed) against {high0:.5g} V (slow)")
    assert high > high0 + 0.01
    w, t, on = _simulated(path, tmp_path, "28", "-10", "4 ms")
    off = t[np.flatnonzero(np.diff(on) != 0)][-1]
    hold = (t > d.pull_in.peak_time_s) & (t < off)
    assert np.sum(hold & (w["high_a_on"] + w["low_a_on"] + w["high_b_on"] + w["low_b_on"] == 0)) > 100
    assert float(w["bus_v"][t > off].max()) > 28.0 + 0.1


def test_an_eddy_term_against_solve_ivp(tmp_path):
    """With a 2 kohm eddy term, hysteretic: at the worst pull-in corner the hold's terminal
    mean, duty and magnetising RMS on the seated coil within 1e-6, and the release within
    1e-5, of solve_ivp of Kirchhoff's laws with the armature (tests/test_armature_current_mode_eddy.py's
    ``reference``, the fast part a third path blocking at the terminal current's zero);
    `simulate`'s switching edges at 24 V, 20 degC within 1e-8 s of the same, the fast parts
    all four open."""
    from test_armature_current_mode_eddy import reference as eddy_reference

    path = _bridge_file(tmp_path)
    path.write_text(path.read_text().replace('mode = "current"\n', 'mode = "current"\n' + CONTROLS["hysteretic"])
                    .replace('resistance = "24 ohm"', 'resistance = "24 ohm"\neddy_resistance = "2000 ohm"', 1))
    d = design(load_drive(path))
    drive, th = d.drive, d.hold.thresholds
    assert drive.coil.eddy_resistance == 2000.0 and th.delay_s == 0.0, "precondition"
    grid, k = corner_grid(drive), d.worst_corner_index
    c = d.corners[k]
    rf, lf = float(grid.r_factor[k]), float(grid.l_factor[k])
    fast = _fast(drive, c.supply_v, c.coil_temp_c, th, rf, lf)
    ref = eddy_reference(_point(drive, c.supply_v, c.coil_temp_c, rf, lf), 2000.0, th.lower_a, th.upper_a,
                         d.pull_in.peak_time_s, 10e-3, release=fast[:2], fast=fast)
    row = d.to_dict()["corners"][k]
    assert row["armature_status"] == "seated" and row["release_status"] == "opens"
    for name, want in (("hold_mean_current_a", ref["mean"]), ("hold_duty", ref["duty"])):
        print(f"eddy: {name} {row[name]:.8g} vs {want:.8g} ({row[name] / want - 1:+.1e})")
        assert row[name] == pytest.approx(want, rel=1e-6), name
    print(f"eddy: release {row['release_time_s']:.8g} vs {ref['open'] - ref['off']:.8g} s")
    assert row["release_time_s"] == pytest.approx(ref["open"] - ref["off"], rel=1e-5)
    assert row["hold_force_margin"] == pytest.approx(ref["mag_rms"] / ref["stay"], rel=1e-6)
    w, t, on = _simulated(path, tmp_path, "24", "20", "10 ms")
    fast = _fast(drive, 24.0, 20.0, th)
    ref = eddy_reference(_point(drive, 24.0, 20.0), 2000.0, th.lower_a, th.upper_a, d.pull_in.peak_time_s, 10e-3,
                         release=fast[:2], fast=fast)
    edges = t[np.flatnonzero(np.diff(on) != 0)]
    print(f"eddy: {edges.size} edges, largest difference {np.max(np.abs(edges - ref['edges'])):.2e} s")
    assert edges.size == ref["edges"].size > 50 and np.max(np.abs(edges - ref["edges"])) < 1e-8
    hold = (t > d.pull_in.peak_time_s) & (t < edges[-1])
    assert np.sum(hold & (w["high_a_on"] + w["low_a_on"] + w["high_b_on"] + w["low_b_on"] == 0)) > 50
