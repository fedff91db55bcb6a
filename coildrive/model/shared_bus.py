"""Several coils on one drooping bus: their peaks behind one source resistance, exact.

The circuit (a board's supply rail with ``n`` channels)::

    V_s ──R_s──┬── bus v(t) ──R_1──L_1── switch 1 ── 0 V
               C        ├─────R_2──L_2── switch 2 ── 0 V
               │        ...
              0 V

Coil ``k`` (loop ``R_k`` ohm: coil, switch, sense; ``L_k`` H) draws from the bus from its
switch-on ``on_k`` s to the end of its peak ``off_k`` s; after it, it freewheels in its own
loop and draws nothing from the bus (a diode, Zener or resistor path across the coil).
Between those moments the set of coils on the bus is fixed and the state
``x = (i_active..., v)`` obeys the linear system with constant input::

    L_k di_k/dt = v - R_k i_k            (each coil on the bus)
    C dv/dt     = (V_s - v)/R_s - sum i_k

so ``x(t) = x_ss + e^{A t} (x(0) - x_ss)``, evaluated through the eigen-decomposition of
``A`` (an ``(m + 1)``-square matrix; numpy's ``eig``). A coil leaves the state at its
peak's end and joins it at zero current. One coil is the 2x2 system of
:mod:`coildrive.model.supply`, which the tests compare. Units A, V, ohm, H, F, s.
"""

from __future__ import annotations

import numpy as np

#: Samples of each piece between two switching moments where the lowest bus is looked for
#: (then refined to the sample's neighbours by golden section).
PIECE_SAMPLES = 2000
#: Golden-section steps of the refinement (the bracket shrinks 0.618^60).
GOLDEN_STEPS = 60


def _piece(v_s, r_s, c, r, l):
    """``(eigenvalues, eigenvectors, their inverse, steady state)`` of the system with the
    coils ``r``, ``l`` (arrays, possibly empty) on the bus."""
    m = len(r)
    a = np.zeros((m + 1, m + 1))
    for k in range(m):
        a[k, k] = -r[k] / l[k]
        a[k, m] = 1.0 / l[k]
        a[m, k] = -1.0 / c
    a[m, m] = -1.0 / (r_s * c)
    lam, vec = np.linalg.eig(a)
    # steady state: v = V_s / (1 + R_s sum 1/R_k), i_k = v / R_k
    v_ss = v_s / (1.0 + r_s * float(np.sum(1.0 / np.asarray(r)))) if m else v_s
    x_ss = np.append(v_ss / np.asarray(r, float), v_ss)
    return lam, vec, np.linalg.inv(vec), x_ss


def _evaluate(piece, x0, t):
    lam, vec, inv, x_ss = piece
    coef = inv @ (x0 - x_ss)
    return (x_ss[:, None] + (vec @ (coef[:, None] * np.exp(np.outer(lam, t))))).real


def lowest_bus(v_s: float, r_s: float, c: float, r, l, on, off) -> tuple[float, float]:
    """``(lowest bus V, when s)`` from the first switch-on to the last peak's end, with
    coil ``k`` (loop ``r[k]`` ohm, ``l[k]`` H) on the bus from ``on[k]`` to ``off[k]`` s
    (module docstring). Exact between switching moments: the lowest of
    :data:`PIECE_SAMPLES` samples of each piece, refined by golden section."""
    r, l, on, off = (np.asarray(x, float) for x in (r, l, on, off))
    moments = np.unique(np.concatenate([on, off]))
    x = {}                       # coil index -> current, plus the bus
    v = float(v_s)
    best = (v, float(moments[0]))
    for a_t, b_t in zip(moments[:-1], moments[1:]):
        active = [k for k in range(len(r)) if on[k] <= a_t < off[k]]
        for k in active:
            x.setdefault(k, 0.0)
        piece = _piece(v_s, r_s, c, r[active], l[active])
        x0 = np.array([x[k] for k in active] + [v])
        span = b_t - a_t
        t = np.linspace(0.0, span, PIECE_SAMPLES)
        bus = _evaluate(piece, x0, t)[-1]
        j = int(np.argmin(bus))
        lo, hi = t[max(j - 1, 0)], t[min(j + 1, len(t) - 1)]
        g = (np.sqrt(5.0) - 1.0) / 2.0
        for _ in range(GOLDEN_STEPS):     # the bus is smooth and unimodal next to its sample minimum
            m1, m2 = hi - g * (hi - lo), lo + g * (hi - lo)
            f1, f2 = _evaluate(piece, x0, np.array([m1, m2]))[-1]
            lo, hi = (lo, m2) if f1 <= f2 else (m1, hi)
        t_min = 0.5 * (lo + hi)
        v_min = float(_evaluate(piece, x0, np.array([t_min]))[-1, 0])
        v_min, t_min = min((v_min, t_min), (float(bus[j]), float(t[j])))
        if v_min < best[0]:
            best = (v_min, a_t + t_min)
        end = _evaluate(piece, x0, np.array([span]))[:, 0]
        for n, k in enumerate(active):
            x[k] = float(end[n])
        v = float(end[-1])
        for k in [k for k in x if off[k] <= b_t]:
            del x[k]
    return best
