"""The driver's fast-rise diagnostic (shorted turns), designed over the envelope.

Shorted turns leave fewer turns on the same magnetic path: the inductance falls with the
square of the turns (``L = N^2 / reluctance``, the textbook inductor relation) and the
resistance only in proportion, so the current rises faster from switch-on. Early in the
rise the time to a current ``i`` is ``t = (L/R)(-ln(1 - iR/V))``, about ``L i / V`` (the
RL step of docs/design-method.md): at a known supply it measures the inductance. The
driver reads the supply, so the rule scales with it: ``n`` conversions to the rise code
at a supply reading ``s`` is a fault when ``n x s`` is below the design's ``limit``.

The limit is the healthy envelope's fastest rise (the cold coil with its resistance and
inductance at their low tolerances, at every supply of the file, as the supply reads
lowest and the current highest), with a margin; :func:`rise_check` also says below which
inductance it trips at every corner. A short that develops while the coil is held is not
seen until the next switch-on (the over-current check covers the hard short).

A boosted peak (``[supply] boost``) rises from the boost, not the main supply: the healthy
rise is the boost capacitor's series RLC (:mod:`coildrive.design.boost`, the boost at its
highest for the fastest), the limit is not scaled by the supply reading (the supply sense
reads the main bus), and the trip inductance is bisected on the same rise (the boost at
its lowest). Timed on the main supply's slower rise, the limit would fault every healthy
boosted rise.

With an ``[armature]``, :func:`seat_check` gives the driver's seat detector its codes
(the dip's fall and climb) and the time the climb takes after the seat, so that the
armature's latest healthy seat is seen before the stuck check gives up.
"""

from __future__ import annotations

import math

import numpy as np

from ..config import Drive
from ..model import eddy
from ..model.eddy import EddyCoil
from ..model.circuit import open_inductance
from ..model.flux import FluxCoil
from ..model.rl import rise_time
from . import boost
from .corners import CornerGrid
from .envelope import reading_factors, supply_codes
from .evaluate import PointResults
from .result import RiseCheck, SeatCheck

#: The rise code as a fraction of the weakest final current (V/R at the hot coil, the
#: lowest supply), as the channel reads it low: early in the rise, where its time goes
#: with the inductance more than with the (temperature-dependent) resistance, yet late
#: enough to span several conversions (a design decision, docs/firmware.md).
RISE_FRACTION = 0.3
#: The fault trips at this fraction of the fastest healthy figure: ten per cent for
#: what the closed form leaves out (common practice for a diagnostic margin).
RISE_MARGIN = 0.9
#: Codes of noise that may make a reading cross early (common practice: an ADC's noise
#: is a code or two, as for the seat's dip codes).
NOISE_CODES = 2
#: A rise code below this many codes is too close to the noise: the check is off.
MIN_RISE_CODES = 8
#: A healthy rise shorter than this many conversions is too coarse to time: the check is off.
MIN_CONVERSIONS = 3


def rise_check(drive: Drive, grid: CornerGrid, res: PointResults, conversion_hz: float) -> RiseCheck:
    """The fast-rise limit over the corners of ``res`` (any hold: only the switch-on rise
    from zero, on the hold's loop with the switch fully on, is used). ``conversion_hz``:
    the driver's conversions a second in the peak (one a PWM period)."""
    board = drive.board
    adc = board.adc
    vpa = board.sense.resistance * board.sense.gain
    lsb_a = adc.reference / 2**adc.bits / vpa
    low, high = reading_factors(drive)
    lp = res.loop
    v = np.asarray(lp.v_on, float)
    r = np.asarray(lp.r_on, float)
    base_l = drive.coil.inductance if drive.armature is None else drive.armature.inductance_open
    # before the armature moves the rise sees its open inductance; motion only slows it
    ind = base_l * np.broadcast_to(np.asarray(res.l_factor, float), v.shape)
    flux_coil = isinstance(lp.inductance, FluxCoil)
    if flux_coil:   # a saturating coil rises through its curve (faster as it saturates)
        rising = lp.inductance   # with [armature] and two curves: the open one
        if drive.armature is not None:
            rising = open_inductance(drive, res.l_factor)
        ind = rising.with_scale(np.broadcast_to(np.asarray(rising.scale, float), v.shape))
    weakest = float(np.min(v / r))
    boosted = drive.supply.boosted
    if boosted:   # a boosted peak ends at the boost's threshold
        weakest = min(weakest, boost.threshold(drive)[0])
    code = math.floor(RISE_FRACTION * weakest * low / lsb_a)
    # a boosted peak rises from the boost, which the supply sense does not read: no scaling
    by_supply = board.supply_sense is not None and not boosted
    if by_supply:
        s_low, s_high = (np.maximum(x, 1) for x in supply_codes(drive, v))
    else:
        s_low = s_high = np.ones(v.shape, int)
    # the earliest healthy crossing: the channel reading high, noise a few codes up
    i_early = max(code - NOISE_CODES, 0) * lsb_a / high
    eddy_coil = isinstance(lp.inductance, EddyCoil)
    if eddy_coil:   # the terminal current steps at switch-on, then rises with the flux
        e = lp.inductance
        if drive.armature is not None:   # of the open coil's branch, before the armature moves
            mag = open_inductance(drive, res.l_factor)
            mag = (mag.with_scale(np.broadcast_to(np.asarray(mag.scale, float), v.shape))
                   if isinstance(mag, FluxCoil) else np.broadcast_to(np.asarray(mag, float), v.shape))
            e = EddyCoil(mag, e.resistance)
        ind = e[...]
        scale = np.broadcast_to(np.asarray(res.l_factor, float), v.shape)
        t = np.asarray(eddy.terminal_rise_time(i_early, v, r, ind), float)
    else:
        t = np.asarray(rise_time(i_early, 0.0, v, r, ind), float)
    coil = e if eddy_coil else ind
    if boosted:   # the boost at its highest (the fastest rise), its capacitor's droop in it
        t = np.asarray(boost.rise_time(drive, lp, i_early, coil, high=True, sensed=True), float)
    product = t * conversion_hz * s_low
    k = int(np.argmin(product))
    fastest = float(t[k])
    limit = math.floor(RISE_MARGIN * float(product[k]))
    # below which inductance it trips surely: a conversion late (n <= t f + 1), the
    # reading low (a code and the noise later), the supply read high; R as healthy (fewer
    # turns lower it too, which only makes the rise faster)
    i_late = (code + 1 + NOISE_CODES) * lsb_a / low
    with np.errstate(divide="ignore", invalid="ignore"):
        if boosted:
            factor = _boosted_trip_factor(drive, lp, i_late, coil, base_l, limit, conversion_hz)
        elif eddy_coil:   # the time scales with the magnetising branch: s per unit of scale
            per_l = np.asarray(eddy.terminal_rise_time(i_late, v, r, ind), float) / scale
            factor = float(max(np.min((limit / s_high - 1.0) / conversion_hz / per_l), 0.0))
        elif flux_coil:   # the time scales with the curve's scale: s per unit of scale
            per_l = np.asarray(rise_time(i_late, 0.0, v, r, ind.with_scale(np.ones(v.shape))), float)
            factor = float(max(np.min((limit / s_high - 1.0) / conversion_hz / per_l), 0.0))
        else:
            per_l = np.asarray(rise_time(i_late, 0.0, v, r, 1.0), float)      # s per henry
            l_trip = (limit / s_high - 1.0) / conversion_hz / per_l
            factor = float(max(np.min(l_trip), 0.0) / base_l)
    why = ""
    if code < MIN_RISE_CODES:
        why = f"the rise code {code} is within {MIN_RISE_CODES} codes of zero (sense too coarse)"
    elif not float(np.min(t)) * conversion_hz >= MIN_CONVERSIONS:
        why = (f"the fastest healthy rise ({fastest * 1e6:.3g} us) spans fewer than "
               f"{MIN_CONVERSIONS} conversions")
    if why:
        limit, factor = 0, 0.0
    return RiseCheck(code=code, current_a=code * lsb_a, conversion_hz=float(conversion_hz),
                     by_supply=by_supply, limit=int(limit), margin=RISE_MARGIN,
                     noise_codes=NOISE_CODES, fastest_s=fastest,
                     fastest_product=float(product[k]), fastest_corner=grid.label(k),
                     inductance_h=float(base_l), trip_inductance_factor=factor, why_off=why)


def _at_scale(coil, base_l: float, x: float):
    """``coil`` (an array of H, a :class:`FluxCoil` or an :class:`EddyCoil`) at ``x`` times
    its nominal inductance (``base_l`` H) or curve, at every point."""
    if isinstance(coil, EddyCoil):
        return EddyCoil(_at_scale(coil.magnetising, base_l, x), coil.resistance)
    if isinstance(coil, FluxCoil):
        return coil.with_scale(np.full(np.shape(coil.scale), x))
    return np.full(np.shape(coil), x * base_l)


#: Bisection steps for a boosted peak's trip inductance: 2^-16 of the nominal, finer than
#: the 4 digits reported (each step is a rise at every point: on a flux-linkage curve a
#: stepped run, ~0.09 s CPU over tests/test_boost_flux.py's curve's corners).
TRIP_FACTOR_STEPS = 16


def _boosted_trip_factor(drive: Drive, lp, i_late: float, coil, base_l: float, limit: int,
                         conversion_hz: float) -> float:
    """The inductance (x the nominal) below which a boosted peak's rise check trips surely:
    the boost at its lowest (the slowest rise) reaches ``i_late`` A within ``limit`` less
    one conversions (a conversion late) at every point. The boost's series RLC rise is
    not proportional to the inductance (its capacitor droops), so the factor is bisected
    on the closed form (the rise time grows with the inductance)."""
    t_max = (limit - 1.0) / conversion_hz

    def trips(x: float) -> bool:
        t = np.asarray(boost.rise_time(drive, lp, i_late, _at_scale(coil, base_l, x), sensed=True), float)
        return bool(np.all(t <= t_max))

    lo, hi = 0.0, 1.0
    if t_max <= 0.0:
        return 0.0
    if trips(hi):
        return hi
    for _ in range(TRIP_FACTOR_STEPS):
        mid = 0.5 * (lo + hi)
        lo, hi = (mid, hi) if trips(mid) else (lo, mid)
    return lo


def dip_codes(drive: Drive, depths) -> int:
    """The fall and the climb in ADC codes that mark the armature's seat in the current dip.

    Rule: a quarter of the shallowest dip over the corners (each corner's dip depth in A:
    the hump before the dip less its bottom), at least four codes. A quarter: the fall is
    seen early in the dip, and the climb after the bottom within a fraction of a
    millisecond on the example latch; four codes stay clear of an ADC's noise of a code or
    two (common practice).
    """
    d = np.asarray(depths, float)
    d = d[np.isfinite(d) & (d > 0)]
    if d.size == 0:
        return 4
    board = drive.board
    vpa = board.sense.resistance * board.sense.gain
    return max(4, math.floor(0.25 * float(np.min(d)) * vpa / board.adc.reference * 2**board.adc.bits))


def seat_check(drive: Drive, grid: CornerGrid, res: PointResults) -> SeatCheck | None:
    """The seat detector's codes and the longest climb it waits for after the seat, over the
    corners of ``res`` (``None`` without an armature). The climb: from the bottom of the dip
    (the armature at rest on its seat, no motional EMF) the seated coil's RL rise with the
    switch on, to ``dip_codes`` + 1 codes above it as the channel reads it low."""
    a = res.armature
    if a is None or drive.armature is None:
        return None
    pin = a.pull_in
    codes = dip_codes(drive, pin.dip_depth)
    board = drive.board
    lsb_a = board.adc.reference / 2**board.adc.bits / (board.sense.resistance * board.sense.gain)
    low, _ = reading_factors(drive)
    climb = (codes + 1) * lsb_a / low
    lp = res.loop
    v = np.asarray(lp.v_on, float)
    ind = drive.armature.inductance_closed * np.broadcast_to(np.asarray(res.l_factor, float), v.shape)
    if isinstance(lp.inductance, FluxCoil):   # the coil's seated curve (with two curves)
        ind = lp.inductance.with_scale(np.broadcast_to(np.asarray(lp.inductance.scale, float), v.shape))
    i_dip = np.asarray(pin.dip_current, float)
    seated = np.isfinite(i_dip)
    r = np.asarray(lp.r_on, float)
    start, end = i_dip, i_dip + climb
    if isinstance(lp.inductance, EddyCoil):
        # the dip is the terminal current's, i = (V + R_e i_m) / (R + R_e): the seated
        # branch's magnetising current climbs (R + R_e) / R_e times as far
        r_e = lp.inductance.resistance
        start = ((r + r_e) * i_dip - v) / r_e
        end = start + climb * (r + r_e) / r_e
        mag = lp.inductance.magnetising
        ind = EddyCoil(mag.with_scale(np.broadcast_to(np.asarray(mag.scale, float), v.shape))
                       if isinstance(mag, FluxCoil) else ind, np.broadcast_to(r_e, v.shape))
    with np.errstate(invalid="ignore", divide="ignore"):
        t = np.asarray(rise_time(end, start, v, r, ind), float)
    t = np.where(seated, t, np.nan)
    reachable = np.isfinite(t)
    k = int(np.nanargmax(np.where(reachable, t, np.nan))) if reachable.any() else 0
    return SeatCheck(dip_codes=codes, climb_a=float(climb),
                     climb_s=float(t[k]) if reachable.any() else math.nan,
                     climb_corner=grid.label(k) if reachable.any() else "",
                     unseen_corners=int(np.sum(seated & ~reachable)))
