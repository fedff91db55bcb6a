"""``coildrive firmware-driver`` as a user runs it (real subprocesses), the FAULT event
kind on the bench link, and ``check``'s fault row."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from coildrive.bench.capture_file import Capture, CaptureEvent
from coildrive.bench.messages import EventKind, FaultCode
from coildrive.codegen.stream import render_stream_encoder
from conftest import BOARDS, EXAMPLES, run_cli

RELAY = EXAMPLES / "relay-12v.toml"


def _board(tmp_path, clock: str, extra: str = "") -> str:
    text = (BOARDS / "tiny-8bit-diode.toml").read_text().replace('clock = "16 MHz"', f'clock = "{clock}"')
    path = tmp_path / f"tiny-{clock.replace(' ', '')}.toml"
    path.write_text(text.replace('name = "tiny-8bit-diode"', 'name = "tiny-8bit-diode"\n' + extra))
    return str(path)


def test_writes_header_and_driver_and_prints_the_budget(tmp_path):
    out = tmp_path / "fw"
    r = run_cli("firmware-driver", str(RELAY), "--out", str(out), "--prefix", "relay1")
    assert r.returncode == 0, r.stderr
    assert sorted(p.name for p in out.iterdir()) == ["relay1_drive.h", "relay1_driver.c", "relay1_driver.h"]
    assert "#define RELAY1_PEAK_TICKS" in (out / "relay1_drive.h").read_text()
    assert "void relay1_tick(void);" in (out / "relay1_driver.h").read_text()
    lines = r.stderr.splitlines()
    assert lines[3].startswith("memory: 8-bit AVR RAM ")
    # relay-12v: 20 kHz PWM at 16 MHz = 800 cycles a period; 351 worst cycles = 43.9 %
    assert "pwm_isr + adc_isr 351 of 800 cycles a PWM period (43.9 %)" in lines[4]
    assert "warning" not in r.stderr


def _relay_without_force_margin(tmp_path) -> str:
    """The relay with pull_in.current_margin = 1: on the slower boards below its coil runs
    hotter and 1.1 x the pull-in current is out of reach at 9.6 V (a failing design writes
    no driver); the timing budget is what these tests are about."""
    path = tmp_path / "relay-12v.toml"
    path.write_text(RELAY.read_text().replace("[pull_in]\n", "[pull_in]\ncurrent_margin = 1.0\n", 1))
    return str(path)


def test_warns_above_half_and_refuses_above_the_period(tmp_path):
    relay = _relay_without_force_margin(tmp_path)
    r = run_cli("firmware-driver", relay, "--out", str(tmp_path / "a"), "--board", _board(tmp_path, "8 MHz"))
    assert r.returncode == 0, r.stderr
    assert "warning: pwm_isr + adc_isr takes 87.8 % of the PWM period" in r.stderr
    slow = _board(tmp_path, "4 MHz")
    r = run_cli("firmware-driver", relay, "--out", str(tmp_path / "b"), "--board", slow)
    assert r.returncode == 2
    assert r.stderr.strip().splitlines() == [
        f"coildrive: {slow}: timer.clock: pwm_isr + adc_isr takes 175.5 % of the PWM period (351 of 200 "
        "cycles at 4 MHz): the driver cannot keep up; lower the PWM frequency or the tick rate, or use a faster part"]
    assert not (tmp_path / "b").exists(), "nothing written"


def test_arm_boards_take_the_cortex_figures(tmp_path):
    """The board's core picks the handler figures (CORTEX_CYCLES, measured under QEMU by
    tests/test_driver_qemu.py): the demo's board is a Cortex-M4 at 84 MHz, 25 kHz PWM =
    3,360 cycles a period, 305 + 8 = 313 cycles = 9.3 %; the same relay board as a
    Cortex-M0+ at 2 MHz (100 cycles a 20 kHz period, 324 + 13 = 337) is refused; a core of
    no known kind is one line."""
    r = run_cli("firmware-driver", str(EXAMPLES / "demo-valve.toml"), "--out", str(tmp_path / "a"))
    assert r.returncode == 0, r.stderr
    assert ("timing at 84 MHz: pwm_isr + adc_isr 313 of 3,360 cycles a PWM period (9.3 %); tick 509 of 8,400 "
            "cycles a tick (6.1 %) (worst-case cycles of a Cortex-M4 from the instructions QEMU executed, zero "
            "flash wait states)") in r.stderr.splitlines()
    relay = _relay_without_force_margin(tmp_path)
    m0 = tmp_path / "m0.toml"
    m0.write_text(Path(_board(tmp_path, "2 MHz")).read_text().replace('core = "avr"', 'core = "cortex-m0plus"'))
    r = run_cli("firmware-driver", relay, "--out", str(tmp_path / "b"), "--board", str(m0))
    assert r.returncode == 2
    assert "pwm_isr + adc_isr takes 337.0 % of the PWM period (337 of 100 cycles at 2 MHz)" in r.stderr
    bad = tmp_path / "bad.toml"
    bad.write_text((BOARDS / "tiny-8bit-diode.toml").read_text().replace('core = "avr"', 'core = "z80"'))
    r = run_cli("firmware-driver", relay, "--out", str(tmp_path / "c"), "--board", str(bad))
    assert r.returncode == 2
    assert r.stderr.strip() == (f"coildrive: {bad}: core: 'z80' is not one of 'avr', 'cortex-m0plus', "
                                "'cortex-m3', 'cortex-m4'")


def test_refuses_past_the_boards_ram(tmp_path):
    board = _board(tmp_path, "16 MHz", 'ram = "64 B"\n')
    r = run_cli("firmware-driver", str(RELAY), "--out", str(tmp_path / "c"), "--board", board)
    assert r.returncode == 2
    assert "ram: the driver needs 90 B of the board's 64 B ram (140.6 %, 8-bit AVR)" in r.stderr


def test_bad_prefix_is_one_line(tmp_path):
    r = run_cli("firmware-driver", str(RELAY), "--out", str(tmp_path / "d"), "--prefix", "9x")
    assert r.returncode == 2
    assert r.stderr.strip() == "coildrive: --prefix: '9x' is not a C identifier, expected e.g. VALVE1"


def test_fault_event_kind_reaches_the_stream_encoder():
    assert int(EventKind.FAULT) == 10, "the next free kind after PAUSE = 9 (docs/protocol.md)"
    header = render_stream_encoder("coil")["coil_stream.h"]
    assert "#define COIL_EVENT_FAULT" in header and " 10u" in header.split("#define COIL_EVENT_FAULT")[1][:40]


def _capture(events) -> Capture:
    return Capture(index=np.arange(10, dtype=np.int64), code=np.zeros(10, np.uint16), events=tuple(events))


def test_check_lists_faults_and_fails_on_an_unexpected_one():
    from coildrive.bench.check import _fault_row
    ev = [CaptureEvent(1500, int(EventKind.FAULT), int(FaultCode.OPEN_LOAD))]
    row = _fault_row(_capture(ev), 15000.0, ())
    assert row.status == "FAIL" and row.detail == "1 reported by the firmware: OPEN_LOAD at 100 ms; 1 unexpected"
    row = _fault_row(_capture(ev), 15000.0, (FaultCode.OPEN_LOAD,))
    assert row.status == "info"
    assert _fault_row(_capture([]), 15000.0, ()) is None
