"""A saturating coil's mixed-decay hold on a full bridge: the exact three-segment orbit.

Each PWM period is on for ``t_on`` (``dpsi/dt = V - R_on i``), then fast for ``t_fast``
(all four switches open: ``dpsi/dt = -(V_f + R_f i)``, ``V_f = V_bus + 2 V_d``, stopping at
zero where the body diodes block) and slow for ``t_slow`` (Q2 + Q4: ``dpsi/dt = -R_s i``).
With the flux-linkage curve every segment's time between two currents is the curve's
exact quadrature ``T(x -> y) = int_x^y L_d(i) di / (v - r i)``
(:func:`coildrive.model.flux.time`), so the orbit's three end currents -- the lowest
``a`` (start of the on-time), the highest ``b`` (its end) and ``c`` (end of the fast part)
-- solve, with no time stepping::

    T_on(a -> b) = t_on,    T_fast(b -> c) = t_fast,    T_slow(c -> a) = t_slow

as :func:`coildrive.model.flux.orbit` solves the two-segment orbit: Newton's method with
the exact Jacobian (each time's derivative in an end current is the integrand there,
``+-L_d / (v - r i)``), started from the linear coil's closed-form mixed orbit
(:mod:`coildrive.model.pwm`) at the incremental inductance of its mean, with the steps
halved to stay in ``0 < a < c < b < V / R_on``. Points that do not converge (a slow or
fast part too short for the relative residual to reach 1e-11) take the period map's
root: from ``a`` the period ends at ``P(a)`` (on, fast, slow: the curve's exact currents
after each time), ``P`` rises with ``a`` with a slope below one, so ``P(a) - a`` falls
through one root; regula falsi with the Illinois halving on that.

Discontinuous conduction is decided first and exactly: from zero, if the fast part's
decay from the on-time's top reaches zero within ``t_fast``, every period starts from
zero (the period map is a contraction: its fixed point is unique).

Units: s, A, V, ohm; arrays broadcast over the points.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import flux
from .flux import FluxCoil
from .roots import falling_root


@dataclass(frozen=True)
class MixedOrbit:
    """The mixed-decay orbit per point: the lowest, highest and end-of-fast currents (A),
    discontinuous conduction (the current dies in the fast part), the time the current
    flows in the off-time (s), and the integrals of ``i`` and ``i^2`` over the on, fast
    and slow segments (A*s, A^2*s)."""

    i_min: np.ndarray
    i_max: np.ndarray
    i_fast: np.ndarray
    dcm: np.ndarray
    conduction_off: np.ndarray
    charge_on: np.ndarray
    square_on: np.ndarray
    charge_fast: np.ndarray
    square_fast: np.ndarray
    charge_slow: np.ndarray
    square_slow: np.ndarray


def linear_start(t_on, t_fast, t_slow, v_on, r_on, r_slow, v_fast, r_fast, ind):
    """The linear coil's mixed orbit ``(a, b, c)`` at inductance ``ind`` H (closed form,
    :mod:`coildrive.model.pwm`)."""
    big_a, big_f = v_on / r_on, v_fast / r_fast
    e_on, e_f, e_s = (np.exp(-t * r / ind) for t, r in ((t_on, r_on), (t_fast, r_fast), (t_slow, r_slow)))
    a = ((big_a * (1.0 - e_on) + big_f) * e_f - big_f) * e_s / (1.0 - e_on * e_f * e_s)
    b = big_a + (a - big_a) * e_on
    return a, b, (b + big_f) * e_f - big_f


def mixed_orbit(coil: FluxCoil, t_on, t_fast, t_slow, v_on, r_on, r_slow, v_fast, r_fast,
                iterations: int = 60) -> MixedOrbit:
    """The exact periodic orbit of the saturating coil ``coil`` under mixed decay (module
    docstring): on ``t_on`` s at ``v_on`` V through ``r_on``, fast ``t_fast`` s against
    ``v_fast`` V through ``r_fast``, slow ``t_slow`` s through ``r_slow`` (all > 0)."""
    arrays = np.broadcast_arrays(*(np.asarray(x, float) for x in
                                   (t_on, t_fast, t_slow, v_on, r_on, r_slow, v_fast, r_fast, coil.scale)))
    shape = arrays[0].shape
    t_on, t_fast, t_slow, v_on, r_on, r_s, v_f, r_f, s = (np.array(x, float).ravel() for x in arrays)
    k = FluxCoil(coil.curve, s)
    n = t_on.size
    top = v_on / r_on
    # discontinuous conduction, exactly: from zero the current dies in the fast part
    b0 = flux.current(k, t_on, 0.0, v_on, r_on)
    tz = flux.time(k, b0, np.zeros(n), -v_f, r_f)
    dcm = tz <= t_fast
    a, b, c = np.zeros(n), b0.copy(), np.zeros(n)
    idx = np.flatnonzero(~dcm)
    if idx.size:
        kk = k[idx]
        x = (t_on[idx], t_fast[idx], t_slow[idx], v_on[idx], r_on[idx], r_s[idx], v_f[idx], r_f[idx])
        ok, a_n, b_n, c_n = _newton(kk, *x, top[idx], iterations)
        a[idx[ok]], b[idx[ok]], c[idx[ok]] = a_n[ok], b_n[ok], c_n[ok]
        rest = idx[~ok]
        if rest.size:
            kr = k[rest]
            y = (t_on[rest], t_fast[rest], t_slow[rest], v_on[rest], r_on[rest], r_s[rest], v_f[rest], r_f[rest])
            a[rest] = _period_root(kr, *y, top[rest] * (1 - 1e-12))
            b[rest] = flux.current(kr, t_on[rest], a[rest], v_on[rest], r_on[rest])
            c[rest] = flux.current(kr, t_fast[rest], b[rest], -v_f[rest], r_f[rest])
    # the three segments' integrals in one pass (a curve's depend only on the end currents)
    three = FluxCoil(k.curve, np.tile(s, 3))
    with np.errstate(invalid="ignore"):
        q, sq = flux.integral(three, np.concatenate([a, b, c]), np.concatenate([b, c, a]),
                              np.concatenate([v_on, -v_f, 0.0 * r_s]), np.concatenate([r_on, r_f, r_s]),
                              (1, 2))
    q_on, q_f, q_s = q[:n], q[n:2 * n], np.where(dcm, 0.0, q[2 * n:])
    s_on, s_f, s_s = sq[:n], sq[n:2 * n], np.where(dcm, 0.0, sq[2 * n:])
    cond = np.where(dcm, tz, t_fast + t_slow)
    out = (a, b, c, dcm, cond, q_on, s_on, q_f, s_f, q_s, s_s)
    return MixedOrbit(*(np.reshape(v, shape) for v in out))


def _newton(k: FluxCoil, t_on, t_fast, t_slow, v_on, r_on, r_s, v_f, r_f, top, iterations):
    """Newton's method on the three segment times (module docstring). Returns
    ``(converged, a, b, c)``."""
    n = t_on.size
    ld = k.incremental(0.0)
    for _ in range(2):   # the linear orbit at the incremental inductance of its mean
        a, b, c = linear_start(t_on, t_fast, t_slow, v_on, r_on, r_s, v_f, r_f, ld)
        ld = k.incremental(np.clip(0.5 * (a + b), 0.0, None))
    cap = top * (1 - 1e-15)
    b = np.clip(b, 1e-9 * cap, cap)
    c = np.clip(c, 1e-9 * b, b * (1 - 1e-12))
    a = np.clip(a, 1e-9 * c, c * (1 - 1e-12))
    three = FluxCoil(k.curve, np.tile(k.scale, 3))
    vs, rs = np.concatenate([v_on, -v_f, 0.0 * r_s]), np.concatenate([r_on, r_f, r_s])
    ts = np.concatenate([t_on, t_fast, t_slow])

    def resid(a, b, c):   # the three segment times in one pass, relative to their targets
        t = flux.time(three, np.concatenate([a, b, c]), np.concatenate([b, c, a]), vs, rs) / ts - 1.0
        return t[:n], t[n:2 * n], t[2 * n:]

    f = np.stack(resid(a, b, c), axis=1)
    ok = np.zeros(n, bool)
    if not np.all(np.isfinite(f)):
        return ok, a, b, c
    for _ in range(iterations):
        la, lb, lc = k.incremental(a), k.incremental(b), k.incremental(c)
        jac = np.zeros((n, 3, 3))
        jac[:, 0, 0] = -la / (v_on - r_on * a) / t_on        # T_on(a -> b)
        jac[:, 0, 1] = lb / (v_on - r_on * b) / t_on
        jac[:, 1, 1] = -lb / (-v_f - r_f * b) / t_fast       # T_fast(b -> c)
        jac[:, 1, 2] = lc / (-v_f - r_f * c) / t_fast
        jac[:, 2, 2] = -lc / (-r_s * c) / t_slow             # T_slow(c -> a)
        jac[:, 2, 0] = la / (-r_s * a) / t_slow
        with np.errstate(divide="ignore", invalid="ignore"):
            d = np.linalg.solve(jac, -f[:, :, None])[:, :, 0]
        norm = np.abs(f).sum(axis=1)
        step = np.ones(n)
        better = np.zeros(n, bool)
        for _h in range(30):   # halve until inside the domain and the residual falls
            na, nb, nc = (v + step * d[:, j] for j, v in enumerate((a, b, c)))
            inside = np.isfinite(na + nb + nc) & (na > 0) & (nc > na) & (nb > nc) & (nb < cap)
            g = np.stack(resid(np.where(inside, na, a), np.where(inside, nb, b), np.where(inside, nc, c)), axis=1)
            better = inside & (np.abs(g).sum(axis=1) < norm)
            if np.all(better | (norm < 1e-13)):
                break
            step = np.where(better, step, 0.5 * step)
        a, b, c = np.where(better, na, a), np.where(better, nb, b), np.where(better, nc, c)
        f = np.where(better[:, None], g, f)
        ok = np.abs(f).sum(axis=1) < 1e-11
        if np.all(ok | ~better):
            break
    return ok, a, b, c


def _period_root(k: FluxCoil, t_on, t_fast, t_slow, v_on, r_on, r_s, v_f, r_f, top, iterations: int = 100):
    """The orbit's lowest current as the fixed point of the period map: the root of
    ``g(a) = P(a) - a`` over ``[0, top]`` (``top``: just below the on-loop's asymptote
    ``V / R_on``, above every orbit; ``g(0) > 0`` in continuous conduction, ``g(top) <
    0``), ``P`` the exact currents after the on, fast and slow times in turn. Regula falsi with the Illinois halving
    (Dowell & Jarratt 1971) to 1e-13 of ``top``."""

    def g(x):
        b = flux.current(k, t_on, x, v_on, r_on)
        c = np.maximum(flux.current(k, t_fast, b, -v_f, r_f), 0.0)
        return flux.current(k, t_slow, c, 0.0 * r_s, r_s) - x

    return falling_root(g, top, iterations)[0]
