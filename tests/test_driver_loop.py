"""The closed-loop hold in the reference driver, compiled with gcc and run under a script.

Outside source: gcc compiles the generated driver (C99, every warning an error,
-Wconversion) with tests/data/driver_target.c; the samples are fed as fixed codes, and
every compare the driver sets must be the one the header's arithmetic gives
(docs/firmware.md, "The closed-loop hold"): e = SETPOINT - code, the integrator moving by
KI e unless the output sits at a limit in e's direction, clamped to its limits, and
(KP e + integrator) >> SHIFT within the compare limits. Integer arithmetic in Python is
exact, so the two must agree count for count, saturation and anti-windup included.
"""

from __future__ import annotations

import pytest

from coildrive.bench.messages import EventKind
from driver_harness import conversions_per_tick, example_design, healthy_slew, run_host

pytestmark = pytest.mark.compiler

PEAK_END = int(EventKind.PEAK_END)


def reference(r, samples: list[int]) -> list[int]:
    """The compare after each hold conversion, as the header's constants say."""
    lo, hi = r.integrator_min, r.integrator_max
    integ = r.preload_compare << r.gain_shift
    out = []
    for code in samples:
        e = r.setpoint_code - code
        p = r.kp_q * e
        s = p + integ
        if not ((s >= hi and e > 0) or (s <= lo and e < 0)):
            integ = min(max(integ + r.ki_q * e, lo), hi)
            s = p + integ
        s = min(max(s, lo), hi)
        assert -2**31 <= p + integ < 2**31 and -2**31 <= integ + r.ki_q * e < 2**31
        out.append(s >> r.gain_shift)
    return out


@pytest.mark.parametrize("example, edit", [
    ("dosing-valve-closed-loop", None),
    ("relay-12v", ('frequency = "20 kHz"', 'frequency = "20 kHz"\nregulation = "closed_loop"')),  # switch leg, 8-bit ADC
])
def test_loop_compare_matches_the_header_arithmetic(tmp_path, example, edit):
    d = example_design(example, edit)
    r = d.hold.closed_loop
    assert d.hold.regulation == "closed_loop"
    sp, oc = r.setpoint_code, d.adc.over_current_code
    cpt = conversions_per_tick(d)
    nominal = (d.adc.supply_min_code + d.adc.supply_max_code) // 2
    # the hold's samples: at the set-point, a little low and high, far low (0 would be an
    # open load only after OPEN_LOAD_TICKS), far high (below the over-current trip), and
    # back: the integrator must not have wound up at either end
    steps = [(sp, 3), (sp - 3, 20), (sp + 2, 20), (1 + d.adc.open_load_code, 4), (oc - 1, 30),
             (sp, 30), (d.adc.open_load_code, 2), (sp + 1, 10)]
    # the peak: the harness coil climbing at a healthy rate (the shorted-turns check
    # judges the rise from switch-on) toward sp + 40 codes, then the hold's samples
    script = [("supply", nominal), ("full", sp + 40), ("slew", healthy_slew(d)), ("run", 2), ("on", 0),
              ("run", d.pull_in.peak_ticks + 1)]
    for code, ticks in steps:
        script += [("level", code), ("run", ticks)]
    run = run_host(tmp_path, d, script)
    peak_end = next(t for t, k, _ in run.events() if k == PEAK_END)
    # conversions of the ticks after PEAK_END's tick run the hold; the last peak ticks see sp + 40
    hold_ticks = 2 + d.pull_in.peak_ticks + 1 - (peak_end + 1)
    samples = [sp + 40] * (hold_ticks * cpt)
    for code, ticks in steps:
        samples += [code] * (ticks * cpt)
    expected = reference(r, samples)
    got = [counts for t, _, counts in run.calls("p") if t > peak_end]
    dedup = [x for i, x in enumerate(expected) if i == 0 or x != expected[i - 1]]
    assert got == dedup
    assert max(expected) == r.max_compare and min(expected) == r.min_compare, "both limits reached"
    # after the far-high run the output comes back off the floor within a few periods:
    # no wound-up integrator to unwind
    k = (hold_ticks + sum(t for _, t in steps[:5])) * cpt
    assert expected[k + 2] > r.min_compare
    assert run.states()[-1] == (2, 0), "still holding, no fault"
