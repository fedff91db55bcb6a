"""The generated C encoder: compiled by gcc, run, and read back by the Python decoder.

Outside sources: gcc (-std=c99 -Wall -Wextra -Werror -pedantic, plus conversion and
prototype warnings) judges the C; the CRC RevEng catalogue gives the CRC-16/CCITT-FALSE
check value 0x29B1; the Python decoder (itself checked against the catalogue and the
COBS paper in test_protocol.py) reads what the program sent. The C snippets of
docs/protocol.md are compiled and checked the same way.
"""

from __future__ import annotations

import re
import subprocess
from pathlib import Path

import numpy as np
import pytest

from coildrive.bench import (Command, Event, EventKind, FrameDecoder, FrameEncoder, Info, Opcode,
                             Reply, ReplyStatus, Samples, cobs_encode)
from coildrive.codegen.stream import render_stream_encoder
from coildrive.config import load_board
from conftest import BOARDS, ROOT, require_tool

pytestmark = pytest.mark.compiler

FLAGS = ["-std=c99", "-Wall", "-Wextra", "-Werror", "-pedantic", "-Wconversion",
         "-Wsign-conversion", "-Wshadow", "-Wstrict-prototypes", "-Wmissing-prototypes",
         "-Wcast-qual", "-O2"]

N1, N3 = 1000, 40          # samples before and after the overrun phase (N3 < every ring)
EXTRA_DROPPED = 37         # samples pushed into a full ring
EXTRA_EVENTS = 3           # events queued into a full queue

PROGRAM = r"""
#include <stdio.h>
#include "@p@_stream.h"

#ifdef CRITICAL_CHECK
int crit_depth, crit_max;
unsigned long flash_reads;
#endif

static uint8_t out[1u << 20];
static size_t out_len, writes, max_write;

static void sink(void *context, const uint8_t *bytes, size_t count)
{
    size_t i;
    (void)context;
    writes++;
    if (count > max_write) {
        max_write = count;
    }
    for (i = 0u; i < count && out_len < sizeof out; i++) {
        out[out_len++] = bytes[i];
    }
}

static uint16_t code_at(uint32_t i)
{
    if ((i / 100u) % 4u == 3u) {
        return 0u;                                   /* switch off: zeros */
    }
    if (i % 11u == 5u) {
        return 0x00FFu;
    }
    return (uint16_t)(((i * 2654435761u) >> 16) & 0x0FFFu);
}

static void print_cobs(const char *name, const uint8_t *in, size_t n)
{
    uint8_t enc[600];
    size_t k, m = @p@_stream_cobs_encode(in, n, enc);
    fprintf(stderr, "cobs %s ", name);
    for (k = 0u; k < m; k++) {
        fprintf(stderr, "%02X", enc[k]);
    }
    fprintf(stderr, "\n");
}

int main(void)
{
    static @p@_stream_t s;
    @p@_stream_info_t info;
    @p@_command_t command;
    static uint8_t vec[600];
    uint32_t i, capacity = @P@_STREAM_BLOCKS * @P@_STREAM_SAMPLES_PER_FRAME, start;
    int c;
    size_t k;

    info.rate_numerator = 84000000u;
    info.rate_denominator = 420u;
    info.adc_bits = 12u;
    info.zero_code = 2048u;
    info.amps_per_code = 0.25f;
    info.has_position_switch = 1u;
    info.firmware_id = "test fw \xc3\xa9";

    @p@_stream_init(&s, sink, NULL);
    @p@_stream_send_info(&s, &info);
    for (i = 0u; i < N1; i++) {
        if (i == 100u) { (void)@p@_stream_event(&s, @P@_EVENT_ON, 0); }
        if (i == 300u) { (void)@p@_stream_event(&s, @P@_EVENT_PEAK_END, 0); }
        if (i == 400u) { (void)@p@_stream_event(&s, @P@_EVENT_SWITCH, 1); }
        if (i == 700u) { (void)@p@_stream_event_at(&s, @P@_EVENT_OFF, 650u, 0); }
        (void)@p@_stream_push(&s, code_at(i));
        if (i % 10u == 9u) { (void)@p@_stream_poll(&s); }
    }
    (void)@p@_stream_flush(&s);
    start = @p@_stream_sample_index(&s);
    for (i = start; i < start + capacity + EXTRA_DROPPED; i++) {
        (void)@p@_stream_push(&s, code_at(i));       /* no poll: the ring fills, then drops */
    }
    for (i = 0u; i < @P@_STREAM_EVENT_SLOTS + EXTRA_EVENTS; i++) {
        (void)@p@_stream_event(&s, @P@_EVENT_SUPPLY, (int32_t)i);
    }
    (void)@p@_stream_poll(&s);
    start = @p@_stream_sample_index(&s);
    {
        uint16_t block[N3];
        for (i = 0u; i < N3; i++) { block[i] = code_at(start + i); }
        (void)@p@_stream_push_block(&s, block, N3);
    }
    (void)@p@_stream_event(&s, @P@_EVENT_TEMPERATURE, -12500);
    (void)@p@_stream_flush(&s);

    while ((c = getchar()) != EOF) {
        if (@p@_stream_receive(&s, (uint8_t)c, &command)) {
            uint8_t status = (uint8_t)(command.opcode <= @P@_CMD_QUERY_INFO ? @P@_REPLY_OK : @P@_REPLY_UNKNOWN_OPCODE);
            (void)@p@_stream_send_reply(&s, &command, status, command.argument);
        }
    }

    fprintf(stderr, "crc %04X\n", (unsigned)@p@_stream_crc16((const uint8_t *)"123456789", 9u));
    print_cobs("empty", vec, 0u);
    print_cobs("zeros5", vec, 5u);
    for (k = 0u; k < 255u; k++) { vec[k] = (uint8_t)(k + 1u); }
    print_cobs("run253", vec, 253u);
    print_cobs("run254", vec, 254u);
    print_cobs("run255", vec, 255u);
    vec[254] = 0u;
    print_cobs("run254zero", vec, 255u);
    fprintf(stderr, "rx_errors %lu\nmax_write %lu\nmax_wire %lu\n", (unsigned long)s.rx_errors,
            (unsigned long)max_write, (unsigned long)@P@_STREAM_MAX_WIRE);
#ifdef CRITICAL_CHECK
    fprintf(stderr, "crit_max %d\ncrit_depth %d\nflash_reads %lu\n", crit_max, crit_depth, flash_reads);
#endif
    fwrite(out, 1u, out_len, stdout);
    return 0;
}
"""

CRITICAL_CONFIG = """
extern int crit_depth, crit_max;
extern unsigned long flash_reads;
#define @P@_STREAM_ENTER_CRITICAL() (crit_max = ++crit_depth > crit_max ? crit_depth : crit_max)
#define @P@_STREAM_EXIT_CRITICAL() ((void)crit_depth--)
#define @P@_STREAM_FLASH
#define @P@_STREAM_FLASH_READ16(address) (flash_reads++, *(address))
"""

VARIANTS = {
    "coil": dict(prefix="coil", board=load_board(BOARDS / "lab-m32-zener.toml")),
    "valve1": dict(prefix="Valve1", samples_per_frame=16, blocks=4, event_slots=4, crc_table=True),
    "big": dict(prefix="big", samples_per_frame=510, blocks=2, event_slots=2),
    # Frame sizes 1 and 2: gcc -O2 once saw an out-of-bounds store for 1 (array-bounds).
    "one": dict(prefix="one", samples_per_frame=1, blocks=64),
    "two": dict(prefix="two", samples_per_frame=2, blocks=32, crc_table=True),
}


def code_at(i: int) -> int:
    """The test program's sample code at index i (same arithmetic, modulo 2**32)."""
    if (i // 100) % 4 == 3:
        return 0
    if i % 11 == 5:
        return 0x00FF
    return ((i * 2654435761) & 0xFFFFFFFF) >> 16 & 0x0FFF


def build(tmp_path: Path, variant: str) -> tuple[Path, dict]:
    gcc = require_tool("gcc")
    options = VARIANTS[variant]
    prefix = options["prefix"]
    files = render_stream_encoder(**options)
    for name, text in files.items():
        (tmp_path / name).write_text(text)
    low, up = prefix.lower(), prefix.upper()
    (tmp_path / "prog.c").write_text(PROGRAM.replace("@p@", low).replace("@P@", up)
                                     .replace("N1", str(N1)).replace("N3", str(N3))
                                     .replace("EXTRA_DROPPED", str(EXTRA_DROPPED))
                                     .replace("EXTRA_EVENTS", str(EXTRA_EVENTS)))
    defines = [f"-D{up}_STREAM_SINGLE_CONTEXT"]
    if variant == "valve1":
        (tmp_path / "cfg.h").write_text(CRITICAL_CONFIG.replace("@P@", up))
        defines = ["-DCRITICAL_CHECK", f"-D{up}_STREAM_CONFIG_HEADER=\"cfg.h\""]
    exe = tmp_path / "prog"
    result = subprocess.run([gcc, *FLAGS, *defines, "-I", str(tmp_path), str(tmp_path / "prog.c"),
                             str(tmp_path / f"{low}_stream.c"), "-o", str(exe)],
                            capture_output=True, text=True, timeout=120)
    assert result.returncode == 0, f"gcc rejected the generated C:\n{result.stderr}"
    return exe, options


def run(exe: Path, stdin: bytes = b"") -> tuple[bytes, dict[str, str], dict[str, bytes]]:
    """stdout (the frames), the ``name value`` report lines, the ``cobs name hex`` lines."""
    result = subprocess.run([str(exe)], input=stdin, capture_output=True, timeout=60)
    assert result.returncode == 0, result.stderr.decode(errors="replace")
    report, cobs = {}, {}
    for line in result.stderr.decode().splitlines():
        fields = line.split(" ")
        if fields[0] == "cobs":
            cobs[fields[1]] = bytes.fromhex(fields[2])
        else:
            report[fields[0]] = fields[1]
    return result.stdout, report, cobs


@pytest.mark.parametrize("variant", sorted(VARIANTS))
def test_c_encoder_round_trip(tmp_path, variant):
    exe, options = build(tmp_path, variant)
    host = FrameEncoder(seq=65534)             # host numbering wraps during the test
    commands = [Command(Opcode.SET_PEAK_TIME, 12000), Command(Opcode.SET_HOLD_DUTY, 16384),
                Command(Opcode.START, 0), Command(77, 5)]
    wire_in = b"\x00" + b"".join(host.encode(c) for c in commands[:2])
    damaged = bytearray(host.encode(Command(Opcode.STOP)))
    damaged[2] ^= 0x04                          # a damaged command: counted, not obeyed
    wire_in += bytes(damaged) + b"\x00\x00" + b"".join(host.encode(c) for c in commands[2:])
    wire_in += b"\x01" * 40 + b"\x00"          # an over-long frame: counted
    out, report, cobs = run(exe, wire_in)

    # CRC RevEng catalogue: CRC-16/CCITT-FALSE check value of "123456789".
    assert report["crc"] == "29B1"
    # The C COBS encoder gives the bytes the Python one gives (checked against the paper).
    run_bytes = bytes(range(1, 256))
    vectors = {"empty": b"", "zeros5": bytes(5), "run253": run_bytes[:253],
               "run254": run_bytes[:254], "run255": run_bytes, "run254zero": run_bytes[:254] + b"\0"}
    assert cobs == {name: cobs_encode(data) for name, data in vectors.items()}
    assert out[:1] == b"\x00", "the first frame is preceded by a delimiter"
    assert int(report["max_write"]) <= int(report["max_wire"])

    dec = FrameDecoder()
    messages = dec.feed(out)
    stats = dec.stats
    assert (stats.crc_errors, stats.malformed_frames, stats.lost_frames, stats.duplicate_frames,
            stats.unknown_frames, stats.sync_bytes) == (0, 0, 0, 0, 0, 0)
    assert dec.pending_bytes == 0

    spf = options.get("samples_per_frame", 64)
    capacity = options.get("blocks", 8) * spf
    slots = options.get("event_slots", 16)
    overrun_at = N1 + capacity
    sent_until = overrun_at + EXTRA_DROPPED + N3
    expected_indices = [i for i in range(sent_until) if not overrun_at <= i < overrun_at + EXTRA_DROPPED]

    samples = [m for m in messages if isinstance(m, Samples)]
    indices = np.concatenate([np.arange(m.first_index, m.next_index) for m in samples])
    codes = np.concatenate([m.codes for m in samples])
    assert indices.tolist() == expected_indices
    assert codes.tolist() == [code_at(i) for i in expected_indices]
    assert all(len(m) <= spf for m in samples)
    assert stats.samples == len(expected_indices)
    assert stats.samples_missing == EXTRA_DROPPED

    info = Info(84_000_000, 420, 12, 0.25, 2048, "test fw \u00e9", True)
    assert messages[0] == info and messages[0].seq == 0

    events = [m for m in messages if isinstance(m, Event)]
    supply = [Event(EventKind.SUPPLY, overrun_at + EXTRA_DROPPED, v) for v in range(slots)]
    assert events == [
        Event(EventKind.ON, 100), Event(EventKind.PEAK_END, 300), Event(EventKind.SWITCH, 400, 1),
        Event(EventKind.OFF, 650),
        Event(EventKind.OVERRUN, overrun_at, EXTRA_DROPPED),
        Event(EventKind.EVENTS_LOST, overrun_at + EXTRA_DROPPED, EXTRA_EVENTS),
        *supply,
        Event(EventKind.TEMPERATURE, sent_until, -12500),
    ]

    replies = [m for m in messages if isinstance(m, Reply)]
    assert replies == [
        Reply(65534, Opcode.SET_PEAK_TIME, ReplyStatus.OK, 12000),
        Reply(65535, Opcode.SET_HOLD_DUTY, ReplyStatus.OK, 16384),
        Reply(1, Opcode.START, ReplyStatus.OK, 0),
        Reply(2, 77, ReplyStatus.UNKNOWN_OPCODE, 5),
    ]
    assert report["rx_errors"] == "2", "the damaged and the over-long command frames"
    if variant == "valve1":
        assert report["crit_max"] == "1", "critical sections never nest"
        assert report["crit_depth"] == "0"
        # The CRC table is read only through the port's flash hook: one read per byte under
        # a CRC, at least every wire byte but the frame's COBS code, CRC and delimiter.
        assert int(report["flash_reads"]) >= len(out) - 4 * out.count(0), "table read via the hook"


DOC_PROGRAM = r"""
#include <stdint.h>
#include <stdio.h>
#include <stddef.h>

@snippets@

int main(void)
{
    static uint8_t vec[600], enc[700];
    size_t k, n, m;
    static const size_t sizes[] = {0u, 1u, 253u, 254u, 255u, 300u, 508u, 509u};
    printf("crc %04X\n", (unsigned)crc16((const uint8_t *)"123456789", 9u));
    for (k = 0u; k < 600u; k++) {
        vec[k] = (uint8_t)((k * 7u) % 256u == 0u || k % 97u == 3u ? 0u : (k * 7u) % 256u);
    }
    for (n = 0u; n < sizeof sizes / sizeof sizes[0]; n++) {
        m = cobs_encode(vec, sizes[n], enc);
        printf("cobs %lu ", (unsigned long)sizes[n]);
        for (k = 0u; k < m; k++) {
            printf("%02X", enc[k]);
        }
        printf("\n");
    }
    return 0;
}
"""


def test_docs_c_snippets_compile_and_agree(tmp_path):
    """The C given in docs/protocol.md compiles and computes what the host expects."""
    gcc = require_tool("gcc")
    doc = (ROOT / "docs" / "protocol.md").read_text(encoding="utf-8")
    snippets = re.findall(r"```c\n(.*?)```", doc, re.S)
    assert len(snippets) == 2
    (tmp_path / "doc.c").write_text(DOC_PROGRAM.replace("@snippets@", "\n".join(snippets)))
    build = subprocess.run([gcc, "-std=c99", "-Wall", "-Wextra", "-Werror", "-pedantic",
                            str(tmp_path / "doc.c"), "-o", str(tmp_path / "doc")],
                           capture_output=True, text=True, timeout=60)
    assert build.returncode == 0, build.stderr
    lines = subprocess.run([str(tmp_path / "doc")], capture_output=True, text=True,
                           timeout=30).stdout.splitlines()
    # CRC RevEng catalogue: CRC-16/CCITT-FALSE check value.
    assert lines[0] == "crc 29B1"
    vec = bytes(0 if (k * 7) % 256 == 0 or k % 97 == 3 else (k * 7) % 256 for k in range(600))
    for line in lines[1:]:
        _, size, encoded = line.split(" ")
        assert bytes.fromhex(encoded) == cobs_encode(vec[:int(size)]), f"{size} bytes"


@pytest.mark.parametrize("defines, message", [
    ([], "define COIL_STREAM_ENTER_CRITICAL() and _EXIT_CRITICAL() (mask the ADC interrupt), "
         "or COIL_STREAM_SINGLE_CONTEXT"),
    (["-DCOIL_STREAM_ENTER_CRITICAL()=((void)0)"], "define COIL_STREAM_ENTER_CRITICAL() and "
                                               "COIL_STREAM_EXIT_CRITICAL() together"),
    (["-DCOIL_STREAM_SINGLE_CONTEXT", "-DCOIL_STREAM_FLASH="],
     "define COIL_STREAM_FLASH and COIL_STREAM_FLASH_READ16(address) together"),
])
def test_unsafe_port_settings_stop_the_build(tmp_path, defines, message):
    """No silent race: a build that neither masks interrupts nor states single-context use
    fails (gcc #error), as does half of a hook pair."""
    gcc = require_tool("gcc")
    for name, text in render_stream_encoder(crc_table=True).items():
        (tmp_path / name).write_text(text)
    r = subprocess.run([gcc, *FLAGS, *defines, "-fsyntax-only", str(tmp_path / "coil_stream.c")],
                       capture_output=True, text=True, timeout=60)
    assert r.returncode != 0 and message in r.stderr, r.stderr
    assert r.stderr.count("error:") == 1, f"one clear error, not a cascade:\n{r.stderr}"
