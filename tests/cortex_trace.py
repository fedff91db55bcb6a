"""Time the reference driver's handlers on a Cortex-M under QEMU.

QEMU is not cycle accurate, so no cycle counter is read: QEMU runs tests/data/driver_target.c
(the same scripted program simavr runs) one instruction per translation block
(``-singlestep``) and logs every block it executes (``-d exec,nochain``), which is the
address of every instruction executed. From that trace and the ELF's disassembly
(arm-none-eabi-objdump) each handler call is the instructions from its first one to the
return into main (the hooks it calls included), and two figures come out of each:

* **instructions executed** -- exact for the path the script takes;
* **a cycle bound**: each executed instruction charged its worst cost in the core's
  instruction timing table (Arm's Technical Reference Manuals for the Cortex-M0+ and the
  Cortex-M3/M4, from memory: see :data:`COSTS`), with zero flash wait states; whether a
  branch was taken is read from the trace (the next address).

The Cortex-M3 and M4 builds run on QEMU's mps2-an385 (Cortex-M3) and mps2-an386 (Cortex-M4);
the Cortex-M0+ build (ARMv6-M code, a subset of the M3's instruction set) runs on the
mps2-an385 too: QEMU models no M0+ board, and the instructions executed are the code's,
not the machine's.
"""

from __future__ import annotations

import re
import subprocess
from dataclasses import dataclass
from pathlib import Path

from conftest import ROOT, require_tool
from driver_harness import STRICT, write_sources

DATA = ROOT / "tests" / "data"
#: core -> (gcc -mcpu, QEMU machine)
CORES = {"cortex-m0plus": ("cortex-m0plus", "mps2-an385"), "cortex-m3": ("cortex-m3", "mps2-an385"),
         "cortex-m4": ("cortex-m4", "mps2-an386")}
HANDLERS = ("adc_isr", "pwm_isr", "tick", "threshold_isr", "off_timer_isr")

#: Worst cycles of one instruction, by class (zero wait states). ``P``: a pipeline refill,
#: 1 to 3 cycles on the M3/M4 (3 taken here); on the M0+ a taken branch is 2 cycles, BL 3.
#: Cortex-M3/M4 (Arm Cortex-M4 TRM, "Instruction set summary", cycle counts; from memory):
#: data processing 1, a load or store 2 (1 when pipelined: 2 taken), LDRD/STRD 3,
#: LDM/STM/PUSH/POP 1 + N registers (+ P when POP loads pc), a taken branch 1 + P, BL 1 + P,
#: TBB/TBH 2 + P, MUL 1, MLA/MLS 2, long multiplies 1 (M4) or up to 5 (M3), UDIV/SDIV up to 12.
#: Cortex-M0+ (Arm Cortex-M0+ TRM, "Instruction set summary"; from memory): data
#: processing 1, loads and stores 2, LDM/STM/PUSH 1 + N, POP 1 + N (3 + N with pc), a taken
#: branch 2, BL 3, BX/BLX 2, MULS 1 (the fast multiplier; 32 with the small one).
COSTS = {
    "cortex-m3": dict(refill=3, load=2, long_mul=5, div=12, m0=False),
    "cortex-m4": dict(refill=3, load=2, long_mul=1, div=12, m0=False),
    "cortex-m0plus": dict(refill=1, load=2, long_mul=1, div=12, m0=True),
}

_TRACE = re.compile(r"^Trace \d+: 0x[0-9a-f]+ \[[0-9a-f]+/([0-9a-f]+)/")


@dataclass(frozen=True)
class Insn:
    address: int
    size: int
    mnemonic: str
    operands: str


def disassemble(elf: Path) -> dict[int, Insn]:
    """Every instruction of the ELF by address (objdump's disassembly, raw bytes shown to
    get each instruction's size)."""
    objdump = require_tool("arm-none-eabi-objdump")
    text = subprocess.run([objdump, "-d", str(elf)], capture_output=True, text=True, check=True).stdout
    out: dict[int, Insn] = {}
    for line in text.splitlines():
        m = re.match(r"^\s*([0-9a-f]+):\s+([0-9a-f]{4})( [0-9a-f]{4})?\s+(\S+)\s*(.*)$", line)
        if not m:
            continue
        addr = int(m.group(1), 16)
        size = 4 if m.group(3) else 2
        out[addr] = Insn(addr, size, m.group(4), m.group(5))
    return out


def symbols(elf: Path) -> dict[str, int]:
    nm = require_tool("arm-none-eabi-nm")
    text = subprocess.run([nm, str(elf)], capture_output=True, text=True, check=True).stdout
    return {f[2]: int(f[0], 16) & ~1 for f in (line.split() for line in text.splitlines()) if len(f) == 3}


def _registers(operands: str) -> int:
    inside = operands[operands.find("{") + 1:operands.find("}")]
    n = 0
    for part in inside.split(","):
        part = part.strip()
        if "-" in part:
            a, b = (int(x.strip()[1:]) for x in part.split("-"))
            n += b - a + 1
        elif part:
            n += 1
    return n


def cost(insn: Insn, taken: bool, core: str) -> int:
    """The worst cycles of one executed instruction on ``core`` (see :data:`COSTS`)."""
    c = COSTS[core]
    m = insn.mnemonic.split(".")[0]
    base = re.sub(r"(eq|ne|cs|hs|cc|lo|mi|pl|vs|vc|hi|ls|ge|lt|gt|le|al)$", "", m) if m not in ("bl", "bls", "bhi") else m
    if c["m0"]:
        if base in ("bl",):
            return 3
        if base in ("b", "bx", "blx", "cbz", "cbnz") or (m.startswith("b") and len(m) == 3):
            return 2 if taken else 1
        if base in ("push", "stmia", "stm", "ldmia", "ldm"):
            return 1 + _registers(insn.operands)
        if base == "pop":
            return (3 if "pc" in insn.operands else 1) + _registers(insn.operands)
        if m.startswith(("ldr", "str")):
            return c["load"]
        return 1
    refill = c["refill"]
    if m in ("mla", "mls"):
        return 2
    if base in ("tbb", "tbh"):
        return 2 + refill
    if m in ("bl", "blx") or (m.startswith("b") and (base in ("b", "bx") or m in ("bls", "bhi")))\
            or base in ("cbz", "cbnz"):
        return 1 + refill if taken else 1
    if base in ("push", "stmia", "stm", "stmdb", "ldmia", "ldm"):
        return 1 + _registers(insn.operands)
    if base == "pop":
        return 1 + _registers(insn.operands) + (refill if "pc" in insn.operands else 0)
    if m.startswith(("ldrd", "strd")):
        return 3
    if m.startswith(("ldr", "str")):
        return c["load"] + (refill if m.startswith("ldr") and insn.operands.startswith("pc") else 0)
    if base in ("mla", "mls"):
        return 2
    if base in ("umull", "smull", "umlal", "smlal"):
        return c["long_mul"]
    if base in ("udiv", "sdiv"):
        return c["div"]
    if insn.operands.startswith("pc,"):
        return 1 + refill
    return 1


@dataclass
class Timing:
    instructions: dict[str, int]
    cycles: dict[str, int]
    lines: list[str]


def build(folder: Path, d, script, core: str, writer=write_sources) -> Path:
    gcc = require_tool("arm-none-eabi-gcc")
    cpu, _ = CORES[core]
    sources = writer(folder, d, script)
    flags = [f"-mcpu={cpu}", "-mthumb", "-Os"]
    objs = []
    for src in sources:
        obj = folder / (Path(src).stem + ".o")
        r = subprocess.run([gcc, *flags, *STRICT, "-I", str(folder), "-c", src, "-o", str(obj)],
                           capture_output=True, text=True, timeout=120)
        assert r.returncode == 0 and r.stderr == "", r.stderr
        objs.append(str(obj))
    start = folder / "cortex_start.o"
    subprocess.run([gcc, *flags, "-Wall", "-Wextra", "-Werror", "-fno-tree-loop-distribute-patterns", "-c",
                    str(DATA / "cortex_start.c"), "-o", str(start)], check=True, timeout=120)
    elf = folder / f"{core}.elf"
    subprocess.run([gcc, *flags, "-nostdlib", "-T", str(DATA / "cortex.ld"), str(start), *objs, "-lgcc",
                    "-o", str(elf)], check=True, timeout=120)
    return elf


def run(folder: Path, d, script, core: str, writer=write_sources) -> Timing:
    """Build the program for ``core`` (its sources from ``writer``: the peak-and-hold
    driver's scripted program, or the latching coil's), run it under QEMU with the
    execution trace, and return the worst instructions and cycle bound of each handler,
    and the printed lines."""
    qemu = require_tool("qemu-system-arm")
    elf = build(folder, d, script, core, writer)
    trace = folder / f"{core}.trace"
    r = subprocess.run([qemu, "-M", CORES[core][1], "-nographic", "-monitor", "none", "-serial", "none",
                        "-semihosting-config", "enable=on,target=native", "-singlestep",
                        "-d", "exec,nochain", "-D", str(trace), "-kernel", str(elf)],
                       capture_output=True, text=True, timeout=120)
    lines = [x for x in (r.stdout + r.stderr).splitlines() if re.match(r"^[a-z] ", x) or x == "end"]
    insns, syms = disassemble(elf), symbols(elf)
    entries = {syms[f"coil_{h}"]: h for h in HANDLERS if f"coil_{h}" in syms}
    main_lo = syms["main"]
    # each call site in main: its return address ends the handler's run
    returns = {a + i.size for a, i in insns.items() if i.mnemonic == "bl" and a >= main_lo
               and any(i.operands.endswith(f"<coil_{h}>") for h in entries.values())}
    worst_i: dict[str, int] = {}
    worst_c: dict[str, int] = {}
    pcs = [int(m.group(1), 16) for m in map(_TRACE.match, trace.read_text().splitlines()) if m]
    k = 0
    while k < len(pcs):
        h = entries.get(pcs[k])
        if h is None:
            k += 1
            continue
        n = c = 0
        while k < len(pcs) and pcs[k] not in returns:
            insn = insns[pcs[k]]
            taken = k + 1 < len(pcs) and pcs[k + 1] != pcs[k] + insn.size
            n += 1
            c += cost(insn, taken, core)
            k += 1
        worst_i[h] = max(worst_i.get(h, 0), n)
        worst_c[h] = max(worst_c.get(h, 0), c)
    return Timing(worst_i, worst_c, lines)
