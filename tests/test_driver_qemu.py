"""The reference driver's handlers timed on a Cortex-M under QEMU (tests/cortex_trace.py).

Outside sources: arm-none-eabi-gcc builds tests/data/driver_target.c (the scripted program
simavr runs, tests/test_driver_simavr.py) for a Cortex-M0+, M3 and M4; QEMU 7.2 runs it on
its mps2-an385 / mps2-an386 models and prints the same hook calls, events and states as the
host build (gcc). QEMU is not cycle accurate and models no cycle counter we could read, so
the figures are the instructions executed (from QEMU's execution trace, one instruction per
block) and a cycle bound from them (each instruction at its worst cost in the core's timing
table: Arm's Cortex-M0+ and Cortex-M4 Technical Reference Manuals, from memory; zero flash
wait states). firmware-driver's Cortex-M budget (coildrive.codegen.driver.CORTEX_CYCLES)
and docs/firmware.md give these figures.
"""

from __future__ import annotations

import pytest

from coildrive.codegen.driver import CORTEX_CYCLES, CORTEX_INSTRUCTIONS, budget_key
from cortex_trace import CORES, Insn, cost, disassemble, run, symbols
from driver_harness import budget_script, budget_shapes, run_host

pytestmark = pytest.mark.compiler

SHAPES = budget_shapes()
measured: dict[tuple[str, str], tuple[dict[str, int], dict[str, int]]] = {}


def _combined(figures: dict[str, int], design) -> dict[str, int]:
    """The threshold and off-timer handlers as one figure (they run at the switching edges);
    a closed-loop hold's ADC handler under its own budget entry (:func:`budget_key`)."""
    out = {budget_key(design, k): v for k, v in figures.items() if k != "off_timer_isr"}
    if "off_timer_isr" in figures:
        out["threshold_isr"] = max(out.get("threshold_isr", 0), figures["off_timer_isr"])
    return out


@pytest.mark.parametrize("core", list(CORES))
@pytest.mark.parametrize("name", [n for n, _ in SHAPES])
def test_cortex_runs_what_the_host_build_runs(tmp_path, name, core):
    d = dict(SHAPES)[name]
    script = budget_script(d)
    host = run_host(tmp_path, d, script)
    (tmp_path / core).mkdir()
    arm = run(tmp_path / core, d, script, core)

    def same(lines):
        return [line for line in lines if not line.startswith("c ")]

    assert same(arm.lines) == same(host.lines)
    assert arm.lines[-1] == "end"
    instructions, cycles = _combined(arm.instructions, d), _combined(arm.cycles, d)
    measured[(name, core)] = (instructions, cycles)
    assert set(instructions) >= {budget_key(d, "adc_isr"), "pwm_isr", "tick"}
    for handler, c in cycles.items():
        assert c <= CORTEX_CYCLES[core][handler], f"{name} on {core}: {handler} {c} cycles above the bound"
        assert instructions[handler] <= CORTEX_INSTRUCTIONS[core][handler], f"{name} on {core}: {handler}"
        assert instructions[handler] <= c, "no instruction takes less than a cycle"
    # the trace against the disassembly: pwm_isr has one straight path (its own code and
    # the adc_start hook), so its instructions are exactly those of the two functions
    elf = tmp_path / core / f"{core}.elf"
    insns, syms = disassemble(elf), symbols(elf)

    def length(function: str) -> int:
        start = syms[function]
        end = min(x for x in syms.values() if x > start)
        return sum(1 for a in insns if start <= a < end)
    assert instructions["pwm_isr"] == length("coil_pwm_isr") + length("coil_port_adc_start")


def test_cortex_bounds_are_tight():
    if len(measured) < len(SHAPES) * len(CORES):
        pytest.skip("needs every shape's run on every core (run the whole file)")
    for core, bounds in CORTEX_CYCLES.items():
        for handler, bound in bounds.items():
            worst = max(m[1].get(handler, 0) for (_, c), m in measured.items() if c == core)
            assert worst >= 0.9 * bound, f"{core} {handler}: worst {worst} cycles, the bound {bound} is loose"
            worst_i = max(m[0].get(handler, 0) for (_, c), m in measured.items() if c == core)
            assert worst_i == CORTEX_INSTRUCTIONS[core][handler], f"{core} {handler}: {worst_i} instructions"


# Per-instruction worst cycles, Arm Cortex-M4 TRM and Cortex-M0+ TRM instruction timing
# tables (from memory): (mnemonic, operands, taken) -> cycles.
M4_TABLE = [("adds", "r3, #1", False, 1), ("ldr", "r3, [r2, #4]", False, 2), ("strb.w", "r1, [r3, #9]", False, 2),
            ("push", "{r3, r4, r5, r6, r7, lr}", False, 7), ("pop", "{r3, r4, r5, r6, r7, pc}", True, 10),
            ("bne.n", "1a4 <x>", True, 4), ("bne.n", "1a4 <x>", False, 1), ("bl", "1a4 <coil_tick>", True, 4),
            ("bx", "lr", True, 4), ("cbz", "r0, 1a4 <x>", True, 4), ("tbb", "[pc, r3]", True, 5),
            ("mls", "r0, r1, r2, r3", False, 2), ("udiv", "r0, r1, r2", False, 12), ("ldr.w", "pc, [sp], #4", True, 5),
            ("itt", "ne", False, 1), ("ldmia.w", "r3, {r0, r1, r2}", False, 4)]
M0_TABLE = [("adds", "r3, #1", False, 1), ("ldr", "r3, [r2, #4]", False, 2), ("push", "{r4, lr}", False, 3),
            ("pop", "{r4, pc}", True, 5), ("bne.n", "1a4 <x>", True, 2), ("bne.n", "1a4 <x>", False, 1),
            ("bl", "1a4 <coil_tick>", True, 3), ("bx", "lr", True, 2), ("muls", "r0, r1", False, 1)]


@pytest.mark.parametrize("core, table", [("cortex-m4", M4_TABLE), ("cortex-m3", M4_TABLE), ("cortex-m0plus", M0_TABLE)])
def test_instruction_costs_follow_the_timing_tables(core, table):
    for mnemonic, operands, taken, cycles in table:
        assert cost(Insn(0, 2, mnemonic, operands), taken, core) == cycles, (core, mnemonic, operands)
