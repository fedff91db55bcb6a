"""The latching coil's reference driver with pulses from the boost: each pulse ends at the
tick whose current-sense reading reaches its threshold code, or at its time-out with a
FAULT; and the driver in the loop (emulate --firmware -> check).

Outside sources: gcc compiles the generated driver (C99, every warning an error) with
tests/data/latch_target.c and runs a script of readings; the ticks it ends each pulse at,
the switches (the boost switch with the winding's) and the events must be the header's
constants (read from its text). avr-gcc and simavr (cycle-level ATmega328P), and
arm-none-eabi-gcc and QEMU (Cortex-M0+, M3, M4, tests/cortex_trace.py) run the same
program and must print the same lines; the tick's worst cycles bound firmware-driver's
budget (coildrive.codegen.latch_driver).
"""

from __future__ import annotations

import pytest

from conftest import EXAMPLES, require_tool, run_cli
from driver_harness import run_avr, run_host, write_latch_sources
from test_latch_driver import header_value, lines
from coildrive.bench.messages import EventKind, FaultCode
from coildrive.codegen.latch_driver import LATCH_BOOSTED_TICK_CYCLES, LATCH_BOOSTED_TICK_INSTRUCTIONS
from coildrive.config import load_drive
from coildrive.design.latch import design_latch

pytestmark = pytest.mark.compiler

VALVE = EXAMPLES / "latching" / "shutoff-valve-boost-reset-winding-12v.toml"
D = design_latch(load_drive(VALVE))
ON, OFF, FAULT = int(EventKind.ON), int(EventKind.OFF), int(EventKind.FAULT)
measured: dict[str, int] = {}


def script(d) -> list[tuple[str, int]]:
    """A set pulse whose reading reaches its code on its third tick; a reset pulse that
    never reads its code (its time-out, a FAULT); a set pulse read one code short, then at
    its code."""
    i = d.latch.interval_ticks
    s, r = (p.boost.threshold_code for p in d.latch.pulses)
    return [("set", 0), ("run", i + 1), ("current", s), ("run", 1), ("current", 0),
            ("reset", 0), ("run", i + d.latch.pulses[1].ticks + 1),
            ("set", 0), ("run", i - d.latch.pulses[1].ticks), ("current", s - 1), ("run", 2),
            ("current", s), ("run", 1), ("current", 0), ("run", 2)]


def _tick_at(sc, k: int) -> int:
    """The number of the first tick run after script step ``k`` (ticks from 0)."""
    return sum(a for op, a in sc[:k] if op == "run")


def test_pulses_end_at_their_thresholds_or_time_out(tmp_path):
    run = run_host(tmp_path, D, script(D), writer=write_latch_sources)
    i, r = header_value(tmp_path, "MIN_INTERVAL_TICKS"), header_value(tmp_path, "RESET_PULSE_TICKS")
    codes = (header_value(tmp_path, "SET_THRESHOLD_CODE"), header_value(tmp_path, "RESET_THRESHOLD_CODE"))
    assert codes == tuple(p.boost.threshold_code for p in D.latch.pulses)
    boost = header_value(tmp_path, "DRIVER_BOOST_SWITCH")
    masks = {0: header_value(tmp_path, "DRIVER_SET_SWITCHES") | boost,
             1: header_value(tmp_path, "DRIVER_RESET_SWITCHES") | boost}
    ev = lines(run, "e")
    ons = [(t, v) for t, k, v in ev if k == ON]
    offs = [t for t, k, _ in ev if k == OFF]
    faults = [(t, v) for t, k, v in ev if k == FAULT]
    assert ons[0] == (i - 1, 0) and [v for _, v in ons] == [0, 1, 0]
    # the set pulse: its reading reaches the code at the tick after its second: on 2 ticks
    assert offs[0] - ons[0][0] == 2, "the tick that reads the code ends the pulse"
    # the reset pulse never reads its code: its time-out, RESET_PULSE_TICKS, then a FAULT
    assert offs[1] - ons[1][0] == r and faults == [(offs[1], int(FaultCode.BOOST_TIMEOUT))]
    # one code short does not end it (two ticks of it while on); the code does, at the next tick
    sc = script(D)
    k_code = len(sc) - 1 - [op for op, _ in sc][::-1].index("current") - 2   # the last ("current", code)
    assert sc[k_code] == ("current", codes[0]) and sc[k_code - 2] == ("current", codes[0] - 1)
    assert ons[2][0] < _tick_at(sc, k_code - 2) and offs[2] == _tick_at(sc, k_code)
    assert ons[2][0] - ons[1][0] == i
    assert offs[0] == _tick_at(sc, 2), "the first set pulse: at the tick after the code's reading"
    sw = lines(run, "w")
    want = [0]
    for (_, v) in ons:
        want += [masks[v], 0]
    assert [m for _, m in sw] == want, sw
    assert lines(run, "x")[-1] == (0,)


def test_simulated_avr_and_cortex_run_what_the_host_build_runs(tmp_path):
    from cortex_trace import run as cortex
    (tmp_path / "host").mkdir()
    host = run_host(tmp_path / "host", D, script(D), writer=write_latch_sources)
    want = [x for x in host.lines if not x.startswith("c ")]
    (tmp_path / "avr").mkdir()
    avr = run_avr(tmp_path / "avr", D, script(D), writer=write_latch_sources)
    assert [x for x in avr.lines if not x.startswith("c ")] == want
    measured["avr"] = avr.cycles()["tick"]
    for core in ("cortex-m0plus", "cortex-m3", "cortex-m4"):
        (tmp_path / core).mkdir()
        arm = cortex(tmp_path / core, D, script(D), core, writer=write_latch_sources)
        assert [x for x in arm.lines if not x.startswith("c ")] == want, core
        measured[core] = arm.cycles["tick"]
        measured[core + " instructions"] = arm.instructions["tick"]
    print("MEASURED", measured)
    # the budget's bounds: never exceeded, and tight (within 10 %)
    for core, bound in LATCH_BOOSTED_TICK_CYCLES.items():
        assert bound * 0.9 <= measured[core] <= bound, (core, measured[core], bound)
    for core, n in LATCH_BOOSTED_TICK_INSTRUCTIONS.items():
        assert measured[core + " instructions"] == n, core


@pytest.fixture(autouse=True)
def build_cache(tmp_path_factory, monkeypatch):
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path_factory.getbasetemp() / "cache"))


def test_driver_in_the_loop_passes_check_and_faults_fail(tmp_path):
    """firmware-driver -> the compiled driver in the model's device (gcc; the model is the
    design's own, so this proves the plumbing) -> check: the example at 9 V with a hot coil
    passes; a coil with 40 % more resistance fails; one with three times the inductance
    never reads its codes in time: every pulse times out with a FAULT, which the capture
    holds at the pulse's OFF, and check fails with a ``faults`` row naming BOOST_TIMEOUT."""
    from test_emulator_device import capture_of, run as run_device
    from coildrive.bench.device import DeviceOptions
    from coildrive.bench.latch_check import check_latch_capture
    from coildrive.bench.latch_device import LatchDevice
    from coildrive.bench.latch_firmware_device import LatchFirmwareDevice
    from coildrive.bench.synth import first_sample_at_or_after
    from coildrive.codegen.host_build import build_latch_firmware
    from coildrive.codegen.latch_driver import pulse_switches

    require_tool("gcc")
    r = run_cli("firmware-driver", str(VALVE), "--out", str(tmp_path / "fw"))
    assert r.returncode == 0, r.stderr
    assert f"tick {LATCH_BOOSTED_TICK_CYCLES['cortex-m4']} of 8,400 cycles a tick" in r.stderr, r.stderr
    lib = build_latch_firmware(tmp_path / "fw", D)
    assert pulse_switches(D) == {"set": 0x5, "reset": 0x6}
    for name, extra, ok in (("good", {}, True), ("hot", dict(resistance_scale=1.4), False),
                            ("slow", dict(inductance_scale=3.0), False)):
        dev = LatchFirmwareDevice(D, lib, pulse_switches(D), DeviceOptions(noise_codes=0.5, seed=5, supply=9.0,
                                                                           coil_temp=100.0, **extra))
        msgs, _ = run_device(dev, 0.05 + dev.interval + 2.2 * dev.period, step=0.05)
        cap = capture_of(msgs, tmp_path / f"{name}.cdcap")
        rep = check_latch_capture(cap, D, coil_temp=100.0)
        assert rep.ok is ok, (name, [(i.name, i.status, i.detail) for i in rep.items])
        assert bool(dev.faults) == (name == "slow"), dev.faults
        # the driver's FAULTs are in the capture, each at its pulse's OFF (the time-out's tick)
        fs = dev.sample_rate
        offs = [e.index for e in cap.events if e.kind == OFF]
        got = [(e.index, e.value) for e in cap.events if e.kind == FAULT]
        assert got == [(first_sample_at_or_after(t, fs), v) for t, v in dev.faults], (got, dev.faults)
        assert all(i in offs for i, _ in got)
        row = next((i for i in rep.items if i.name == "faults"), None)
        if name == "slow":   # every complete pulse timed out: the row fails naming the code
            pulses = [p for p in rep.analysis.pulses if p.partial is None]
            assert len(got) >= len(pulses) >= 2 and {v for _, v in got} == {int(FaultCode.BOOST_TIMEOUT)}
            assert row is not None and row.status == "FAIL" and "BOOST_TIMEOUT at " in row.detail, row
        else:
            assert row is None and not got
        # the model's device (coildrive.bench.latch_device: the time-out rule in Python) streams
        # the same FAULTs, at the same sample after each pulse's ON, as the compiled driver
        model = LatchDevice(D, DeviceOptions(noise_codes=0.5, seed=5, supply=9.0, coil_temp=100.0, **extra))
        mine = capture_of(run_device(model, 0.05 + 2.2 * model.period, step=0.05)[0], tmp_path / f"m{name}.cdcap")
        assert _fault_offsets(mine) == _fault_offsets(cap), name
        if name == "good":   # each pulse as long as the model's firmware runs it there
            from coildrive.design.latch import firmware_pulse
            lengths = {k: firmware_pulse(D, k, 9.0, 100.0) for k in ("set", "reset")}
            ends = [p for p in rep.analysis.pulses if p.partial is None]
            for p in ends:
                assert p.length_s == pytest.approx(lengths[p.name], abs=1.5 / dev.sample_rate), (p, lengths)


def _fault_offsets(cap) -> set:
    """``{(pulse value, samples from its ON to each FAULT, FAULT value)}`` of a capture."""
    out = set()
    for e in (e for e in cap.events if e.kind == FAULT):
        on = max((o for o in cap.events if o.kind == ON and o.index <= e.index), key=lambda o: o.index)
        out.add((on.value, e.index - on.index, e.value))
    return out


def test_boosted_latch_driver_compiles_warning_free_in_every_dialect(tmp_path):
    """The example's driver for every target of tests/test_cross_compile.py (C99, C11,
    C++11 on the host; Cortex-M0+, M4; ATmega328P), every warning an error."""
    import subprocess

    from coildrive.codegen.latch_driver import render_latch_driver
    from test_cross_compile import STRICT, TARGETS

    for file, text in render_latch_driver(D, "shut").items():
        (tmp_path / file).write_text(text)
    for target, (compiler, flags, _) in TARGETS.items():
        r = subprocess.run([require_tool(compiler), *STRICT, *flags, "-I", str(tmp_path), "-c",
                            str(tmp_path / "shut_driver.c"), "-o", str(tmp_path / f"{target}.o")],
                           capture_output=True, text=True, timeout=120)
        assert r.returncode == 0 and r.stderr == "", f"{target}:\n{r.stderr}"
