"""A moving armature over a saturating coil: the open and the seated flux-linkage curve,
and the gap between them (docs/coil-model.md).

The coil is measured twice: with the armature blocked open (gap ``x = stroke``, the curve
``psi_o(i)`` of ``[coil] flux_current/flux_linkage``) and seated (``x = 0``, the curve
``psi_c(i)`` of ``[coil] seated_current/seated_linkage``). Between them the current is
blended linearly in the gap at constant flux linkage::

    i(psi, x) = i_c(psi) + (x / stroke) (i_o(psi) - i_c(psi))

Why: the winding's ampere-turns drive the flux through the iron and the air gap in
series, ``N i = R_iron(phi) phi + R_gap(x) phi``, and the air gap's reluctance
``R_gap = x / (mu0 A)`` is linear in ``x`` (the series circuit of
:mod:`coildrive.model.magnet`, whose fixed remainder ``g0`` is here the iron, saturation
and all). At fixed flux the current is therefore affine in ``x``, and the two curves fix
both ends. With both curves linear (``psi = L i``) this is
``1/L(x) = 1/L_c + (x / stroke)(1/L_o - 1/L_c)`` -- the reluctance linear in the gap --
which is exactly the linear model's ``L(x) = L_c / (1 + beta x)`` with
``beta = (L_c - L_o) / (stroke L_o)``: the linear armature is this model's special case.

Energies: the field energy at ``(psi, x)`` is ``W = integral_0^psi i dpsi'
= (1 - x/stroke) W_c(psi) + (x/stroke) W_o(psi)``, each
``W_k(psi) = psi i_k(psi) - W'_k(i_k(psi))`` (the co-energy ``W'_k(i) = integral_0^i
psi_k di'``, closed form on the PCHIP pieces: :meth:`FluxCurve.coenergy`).

Force: ``F_x = dW'(i, x)/dx`` at constant ``i`` ``= -dW(psi, x)/dx`` at constant
``psi`` (the two partials of a Legendre pair), so the force pulling the gap shut is

    F_close(psi) = (W_o(psi) - W_c(psi)) / stroke

independent of the gap at constant flux linkage, as in the linear model (where it is
``psi^2 beta / (2 L_c)``). It grows with ``psi`` where the open curve lies below the
seated one (``dF/dpsi = (i_o - i_c) / stroke``, checked by the drive file's reader).

Each point may scale both curves by its inductance tolerance ``s``: ``psi = s psi(i)``.

Units: A, Wb (V*s), J, m, N.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from . import flux
from .flux import FluxCoil, FluxCurve


@dataclass(frozen=True, eq=False)
class GapCurves:
    """The open and seated curves at a set of points: ``scale`` (per point) multiplies
    both; ``stroke`` m per point."""

    open: FluxCurve
    seated: FluxCurve
    scale: np.ndarray
    stroke: np.ndarray

    def __getitem__(self, index) -> "GapCurves":
        return GapCurves(self.open, self.seated, np.atleast_1d(np.asarray(self.scale)[index]),
                         np.atleast_1d(np.asarray(self.stroke)[index]))

    @property
    def coil_open(self) -> FluxCoil:
        """The open coil as the closed-form segments take it (:mod:`coildrive.model.rl`)."""
        return FluxCoil(self.open, self.scale)

    @property
    def coil_seated(self) -> FluxCoil:
        return FluxCoil(self.seated, self.scale)

    def flux_open(self, i):
        """Flux linkage Wb at ``i`` A with the armature open."""
        return self.scale * self.open.psi(i)

    def flux_seated(self, i):
        """Flux linkage Wb at ``i`` A with the armature seated."""
        return self.scale * self.seated.psi(i)

    def small_signal(self):
        """``(L_o, L_c)``: the incremental inductances at zero current, H per point."""
        return self.scale * self.open.incremental(0.0), self.scale * self.seated.incremental(0.0)

    def _currents(self, lam):
        # odd in the flux (a coil's curve without hysteresis is): an integrator's trial
        # stage just past zero flux sees the curves' own continuation, not a kink
        u = np.asarray(lam, float) / self.scale
        a, sign = np.abs(u), np.sign(u)
        return sign * self.open.current_of(a), sign * self.seated.current_of(a)

    def current(self, lam, x):
        """Current in A at flux linkage ``lam`` Wb and gap ``x`` m."""
        i_o, i_c = self._currents(lam)
        return i_c + np.asarray(x, float) / self.stroke * (i_o - i_c)

    def _energies(self, lam, i_o, i_c):
        lam = np.asarray(lam, float)
        w_o = lam * i_o - self.scale * self.open.coenergy(np.abs(i_o))
        w_c = lam * i_c - self.scale * self.seated.coenergy(np.abs(i_c))
        return w_o, w_c

    def closing_force(self, lam):
        """Force N pulling the gap shut at flux linkage ``lam`` Wb (any gap)."""
        i_o, i_c = self._currents(lam)
        w_o, w_c = self._energies(lam, i_o, i_c)
        return (w_o - w_c) / self.stroke

    def field_energy(self, lam, x):
        """Energy J stored in the field at flux linkage ``lam`` Wb and gap ``x`` m."""
        i_o, i_c = self._currents(lam)
        w_o, w_c = self._energies(lam, i_o, i_c)
        s = np.asarray(x, float) / self.stroke
        return (1.0 - s) * w_c + s * w_o

    def state(self, lam, x):
        """Everything the equations of motion need at ``(lam, x)`` in one pass:
        ``(i, di/dlam, di/dx, F_close, dF_close/dlam)`` (A, A/Wb, A/m, N, N/Wb)."""
        if (flux.ONE_POINT_FLOATS and np.size(lam) == 1 and np.size(x) == 1
                and np.size(self.scale) == 1 and np.size(self.stroke) == 1):
            one = self._state_one(float(np.ravel(lam)[0]), float(np.ravel(x)[0]))
            if one is not None:   # one point (an armature's flight): Python floats
                shape = np.broadcast_shapes(np.shape(lam), np.shape(x), np.shape(self.scale),
                                            np.shape(self.stroke))
                return tuple(np.full(shape, v) for v in one)
        i_o, i_c = self._currents(lam)
        w_o, w_c = self._energies(lam, i_o, i_c)
        s = np.asarray(x, float) / self.stroke
        gap = (i_o - i_c) / self.stroke
        di_dl = ((1.0 - s) / self.seated.incremental(np.abs(i_c))
                 + s / self.open.incremental(np.abs(i_o))) / self.scale
        return i_c + s * (i_o - i_c), di_dl, gap, (w_o - w_c) / self.stroke, gap

    def _state_one(self, lam: float, x: float):
        """:meth:`state` of one point in Python floats, step for step the same arithmetic
        (numpy's per-call cost on 1-element arrays dominates a flight; the same IEEE
        operations in the same order give the same bits); None where a division by zero
        needs numpy's infinities."""
        scale, stroke = float(np.ravel(self.scale)[0]), float(np.ravel(self.stroke)[0])
        try:
            u = lam / scale
            a = abs(u)
            sign = (1.0 if u > 0 else -1.0 if u < 0 else 0.0) if u == u else math.nan
            i_o = sign * self.open._current_of_one(a)
            i_c = sign * self.seated._current_of_one(a)
            w_o = lam * i_o - scale * self.open.coenergy_one(abs(i_o))
            w_c = lam * i_c - scale * self.seated.coenergy_one(abs(i_c))
            s = x / stroke
            gap = (i_o - i_c) / stroke
            di_dl = ((1.0 - s) / self.seated.incremental_one(abs(i_c))
                     + s / self.open.incremental_one(abs(i_o))) / scale
        except ZeroDivisionError:
            return None
        return i_c + s * (i_o - i_c), di_dl, gap, (w_o - w_c) / stroke, gap

    def flux_for_force(self, force, iterations: int = 100):
        """Flux linkage Wb whose closing force is ``force`` N (0 where ``force <= 0``):
        Newton on the monotone ``F_close(psi)`` with its exact slope, bracketed (a step
        leaving the bracket bisects), to 1e-13 relative in the flux or the force."""
        force = np.array(np.broadcast_arrays(np.asarray(force, float), self.scale)[0], float)
        want = np.maximum(force, 0.0)
        lo_l, lc_l = self.small_signal()
        # start: the linear model at the small-signal inductances
        beta_term = np.maximum(1.0 / lo_l - 1.0 / lc_l, 1e-300) / self.stroke
        lam = np.sqrt(2.0 * want / beta_term)
        lo = np.zeros_like(lam)
        hi = np.full_like(lam, np.inf)
        for _ in range(iterations):
            _, _, _, f, df = self.state(lam, 0.0)
            g = f - want
            lo = np.where(g < 0, lam, lo)
            hi = np.where(g > 0, lam, hi)
            with np.errstate(divide="ignore", invalid="ignore"):
                nxt = lam - g / df
            bad = ~np.isfinite(nxt) | (nxt <= lo) | (nxt >= hi)
            nxt = np.where(bad, np.where(np.isfinite(hi), 0.5 * (lo + hi), 2.0 * lam + 1e-12), nxt)
            # done: each step below 1e-13 of the flux, or the force met to rounding (the
            # force is a difference of two energies: its last digits are noise)
            done = np.all((np.abs(nxt - lam) <= 1e-13 * np.maximum(lam, 1e-300))
                          | (np.abs(g) <= 1e-13 * np.maximum(want, 1e-300)))
            lam = np.where(np.abs(g) <= 1e-13 * np.maximum(want, 1e-300), lam, nxt)
            if done:
                break
        return np.where(want > 0, lam, 0.0)

    def balance_current(self, x, force):
        """Current A at gap ``x`` m whose closing force is ``force`` N."""
        return self.current(self.flux_for_force(force), x)

    def stroke_current(self, opening_force, samples: int = 17, rounds: int = 4):
        """Least steady current A (and the gap m where it is needed) whose force beats
        ``opening_force(x)`` (N, a function of the gap) over the whole stroke: the largest
        balance current over ``samples`` evenly spaced gaps (ends included), then
        ``rounds`` times over 9 gaps spanning the best one's neighbours (each round a
        quarter of the spacing before). A maximum at an end (the usual case: the start
        current) is exact; an interior one is within O(spacing^2) of the smooth
        maximum, the final spacing being stroke / (16 * 4^rounds)."""
        frac = np.linspace(0.0, 1.0, samples)[:, None]
        x = frac * self.stroke
        cur = self.balance_current(x, opening_force(x))
        j = np.argmax(cur, axis=0)
        cols = np.arange(cur.shape[1])
        best, at = cur[j, cols], x[j, cols]
        half = self.stroke / (samples - 1)
        for _ in range(rounds):
            lo = np.maximum(at - half, 0.0)
            hi = np.minimum(at + half, self.stroke)
            x = lo + (hi - lo) * np.linspace(0.0, 1.0, 9)[:, None]
            cur = self.balance_current(x, opening_force(x))
            j = np.argmax(cur, axis=0)
            better = cur[j, cols] > best
            best = np.where(better, cur[j, cols], best)
            at = np.where(better, x[j, cols], at)
            half = half / 4.0
        return best, at
