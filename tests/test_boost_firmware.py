"""A boosted peak in the reference C driver: the boost switch on in the peak until the ADC
handler reads BOOST_THRESHOLD_CODE, the BOOST_TIMEOUT fault, the recharge interval; and
the driver in the loop against the boost capacitor's closed form.

Outside sources: gcc (``-Wall -Wextra -Werror -pedantic -Wconversion``) builds the driver
with the scripted program of the simavr and QEMU runs (tests/data/driver_target.c; those
runs time this shape's handlers, tests/test_driver_simavr.py and tests/test_driver_qemu.py),
and the expected ticks and codes are the design header's constants. The emulator shares
the design's physics (coildrive.model.boost), so the firmware-in-the-loop runs prove
plumbing (the boost switch the driver sets reaches the coil model, the threshold ends the
peak, a slow coil gives the fault), not numbers -- the numbers are ngspice's, in
tests/test_boost.py.
"""

from __future__ import annotations

import json

import pytest

from conftest import EXAMPLES, require_tool, run_cli
from coildrive.bench.messages import EventKind, FaultCode

BOOST = EXAMPLES / "fuel-valve-boost-12v.toml"
FAULT_STATE = 4


@pytest.mark.compiler
def test_driver_switches_the_boost_ends_at_the_threshold_times_out_and_waits_to_recharge(tmp_path):
    # One build of a variant whose boost recharges slower (1 W: 5.6 ms, longer than the
    # release lockout), so that the recharge wait shows. The harness holds the current at
    # one code ("level"): one code below the threshold keeps the boost on, the threshold
    # code ends the peak in that conversion; below it for BOOST_TIMEOUT_TICKS is the fault.
    from driver_harness import example_design, run_host

    d = example_design("fuel-valve-boost-12v", ('boost_power = "5 W"', 'boost_power = "1 W"'))
    b = d.boost
    from coildrive.codegen.header import boost_min_interval_ticks
    interval, timeout, th = boost_min_interval_ticks(d), b.timeout_ticks, b.threshold_code
    lock = d.release.lockout_ticks
    assert interval > lock + 3, (interval, lock)
    script = [("level", th - 1), ("run", 1), ("on", 0), ("run", 3), ("level", th), ("run", 2),
              ("off", 0), ("run", lock + 1), ("on", 0), ("run", interval), ("off", 0), ("run", lock + 1),
              ("level", th - 1), ("on", 0), ("run", interval + timeout + 2)]
    run = run_host(tmp_path, d, script)
    # k/s/p: <tick> <conversion> <value>; e: <tick> <conversion> <kind> <value>
    lines = [ln.split() for ln in run.lines if ln[:2] in ("s ", "k ", "e ", "p ")]
    ons = [int(x[1]) for x in lines if x[0] == "e" and int(x[3]) == int(EventKind.ON)]
    assert len(ons) == 3, run.lines
    # ON, the boost, then the switch, in the first conversion after the tick's start (ON
    # from the ADC handler: the switch's edge)
    on_at = [x[1:3] for x in lines if x[0] == "e" and int(x[3]) == int(EventKind.ON)][0]
    first = [x for x in lines if x[0] in ("k", "s") and x[3] == "1"][:2]
    assert [x[0] for x in first] == ["k", "s"] and first[0][1:3] == first[1][1:3] == on_at == [str(ons[0]), "0"]
    # the threshold code: boost off in the conversion that reads it (two ticks of the peak
    # below it), the hold's compare and PEAK_END in that conversion
    at = [str(ons[0] + 2), "0"]
    k_off = [x for x in lines if x[0] == "k" and x[3] == "0" and x[1:3] == at]
    assert k_off, run.lines
    assert [x for x in lines if x[0] == "p" and x[1:3] == at and int(x[3]) < d.timer.period_ticks]
    assert [x[1:3] for x in lines if x[0] == "e" and int(x[3]) == int(EventKind.PEAK_END)][0] == at
    # recharge: each on() after the lockout waits until BOOST_MIN_INTERVAL_TICKS from the
    # last peak's start (the second starts above the threshold: no boost at all); then one
    # code short of the threshold is the fault at the time-out
    assert ons[1] - ons[0] == interval and ons[2] - ons[1] == interval, (ons, interval)
    assert not [x for x in lines if x[0] == "k" and ons[1] <= int(x[1]) < ons[2]]
    faults = [x for x in lines if x[0] == "e" and int(x[3]) == int(EventKind.FAULT)]
    assert [int(x[4]) for x in faults] == [int(FaultCode.BOOST_TIMEOUT)]
    # the time-out counts from the tick's start(), the tick before the ON conversion
    assert int(faults[0][1]) == ons[2] - 1 + timeout
    after = [x for x in lines if int(x[1]) == ons[2] + timeout and x[0] in ("k", "s")]
    assert sorted(x[0] + x[3] for x in after) == ["k0", "s0"], after      # both off at the next conversion
    assert run.states()[-1] == (FAULT_STATE, int(FaultCode.BOOST_TIMEOUT))


@pytest.fixture(scope="module")
def firmware(tmp_path_factory):
    """The example's driver as `firmware-driver` writes it and one build cache for every run."""
    require_tool("gcc")
    base = tmp_path_factory.mktemp("boost-fw")
    r = run_cli("firmware-driver", str(BOOST), "--out", str(base / "fw"))
    assert r.returncode == 0, r.stderr
    assert "coil_port_boost" in (base / "fw" / "coil_driver.h").read_text()
    return base / "fw", base / "cache"


def test_a_boost_drivers_folder_is_refused_for_a_drive_without_one(firmware):
    # the coil model switches the boost on the driver's word: a folder generated for
    # another kind of drive stops in one line naming the folder, before any build
    from coildrive.codegen.host_build import build_firmware
    from coildrive.errors import InputError
    from driver_harness import example_design

    fw, cache = firmware
    with pytest.raises(InputError, match="with supply.boost, this drive has none"):
        build_firmware(fw, example_design("relay-12v"), cache=cache)


@pytest.mark.compiler
def test_driver_and_header_guard_each_other(tmp_path, firmware):
    # gcc: the boost driver against a header without a boost, and a plain driver against
    # the boost's header, each stop at its #error
    import shutil
    import subprocess

    from coildrive.codegen.driver import render_driver
    from driver_harness import STRICT, example_design

    gcc = require_tool("gcc")
    fw, _ = firmware
    plain = render_driver(example_design("relay-12v"))
    for driver_from, header_from, message in ((fw, plain, "this driver runs a boosted peak"),
                                              (plain, fw, "coil_drive.h declares a boosted peak")):
        folder = tmp_path / message.split()[-1]
        folder.mkdir(exist_ok=True)
        for name in ("coil_driver.h", "coil_driver.c", "coil_drive.h"):
            source = header_from if name == "coil_drive.h" else driver_from
            if isinstance(source, dict):
                (folder / name).write_text(source[name])
            else:
                shutil.copy(source / name, folder / name)
        r = subprocess.run([gcc, *STRICT, "-c", str(folder / "coil_driver.c"), "-o", str(folder / "d.o")],
                           capture_output=True, text=True)
        assert r.returncode != 0 and message in r.stderr, r.stderr


@pytest.mark.compiler
def test_the_coils_envelope_runs_without_a_fault_and_a_slow_coil_times_out(firmware):
    # In the loop (in process): the hottest coil at its high R and L at the lowest supply
    # (the longest peak: it must end at the threshold before BOOST_TIMEOUT_TICKS) and the
    # coldest at its low R and L at the highest (the fastest rise: no over-current) run
    # without a fault. The emulated boost is at its nominal voltage and capacitance; the
    # boost's own tolerances are the design's worst corner. A coil of 3 x the inductance
    # does not reach the threshold by the time-out (design/boost.firmware_peak: 0.4 ms and
    # beyond): FAULT BOOST_TIMEOUT, BOOST_TIMEOUT_TICKS after the start (ON goes out at
    # the next conversion, within a tick of it).
    from coildrive.bench import FrameDecoder
    from coildrive.bench.device import DeviceOptions
    from coildrive.bench.firmware_device import FirmwareDevice
    from coildrive.bench.messages import Event
    from coildrive.codegen.host_build import build_firmware
    from driver_harness import example_design

    d = example_design("fuel-valve-boost-12v")
    fw, cache = firmware
    lib = build_firmware(fw, d, cache=cache)
    c = d.drive.coil
    temps = [x.coil_temp_c for x in d.corners]
    runs = [(d.drive.supply.min, max(temps), 1 + c.resistance_tolerance, 1 + c.inductance_tolerance),
            (d.drive.supply.max, min(temps), 1 - c.resistance_tolerance, 1 - c.inductance_tolerance),
            (d.drive.supply.nominal, None, 1.0, 3.0)]
    for supply, temp, rs, ls in runs:
        dev = FirmwareDevice(d, lib, DeviceOptions(
            supply=supply, coil_temp=temp, resistance_scale=rs, inductance_scale=ls, first_actuation=0.002,
            noise_codes=1, seed=3, hold_time=0.005))
        dec, events, t = FrameDecoder(), [], 0.0
        while t < 0.1 and EventKind.OFF not in [e.kind for e in events]:
            t += 0.005
            events += [m for m in dec.feed(dev.read(t)) if isinstance(m, Event)]
        kinds = [e.kind for e in events]
        assert EventKind.OFF in kinds, (supply, temp, rs, ls, kinds)
        if ls < 3.0:
            assert EventKind.PEAK_END in kinds and EventKind.FAULT not in kinds, (supply, temp, rs, ls, kinds)
            continue
        faults = [e for e in events if e.kind == EventKind.FAULT]
        assert [e.value for e in faults] == [int(FaultCode.BOOST_TIMEOUT)] and EventKind.PEAK_END not in kinds
        on = next(e.index for e in events if e.kind == EventKind.ON)
        took = (faults[0].index - on) / d.drive.board.adc.sample_rate * d.drive.board.tick.rate
        assert d.boost.timeout_ticks - 1 <= took <= d.boost.timeout_ticks, took


@pytest.mark.slow
def test_firmware_in_the_loop_passes_check(tmp_path, firmware, monkeypatch):
    # firmware-driver -> emulate --firmware -> capture -> check, each a real subprocess: the
    # nominal device passes check (the peak ends at the threshold, as check predicts from
    # the boost's closed form)
    from test_firmware_loop import capture

    fw, cache = firmware
    monkeypatch.setenv("XDG_CACHE_HOME", str(cache))
    out, cap = capture(tmp_path, fw, "boost", drive=BOOST)
    assert not [e for e in cap.events if e.kind == EventKind.FAULT]
    r = run_cli("check", str(out), str(BOOST), "--json")
    items = {i["name"]: i for i in json.loads(r.stdout)["items"]}
    assert r.returncode == 0, {k: (i["status"], i["detail"]) for k, i in items.items()}
    assert {k for k, i in items.items() if i["status"] == "pass"} >= {
        "pull_in_time", "peak_duration", "hold_mean", "release_time"}


CURRENT = ('frequency = "50 kHz"', 'frequency = "50 kHz"\nmode = "current"')
CLOSED = ('frequency = "50 kHz"', 'frequency = "50 kHz"\nregulation = "closed_loop"')


@pytest.mark.compiler
@pytest.mark.parametrize("control", ["hysteretic", "off_time"])
def test_current_mode_hold_takes_over_at_the_boosts_threshold(tmp_path, control):
    # gcc, the scripted program: the conversion that reads the threshold code turns the
    # boost off, reports PEAK_END and arms the comparator (or window watchdog) at the
    # hold's codes; the harness's comparator then calls the threshold handler in that
    # conversion, which switches off at once though the tick has not yet entered HOLD
    # (handlers that switched in HOLD only would leave the coil on from the main supply for
    # up to a tick)
    from driver_harness import conversions_per_tick, example_design, run_host

    d = example_design("fuel-valve-boost-12v", (CURRENT[0], CURRENT[1] + f'\ncontrol = "{control}"'))
    assert d.hold.regulation == "current" and d.boost is not None
    th, timeout, lock = d.boost.threshold_code, d.boost.timeout_ticks, d.release.lockout_ticks
    # then a peak that never reaches the threshold: BOOST_TIMEOUT
    script = [("level", th - 1), ("run", 1), ("on", 0), ("run", 2), ("level", th), ("run", 1), ("run", 3),
              ("off", 0), ("run", lock + 20), ("level", th - 1), ("on", 0), ("run", timeout + 2)]
    run = run_host(tmp_path, d, script)
    lines = [ln.split() for ln in run.lines if ln[:2] in ("s ", "k ", "e ", "w ", "o ")]
    end = [x[1:3] for x in lines if x[0] == "e" and int(x[3]) == int(EventKind.PEAK_END)]
    assert len(end) == 1, run.lines
    at = end[0]
    here = [x[0] + x[3] for x in lines if x[1:3] == at]
    armed = d.hold.thresholds.lower_code * 65536 + d.hold.thresholds.upper_code   # off-time: low 0
    assert "k0" in here and f"w{armed}" in here, here
    assert "s0" in here, here          # the threshold handler, still in PEAK
    assert here.index("k0") < here.index("s0")
    if control == "off_time":
        assert "o" + str(d.hold.thresholds.off_ticks) in here
    assert (2, 0) in run.states(), run.states()     # held without a fault
    # the time-out: the tick opens the switch itself as it reports the fault (as it does
    # in a current-mode hold), the boost goes off at the next conversion
    fault = [x for x in lines if x[0] == "e" and int(x[3]) == int(EventKind.FAULT)]
    assert [int(x[4]) for x in fault] == [int(FaultCode.BOOST_TIMEOUT)], run.lines
    tick, cpt = int(fault[0][1]), conversions_per_tick(d)
    assert ["s", str(tick), str(cpt), "0"] in lines, run.lines
    assert ["k", str(tick + 1), "0", "0"] in lines, run.lines
    assert run.states()[-1] == (FAULT_STATE, int(FaultCode.BOOST_TIMEOUT))


@pytest.mark.compiler
def test_closed_loop_starts_from_its_preload_at_the_boosts_threshold(tmp_path):
    # gcc, the scripted program: from the conversion that reads the threshold code every
    # compare is the PI step of the header's arithmetic (tests/test_driver_loop.reference,
    # integers: exact), the integrator preloaded once in that conversion
    from driver_harness import conversions_per_tick, example_design, run_host
    from test_driver_loop import reference

    d = example_design("fuel-valve-boost-12v", CLOSED)
    r = d.hold.closed_loop
    assert d.hold.regulation == "closed_loop" and d.boost is not None
    th, sp, cpt = d.boost.threshold_code, r.setpoint_code, conversions_per_tick(d)
    steps = [(th, 1), (sp - 40, 6), (sp + 30, 6), (sp, 4)]
    script = [("level", th - 1), ("run", 1), ("on", 0), ("run", 2)]
    for code, ticks in steps:
        script += [("level", code), ("run", ticks)]
    run = run_host(tmp_path, d, script)
    at = next((t, c) for t, c, k, _ in run.calls("e") if k == int(EventKind.PEAK_END))
    samples = [code for code, ticks in steps for _ in range(ticks * cpt)]
    expected = reference(r, samples)
    dedup = [x for i, x in enumerate(expected) if i == 0 or x != expected[i - 1]]
    got = [counts for t, c, counts in run.calls("p") if (t, c) >= at]
    assert got == dedup and len(set(got)) > 3, (got, dedup)
    assert run.states()[-1] == (2, 0)


@pytest.mark.compiler
@pytest.mark.parametrize("edit, hot", [(CURRENT, True), (CLOSED, False)], ids=["current", "closed_loop"])
def test_regulated_holds_after_the_boost_pass_check_in_the_loop(tmp_path, edit, hot):
    # firmware in the loop (gcc, in process) then `check` (a subprocess) at a corner where
    # the hardware is worst, one per hold (lean): the current-mode hold with the hottest
    # coil at the lowest supply (the longest boost, the least headroom for the band), the
    # closed loop with the coldest at the highest (the highest end current to come down from)
    from driver_harness import as_edited, checked_rows, example_design, loop_captures

    d = example_design("fuel-valve-boost-12v", edit)
    drive = tmp_path / "fuel-valve-boost-12v.toml"
    text = as_edited(BOOST.read_text(), edit).replace('board = "lab-m32-zener"',
                                                      f'board = "{BOOST.parent.parent / "boards" / "lab-m32-zener.toml"}"')
    drive.write_text(text)
    temps = [c.coil_temp_c for c in d.corners]
    runs = [(d.drive.supply.min, max(temps), None) if hot else (d.drive.supply.max, min(temps), None)]
    for (path, cap), (_, temp, _) in zip(loop_captures(tmp_path, d, runs, hold_time=0.01), runs):
        kinds = [int(e.kind) for e in cap.events]
        assert int(EventKind.FAULT) not in kinds and int(EventKind.PEAK_END) in kinds, kinds
        rows = checked_rows(path, drive, temp)
        assert {k for k, i in rows.items() if i["status"] == "pass"} >= {
            "pull_in_time", "peak_duration", "hold_mean", "release_time"}
