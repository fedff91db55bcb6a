"""The moving armature in the design (``[armature]``): its figures across the corners
and the checks that it seats, stays seated without chatter, lets go, and that the file's
currents agree with the force balance.
"""

from __future__ import annotations

import math

import numpy as np

from ..config import Drive
from .corners import CornerGrid
from .evaluate import PointResults
from .figures import worst
from .result import ArmatureResult, Check, ReleaseResult


def armature_result(drive: Drive, grid: CornerGrid, res: PointResults) -> ArmatureResult:
    from ..model.magnet import equivalent_gap, fit_gap, inductance_slope  # only [armature] drives pay

    arm = drive.armature
    a = res.armature
    pin, rel = a.pull_in, a.release
    lc, beta = fit_gap(arm.inductance_open, arm.inductance_closed, arm.stroke)
    g0 = float(equivalent_gap(beta))
    k_seat = worst(pin.seat_time)
    seated = pin.status == 0
    k_early = worst(np.where(seated, pin.seat_time, np.inf), largest=False)
    k_rel = worst(rel.open_time)
    ratio = a.hold_current / a.stay_current
    k_hold = worst(ratio, largest=False)
    low = grid.supply == np.min(grid.supply)
    k_hl = int(np.flatnonzero(low)[worst(res.coil_temp[low])])
    k_through = worst(a.stroke_current)
    through = float(a.stroke_current[k_through])
    stay = float(np.max(a.stay_current))
    lift_ok = a.hold_lift <= 0
    basis = ("RMS current (the ripple never drops below the stay current)" if np.all(lift_ok) else
             "RMS current where the mass averages the ripple, else the ripple bottom")
    dip = pin.dip_current
    boosted = {}
    if a.boost is not None:   # a boosted peak: where the armature seats, and its window
        from ..model.armature_boost import seated_in_peak
        boosted = dict(seated_in_peak_corners=int(np.sum(seated_in_peak(pin))),
                       seat_window_s=float(a.boost.window))
    return ArmatureResult(
        inductance_open_h=arm.inductance_open, inductance_closed_h=arm.inductance_closed,
        stroke_m=arm.stroke, equivalent_gap_m=g0,
        force_constant_h_m=float(lc * g0) if math.isfinite(g0) else math.inf,
        slope_open_h_m=float(inductance_slope(arm.stroke, lc, beta)),
        slope_closed_h_m=float(inductance_slope(0.0, lc, beta)),
        current_margin=arm.current_margin, derived=list(arm.derived),
        start_current_a=float(np.max(a.start_current)), stroke_current_a=through,
        stroke_current_gap_m=float(a.stroke_gap[k_through]), stay_current_a=stay,
        dropout_current_a=float(np.min(a.stay_current)),
        pull_in_current_margin=drive.pull_in.current / through if through > 0 else math.inf,
        hold_current_margin=drive.hold.current / stay if stay > 0 else math.inf,
        seat_time_s=float(pin.seat_time[k_seat]), seat_corner=grid.label(k_seat),
        seat_time_min_s=float(pin.seat_time[k_early]),
        dip_current_a=float(dip[k_seat]), dip_time_s=float(pin.dip_time[k_seat]),
        dip_current_min_a=float(np.nanmin(dip)) if np.any(np.isfinite(dip)) else math.nan,
        release_open_time_s=float(rel.open_time[k_rel]), release_corner=grid.label(k_rel),
        hold_force_current_a=float(a.hold_current[k_hold]), hold_force_margin=float(ratio[k_hold]),
        hold_force_corner=grid.label(k_hold), hold_force_basis=basis,
        hottest_low_supply_corner=grid.label(k_hl), hottest_low_supply_margin=float(ratio[k_hl]),
        hold_lift_max_m=float(np.max(a.hold_lift)),
        seated_corners=int(np.sum(seated)), opened_corners=int(np.sum(rel.status == 0)),
        corners=len(grid), **boosted,
    )


def _mm(metres: float) -> str:
    return f"{metres * 1e3:.3g} mm"


def armature_checks(drive: Drive, grid: CornerGrid, res: PointResults, ar: ArmatureResult,
                     release: ReleaseResult) -> list[Check]:
    """Checks of the moving armature: it seats, stays seated, lets go; the file's currents
    against the force balance."""
    from ..model.armature import CHATTER_FRACTION, NO_START  # only [armature] drives pay

    arm = drive.armature
    a = res.armature
    pin, rel = a.pull_in, a.release
    out: list[Check] = []
    add = out.append
    i_inf = res.loop.v_on / res.loop.r_on

    # It seats at every corner.
    bad = np.flatnonzero(pin.status != 0)
    where_seated = ""
    if ar.seated_in_peak_corners is not None:
        n_peak = ar.seated_in_peak_corners
        where_seated = (" within the boosted peak (before the threshold)" if n_peak == len(grid) else
                        f"; within the boosted peak at {n_peak} of {len(grid)} corners, in the hold after "
                        f"the threshold at the rest (window {ar.seat_window_s * 1e3:.4g} ms: "
                        "pull_in.margin x the longest boosted peak)")
    if bad.size == 0:
        add(Check("armature_seats", True,
                  f"seated at every corner{where_seated if ar.seated_in_peak_corners == len(grid) else ''}, "
                  f"latest {ar.seat_time_s * 1e3:.4g} ms ({ar.seat_corner}); "
                  f"current dip {ar.dip_current_a:.4g} A at the seat moment"
                  + (where_seated if ar.seated_in_peak_corners not in (None, len(grid)) else "")))
    else:
        k = int(bad[0])
        where = f"{bad.size} of {len(grid)} corners, e.g. {grid.label(k)}"
        if pin.status[k] == NO_START:
            force = arm.spring_preload + arm.load_force
            why = (f"the coil reaches only {i_inf[k]:.4g} A but spring preload + load "
                   f"({force:.4g} N) need {a.start_current[k]:.4g} A at the open gap: the "
                   "armature never moves")
            if not np.isfinite(a.start_current[k]):
                why = ("inductance_open = inductance_closed: the coil makes no force on the "
                       "armature")
            fix = " — a stronger spring than the coil can pull: lower spring_preload/load_force, raise the supply or use a coil with more ampere-turns"
        elif a.stroke_current[k] >= i_inf[k]:
            why = (f"the armature stalls at gap {_mm(pin.stall_gap[k])}: spring + load need "
                   f"{a.stroke_current[k]:.4g} A at gap {_mm(a.stroke_gap[k])} but the coil "
                   f"carries at most {i_inf[k]:.4g} A")
            fix = " — the spring rate or the load keeps it from seating: lower them or raise the current"
        elif a.boost is not None and not np.isfinite(pin.trip_time[k]):
            why = ("the boost at its lowest never drives the moving armature's coil to the threshold "
                   "there (see boost_threshold): no boosted peak to pull it in")
            fix = " — a larger boost capacitance or a higher boost voltage"
        elif a.boost is not None:
            why = (f"not seated within {a.boost.window * 1e3:.4g} ms of switch-on (pull_in.margin x the "
                   f"longest boosted peak; gap {_mm(pin.stall_gap[k])} then): the threshold ends the "
                   f"boost after {pin.trip_time[k] * 1e3:.4g} ms with the armature "
                   + ("still open" if pin.trip_state[1, k] >= arm.stroke else "in flight")
                   + ", and the hold does not carry it onto the seat in time")
            fix = (" — a higher threshold (pull_in.current_margin: a longer push from the boost), a "
                   "higher hold current, or a lighter spring")
        else:
            why = (f"not seated within {pin.bound[k] * 1e3:.4g} ms (gap {_mm(pin.stall_gap[k])} "
                   "at the end): the armature moves too slowly (mass, damping)")
            fix = " — check mass and damping"
        add(Check("armature_seats", False, f"not seated at {where}: {why}{fix}"))

    # It stays seated through the hold (closed-gap force balance).
    hold_ok = bool(ar.hold_force_margin >= 1.0 and np.all(np.isfinite(a.hold_current)))
    add(Check("armature_hold", hold_ok,
              f"hold force current {ar.hold_force_current_a:.4g} A vs {ar.stay_current_a:.4g} A to "
              f"stay seated (closed-gap force balance), margin x{ar.hold_force_margin:.3g} at "
              f"{ar.hold_force_corner}; x{ar.hottest_low_supply_margin:.3g} at the hottest, "
              f"lowest-supply corner ({ar.hottest_low_supply_corner}); counted as the {ar.hold_force_basis}"
              + ("" if hold_ok else " — raise hold.current: the armature would drop out during the hold")))

    # PWM ripple: can the armature chatter within one period?
    limit = CHATTER_FRACTION * min(arm.stroke, ar.equivalent_gap_m)
    add(Check("armature_chatter", bool(ar.hold_lift_max_m <= limit),
              f"largest lift within one PWM period {ar.hold_lift_max_m * 1e6:.3g} um vs "
              f"{limit * 1e6:.3g} um ({CHATTER_FRACTION:.0%} of min(stroke, equivalent gap): our "
              "choice)" + ("" if ar.hold_lift_max_m <= limit else
                           " — the ripple bottom falls below the stay current long enough to lift "
                           "the armature: raise the PWM frequency"),
              severity="warning"))

    # It lets go and returns to the open stop.
    bad = np.flatnonzero(rel.status != 0)
    if bad.size == 0:
        add(Check("armature_releases", True,
                  f"back on the open stop at every corner, latest {ar.release_open_time_s * 1e3:.4g} ms "
                  f"after turn-off ({ar.release_corner}) through the "
                  + ("bridge's fast decay into the bus" if drive.switch.topology == "full_bridge"
                     else f"{drive.freewheel.type} path")))
    else:
        k = int(bad[0])
        add(Check("armature_releases", False,
                  f"not back on the open stop at {bad.size} of {len(grid)} corners, e.g. {grid.label(k)}: "
                  f"gap {_mm(rel.stall_gap[k])} after {rel.bound[k] * 1e3:.4g} ms — spring preload + load "
                  f"({arm.spring_preload + arm.load_force:.4g} N at the open stop) against damping "
                  f"{arm.damping:.4g} N*s/m: a stronger return spring or less damping"))

    # The file's currents against the force balance.
    def compare(key: str, name: str, value: float, need: float, what: str) -> None:
        ratio = value / need if need > 0 else math.inf
        if key in arm.derived:
            add(Check(name, True, f"{key} not given: derived {value:.4g} A = x{arm.current_margin:g} "
                      f"(armature.current_margin) on {need:.4g} A {what}"))
            return
        if ratio >= arm.current_margin:
            add(Check(name, True, f"{key} {value:.4g} A vs {need:.4g} A {what}: "
                      f"x{ratio:.3g} (at least x{arm.current_margin:g} asked)"))
        elif ratio >= 1.0:
            add(Check(name, False, f"{key} {value:.4g} A vs {need:.4g} A {what}: only "
                      f"{(ratio - 1) * 100:.3g} % above, below the x{arm.current_margin:g} of "
                      "armature.current_margin", severity="warning"))
        else:
            add(Check(name, False, f"{key} {value:.4g} A disagrees with the mechanics: "
                      f"{(1 - ratio) * 100:.3g} % below the {need:.4g} A {what}"))

    compare("pull_in.current", "pull_in_current_mechanics", drive.pull_in.current,
            ar.stroke_current_a, "the mechanics need to pull in over the whole stroke (static "
            "force balance, lowest inductance)")
    compare("hold.current", "hold_current_mechanics", drive.hold.current, ar.stay_current_a,
            "the mechanics need to stay seated (static force balance, lowest inductance)")
    if "release.current" in arm.derived:
        add(Check("release_current_mechanics", True,
                  f"release.current not given: the predicted drop-out {drive.release.current:.4g} A "
                  "(nominal stay current)"))
    else:
        lo, hi = ar.dropout_current_a, ar.stay_current_a
        inside = lo * 0.9 <= drive.release.current <= hi * 1.1
        off = (drive.release.current / (lo if drive.release.current < lo else hi) - 1) * 100
        add(Check("release_current_mechanics", bool(inside),
                  f"release.current {drive.release.current:.4g} A vs the mechanics' drop-out "
                  f"{lo:.4g}..{hi:.4g} A over the tolerance band"
                  + ("" if inside else f": {off:+.3g} % off (more than 10 %); release times use "
                     "the armature model, not this current"),
                  severity="warning"))
    lo_l, hi_l = arm.inductance_open, arm.inductance_closed
    inside = lo_l * (1 - 1e-9) <= drive.coil.inductance <= hi_l * (1 + 1e-9)
    add(Check("coil_inductance_armature", bool(inside),
              f"coil.inductance {drive.coil.inductance * 1e3:.4g} mH vs armature "
              f"{lo_l * 1e3:.4g}..{hi_l * 1e3:.4g} mH (open..closed); with [armature] the model "
              "uses the armature values" + ("" if inside else ": check which position coil.inductance was measured at"),
              severity="warning"))
    return out
