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
