"""Every generated C file compiles warning-free on the host and on microcontrollers.

Outside sources: the compilers judge the C -- gcc and g++ (C++11) on the host,
arm-none-eabi-gcc for a Cortex-M0+ and a Cortex-M4, avr-gcc for an ATmega328P -- with
``-Wall -Wextra -Werror -pedantic -Wconversion -Wsign-conversion``; their ``nm`` gives
the bytes the encoder's state and code really take, which must be what
``firmware-stream`` prints (coildrive.codegen.stream.memory_use).

One translation unit per target holds every generated file: the stream encoder in four
shapes (1, 2, 64 and 510 codes per frame, bitwise and table CRC) and the design header
of every bundled board x example, each under its own prefix; so a target costs one
compiler run.
"""

from __future__ import annotations

import itertools
import re
import subprocess
from pathlib import Path

import pytest

from coildrive.codegen.header import generate_header
from coildrive.codegen.stream import _CODE_BYTES, StreamView, memory_use, render_stream_encoder
from coildrive.config import load_board, load_drive
from coildrive.design import design
from conftest import BOARDS, EXAMPLES, loads, require_tool

pytestmark = pytest.mark.compiler

STRICT = ["-Wall", "-Wextra", "-Werror", "-pedantic", "-Wconversion", "-Wsign-conversion"]
#: name: (compiler, flags, ABI family of memory_use or None for the host)
TARGETS = {
    "gcc-c99": ("gcc", ["-std=c99", "-O2"], None),
    "gcc-c11": ("gcc", ["-std=c11", "-O2"], None),
    "g++-c++11": ("g++", ["-x", "c++", "-std=c++11", "-O2"], None),
    "cortex-m0plus": ("arm-none-eabi-gcc", ["-mcpu=cortex-m0plus", "-mthumb", "-std=c99", "-Os"], "Cortex-M"),
    "cortex-m4": ("arm-none-eabi-gcc", ["-mcpu=cortex-m4", "-mthumb", "-std=c11", "-Os"], "Cortex-M"),
    "atmega328p-c99": ("avr-gcc", ["-mmcu=atmega328p", "-std=c99", "-Os"], "8-bit AVR"),
    "atmega328p-c11": ("avr-gcc", ["-mmcu=atmega328p", "-std=c11", "-Os"], "8-bit AVR"),
}
ENCODERS = {
    "one": dict(samples_per_frame=1, blocks=128, event_slots=128),
    "two": dict(samples_per_frame=2, blocks=2, event_slots=2, crc_table=True),
    "mid": dict(board=load_board(BOARDS / "lab-m32-zener.toml")),
    "big": dict(samples_per_frame=510, blocks=2, event_slots=4, crc_table=True),
}
COMBOS = [(e, b) for e, b in itertools.product(sorted(EXAMPLES.glob("*.toml")), sorted(BOARDS.glob("*.toml")))
          if loads(e, b.stem)]


@pytest.fixture(scope="module")
def unit(tmp_path_factory) -> Path:
    """all.c: every encoder (with one state object each) and every design header."""
    folder = tmp_path_factory.mktemp("generated")
    lines = []
    for prefix, options in ENCODERS.items():
        for name, text in render_stream_encoder(prefix, **options).items():
            (folder / name).write_text(text)
        lines += [f"#define {prefix.upper()}_STREAM_SINGLE_CONTEXT", f'#include "{prefix}_stream.c"',
                  f"{prefix}_stream_t {prefix}_state;"]
    for k, (example, board) in enumerate(COMBOS):
        # The CLI writes no header for a failing design, but its C must be valid all the same --
        # except where the pull-in current is never reached: there is no peak, and the
        # header stops the build on purpose (tests/test_header.py checks that #error).
        d = design(load_drive(example, board.stem))
        if d.pull_in.peak_ticks is None:
            continue
        (folder / f"d{k}.h").write_text(generate_header(d, prefix=f"D{k}"))
        lines.append(f'#include "d{k}.h"')
    (folder / "all.c").write_text("\n".join(lines) + "\n")
    return folder


def _symbols(nm: str, obj: Path) -> list[tuple[str, int, str]]:
    """(type letter, size, name) of every sized symbol in an object file."""
    out = subprocess.run([nm, "-S", str(obj)], capture_output=True, text=True, check=True).stdout
    found = []
    for line in out.splitlines():
        fields = line.split()
        if len(fields) == 4:
            found.append((fields[2], int(fields[1], 16), fields[3]))
    return found


@pytest.mark.parametrize("target", list(TARGETS))
def test_every_generated_file_compiles_warning_free(unit, target):
    compiler, flags, family = TARGETS[target]
    tool = require_tool(compiler)
    obj = unit / f"{target}.o"
    # -fno-ipa-icf: the encoders here are alike, and gcc would fold their identical
    # functions and tables into one; a firmware has one encoder, so measure each whole.
    r = subprocess.run([tool, *STRICT, *flags, "-fno-ipa-icf", "-I", str(unit), "-c", str(unit / "all.c"),
                        "-o", str(obj)],
                       capture_output=True, text=True, timeout=300)
    assert r.returncode == 0 and r.stderr == "", f"{target}:\n{r.stderr}"
    if family is None:
        return
    # What firmware-stream prints, against the compiler's own figures.
    symbols = _symbols(require_tool(compiler.replace("gcc", "nm")), obj)
    sizes = {name: size for _, size, name in symbols}
    code = {}
    for prefix, options in ENCODERS.items():
        use = next(u for u in memory_use(StreamView(prefix, **options)) if u.family == family)
        assert sizes[f"{prefix}_state"] == use.state, f"{prefix}: sizeof({prefix}_stream_t) on {target}"
        code[prefix] = sum(size for kind, size, name in symbols
                           if kind in "Tt" and name.startswith(f"{prefix}_"))
        if options.get("crc_table"):
            assert sizes[f"{prefix}_stream_crc_table"] == 512
    bound = _CODE_BYTES["avr" if family == "8-bit AVR" else "arm"]
    assert max(code.values()) <= bound, f"code bytes {code} above the bound {bound} printed"
    if target in ("cortex-m0plus", "atmega328p-c99"):     # the builds the bound was measured on
        assert max(code.values()) >= 0.9 * bound, f"code bytes {code}: the bound {bound} is loose"


def test_flash_hook_puts_the_crc_table_in_program_memory(tmp_path):
    """avr-gcc: with PROGMEM / pgm_read_word the table sits in flash (.progmem.data, inside
    .text); plain const puts it in .data, i.e. 512 bytes of RAM (avr-libc manual, "Data in
    Program Space")."""
    gcc, nm, size = require_tool("avr-gcc"), require_tool("avr-nm"), require_tool("avr-size")
    for name, text in render_stream_encoder(crc_table=True).items():
        (tmp_path / name).write_text(text)
    (tmp_path / "flash.h").write_text("#include <avr/pgmspace.h>\n#define COIL_STREAM_FLASH PROGMEM\n"
                                      "#define COIL_STREAM_FLASH_READ16(address) pgm_read_word(address)\n")
    (tmp_path / "main.c").write_text(
        '#include "coil_stream.h"\nint main(void)\n{\n'
        '    return (int)coil_stream_crc16((const uint8_t *)"123456789", 9u);\n}\n')
    sections = {}
    for case, defines in (("plain", []), ("flash", ['-DCOIL_STREAM_CONFIG_HEADER="flash.h"'])):
        elf = tmp_path / f"{case}.elf"
        r = subprocess.run([gcc, "-mmcu=atmega328p", "-Os", *STRICT, "-std=c99", "-DCOIL_STREAM_SINGLE_CONTEXT",
                            *defines, "-I", str(tmp_path), str(tmp_path / "main.c"),
                            str(tmp_path / "coil_stream.c"), "-o", str(elf)],
                           capture_output=True, text=True, timeout=120)
        assert r.returncode == 0 and r.stderr == "", r.stderr
        address = next(int(line.split()[0], 16) for line in subprocess.run(
            [nm, str(elf)], capture_output=True, text=True, check=True).stdout.splitlines()
            if line.endswith(" coil_stream_crc_table"))
        table = subprocess.run([size, "-A", str(elf)], capture_output=True, text=True, check=True).stdout
        sections[case] = (address, {m[1]: int(m[2]) for m in re.finditer(r"^(\.\w+)\s+(\d+)", table, re.M)})
    # avr-gcc's ELF maps RAM at 0x800000 and flash from 0 (avr-libc's linker scripts).
    plain_address, plain = sections["plain"]
    flash_address, flash = sections["flash"]
    assert plain_address >= 0x800000 and plain[".data"] >= 512, "plain const: the table is RAM"
    assert flash_address < 0x800000, "PROGMEM: the table is in flash"
    assert plain[".data"] - flash.get(".data", 0) == 512, "PROGMEM frees the table's 512 bytes of RAM"


# --------------------------------------------------------------------------- reference driver
@pytest.fixture(scope="module")
def driver_unit(tmp_path_factory) -> tuple[Path, list[str]]:
    """drivers.c: the reference driver (with its design header) of every shape the timing
    budget covers, each under its own prefix."""
    from coildrive.codegen.driver import render_driver
    from driver_harness import budget_shapes

    folder = tmp_path_factory.mktemp("drivers")
    prefixes, lines = [], []
    for k, (_, d) in enumerate(budget_shapes()):
        prefix = f"drv{k}"
        for name, text in render_driver(d, prefix).items():
            (folder / name).write_text(text)
        lines.append(f'#include "{prefix}_driver.c"')
        prefixes.append(prefix)
    (folder / "drivers.c").write_text("\n".join(lines) + "\n")
    return folder, prefixes


def _sections(size: str, obj: Path) -> dict[str, int]:
    """Section sizes of an object file (``size -A``)."""
    out = subprocess.run([size, "-A", str(obj)], capture_output=True, text=True, check=True).stdout
    return {f[0]: int(f[1]) for f in (line.split() for line in out.splitlines()) if len(f) == 3 and f[0].startswith(".")}


@pytest.mark.parametrize("target", list(TARGETS))
def test_reference_driver_compiles_warning_free(driver_unit, target):
    """The driver, every regulation and option (peak limit on and off), in every dialect;
    on the microcontrollers nm's sizes must stay within what firmware-driver prints."""
    from coildrive.codegen.driver import _CLOSED_LOOP_CODE_BYTES, _CODE_BYTES as DRIVER_CODE, _STATE_BYTES
    from driver_harness import budget_shapes

    folder, prefixes = driver_unit
    compiler, flags, family = TARGETS[target]
    tool = require_tool(compiler)
    for option in ("0", "1"):
        obj = folder / f"{target}-{option}.o"
        limits = [f"-D{p.upper()}_DRIVER_PEAK_LIMIT={option}" for p in prefixes]
        r = subprocess.run([tool, *STRICT, *flags, "-fno-ipa-icf", *limits, "-I", str(folder), "-c",
                            str(folder / "drivers.c"), "-o", str(obj)], capture_output=True, text=True, timeout=300)
        assert r.returncode == 0 and r.stderr == "", f"{target} peak limit {option}:\n{r.stderr}"
    if family is None:
        return
    # A firmware has one driver: measure each alone, as firmware-driver's figures are made.
    abi = "avr" if family == "8-bit AVR" else "arm"
    code, state = {}, {}
    for p in prefixes:
        obj = folder / f"{target}-{p}.o"
        subprocess.run([tool, *flags, "-I", str(folder), "-c", str(folder / f"{p}_driver.c"), "-o", str(obj)],
                       check=True, timeout=120)
        sections = _sections(require_tool(compiler.replace("gcc", "size")), obj)
        code[p] = sections.get(".text", 0)
        state[p] = sections.get(".bss", 0) + sections.get(".data", 0)   # padding included
    assert max(state.values()) <= _STATE_BYTES[abi], f"state bytes {state}"
    # the closed-loop driver has a bound of its own (firmware-driver prints it for that hold)
    looped = {p for p, (_, d) in zip(prefixes, budget_shapes()) if d.hold.regulation == "closed_loop"}
    assert looped, "the budget shapes include a closed-loop hold"
    plain = {p: c for p, c in code.items() if p not in looped}
    loop_code = {p: c for p, c in code.items() if p in looped}
    assert max(plain.values()) <= DRIVER_CODE[abi], f"code bytes {code} above the bound printed"
    assert max(loop_code.values()) <= _CLOSED_LOOP_CODE_BYTES[abi], f"closed-loop code bytes {loop_code}"
    if target in ("cortex-m0plus", "atmega328p-c99"):
        assert max(state.values()) == _STATE_BYTES[abi]
        assert max(plain.values()) >= 0.9 * DRIVER_CODE[abi], f"code bytes {code}: the bound is loose"
        assert max(loop_code.values()) >= 0.9 * _CLOSED_LOOP_CODE_BYTES[abi], f"closed-loop code bytes {loop_code}: loose"
