"""What the firmware runs at a given supply: the hold's compare and the peak, looked up in
the design's tables the way the generated header's functions look them up."""

from __future__ import annotations

import numpy as np

from .boost import firmware_peak
from .envelope import table_index
from .figures import adc_code
from .loop_duty import settled_duty
from .regulation import table_lookup
from .result import Design


def firmware_setting(design: Design, supply: float, coil_temp: float | None = None,
                     r_factor: float = 1.0, l_factor: float = 1.0) -> tuple[float, float]:
    """``(duty, peak s)`` the firmware runs at bus voltage ``supply`` (its reading taken at
    the nominal divider): the table entries where it looks them up (a current-mode hold:
    the fixed-duty fallback's duty). A closed-loop hold's duty is where its loop settles
    with the coil at ``coil_temp`` degC (default: its reference temperature clipped into
    the ambient range), nominal parts. A boosted peak's is its time to the threshold there
    (the coil's ``r_factor``/``l_factor`` too; :func:`coildrive.design.boost.firmware_peak`)."""
    drive = design.drive
    duty = design.hold.duty
    peak = design.pull_in.peak_time_s or 0.0
    temp = coil_temp
    if temp is None:
        temp = min(max(drive.coil.reference_temp, drive.ambient.min), drive.ambient.max)
    if design.boost is not None and peak > 0:
        peak = firmware_peak(design, supply, temp, r_factor, l_factor)
    if design.hold.regulation == "closed_loop":
        duty = settled_duty(design, supply, temp)
    b = drive.board
    if b.supply_sense is None:
        return duty, peak
    code = adc_code(supply / b.supply_sense.divider, b.adc.reference, b.adc.bits)
    if design.hold.regulation == "supply_table" and design.duty_table.adc_codes:
        duty = design.duty_table.compare_ticks[table_lookup(design.duty_table, code)] / design.timer.period_ticks
    if design.peak_table is not None:
        peak = design.peak_table.peak_ticks[table_lookup(design.peak_table, code)] / b.tick.rate
    return duty, peak


def firmware_arrays(design: Design, supply) -> tuple[np.ndarray, np.ndarray]:
    """:func:`firmware_setting` over an array of bus voltages: ``(duty, peak s)`` arrays."""
    drive = design.drive
    b = drive.board
    v = np.asarray(supply, float)
    duty = np.full(v.shape, design.hold.duty)
    peak = np.full(v.shape, design.pull_in.peak_time_s or 0.0)
    if b.supply_sense is None:
        return duty, peak
    lsb = b.adc.reference / 2**b.adc.bits
    code = np.clip(np.floor(v / b.supply_sense.divider / lsb), 0, 2**b.adc.bits - 1)
    if design.hold.regulation == "supply_table" and design.duty_table.adc_codes:
        k = table_index(design.duty_table.adc_codes, code)
        duty = np.asarray(design.duty_table.compare_ticks, float)[k] / design.timer.period_ticks
    if design.peak_table is not None:
        k = table_index(design.peak_table.adc_codes, code)
        peak = np.asarray(design.peak_table.peak_ticks, float)[k] / b.tick.rate
    return duty, peak
