"""Tolerance Monte Carlo of a latching coil's designed pulses (``design --samples N``).

Each sample draws the supply uniformly over the range the pulses are designed for (the
lowest supply less ``hold.recharge_tolerance`` on a drooping bus, up to the highest), the
coil's temperature uniformly between ``ambient.min`` and ``thermal.max_coil_temp`` (the
limit the shortest interval keeps it at or below), each winding's resistance and
inductance within their tolerances (uniform, or normal with the tolerance as 3 sigma,
as the peak-and-hold Monte Carlo of :mod:`coildrive.design.montecarlo`) and the sense
resistor uniformly within its tolerance: the same box as the pulses' corners. At each
sample, with the designed pulse lengths, the same closed form as the corners gives per
pulse: the time to its current, the current at the end of the shortest real pulse, the
supply's energy over the longest pulse (on a stiff bus, as the design's) and the time to
zero after it. Failures count the samples whose shortest pulse does not reach its
current, or does not carry ``current_margin`` x it. With a moving armature the set
pulse's time is the armature's seat time (the same batched run as the design's) and
``set_not_seated`` counts the samples where it is not on the seat when the shortest
pulse ends. Pulses from the boost (:mod:`coildrive.design.latch_boost`) also draw the
boost's charge and capacitance uniformly within their tolerances: each pulse ends where
the sample's sense chain reads its threshold code (the energy and the decay one tick
later), and ``<pulse>_timed_out`` counts the samples whose threshold comes after the
time-out.

SI units (s, A, J).
"""

from __future__ import annotations

import dataclasses

import numpy as np

from ..config import Drive
from ..model.rl import decay_integrals
from .latch import (LatchDesign, Points, plain_pulse, pulse_loop, release_loop, rise_current_at,
                    seat_run, seated_pulse, table_lengths, time_to_zero, winding_drive,
                    clamp_decays_from_full)
from . import latch_boost
from .montecarlo import CHUNK, PERCENTILES, factors, summary
from .supply import rise_time

#: The figures kept per pulse and sample.
FIGURES = ("time_to_current_s", "end_current_a", "supply_j", "decay_time_s")


def _figures(wd: Drive, pts: Points, current: float, t_short, t_long) -> tuple:
    """The :data:`FIGURES` of one pulse at the points (``t_short``/``t_long``: its shortest
    and longest length s, per point or one for all); with a moving armature (the set
    pulse) the time is the seat time and the energy and the decay NaN where it is not
    seated by the longest pulse's end. The energy is the supply's (with a clamp across the
    switch, the decay's draw too; on the stiff bus, as the design's); with a clamp on the
    drooping bus the decay's time to zero is on that bus after a pulse from a full
    capacitor at the sample's supply (:func:`coildrive.design.latch.clamp_decays_from_full`)."""
    lp = pulse_loop(wd, pts)
    rel = release_loop(wd, pts)
    if wd.armature is None:
        i_top, q_on, _ = plain_pulse(lp, t_long)
        t_req, i_end = rise_time(wd, lp, current, lp.inductance), rise_current_at(wd, lp, t_short)
    else:
        pin, p = seat_run(wd, lp, pts, peak_time=t_short)
        seated = (pin.status == 0) & (pin.seat_time <= t_long)
        t_req = np.where(pin.status == 0, pin.seat_time, np.inf)
        i_end = pin.peak_end_current
        i_top, q_on, _ = seated_pulse(wd, lp, pts, pin, p, t_long)
        i_top, q_on = np.where(seated, i_top, np.nan), np.where(seated, q_on, np.nan)
    t_zero = time_to_zero(wd, lp, rel, i_top)
    if wd.freewheel.type == "clamp":   # the decay draws from the bus too (latch._pulse)
        q_on = q_on + decay_integrals(np.where(np.isfinite(t_zero), t_zero, 0.0), np.nan_to_num(i_top), rel.r_off,
                                      rel.v_off, rel.inductance)[0]
        if wd.supply.droops:   # the time to zero on that bus, from a full capacitor (latch._pulse)
            t_zero = clamp_decays_from_full(wd, lp, rel, t_long).zero_time
    return (t_req, i_end, lp.v_on * q_on, t_zero)


def _boost_figures(wd: Drive, pts: Points, p, v_factor, c_factor) -> tuple:
    """The :data:`FIGURES` of a pulse from the boost at the points and whether it timed out
    (:func:`coildrive.design.latch_boost.sample_figures`)."""
    return latch_boost.sample_figures(wd, pulse_loop(wd, pts), release_loop(wd, pts), pts.sense_factor, p.boost,
                                      p.current_a, v_factor, c_factor, pts.l_factor)


def with_monte_carlo(d: LatchDesign, samples: int, seed: int = 1) -> LatchDesign:
    """``d`` with its Monte Carlo of ``samples`` samples (``monte_carlo``)."""
    return dataclasses.replace(d, monte_carlo=latch_monte_carlo(d, samples, seed))


def latch_monte_carlo(d: LatchDesign, samples: int, seed: int = 1, chunk: int = CHUNK) -> dict:
    """``samples`` random operating points of the designed pulses (module docstring): a
    JSON-ready dict with ``samples``, ``seed``, ``percentiles``, ``distribution``, per
    pulse name each figure's percentiles, min and max, and ``failures``."""
    drive = d.drive
    rng = np.random.default_rng(seed)
    scale = 1.0 - drive.latch.recharge_tolerance if drive.supply.droops and not drive.supply.boosted else 1.0
    supply = rng.uniform(drive.supply.min * scale, drive.supply.max, samples)
    temp = rng.uniform(drive.ambient.min, drive.thermal.max_coil_temp, samples)
    sense = factors(rng, drive.board.sense.resistance_tolerance, samples, "uniform")
    out: dict = {"samples": samples, "seed": seed, "percentiles": list(PERCENTILES),
                 "distribution": drive.coil.tolerance_distribution, "pulses": {}, "failures": {}}
    tol = {}
    for p in d.latch.pulses:
        coil = winding_drive(drive, p.name == "reset").coil
        if p.winding not in tol:   # a bridge's reset drives the same coil: the same draws
            tol[p.winding] = (factors(rng, coil.resistance_tolerance, samples, coil.tolerance_distribution),
                         factors(rng, coil.inductance_tolerance, samples, coil.tolerance_distribution))
    boosted = drive.supply.boosted
    if boosted:   # the boost's charge and capacitance, drawn last (the other draws as without it)
        s = drive.supply
        v_f = rng.uniform(1.0 - s.boost_tolerance, 1.0 + s.boost_tolerance, samples)
        c_f = rng.uniform(1.0 - s.boost_capacitance_tolerance, 1.0 + s.boost_capacitance_tolerance, samples)
    for p in d.latch.pulses:
        wd = winding_drive(drive, p.name == "reset")
        rf, lf = tol[p.winding]
        values = tuple(np.full(samples, np.nan) for _ in FIGURES)
        timed_out = np.zeros(samples, bool)
        # each sample's shortest and longest pulse (a compensated one's: the entries its readings select)
        short, long_ = (np.broadcast_to(x, supply.shape) for x in
                        ((p.shortest_s, p.time_s) if p.table is None else table_lengths(drive, p.table, supply)))
        if p.ticks is not None:
            for start in range(0, samples, chunk):
                sl = slice(start, min(start + chunk, samples))
                pts = Points(supply[sl], temp[sl], rf[sl], lf[sl], sense[sl])
                if boosted:
                    *got, timed_out[sl] = _boost_figures(wd, pts, p, v_f[sl], c_f[sl])
                else:
                    got = _figures(wd, pts, p.current_a, short[sl], long_[sl])
                for arr, fig in zip(values, got):
                    arr[sl] = fig
        figs = dict(zip(FIGURES, values))
        out["pulses"][p.name] = {name: summary(v) for name, v in figs.items()}
        end = figs["end_current_a"]
        out["failures"][f"{p.name}_not_reached"] = int(np.sum(~(end >= p.current_a)))
        out["failures"][f"{p.name}_below_margin"] = int(np.sum(~(end >= p.current_margin * p.current_a)))
        if boosted:
            out["failures"][f"{p.name}_timed_out"] = int(np.sum(timed_out)) if p.ticks is not None else samples
        if wd.armature is not None:   # (from the boost: the seat's time is inf where not seated by the trip)
            out["failures"][f"{p.name}_not_seated"] = int(np.sum(~(figs["time_to_current_s"] <= short) if not boosted
                                                             else ~np.isfinite(figs["time_to_current_s"])))
    return out
