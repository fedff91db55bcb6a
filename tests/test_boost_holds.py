"""The regulated holds after a boosted peak: a current-mode hold and a closed-loop hold
(``[supply] boost`` with ``hold.mode = "current"`` or ``hold.regulation = "closed_loop"``).

The peak runs from the boost capacitor until the current threshold; the hold runs from
the main supply; the release goes through the freewheel diode. References:

* ngspice (batch mode, ``ngspice -b``), the circuit of tests/test_boost.py -- the boost
  capacitor with its initial charge, the boost switch and the low-side switch as ngspice's
  voltage-controlled switches (``SW`` model: ngspice manual, "Switches"), the main supply
  and the freewheel diode as the constant-drop one-way device of the other references
  (:func:`ngspice_run.knee`; the main supply's with no drop, as the design takes
  ``supply.min`` at the coil's top). The current-mode hold's comparator is a switch with
  hysteresis driven by the coil current (on below the lower threshold, off above the upper:
  the ``VT``/``VH`` of the ``SW`` model), so ngspice finds every threshold crossing by
  itself; the closed-loop hold's PWM gate is the model's switch edges as a ``PWL`` source.
  Checked within 1 % (plus one time step): the time to the boost's threshold, the boost
  capacitor there, every threshold crossing of the hold, the currents at the hold's switch
  edges, the release to the drop-out current.
* The design end to end: the boost's figures, checks and header constants sit beside the
  regulated hold's; gcc (``-Wall -Wextra -Werror -pedantic``) compiles the header.
"""

from __future__ import annotations

import json
import subprocess

import numpy as np
import pytest

from conftest import require_tool, run_cli
from driver_harness import STRICT
from ngspice_run import OPTIONS, knee, run
from test_boost import _variant

SUPPLY, COIL_TEMP = 9.0, 90.0      # the slow corner's supply and a hot coil, nominal parts


CURRENT = ("[hold]", '[hold]\nmode = "current"\nband = "0.1 A"\nmin_frequency = "2 kHz"')
CLOSED = ("[hold]", '[hold]\nregulation = "closed_loop"')
CLAMP = ('type = "diode"', 'type = "clamp"\nclamp_voltage = "75 V"')
SPLIT = ('type = "diode"', 'type = "zener"\nzener_voltage = "24 V"\nsplit_decay = true\nbypass_resistance = "0.05 ohm"')


@pytest.fixture(scope="module")
def designs(tmp_path_factory):
    from coildrive.config import load_drive
    from coildrive.design import design

    tmp = tmp_path_factory.mktemp("boost-holds")
    return {name: design(load_drive(_variant(tmp, name, *change)))
            for name, change in (("current", CURRENT), ("closed", CLOSED), ("split", SPLIT))}


def _elements(drive) -> dict:
    """The circuit's element values from the drive's own parts (coil at COIL_TEMP, IEC
    60028 copper as in the rest of the suite)."""
    from coildrive.copper import copper_resistance

    c, b, s = drive.coil, drive.board, drive.supply
    return dict(r_coil=float(copper_resistance(c.resistance, c.reference_temp, COIL_TEMP)),
                l_coil=c.inductance, r_sense=b.sense.resistance, r_sw=drive.switch.on_resistance,
                v_d=drive.freewheel.diode_drop, v_b=s.boost, c_b=s.boost_capacitance, r_b=s.boost_resistance)


def _netlist(e: dict, t_peak: float, hold_switch: list[str], measures: list[str], step: float,
             tend: float, freewheel: list[str] | None = None, main: list[str] | None = None) -> str:
    """The boosted peak (boost switch and peak switch on until ``t_peak``), a hold switch
    (``hold_switch``: from ``drain`` to ``hold``), the release through the freewheel diode
    (or the ``freewheel`` elements from ``drain`` back to ``top``); the main supply a stiff
    ``SUPPLY`` V at ``main`` (or the ``main`` elements that make that node)."""
    return "\n".join([
        "* boosted peak, then a regulated hold from the main supply, then the release",
        f"CB boost 0 {e['c_b']!r} IC={e['v_b']!r}",
        "SB boost top gp 0 SWB", knee("BDB", "top", "boost", e["v_d"]),
        f"VGP gp 0 PULSE(1 0 {t_peak - 0.5e-9!r} 1e-9 1e-9 1 2)",
        *(main or [f"VMAIN main 0 DC {SUPPLY!r}"]), knee("BDM", "main", "top", 0.0),
        "VM top n1 DC 0", f"RSENSE n1 n2 {e['r_sense']!r}", f"RCOIL n2 n3 {e['r_coil']!r}",
        f"LCOIL n3 drain {e['l_coil']!r} IC=0",
        "SP drain 0 gp 0 SW1", knee("BD1", "0", "drain", e["v_d"]),
        *hold_switch,
        *(freewheel or [knee("BFW", "drain", "top", e["v_d"])]),
        f".model SWB SW(VT=0.5 VH=0 RON={e['r_b']!r} ROFF=1e9)",
        f".model SW1 SW(VT=0.5 VH=0 RON={e['r_sw']!r} ROFF=1e9)",
        OPTIONS, ".control", f"tran {step!r} {tend!r} 0 {step!r} uic", *measures,
        "quit 0", ".endc", ".end"]) + "\n"


def _edges(w, up: bool) -> np.ndarray:
    """Sample indices of the model's switch edges after the peak where it turns on (``up``)
    or off: a segment's last sample sits exactly on its edge."""
    on = np.asarray(w.switch_on)
    k = np.flatnonzero(np.diff(on) != 0)
    k = k[w.time[k] > w.events["hold"]]
    return k[on[k + 1] == (1 if up else 0)]


def _pwm_points(w, frequency: float, duty: float) -> list[str]:
    """The ``PWL`` points of a PWM gate at ``duty``: periods from the end of the peak, on
    first, the last cut at its turn-off (the model's ``off`` event), 1 ns ramps."""
    t_peak, t_off = float(w.events["hold"]), float(w.events["off"])
    period = 1.0 / frequency
    n = round((t_off - t_peak - duty * period) / period) + 1
    assert t_peak + (n - 1) * period + duty * period == pytest.approx(t_off, rel=1e-9)
    pts = ["0 0"]
    for m in range(n):
        t0 = t_peak + m * period
        pts += [f"{t0 - 0.5e-9!r} 0", f"{t0 + 0.5e-9!r} 1", f"{t0 + duty * period - 0.5e-9!r} 1",
                f"{t0 + duty * period + 0.5e-9!r} 0"]
    return pts


def _peak_measures(d, t_peak: float) -> list[str]:
    """ngspice's measures of the peak (the current and the boost capacitor at its end) and
    of the release (the last fall through the drop-out current)."""
    from coildrive.design.boost import nominal_trip

    return [f"meas tran t99 WHEN i(VM)={0.99 * nominal_trip(d.drive)!r} CROSS=1",
            f"meas tran ipk FIND i(VM) AT={t_peak - 2e-9!r}", f"meas tran vcth FIND v(boost) AT={t_peak!r}",
            f"meas tran tdrop WHEN i(VM)={d.drive.release.current!r} FALL=LAST"]


def _check_peak_and_release(res: dict, w, d, step: float) -> None:
    from coildrive.design.boost import nominal_trip
    from coildrive.model import boost as boost_model
    from coildrive.model.circuit import loop, split_decay
    from coildrive.model.rl import decay_time
    from coildrive.model.waveform import nominal_boost

    t_peak = float(w.events["hold"])
    # ngspice: the peak the firmware runs there (to the nominal chain's threshold) ends at
    # that threshold within 1 %; the rise to 99 % of it within 1 % plus one step
    assert res["ipk"] == pytest.approx(nominal_trip(d.drive), rel=0.01), (res["ipk"], nominal_trip(d.drive))
    lp = loop(d.drive, SUPPLY, COIL_TEMP)
    t99 = float(boost_model.threshold_time(0.99 * nominal_trip(d.drive),
                                           nominal_boost(d.drive, float(lp.r_on), float(lp.inductance))))
    assert abs(res["t99"] - t99) <= 0.01 * t99 + step, (res["t99"], t99)
    # ngspice: the boost capacitor at the threshold within 1 % of its droop
    v_end = float(np.interp(t_peak, w.time, w.boost_voltage))
    assert d.drive.supply.boost - res["vcth"] == pytest.approx(d.drive.supply.boost - v_end, rel=0.01)
    # ngspice: the release from the last turn-off to the drop-out current within 1 % + a step
    # (with split decay through the release's fast path)
    rel = loop(d.drive, SUPPLY, COIL_TEMP, path="release") if split_decay(d.drive) else lp
    i_off = float(np.interp(w.events["off"], w.time, w.current))
    t_drop = float(decay_time(d.drive.release.current, i_off, rel.r_off, rel.v_off, rel.inductance))
    assert abs(res["tdrop"] - (w.events["off"] + t_drop)) <= 0.01 * t_drop + 2 * step, (res["tdrop"], t_drop)


def test_current_mode_hold_after_the_boost_against_ngspice(tmp_path, designs):
    from coildrive.design import actuation

    d = designs["current"]
    th = d.hold.thresholds
    assert th.control == "hysteretic" and th.delay_s == 0.0
    lo, up = th.lower_a, th.upper_a
    w = actuation(d, SUPPLY, COIL_TEMP, 1.2e-3)
    t_peak, t_off = float(w.events["hold"]), float(w.events["off"])
    ons, offs = (w.time[_edges(w, up_)].tolist() for up_ in (True, False))
    assert len(ons) >= 2 and len(offs) >= 2
    e = _elements(d.drive)
    step = t_peak / 2000
    ctl = [f"BCTL ctl 0 V = -i(VM)",   # the comparator: on below lo, off above up
           f"SH drain x ctl 0 SWH", f"SEN x 0 ge 0 SWE",
           f"VGE ge 0 PULSE(0 1 {t_peak - 0.5e-9!r} 1e-9 1e-9 {t_off - t_peak + 0.2 * (ons[1] - offs[0])!r} 1)",
           f".model SWH SW(VT={-(lo + up) / 2!r} VH={(up - lo) / 2!r} RON={e['r_sw']!r} ROFF=1e9)",
           ".model SWE SW(VT=0.5 VH=0 RON=1e-6 ROFF=1e9)"]
    meas = _peak_measures(d, t_peak)
    # the switch edges: the drain falls as the switch turns on, rises as it turns off
    meas += [f"meas tran ton{k} WHEN v(drain)=5 FALL={k + 1}" for k in range(len(ons))]
    meas += [f"meas tran toff{k} WHEN v(drain)=5 RISE={k + 2}" for k in range(len(offs))]
    res = run(tmp_path, "boost-current", _netlist(e, t_peak, ctl, meas, step, float(w.time[-1])))
    _check_peak_and_release(res, w, d, step)
    # ngspice: every crossing of the lower threshold (switch on) and the upper (switch off)
    # in the hold from the main supply, within 1 % of its time from the peak plus two steps
    for k, t in enumerate(ons):
        assert abs(res[f"ton{k}"] - t) <= 0.01 * (t - t_peak) + 2 * step, (k, res[f"ton{k}"], t)
    for k, t in enumerate(offs):
        assert abs(res[f"toff{k}"] - t) <= 0.01 * (t - t_peak) + 2 * step, (k, res[f"toff{k}"], t)


@pytest.mark.parametrize("name", ["closed", "split"])
def test_pwm_hold_after_the_boost_against_ngspice(tmp_path, designs, name):
    """The closed loop's settled PWM, and a supply-table hold with split decay (the hold
    through the freewheel diode and the bypass switch, the release with the bypass open
    through the diode and the Zener), after the boosted peak."""
    from coildrive.design import actuation, firmware_setting
    from coildrive.model.circuit import loop

    d = designs[name]
    w = actuation(d, SUPPLY, COIL_TEMP, 0.6e-3)
    t_peak, t_off = float(w.events["hold"]), float(w.events["off"])
    duty = firmware_setting(d, SUPPLY, COIL_TEMP)[0]
    pts = _pwm_points(w, d.hold.frequency_hz, duty)
    e = _elements(d.drive)
    step = t_peak / 2000
    gate = ["SH drain 0 gh 0 SW1", f"VGH gh 0 PWL({' '.join(pts)})"]
    hold = np.flatnonzero((w.time > t_peak) & (w.time <= t_off))
    sample = hold[:: max(1, len(hold) // 16)]
    meas = _peak_measures(d, t_peak)
    meas += [f"meas tran i{j} FIND i(VM) AT={float(w.time[k])!r}" for j, k in enumerate(sample)]
    freewheel = None
    if name == "split":
        fw = d.drive.freewheel
        assert fw.split_decay and fw.bypass_lead == 0.0 and w.events["bypass_open"] == t_off
        freewheel = [knee("BFW", "drain", "z", e["v_d"]), knee("BZ", "z", "top", fw.zener_voltage),
                     "SBY z top gby 0 SWBY", f"VGBY gby 0 PULSE(1 0 {t_off - 0.5e-9!r} 1e-9 1e-9 1 2)",
                     f".model SWBY SW(VT=0.5 VH=0 RON={fw.bypass_resistance!r} ROFF=1e9)",
                     "BVP vp 0 V = v(drain) - v(top)"]   # the path's voltage, drain over the rail
        meas.append(f"meas tran vpath MAX v(vp) from={t_off + 5e-9!r} to={t_off + 20 * step!r}")
    res = run(tmp_path, f"boost-{name}", _netlist(e, t_peak, gate, meas, step, float(w.time[-1]), freewheel))
    # ngspice: the coil current through the hold (the PWM from the main supply, down from
    # the boost's end current) within 1 %
    for j, k in enumerate(sample):
        assert res[f"i{j}"] == pytest.approx(float(w.current[k]), rel=0.01), (j, res[f"i{j}"], w.current[k])
    _check_peak_and_release(res, w, d, step)
    if name == "split":
        # ngspice: the release path's voltage right after the final turn-off (diode + Zener,
        # the bypass open) within 1 %: the switch sees the rail plus this
        fast = loop(d.drive, SUPPLY, COIL_TEMP, path="release")
        i_off = float(np.interp(t_off, w.time, w.current))
        want = float(fast.switch_voltage(d.drive, i_off)) - SUPPLY
        assert res["vpath"] == pytest.approx(want, rel=0.01), (res["vpath"], want)


def test_regulated_holds_carry_the_boost_end_to_end(tmp_path, designs):
    """Each regulated hold's design reports the boost beside its own hold, with the boost's
    checks, its end current in the peak and turn-offs, and the header's boost constants."""
    for name, change in (("current", CURRENT), ("closed", CLOSED)):
        path = _variant(tmp_path, name, *change)
        out = run_cli("design", path, "--json", "--header", str(tmp_path / f"{name}.h"))
        assert out.returncode == 0, out.stderr
        doc = json.loads(out.stdout)
        assert doc["hold"]["regulation"] == ("current" if name == "current" else "closed_loop")
        b = doc["boost"]
        names = {c["name"]: c for c in doc["checks"]}
        assert all(names[n]["ok"] for n in ("boost_threshold", "boost_droop", "boost_switch_voltage"))
        assert doc["pull_in"]["peak_end_current_max_a"] == pytest.approx(b["end_current_max_a"])
        assert doc["pull_in"]["governed_by"].endswith("ends at the current threshold")
        ends = [o for o in doc["release"]["turn_offs"] if o["event"] == "end of peak"]
        assert ends and "from the boost" in ends[0]["switch_voltage_corner"]
        header = (tmp_path / f"{name}.h").read_text()
        assert "BOOST_THRESHOLD_CODE" in header and "BOOST_TIMEOUT_TICKS" in header
        # gcc: the header (boost and regulated-hold constants together) compiles cleanly
        (tmp_path / f"{name}.c").write_text(f'#include "{name}.h"\nint main(void) {{ return 0; }}\n')
        cc = subprocess.run([require_tool("gcc"), *STRICT, "-c", f"{name}.c", "-o", f"{name}.o"],
                            cwd=tmp_path, capture_output=True, text=True)
        assert cc.returncode == 0, cc.stderr


def test_reference_driver_runs_a_regulated_hold_after_the_boost(tmp_path):
    """firmware-driver writes the driver for both regulated holds after a boost (its runs:
    tests/test_boost_firmware.py): the boost switch beside the threshold handler or the PI
    step."""
    for name, change, part in (("current", CURRENT, "coil_threshold_isr"), ("closed", CLOSED, "coil_loop(")):
        out = run_cli("firmware-driver", _variant(tmp_path, name, *change), "--out", str(tmp_path / name))
        assert out.returncode == 0, out.stderr
        source = (tmp_path / name / "coil_driver.c").read_text()
        assert "coil_port_boost(1U)" in source and part in source


def test_split_decay_turns_the_boost_off_through_the_fast_path(designs):
    """Hand-worked: a peak cut short or a trip opens the bypass too, so the switch sees the
    boost at full charge plus the diode and the Zener (no freewheel resistor)."""
    d = designs["split"]
    s, fw = d.drive.supply, d.drive.freewheel
    want = s.boost * (1 + s.boost_tolerance) + fw.diode_drop + fw.zener_voltage
    assert d.boost.switch_voltage_v == pytest.approx(want, rel=1e-12)
    ends = {o["event"]: o for o in d.release.turn_offs}
    assert ends["end of peak"]["switch_voltage_v"] == pytest.approx(want, rel=1e-12)
    assert d.release.peak_switch_voltage_v == pytest.approx(want, rel=1e-12)
    assert d.split_decay is not None and {c.name: c for c in d.checks}["boost_switch_voltage"].ok


def test_clamp_turn_off_from_the_boost_against_ngspice(tmp_path):
    """A clamp across the low-side switch: a peak cut short while the boost feeds the coil
    (the boost switch opening with the low-side one) decays through the clamp from the main
    supply (its diode ``D_m`` takes over the coil's top). ngspice within 1 %: the switch
    voltage (the clamp's), the time to the drop-out current, the clamp's energy."""
    from coildrive.config import load_drive
    from coildrive.design.evaluate import release_figures
    from coildrive.model import boost as boost_model
    from coildrive.model.circuit import loop
    from coildrive.model.waveform import nominal_boost

    drive = load_drive(_variant(tmp_path, "clamp", *CLAMP))
    v_cl = drive.freewheel.clamp_voltage
    lp = loop(drive, SUPPLY, COIL_TEMP)
    b = nominal_boost(drive, float(lp.r_on), float(lp.inductance))
    t_off = 0.8 * float(boost_model.threshold_time(drive.pull_in.current, b))   # cut short
    i_off = float(boost_model.state(t_off, b)[0])
    t_drop, _, energy, _ = (float(x) for x in release_figures(drive, lp, lp, i_off))
    e = _elements(drive)
    step = t_off / 2000
    clamp = ["VCL drain cl DC 0", knee("BCL", "cl", "0", v_cl), "BPW pw 0 V = v(drain) * i(VCL)"]
    meas = [f"meas tran vsw MAX v(drain) from={t_off + 5e-9!r} to={t_off + 20 * step!r}",
            f"meas tran tdrop WHEN i(VM)={drive.release.current!r} FALL=LAST",
            f"meas tran eclamp INTEG v(pw) from={t_off!r} to={t_off + 2 * t_drop!r}"]
    res = run(tmp_path, "boost-clamp", _netlist(e, t_off, [], meas, step, t_off + 2 * t_drop, clamp))
    # ngspice: the switch held at the clamp voltage within 1 %
    assert res["vsw"] == pytest.approx(v_cl, rel=0.01), res["vsw"]
    # ngspice: the time from the turn-off to the drop-out current within 1 % plus two steps
    assert abs(res["tdrop"] - t_off - t_drop) <= 0.01 * t_drop + 2 * step, (res["tdrop"] - t_off, t_drop)
    # ngspice: the clamp's energy (the coil's and the main supply's) within 1 %
    assert res["eclamp"] == pytest.approx(energy, rel=0.01), (res["eclamp"], energy)


def test_clamp_below_the_boost_fails_its_check(tmp_path):
    """The clamp must stand above the boost at full charge (else a turn-off while the boost
    switch is still on would not decay): a 48 V clamp under a 50.4 V boost fails
    ``boost_clamp``; at 75 V it passes and the switch sees the clamp voltage."""
    from coildrive.config import load_drive
    from coildrive.design import design

    for volts, ok in ((75.0, True), (48.0, False)):
        path = _variant(tmp_path, f"clamp{volts:g}", CLAMP[0], CLAMP[1].replace("75 V", f"{volts:g} V"))
        d = design(load_drive(path))
        check = {c.name: c for c in d.checks}["boost_clamp"]
        assert check.ok is ok, check.detail
        assert d.boost.switch_voltage_v == pytest.approx(volts)
        assert all(o["switch_voltage_v"] == pytest.approx(volts) for o in d.release.turn_offs)
