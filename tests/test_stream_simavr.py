"""The stream encoder on a simulated 8-bit target: simavr runs an ATmega328P build.

Outside sources: avr-gcc compiles tests/data/stream_target.c with the generated encoder;
simavr (cycle-level ATmega328P model) runs it and prints its UART; gcc builds the same
program for the host. The bytes must be the same, and coildrive's host decoder
(coildrive.bench, itself checked against the CRC RevEng catalogue and the COBS paper in
test_protocol.py) must read them back as the samples and events the program pushed. The
handlers' cycle counts are read from Timer1 at clk/1 inside the program; simavr models
the timer from its cycle counter. docs/firmware.md shows the figures this run measures.
"""

from __future__ import annotations

import re
import subprocess
from pathlib import Path

import numpy as np
import pytest

from coildrive.bench import Event, EventKind, FrameDecoder, Info, Samples
from coildrive.codegen.stream import render_stream_encoder
from conftest import ROOT, require_tool

pytestmark = pytest.mark.compiler

PROGRAM = ROOT / "tests" / "data" / "stream_target.c"
STRICT = ["-std=c99", "-Wall", "-Wextra", "-Werror", "-pedantic", "-Wconversion", "-Wsign-conversion"]
OPTIONS = dict(samples_per_frame=64, blocks=2, event_slots=4)
SAMPLES, DROPPED = 600, 10                 # as in stream_target.c
#: A port's stream_config.h for AVR: SREG saved and restored (the encoder's sections
#: never nest, so one saved copy is enough), tables in flash when asked.
AVR_CONFIG = """#include <avr/io.h>
#include <avr/interrupt.h>
extern volatile uint8_t sim_saved_sreg;
#define SIM_STREAM_ENTER_CRITICAL() do { uint8_t sreg_ = SREG; cli(); sim_saved_sreg = sreg_; } while (0)
#define SIM_STREAM_EXIT_CRITICAL() (SREG = sim_saved_sreg)
"""
AVR_FLASH = """#include <avr/pgmspace.h>
#define SIM_STREAM_FLASH PROGMEM
#define SIM_STREAM_FLASH_READ16(address) pgm_read_word(address)
"""
_ANSI = re.compile(r"\x1b\[[0-9;]*m")


def code_at(i: int) -> int:
    """stream_target.c's code_at()."""
    if (i // 50) % 4 == 3:
        return 0
    return ((i * 40503) & 0xFFFFFFFF) >> 4 & 0x03FF


def uart_lines(stderr: str) -> list[str]:
    """What the program wrote to UART0, as lines. simavr prints UART output on stderr, in
    colour, a chunk at each newline (shown as a final '.') or every 256 characters."""
    text = []
    for chunk in stderr.splitlines():
        chunk = _ANSI.sub("", chunk)
        text.append(chunk[:-1] + "\n" if chunk.endswith(".") else chunk)
    return "".join(text).splitlines()


def run_both(tmp_path: Path, crc_table: bool) -> tuple[list[str], list[str], dict[str, int]]:
    gcc, avr_gcc, simavr = require_tool("gcc"), require_tool("avr-gcc"), require_tool("simavr")
    for name, text in render_stream_encoder("sim", crc_table=crc_table, **OPTIONS).items():
        (tmp_path / name).write_text(text)
    config = AVR_CONFIG + (AVR_FLASH if crc_table else "")
    (tmp_path / "stream_config.h").write_text(config)
    (tmp_path / "sreg.c").write_text("#include <stdint.h>\nvolatile uint8_t sim_saved_sreg;\n")
    sources = [str(PROGRAM), str(tmp_path / "sim_stream.c")]
    host = tmp_path / "host"
    build = subprocess.run([gcc, *STRICT, "-O2", "-DSIM_STREAM_SINGLE_CONTEXT", "-I", str(tmp_path), *sources,
                            "-o", str(host)], capture_output=True, text=True, timeout=120)
    assert build.returncode == 0 and build.stderr == "", build.stderr
    elf = tmp_path / "prog.elf"
    build = subprocess.run([avr_gcc, "-mmcu=atmega328p", "-Os", *STRICT, "-DSIM_STREAM_CONFIG_HEADER=\"stream_config.h\"",
                            "-I", str(tmp_path), *sources, str(tmp_path / "sreg.c"), "-o", str(elf)],
                           capture_output=True, text=True, timeout=120)
    assert build.returncode == 0 and build.stderr == "", build.stderr
    host_lines = subprocess.run([str(host)], capture_output=True, text=True, timeout=60, check=True).stdout.splitlines()
    sim = subprocess.run([simavr, "-m", "atmega328p", "-f", "16000000", str(elf)],
                         capture_output=True, text=True, timeout=120)
    assert sim.returncode == 0, sim.stderr[-2000:]
    target_lines = uart_lines(sim.stderr)
    cycles = {line.split()[1]: int(line.split()[2]) for line in target_lines if line.startswith("c ")}
    return host_lines, target_lines, cycles


@pytest.mark.parametrize("crc_table", [False, True], ids=["crc-bitwise", "crc-table-progmem"])
def test_simulated_avr_sends_what_the_host_build_sends(tmp_path, crc_table):
    host_lines, target_lines, cycles = run_both(tmp_path, crc_table)
    frames = [line for line in target_lines if not line.startswith("c ")]
    assert frames[-1] == "end", "the run finished and the sink never overflowed"
    assert frames == [line for line in host_lines if not line.startswith("c ")]

    wire = b"".join(bytes.fromhex(line[2:]) for line in frames if line.startswith("f "))
    decoder = FrameDecoder()
    messages = decoder.feed(wire)
    stats = decoder.stats
    assert (stats.crc_errors, stats.malformed_frames, stats.lost_frames, stats.sync_bytes) == (0, 0, 0, 0)
    assert messages[0] == Info(15000, 1, 10, 0.009765625, 0, "simavr run", False)
    capacity = OPTIONS["samples_per_frame"] * OPTIONS["blocks"]
    expected = list(range(SAMPLES + capacity))
    samples = [m for m in messages if isinstance(m, Samples)]
    indices = np.concatenate([np.arange(m.first_index, m.next_index) for m in samples])
    assert indices.tolist() == expected
    assert np.concatenate([m.codes for m in samples]).tolist() == [code_at(i) for i in expected]
    assert [m for m in messages if isinstance(m, Event)] == [
        Event(EventKind.ON, 20), Event(EventKind.PEAK_END, 170), Event(EventKind.OFF, 480),
        Event(EventKind.OVERRUN, SAMPLES + capacity, DROPPED)]

    # Cycle counts on the ATmega328P (Timer1 at clk/1); the host build prints zeros.
    assert set(cycles) == {"push", "push_dropped", "event", "poll_one_samples_frame",
                           "poll_one_event_frame", "flush_partial_frame"}
    assert all(0 < c < 65536 for c in cycles.values()), cycles
    # docs/firmware.md gives these figures (avr-gcc 5.4 -Os); a compiler change that moves
    # one by more than 10 % means the page needs the new run's numbers.
    doc = (ROOT / "docs" / "firmware.md").read_text(encoding="utf-8")
    column = 2 if crc_table else 1
    for name, measured in cycles.items():
        row = re.search(rf"^\| `{name}` [^|]*\|([^|]*)\|([^|]*)\|", doc, re.M)
        assert row, f"docs/firmware.md has no row for {name}"
        shown = int(row[column].strip().replace(",", ""))
        assert abs(shown - measured) <= 0.1 * measured, f"{name}: doc {shown}, measured {measured}"


def test_uart_line_parser():
    # simavr 1.6 output: green chunks, '.' for the newline, a split after 256 characters.
    stderr = "\x1b[32mf 0102.\n\x1b[0m\x1b[32m" + "A" * 256 + "\n\x1b[0m\x1b[32mBB.\n\x1b[0m"
    assert uart_lines(stderr) == ["f 0102", "A" * 256 + "BB"]
