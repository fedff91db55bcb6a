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


def boosted_rhs(g: dict, boost: tuple, bus: tuple | None = None):
    """``rhs(mode, free)`` -> ``f(t, y)`` for solve_ivp over ``y = (i, x, v, u)``: the
    armature in the current (:func:`current_form`) switched on to the boost capacitor
    (``mode`` ``"boost"``: ``boost = (V_b, C_b, R_b)``, ``u`` the capacitor), then the hold
    (``"on"``, ``"off"``: the freewheel while ``i > 0``) from the main supply ``g["v_on"]``,
    or with ``bus = (R_s, C, V_src)`` from the main bus ``u`` behind ``R_s`` from ``V_src``;
    ``free`` False: the armature at rest at its stop."""
    _, c_b, r_b = boost
    ind, slope, opening = current_form(g)

    def rhs(mode, free):
        def f(_t, y):
            i, x, v, u = y
            if mode == "boost":
                v_l, du = u - (g["r_on"] + r_b) * i, -i / c_b
            else:
                on = mode == "on"
                if on:
                    v_l = (g["v_on"] if bus is None else u) - g["r_on"] * i
                else:
                    v_l = -(g["r_off"] * i + g["v_off"]) if i > 0 else 0.0
                du = 0.0 if bus is None else ((bus[2] - u) / bus[0] - (i if on else 0.0)) / bus[1]
            if not free:
                return [v_l / ind(x), 0.0, 0.0, du]
            di = (v_l - i * slope(x) * v) / ind(x)
            acc = (opening(x) + 0.5 * i * i * slope(x) - g["damping"] * v) / g["mass"]
            return [di, v, acc, du]
        return f
    return rhs


def boosted_events(g: dict, trip: float):
    """solve_ivp's terminal events over ``y = (i, x, v, u)`` (:func:`boosted_rhs`): ``start``,
    the force beats spring + load at the open stop; ``at_trip``, the current rises through
    ``trip`` A."""
    _, slope, opening = current_form(g)
    s = g["stroke"]

    def start(_t, y):
        return -0.5 * y[0] ** 2 * slope(s) - opening(s)
    start.terminal, start.direction = True, 1

    def at_trip(_t, y):
        return y[0] - trip
    at_trip.terminal, at_trip.direction = True, 1
    return start, at_trip
