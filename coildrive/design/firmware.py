"""What the firmware runs at a given supply: the hold's compare and the peak, looked up in
the design's tables the way the generated header's functions look them up."""

from __future__ import annotations

from .figures import adc_code
from .regulation import table_lookup
from .result import Design


def firmware_setting(design: Design, supply: float) -> tuple[float, float]:
    """``(duty, peak s)`` the firmware runs at bus voltage ``supply`` (its reading taken at
    the nominal divider): the table entries where it looks them up (a current-mode hold:
    the fixed-duty fallback's duty)."""
    drive = design.drive
    duty = design.hold.duty
    peak = design.pull_in.peak_time_s or 0.0
    b = drive.board
    if b.supply_sense is None:
        return duty, peak
    code = adc_code(supply / b.supply_sense.divider, b.adc.reference, b.adc.bits)
    if design.hold.regulation == "supply_table" and design.duty_table.adc_codes:
        duty = design.duty_table.compare_ticks[table_lookup(design.duty_table, code)] / design.timer.period_ticks
    if design.peak_table is not None:
        peak = design.peak_table.peak_ticks[table_lookup(design.peak_table, code)] / b.tick.rate
    return duty, peak
