"""The reference driver on a simulated 8-bit target: simavr runs an ATmega328P build.

Outside sources: avr-gcc compiles tests/data/driver_target.c with the generated driver;
simavr (cycle-level ATmega328P model) runs it and prints its UART; gcc builds the same
program for the host, and both must print the same hook calls, events and states. The
handlers' worst cycle counts are read from Timer1 at clk/1 inside the program (simavr
models the timer from its cycle counter); firmware-driver's timing budget
(coildrive.codegen.driver.HANDLER_CYCLES) and docs/firmware.md give these figures.
"""

from __future__ import annotations

import pytest

from coildrive.codegen.driver import HANDLER_CYCLES, budget_key
from driver_harness import budget_script, budget_shapes, run_avr, run_host

pytestmark = pytest.mark.compiler

SHAPES = budget_shapes()
measured: dict[str, dict[str, int]] = {}


@pytest.mark.parametrize("name", [n for n, _ in SHAPES])
def test_simulated_avr_runs_what_the_host_build_runs(tmp_path, name):
    d = dict(SHAPES)[name]
    script = budget_script(d)
    host = run_host(tmp_path, d, script)
    avr = run_avr(tmp_path, d, script)

    def same(run):
        return [line for line in run.lines if not line.startswith("c ")]

    assert same(avr) == same(host)
    assert avr.lines[-1] == "end"
    faults = [v for _, k, v in host.events() if k == 10]
    assert faults, "the script provokes faults"
    measured[name] = {budget_key(d, h): c for h, c in avr.cycles().items()}
    for handler, cycles in measured[name].items():
        assert cycles <= HANDLER_CYCLES[handler], f"{name}: {handler} {cycles} cycles above the budget's bound"


def test_cycle_bounds_are_tight():
    if len(measured) < len(SHAPES):
        pytest.skip("needs every shape's run (run the whole file)")
    for handler, bound in HANDLER_CYCLES.items():
        worst = max(m.get(handler, 0) for m in measured.values())   # threshold_isr: current mode only; adc_isr_closed_loop: closed loop only
        assert worst >= 0.9 * bound, f"{handler}: worst {worst} cycles, the bound {bound} is loose"
