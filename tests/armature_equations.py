"""The moving armature's equations, written afresh for the tests' scipy references (they
import nothing of coildrive.model): with ``L(x) = L_c / (1 + beta x)`` (``x`` the gap,
``stroke`` when open, 0 seated) and the flux linkage ``lam``::

    i = lam (1 + beta x) / L_c
    magnetic pull (co-energy, 1/2 i^2 |dL/dx|) = lam^2 beta / (2 L_c)
    spring + load opening it = preload + rate (stroke - x) + load
"""

from __future__ import annotations


def values(p) -> dict:
    """One point's parameters of a model ``ArmatureParams`` as plain floats (SI)."""
    return {n: float(getattr(p, n)[0]) for n in p.arrays}


def equations(g: dict):
    """``(current(lam, x), opening force(x), magnetic pull(lam))`` of one point ``g``."""
    lc, beta, stroke = g["l_closed"], g["beta"], g["stroke"]

    def cur(lam, x):
        return lam * (1 + beta * x) / lc

    def opening(x):
        return g["preload"] + g["rate"] * (stroke - x) + g["load"]

    def pull(lam):
        return lam * lam * beta / (2 * lc)

    return cur, opening, pull


def current_form(g: dict):
    """``(L(x) H, dL/dx H/m, opening force(x) N)`` of one point ``g``: the equations in the
    current, ``L(x) di/dt = V - R i - i L'(x) v`` with the pull ``-i^2 L'(x) / 2``."""
    lc, beta, stroke = g["l_closed"], g["beta"], g["stroke"]

    def ind(x):
        return lc / (1 + beta * x)

    def slope(x):
        return -lc * beta / (1 + beta * x) ** 2

    def opening(x):
        return g["preload"] + g["rate"] * (stroke - x) + g["load"]

    return ind, slope, opening


def boosted_loop(g: dict, boost: tuple, bus: tuple | None = None, r_e: float | None = None,
                 clamp: float | None = None):
    """``loop(mode, y)`` -> ``(v_L V, i_t A)`` over ``y = (i, x, v, u)``: the voltage across the
    inductance and the terminal current (what the sense and the source see) in ``mode``
    (:func:`boosted_rhs`). ``r_e``: an eddy resistance across the inductance -- ``i`` is then
    the inductance's current, the loop (``drive``, ``R``) carries ``i_t = (drive + R_e i) / (R
    + R_e)`` and the inductance sees ``R_e (i_t - i)``; freewheeling, while ``i_t > 0``, else
    the path blocks and the flux dies through ``R_e`` alone (``v_L = -R_e i``). In the
    ``"boost"`` mode ``y`` may hold arrays (no branch). ``clamp``: a clamp across the switch
    at that voltage, on the main bus: freewheeling, the current flows on from the bus ``u``
    through it, ``drive = u - V_clamp``."""
    _, c_b, r_b = boost

    def loop(mode, y):
        i, u = y[0], y[3]
        if mode == "boost":
            drive, r = (u if c_b > 0 else boost[0]), g["r_on"] + r_b
        elif mode == "on":
            drive, r = (g["v_on"] if bus is None else u), g["r_on"]
        else:
            drive, r = (-g["v_off"] if clamp is None else u - clamp), g["r_off"]
        if r_e is None:
            if mode == "off" and i <= 0:
                return 0.0, 0.0
            return drive - r * i, i
        term = (drive + r_e * i) / (r + r_e)
        if mode == "off" and term <= 0:
            return -r_e * i, 0.0
        return r_e * (term - i), term
    return loop


def boosted_rhs(g: dict, boost: tuple, bus: tuple | None = None, r_e: float | None = None,
                clamp: float | None = None):
    """``rhs(mode, free)`` -> ``f(t, y)`` for solve_ivp over ``y = (i, x, v, u)``: the
    armature in the current (:func:`current_form`) switched on to the boost capacitor
    (``mode`` ``"boost"``: ``boost = (V_b, C_b, R_b)``, ``u`` the capacitor; ``C_b = 0`` an
    ideal boost, ``u`` stays), then the hold (``"on"``, ``"off"``: the freewheel while ``i >
    0``) from the main supply ``g["v_on"]``, or with ``bus = (R_s, C, V_src)`` from the main
    bus ``u`` behind ``R_s`` from ``V_src``; ``free`` False: the armature at rest at its stop.
    ``r_e``: an eddy resistance across the inductance, ``clamp``: a clamp across the switch
    whose off-times draw from the bus (:func:`boosted_loop`)."""
    c_b = boost[1]
    ind, slope, opening = current_form(g)
    loop = boosted_loop(g, boost, bus, r_e, clamp)

    def rhs(mode, free):
        def f(_t, y):
            i, x, v, u = y
            v_l, term = loop(mode, y)
            if mode == "boost":
                du = -term / c_b if c_b > 0 else 0.0
            else:
                on = mode == "on"
                draws = on or clamp is not None   # (a clamp's off-times draw from the bus too)
                du = 0.0 if bus is None else ((bus[2] - u) / bus[0] - (term if draws else 0.0)) / bus[1]
            if not free:
                return [v_l / ind(x), 0.0, 0.0, du]
            di = (v_l - i * slope(x) * v) / ind(x)
            acc = (opening(x) + 0.5 * i * i * slope(x) - g["damping"] * v) / g["mass"]
            return [di, v, acc, du]
        return f
    return rhs


def boosted_events(g: dict, trip: float, loop=None):
    """solve_ivp's terminal events over ``y = (i, x, v, u)`` (:func:`boosted_rhs`): ``start``,
    the force beats spring + load at the open stop; ``at_trip``, the current (given the
    :func:`boosted_loop` ``loop``, the boost's terminal current) rises through ``trip`` A."""
    _, slope, opening = current_form(g)
    s = g["stroke"]

    def start(_t, y):
        return -0.5 * y[0] ** 2 * slope(s) - opening(s)
    start.terminal, start.direction = True, 1

    def at_trip(_t, y):
        return (y[0] if loop is None else loop("boost", y)[1]) - trip
    at_trip.terminal, at_trip.direction = True, 1
    return start, at_trip


def hold_on_bus(rhs, seat, t: float, y: list, free: bool, trip: float, duty: float, period: float,
                t_end: float, opts: dict, out: dict, fix=None) -> list:
    """The PWM hold on the main bus for a solve_ivp reference, from the hand-over at ``t`` =
    ``trip`` s (state ``y``, its row 3 the bus ``u``): ``rhs(mode, free)`` -> ``f(t, y)``
    for ``mode`` "on" / "off", ``seat`` the seat's event (``free``: the armature not yet
    seated), periods of ``period`` s on for ``duty`` until ``t_end`` s. The lowest bus is
    found at the pieces' ends and at the events where ``du/dt`` turns from falling to
    rising. Into ``out``: ``seat``, ``seat_bus`` (where it seats in the hold), ``low``,
    ``low_t``; ``fix(y)`` adjusts a piece's end state (e.g. the current held at zero).
    Returns the state at ``t_end``."""
    from scipy.integrate import solve_ivp

    low, low_t = y[3], t
    k = 0
    while t < t_end:
        for mode, stop in (("on", trip + (k + duty) * period), ("off", trip + (k + 1) * period)):
            stop = min(stop, t_end)
            while t < stop:
                f = rhs(mode, free)

                def turn(tt, yy, f=f):   # du/dt from falling to rising: a minimum of the bus
                    return f(tt, yy)[3]
                turn.direction = 1
                sol = solve_ivp(f, (t, stop), y, events=[turn] + ([seat] if free else []), **opts)
                for tm, ym in zip(sol.t_events[0], sol.y_events[0]):
                    if ym[3] < low:
                        low, low_t = float(ym[3]), float(tm)
                t, y = float(sol.t[-1]), list(sol.y[:, -1])
                if fix is not None:
                    fix(y)
                if y[3] < low:
                    low, low_t = y[3], t
                if free and sol.t_events[1].size:
                    out["seat"], out["seat_bus"], free = t, y[3], False
                    y[1] = y[2] = 0.0
        k += 1
    out.update(low=low, low_t=low_t)
    return y


def boost_peak(rhs, start, at_trip, seat, y: list, t_peak: float, opts: dict, out: dict):
    """The boosted peak for a solve_ivp reference from switch-on (state ``y``): at rest on
    the open stop until ``start``, in flight, and where ``seat`` comes first at rest on the
    seat (``out["seat"]``), each until ``at_trip`` or ``t_peak`` s; ``rhs(mode, free)`` with
    ``mode`` "boost". Returns ``(t, y, free)`` at the end of the peak (``out["trip"]`` = t)."""
    from scipy.integrate import solve_ivp

    sol = solve_ivp(rhs("boost", False), (0, t_peak), y, events=[start, at_trip], **opts)
    t, y = float(sol.t[-1]), list(sol.y[:, -1])
    free = bool(sol.t_events[0].size) and not sol.t_events[1].size
    if free:
        sol = solve_ivp(rhs("boost", True), (t, t_peak), y, events=[at_trip, seat], **opts)
        t, y = float(sol.t[-1]), list(sol.y[:, -1])
        if sol.t_events[1].size:   # seated in the peak: on to the threshold at rest
            out["seat"], free = t, False
            y[1] = y[2] = 0.0
            sol = solve_ivp(rhs("boost", False), (t, t_peak), y, events=[at_trip], **opts)
            t, y = float(sol.t[-1]), list(sol.y[:, -1])
    out["trip"] = t
    return t, y, free


def flux_pieces(g: dict, dlam):
    """solve_ivp's pieces over the flux linkage ``lam`` (:func:`equations`), the circuit's
    ``dlam(lam, x, on)`` given: ``(resting(x, on), free(on), event(f, direction))`` --
    the armature at rest at gap ``x`` (``y = [lam]``), in flight (``y = [lam, x, v]``),
    and a terminal event."""
    _, opening, pull = equations(g)

    def resting(x, on):
        return lambda t, y: [dlam(y[0], x, on)]

    def free(on):
        return lambda t, y: [dlam(y[0], y[1], on), y[2],
                             (opening(y[1]) - pull(y[0]) - g["damping"] * y[2]) / g["mass"]]

    def event(f, direction):
        f.terminal, f.direction = True, direction
        return f

    return resting, free, event


def switched_on_peak(g: dict, dlam, t_peak: float, tol: dict):
    """The peak with the switch on from rest (solve_ivp with ``tol``, three pieces): resting
    open until the pull beats spring + load, free to the seat (inelastic), seated until
    ``t_peak`` s. Returns ``(t_move s, t_seat s, lam at t_peak Wb)``."""
    from scipy.integrate import solve_ivp

    _, opening, pull = equations(g)
    resting, free, event = flux_pieces(g, dlam)
    stroke = g["stroke"]
    s = solve_ivp(resting(stroke, True), (0, t_peak), [0.0],
                  events=event(lambda t, y: pull(y[0]) - opening(stroke), 1), **tol)
    t_move, lam = s.t_events[0][0], s.y_events[0][0][0]
    s = solve_ivp(free(True), (t_move, t_peak), [lam, stroke, 0.0], events=event(lambda t, y: y[1], -1), **tol)
    t_seat, lam = s.t_events[0][0], s.y_events[0][0][0]
    s = solve_ivp(resting(0.0, True), (t_seat, t_peak), [lam], **tol)
    return t_move, t_seat, float(s.y[0, -1])
