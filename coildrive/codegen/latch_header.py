"""The firmware header of a latching coil: both pulse lengths and the shortest interval
between pulses as C constants (``codegen_templates/latch_header.h.j2``; pulses from the
boost: each pulse's threshold code, its time-out in the pulse's ticks), and with
``pull_in.compensate`` each pulse's table of ticks against the supply reading and its
lookup function. Pure: a :class:`~coildrive.design.latch.LatchDesign` in, text out."""

from __future__ import annotations

import math

from ..design.latch import LatchDesign
from ..resources import data_dir
from .header import Constant, c_uint_type, check_prefix


def latch_constants(d: LatchDesign, m: str) -> list[Constant]:
    """The header's constants (scheduler ticks at ``tick.rate``; the interval in ms too)."""
    r = d.latch
    by = {p.name: p for p in r.pulses}
    s, t = by["set"], by["reset"]
    out = [Constant(f"{m}_LATCH", 1, "a latching coil: set and reset pulses, no hold"),
           Constant(f"{m}_TICK_RATE_HZ", round(r.tick_rate_hz), "scheduler tick rate"),
           Constant(f"{m}_SET_PULSE_TICKS", s.ticks,
                    f"set pulse {s.time_s * 1e3:.4g} ms ({s.governed_by}, +1 tick), {s.switches}"),
           Constant(f"{m}_RESET_PULSE_TICKS", t.ticks,
                    f"reset pulse {t.time_s * 1e3:.4g} ms ({t.governed_by}, +1 tick), {t.switches}"),
           Constant(f"{m}_MIN_INTERVAL_TICKS", r.interval_ticks,
                    f"shortest start-to-start interval between any two pulses ({r.governed_by})"),
           Constant(f"{m}_MIN_INTERVAL_MS", math.ceil(r.interval_s * 1e3 - 1e-9),
                    f"the same in ms ({r.interval_s * 1e3:.4g} ms)"),
           Constant(f"{m}_DECAY_TICKS", math.ceil(max(p.decay_time_s for p in r.pulses) * r.tick_rate_hz - 1e-9),
                    "after a pulse the current is zero within this (never start the other polarity sooner)")]
    if s.boost is not None:
        out[2:4] = [Constant(f"{m}_{p.name.upper()}_PULSE_TICKS", p.ticks,
                             f"{p.name} pulse's time-out {p.time_s * 1e3:.4g} ms ({p.margin:g} x the slowest "
                             f"{p.boost.time_to_threshold_s * 1e3:.4g} ms, +1 tick): it ends at its threshold, "
                             "a pulse still on by then is a fault") for p in (s, t)]
        out += [Constant(f"{m}_LATCH_BOOSTED", 1, "both pulses from the boost (the boost switch on with the "
                         "winding's), each until its threshold code")]
        out += [Constant(f"{m}_{p.name.upper()}_THRESHOLD_CODE", p.boost.threshold_code,
                         f"{p.name} pulse ends when the current-sense reading is >= this "
                         f"({p.boost.threshold_a:.4g} A; compare once a tick)") for p in (s, t)]
        out.append(Constant(f"{m}_BOOST_RECHARGE_MS", math.ceil(r.boost_interval_s * 1e3 - 1e-9),
                            "the longest pulse + the boost's recharge at its power (in the interval above)"))
    if s.table is not None:
        out.append(Constant(f"{m}_PULSE_COMPENSATED", 1, "each pulse's ticks looked up against the supply "
                            "reading (the *_PULSE_TICKS above: the longest entry)"))
        out += [Constant(f"{m}_{p.name.upper()}_PULSE_TABLE_LEN", len(p.table.ticks),
                         f"entries of the {p.name} pulse's table") for p in (s, t)]
    return out


def pulse_tables(d: LatchDesign, m: str) -> list[dict]:
    """What the template's supply-compensated tables need, per pulse (none without a table):
    ``name``, ``macro``, ``rows`` (code, ticks, nominal bus V), ``adc_type``, ``tick_type``."""
    b = d.drive.board
    return [{"name": p.name, "macro": f"{m}_{p.name.upper()}", "rows": list(zip(p.table.adc_codes, p.table.ticks,
                                                                              p.table.supply_v)),
             "adc_type": c_uint_type(2**b.adc.bits - 1), "tick_type": c_uint_type(max(p.table.ticks))}
            for p in d.latch.pulses if p.table is not None]


def generate_latch_header(design: LatchDesign, prefix: str = "COIL") -> str:
    """Render the C header of a latching coil; ``prefix`` names the macros."""
    import jinja2  # only the header path pays for it

    m = check_prefix(prefix).upper()
    env = jinja2.Environment(
        loader=jinja2.FileSystemLoader(str(data_dir("codegen_templates"))),
        undefined=jinja2.StrictUndefined, keep_trailing_newline=True, trim_blocks=True, lstrip_blocks=True)
    return env.get_template("latch_header.h.j2").render(
        d=design, m=m, guard=f"{m}_LATCH_H", constants=latch_constants(design, m), lower=m.lower(),
        tables=pulse_tables(design, m))
