"""A saturating coil: flux linkage against current, ``v = R i + dpsi/dt``.

The coil is a table of current against flux linkage ``psi(i)`` (from a bench capture or
a field solver), interpolated with a piecewise-cubic Hermite interpolant (PCHIP,
Fritsch & Carlson 1980, the algorithm of scipy's ``PchipInterpolator``, see
:func:`pchip_coefficients` for why it is written out): it keeps the table's
monotonicity (the flux never falls as the current rises, so there is one current for
every flux), it is C1 (the incremental inductance ``L_d(i) = dpsi/di`` is continuous,
so the time integrals below have no jumps), and it does not overshoot between points as
a cubic spline can, which would put a bump of negative inductance into a saturating
knee. Above the last point the flux rises linearly at the curve's end slope (the core
saturated: what is left is the winding's air-core inductance); below zero current
nothing is needed (the freewheel diode blocks).

With no eddy currents the state is one number and a switched segment at constant
voltage needs no time stepping: from ``dpsi = L_d(i) di = (v - R i) dt``,

    t(i0 -> i1) = integral_{i0}^{i1} L_d(i) / (v - R i) di

exactly (a rise has ``v`` the supply; a freewheel decay ``v = -V_off``). The integrand
is the interpolant's quadratic derivative over a linear denominator: per table
interval, the pole of ``1/(v - R i)`` is taken out in closed form and the polynomial
left is integrated exactly by Gauss-Legendre (see :func:`integral`). Currents at given
times invert this monotone map by safeguarded Newton steps; the PWM hold's periodic orbit solves the two
segment times at once (two equations, two end currents) by Newton's method with the
exact Jacobian. Every function is vectorised over operating points. The linear coil
keeps its closed forms (:mod:`coildrive.model.rl`), which dispatch here for a
:class:`FluxCoil`.

Units: A, Wb (V*s), H, V, ohm, s.
"""

from __future__ import annotations

import bisect
import functools
import math
from dataclasses import dataclass

import numpy as np

from .roots import falling_root

#: One point's inversion (and :mod:`gap_curves`' state of one point) in Python floats, the
#: same steps as the arrays' (False: numpy's, for benchmarks/bench_armature.py's side by side).
ONE_POINT_FLOATS = True
#: Gauss-Legendre nodes per table interval.
_NODES = 8
_GL_X, _GL_W = np.polynomial.legendre.leggauss(_NODES)


def pchip_coefficients(x, y):
    """Piecewise-cubic coefficients ``(4, K)`` of the PCHIP interpolant through ``(x, y)``
    (``x`` rising), per interval in powers of ``x - x_k`` from the cubic down.

    The algorithm of scipy's ``PchipInterpolator`` (Fritsch & Carlson 1980, with the
    derivatives as weighted harmonic means of the neighbouring slopes, Fritsch & Butland
    1984, and the one-sided three-point end derivatives), written out here because
    importing ``scipy.interpolate`` costs about half a second of every design run's
    start-up; tests/test_flux_coil.py checks it against scipy's to rounding.
    """
    h = np.diff(x)
    m = np.diff(y) / h
    d = np.zeros_like(x)
    w1 = 2 * h[1:] + h[:-1]
    w2 = h[1:] + 2 * h[:-1]
    same = (np.sign(m[1:]) == np.sign(m[:-1])) & (m[1:] != 0) & (m[:-1] != 0)
    with np.errstate(divide="ignore", invalid="ignore"):
        whmean = (w1 / m[:-1] + w2 / m[1:]) / (w1 + w2)
        d[1:-1] = np.where(same, 1.0 / whmean, 0.0)
    d[0] = _pchip_end(h[0], h[1], m[0], m[1])
    d[-1] = _pchip_end(h[-1], h[-2], m[-1], m[-2])
    d0, d1 = d[:-1], d[1:]
    return np.array([(d0 + d1 - 2 * m) / h ** 2, (3 * m - 2 * d0 - d1) / h, d0, y[:-1]])


def _pchip_end(h0, h1, m0, m1):
    """The one-sided three-point end derivative, kept monotone (scipy's ``_edge_case``)."""
    d = ((2 * h0 + h1) * m0 - h0 * m1) / (h0 + h1)
    if np.sign(d) != np.sign(m0):
        return 0.0
    if np.sign(m0) != np.sign(m1) and abs(d) > abs(3 * m0):
        return 3 * m0
    return d


class FluxCurve:
    """``psi(i)`` through the table ``current`` (A, from 0, rising) and ``flux`` (Wb, from
    0, rising): PCHIP inside, linear at the end slope above the last point."""

    def __init__(self, current, flux):
        x = np.asarray(current, float)
        y = np.asarray(flux, float)
        c = pchip_coefficients(x, y)                     # (4, K): c0 d^3 + c1 d^2 + c2 d + c3
        h = x[-1] - x[-2]
        end_slope = 3 * c[0, -1] * h * h + 2 * c[1, -1] * h + c[2, -1]
        ext = np.array([[0.0], [0.0], [end_slope], [y[-1]]])
        #: per interval (the last one is the linear extension above the table)
        self.coef = np.concatenate([c, ext], axis=1)     # (4, K + 1)
        self.base = x.copy()                             # interval k starts at base[k]
        self.edges = np.append(x, np.inf)
        self.current = x
        self.flux = y
        # co-energy of the whole pieces below each piece's start (J), for coenergy()
        h_all = np.diff(x)
        whole = (((c[0] / 4 * h_all + c[1] / 3) * h_all + c[2] / 2) * h_all + c[3]) * h_all
        self._whole = np.concatenate([[0.0], np.cumsum(whole)])

    def _index(self, i):
        return np.maximum(np.searchsorted(self.base, i, side="right") - 1, 0)

    def psi(self, i):
        """Flux linkage in Wb at current ``i`` A (``i >= 0``)."""
        i = np.asarray(i, float)
        k = self._index(i)
        d = i - self.base[k]
        c = self.coef[:, k]
        return ((c[0] * d + c[1]) * d + c[2]) * d + c[3]

    def incremental(self, i):
        """Incremental inductance ``dpsi/di`` in H at current ``i`` A."""
        i = np.asarray(i, float)
        k = self._index(i)
        d = i - self.base[k]
        c = self.coef[:, k]
        return (3 * c[0] * d + 2 * c[1]) * d + c[2]

    def coenergy(self, i):
        """Magnetic co-energy ``W'(i) = integral_0^i psi(i') di'`` in J at ``i`` A (``i >= 0``):
        each piece's cubic integrated in closed form, the whole pieces below summed once."""
        i = np.asarray(i, float)
        k = self._index(i)
        d = i - self.base[k]
        c = self.coef[:, k]
        return self._whole[k] + (((c[0] / 4 * d + c[1] / 3) * d + c[2] / 2) * d + c[3]) * d

    def current_of(self, psi, iterations: int = 60):
        """Current in A at flux linkage ``psi`` Wb (``psi >= 0``): the inverse of the
        monotone curve. The piece holding ``psi`` is found among the table's fluxes; in it,
        Newton steps on the cubic from the chord's value, kept inside the piece (a step
        leaving it bisects), to 1e-14 of the piece's length or the flux to rounding; the
        extension above the table is linear and exact."""
        psi = np.asarray(psi, float)
        if psi.size == 1 and ONE_POINT_FLOATS:
            # one point (an armature's flight takes tens of thousands of these): the same
            # steps in Python floats, free of numpy's per-call cost; IEEE arithmetic in the
            # same order gives the same bits (tests/test_flux_coil.py compares them)
            return np.full(psi.shape, self._current_of_one(float(psi.reshape(-1)[0]), iterations))
        k = np.clip(np.searchsorted(self.flux, psi, side="right") - 1, 0, self.base.size - 1)
        c = self.coef[:, k]
        lo = np.zeros_like(psi)
        hi = np.where(k < self.current.size - 1, np.diff(self.edges)[k], np.inf)
        with np.errstate(divide="ignore", invalid="ignore"):
            d = np.where(np.isfinite(hi), (psi - c[3]) / (self.flux[np.minimum(k + 1, self.flux.size - 1)]
                                                      - c[3]) * hi, (psi - c[3]) / c[2])
        d = np.where(np.isfinite(d), np.clip(d, 0.0, np.where(np.isfinite(hi), hi, np.inf)), 0.0)
        tol = 1e-14 * np.where(np.isfinite(hi), hi, 1.0 + np.abs(d))
        skip = ~np.isfinite(psi)   # a NaN asks for nothing (NaN out, no warnings)
        d = np.where(skip, 0.0, d)
        for _ in range(iterations):
            f = ((c[0] * d + c[1]) * d + c[2]) * d + c[3] - np.where(skip, 0.0, psi)
            slope = (3 * c[0] * d + 2 * c[1]) * d + c[2]
            lo = np.where(f < 0, d, lo)
            hi = np.where(f > 0, d, hi)
            with np.errstate(divide="ignore", invalid="ignore"):
                nxt = d - f / slope
            bad = ~np.isfinite(nxt) | (nxt < lo) | (nxt > hi)
            nxt = np.where(bad, 0.5 * (lo + hi), nxt)
            # done: the step is below the tolerance or the flux is met to rounding
            done = np.all((np.abs(nxt - d) <= tol) | (np.abs(f) <= 4e-16 * np.abs(psi)) | skip)
            d = nxt
            if done:
                break
        return np.where(skip, np.nan, self.base[k] + d)

    @functools.cached_property
    def _lists(self):
        """The table as Python floats, for :meth:`_current_of_one`."""
        return (self.flux.tolist(), self.base.tolist(), self.coef.T.tolist(),
                np.diff(self.edges).tolist())

    def _piece_one(self, i: float):
        """``(piece index, offset A, coefficients)`` of one current, as :meth:`_index`."""
        _, base, coef, _ = self._lists
        k = max(bisect.bisect_right(base, i) - 1, 0)
        return k, i - base[k], coef[k]

    def incremental_one(self, i: float) -> float:
        """:meth:`incremental` of one current (A, a float) to H, in Python floats."""
        _, d, (c0, c1, c2, _) = self._piece_one(i)
        return (3 * c0 * d + 2 * c1) * d + c2

    def coenergy_one(self, i: float) -> float:
        """:meth:`coenergy` of one current (A, a float) to J, in Python floats."""
        k, d, (c0, c1, c2, c3) = self._piece_one(i)
        return self._whole_list[k] + (((c0 / 4 * d + c1 / 3) * d + c2 / 2) * d + c3) * d

    @functools.cached_property
    def _whole_list(self):
        return self._whole.tolist()

    def _current_of_one(self, psi: float, iterations: int = 60) -> float:
        """:meth:`current_of` of one flux linkage (Wb, a float) to A: step for step the
        vectorised loop of one point, in Python floats."""
        if not math.isfinite(psi):
            return math.nan
        flux, base, coef, width = self._lists
        k = min(max(bisect.bisect_right(flux, psi) - 1, 0), len(base) - 1)
        c0, c1, c2, c3 = coef[k]
        lo = 0.0
        hi = width[k] if k < len(flux) - 1 else math.inf
        finite_hi = math.isfinite(hi)
        try:
            d = ((psi - c3) / (flux[min(k + 1, len(flux) - 1)] - c3) * hi if finite_hi
                 else (psi - c3) / c2)
        except ZeroDivisionError:
            d = math.nan
        d = min(max(d, 0.0), hi) if math.isfinite(d) else 0.0
        tol = 1e-14 * (hi if finite_hi else 1.0 + abs(d))
        for _ in range(iterations):
            f = ((c0 * d + c1) * d + c2) * d + c3 - psi
            slope = (3 * c0 * d + 2 * c1) * d + c2
            if f < 0:
                lo = d
            if f > 0:
                hi = d
            try:
                nxt = d - f / slope
            except ZeroDivisionError:
                nxt = math.nan
            if not math.isfinite(nxt) or nxt < lo or nxt > hi:
                nxt = 0.5 * (lo + hi)
            done = abs(nxt - d) <= tol or abs(f) <= 4e-16 * abs(psi)
            d = nxt
            if done:
                break
        return base[k] + d


@functools.lru_cache(maxsize=32)
def curve(current: tuple[float, ...], flux: tuple[float, ...]) -> FluxCurve:
    """The (cached) :class:`FluxCurve` of a table."""
    return FluxCurve(current, flux)


@dataclass(frozen=True, eq=False)
class FluxCoil:
    """A flux-linkage curve at a set of operating points: ``psi_k(i) = scale_k psi(i)``
    (``scale`` is the inductance tolerance factor of each point)."""

    curve: FluxCurve
    scale: np.ndarray

    @property
    def shape(self):
        return np.shape(self.scale)

    def __getitem__(self, index) -> FluxCoil:
        return FluxCoil(self.curve, np.asarray(self.scale)[index])

    def with_scale(self, scale) -> FluxCoil:
        return FluxCoil(self.curve, np.asarray(scale, float))

    def incremental(self, i):
        """Incremental inductance in H at ``i`` A, per point."""
        return self.scale * self.curve.incremental(i)

    def small_signal(self):
        """Incremental inductance at zero current (what an LCR meter reads), H per point."""
        return self.scale * self.curve.incremental(0.0)


def energy(coil: FluxCoil, i):
    """Energy stored in the coil at ``i`` A, ``W = int_0^i i dpsi = i psi(i) - W'(i)`` (J
    per point): what a decay to zero takes out of it (the rest of that decay's losses
    come from the supply)."""
    c = coil.curve
    i = np.asarray(i, float)
    return coil.scale * (i * c.psi(i) - c.coenergy(i))


def linkage(coil: FluxCoil, i):
    """Flux linkage ``psi(i)`` in Wb per point."""
    return coil.scale * coil.curve.psi(i)


def small_signal(inductance):
    """The inductance a report shows per point: H as given for a linear coil, the
    incremental inductance at zero current for a :class:`FluxCoil` (or the magnetising
    branch's, for a coil with an eddy resistance)."""
    return inductance.small_signal() if hasattr(inductance, "small_signal") else inductance


def incremental_at(inductance, i):
    """Incremental inductance in H at ``i`` A: the inductance itself for a linear coil."""
    return inductance.incremental(i) if isinstance(inductance, FluxCoil) else inductance


def integral(coil: FluxCoil, i_from, i_to, v, r, power=0):
    """``integral_{i_from}^{i_to} i^power L_d(i) / (v - r i) di`` per point.

    ``power`` 0: the time (s) the current takes from ``i_from`` to ``i_to`` A with ``v``
    V across the loop of ``r`` ohm; 1 and 2: ``int i dt`` (A*s) and ``int i^2 dt``
    (A^2*s) over that segment. ``inf`` where a rise asks for ``v/r`` or more. A tuple of
    powers gives a tuple of integrals (one pass over the nodes).
    """
    powers = power if isinstance(power, tuple) else (power,)
    c = coil.curve
    i_from, i_to, v, r, s = np.broadcast_arrays(*(np.asarray(x, float) for x in
                                                  (i_from, i_to, v, r, coil.scale)))
    lo = np.minimum(i_from, i_to)
    hi = np.maximum(i_from, i_to)
    # only the table intervals the range touches: k_lo .. k_lo + span - 1 at each point
    k_lo, k_hi = c._index(np.stack([lo, hi]))
    span = int(np.max(k_hi - k_lo, initial=0)) + 1
    k = np.minimum(k_lo[..., None] + np.arange(span), c.base.size - 1)   # (..., span)
    lo, hi = lo[..., None], hi[..., None]
    a = np.minimum(np.maximum(c.edges[k], lo), hi)
    b = np.minimum(np.maximum(c.edges[k + 1], lo), hi)
    vv, rr = v[..., None], r[..., None]
    c0, c1, c2 = c.coef[0][k], c.coef[1][k], c.coef[2][k]
    base = c.base[k]
    # Take out the pole of 1/(v - r i) at i* = v/r: with g(i) = i^p L_d(i) the piece's
    # polynomial, (g(i) - g(i*)) / (v - r i) is a polynomial of degree <= 3 + p, which
    # the 8 Gauss-Legendre nodes integrate exactly, and g(i*) / (v - r i) integrates in
    # closed form. Where the pole lies far from the piece (beyond 4 of its lengths) the
    # piece's end nearer to it stands in for it (no cancellation of large values; the
    # rest is then smooth to 1e-10 at 8 nodes).
    pole = vv / rr
    above = pole >= b
    near = np.where(above, pole - b, a - pole) <= 4.0 * (b - a)
    end = np.where(near, pole, np.where(above, b, a))
    d_end = end - base
    ld_end = (3 * c0 * d_end + 2 * c1) * d_end + c2
    half = 0.5 * (b - a)
    nodes = (0.5 * (a + b))[..., None] + half[..., None] * _GL_X     # (..., span, nodes)
    d = nodes - base[..., None]
    ld = (3 * c0[..., None] * d + 2 * c1[..., None]) * d + c2[..., None]
    sign = np.where(i_to >= i_from, s, -s)
    rising = (i_to > i_from) & (v - r * i_to <= 0) & (v - r * i_from > 0)
    used = b > a
    if span > 1:   # past the table's end the extension repeats: count it once
        used &= _first(k)
    with np.errstate(divide="ignore", invalid="ignore"):
        denom = vv[..., None] - rr[..., None] * nodes
        log_part = np.log1p(rr * (b - a) / (vv - rr * b)) / rr   # int di / (v - r i)
        out = []
        for p in powers:
            g_end = ld_end * end ** p
            smooth = (ld * nodes ** p - g_end[..., None]) / denom
            part = np.where(used, half * (smooth @ _GL_W) + g_end * log_part, 0.0)
            out.append(np.where(rising, np.inf, sign * np.sum(part, axis=-1)))
    return tuple(out) if isinstance(power, tuple) else out[0]


def _first(k):
    """True at each interval index's first appearance along the last axis (the clipped
    indices past the table's end repeat the extension interval: count it once)."""
    first = np.ones(k.shape, bool)
    first[..., 1:] = k[..., 1:] != k[..., :-1]
    return first


def time(coil: FluxCoil, i_from, i_to, v, r):
    """Seconds from ``i_from`` to ``i_to`` A at constant ``v`` V through ``r`` ohm."""
    return integral(coil, i_from, i_to, v, r, 0)


def current(coil: FluxCoil, t, i0, v, r, iterations: int = 80):
    """Current in A after ``t`` s from ``i0`` A at constant ``v`` V through ``r`` ohm.

    The current moves monotonically from ``i0`` toward ``v/r`` and stops at zero (the
    freewheel diode). Newton steps on the exact time :func:`time`, kept inside a bracket
    (a step leaving it bisects), to 1e-13 of the current's range.
    """
    t, i0, v, r, s = np.broadcast_arrays(*(np.asarray(x, float) for x in (t, i0, v, r, coil.scale)))
    shape = t.shape
    t, i0, v, r, s = (np.array(x, dtype=float).ravel() for x in (t, i0, v, r, s))
    k = FluxCoil(coil.curve, s)
    target = v / r
    up = target > i0
    end = np.where(up, target, np.maximum(target, 0.0))   # the current never passes it
    lo = np.minimum(i0, end)
    hi = np.maximum(i0, end)
    out = np.where(t <= 0, i0, np.nan)
    # falling to zero: where the whole decay to zero is shorter than t, the answer is 0
    to_zero = ~up & (end == 0.0) & (t > 0)
    if np.any(to_zero):
        tz = time(k[to_zero], i0[to_zero], 0.0, v[to_zero], r[to_zero])
        idx = np.flatnonzero(to_zero)[tz <= t[to_zero]]
        out[idx] = 0.0
    act = np.flatnonzero(np.isnan(out))
    if act.size:
        kk = k[act]
        a_, v_, r_, t_, i0_ = target[act], v[act], r[act], t[act], i0[act]
        lo_, hi_ = lo[act], hi[act]
        up_ = up[act]
        # start: the linear coil at the incremental inductance of the start
        tau = kk.incremental(i0_) / r_
        x = a_ + (i0_ - a_) * np.exp(-t_ / tau)
        x = np.where((x > lo_) & (x < hi_), x, 0.5 * (lo_ + hi_))
        tol = 1e-13 * (np.maximum(np.abs(a_), np.abs(i0_)) + 1e-300)
        for _ in range(iterations):   # each pass keeps only the points not yet done
            f = time(kk, i0_, x, v_, r_) - t_
            toward_i0 = (f > 0) == up_   # this current comes after t: the answer is toward i0
            hi_ = np.where(toward_i0, x, hi_)
            lo_ = np.where(toward_i0, lo_, x)
            # dt/di (negative when falling); infinite on the asymptote v/r itself (a bracket
            # end the search can land on): the step is then bad and bisects
            with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
                slope = kk.incremental(x) / (v_ - r_ * x)
                nxt = x - f / slope
            bad = ~np.isfinite(nxt) | (nxt < lo_) | (nxt > hi_)
            nxt = np.where(bad, 0.5 * (lo_ + hi_), nxt)
            exact = np.abs(f) <= 1e-14 * t_   # this current is the answer (to rounding)
            nxt = np.where(exact, x, nxt)
            done = exact | (np.abs(nxt - x) <= tol) | (hi_ - lo_ <= tol)
            out[act[done]] = nxt[done]
            keep = ~done
            if not np.any(keep):
                break
            act, kk, x = act[keep], kk[keep], nxt[keep]
            v_, r_, t_, i0_, lo_, hi_, up_, tol = (z[keep] for z in (v_, r_, t_, i0_, lo_, hi_, up_, tol))
        else:
            out[act] = x
    return out.reshape(shape)


def rise_integrals(coil: FluxCoil, t, i0, v, r):
    """``(i(t), int i dt, int i^2 dt)`` of a rise of ``t`` s from ``i0`` A at ``v`` V through
    ``r`` ohm, well conditioned however close ``i(t)`` comes to ``v/r``.

    :func:`integral` integrates over the current, and near the asymptote ``v/r`` the time
    there hangs on the last digits of ``i(t)``: a pulse many time constants long loses its
    flat top. With ``t`` known, ``v - r i = dpsi/dt`` gives ``v t - r Q = psi(i1) - psi(i0)``
    and, times ``i``, ``v Q - r S = W(i1) - W(i0)`` (``W = int i dpsi``, :func:`energy`):
    exact. Where the resistor takes a small part of ``v`` (``r i1 < v / 2``) those two
    subtract nearly equal numbers, and the quadrature (no pole near) is kept there.
    """
    end = current(coil, t, i0, v, r)
    t, i0, v, r = (np.asarray(x, float) for x in (t, i0, v, r))
    q_quad, s_quad = integral(coil, i0, end, v, r, (1, 2))
    with np.errstate(invalid="ignore"):
        q_id = (v * t - (linkage(coil, end) - linkage(coil, i0))) / r
        s_id = (v * q_id - (energy(coil, end) - energy(coil, i0))) / r
    flat = r * end >= 0.5 * v
    return end, np.where(flat, q_id, q_quad), np.where(flat, s_id, s_quad)


def linear_orbit(t_on, t_off, v_on, r_on, r_off, v_off, inductance):
    """The linear coil's continuous-conduction fixed point of the two exponentials
    (:mod:`coildrive.model.pwm`; here as the start of the saturating coil's orbit):
    ``(i_min, i_max)`` in A for ``t_on`` s on and ``t_off`` s off with a linear coil of
    ``inductance`` H (``i_min <= 0``: the orbit is discontinuous)."""
    a = v_on / r_on
    b = v_off / r_off
    e_on = np.exp(-t_on * r_on / inductance)
    e_off = np.exp(-t_off * r_off / inductance)
    i_min = ((a * (1.0 - e_on) + b) * e_off - b) / (1.0 - e_on * e_off)
    return i_min, a + (i_min - a) * e_on


def _bisect_orbit(coil, t_on, t_off, v_on, r_on, r_off, v_off, top, iterations: int = 100):
    """The continuous orbit's end currents by a bracketed root search on the lowest
    current ``a`` in ``(0, top)``: from ``a`` the on-time ends at ``b(a)``; the decay from
    there takes longer than the off-time back to ``a`` exactly when the orbit lies above
    ``a`` (``top``: where the on-time from zero ends, above every orbit). Regula falsi
    with the Illinois halving (Dowell & Jarratt 1971) on ``g(a) = t_off(b(a) -> a) - t_off``,
    to 1e-13 of ``top``."""

    def g(a):
        return time(coil, current(coil, t_on, a, v_on, r_on), a, -v_off, r_off) / t_off - 1.0

    # g(top) < 0: from the top it only falls
    _, lo, hi, g_lo, g_hi = falling_root(g, top, iterations, g_top=-1.0, small=1e-13)
    a = np.where(np.abs(g_lo) < np.abs(g_hi), lo, hi)
    return a, current(coil, t_on, a, v_on, r_on)


@dataclass(frozen=True)
class Orbit:
    """The PWM hold's periodic orbit at each point: the lowest and highest current (A),
    discontinuous conduction, how long the off-time conducts (s), and the integrals of
    ``i`` and ``i^2`` over the on and the off segment (A*s, A^2*s)."""

    i_min: np.ndarray
    i_max: np.ndarray
    dcm: np.ndarray
    conduction_off: np.ndarray
    charge_on: np.ndarray
    square_on: np.ndarray
    charge_off: np.ndarray
    square_off: np.ndarray


def orbit(coil: FluxCoil, t_on, t_off, v_on, r_on, r_off, v_off, iterations: int = 60) -> Orbit:
    """The exact periodic orbit of a switched saturating coil: on for ``t_on`` s at
    ``v_on`` V through ``r_on``, freewheeling for ``t_off`` s against ``v_off`` V through
    ``r_off`` (the diode blocks at zero).

    Discontinuous conduction is decided first and exactly: from zero current, if the
    decay from the on-segment's top reaches zero within ``t_off``, the orbit starts at
    zero (the flux map of a period is a contraction, so its fixed point is unique).
    Otherwise the two end currents ``(a, b)`` solve ``t_on(a -> b) = t_on`` and
    ``t_off(b -> a) = t_off`` by Newton's method with the exact Jacobian (the
    integrands at the ends), started from the linear coil at the incremental
    inductance of the mean, with the steps halved to stay in ``0 < a < b < v_on/r_on``.
    """
    t_on, t_off, v_on, r_on, r_off, v_off, s = np.broadcast_arrays(
        *(np.asarray(x, float) for x in (t_on, t_off, v_on, r_on, r_off, v_off, coil.scale)))
    shape = t_on.shape
    t_on, t_off, v_on, r_on, r_off, v_off, s = (np.array(x, dtype=float).ravel() for x in
                                                (t_on, t_off, v_on, r_on, r_off, v_off, s))
    k = FluxCoil(coil.curve, s)
    n = t_on.size
    full = t_off <= 0
    top = v_on / r_on
    a = np.where(full, top, 0.0)
    b = np.where(full, top, 0.0)
    solved = full.copy()
    # continuous conduction: Newton on the two end currents from the linear orbit at the
    # incremental inductance of its mean (twice)
    idx = np.flatnonzero(~full & (t_on > 0))
    ld = k[idx].incremental(0.0)
    for _ in range(2):
        lo_, hi_ = linear_orbit(t_on[idx], t_off[idx], v_on[idx], r_on[idx], r_off[idx],
                                v_off[idx], ld)
        ld = k[idx].incremental(np.clip(0.5 * (lo_ + hi_), 0.0, None))
    ccm = lo_ > 0   # where the linear start conducts continuously, Newton from it
    idx, lo_, hi_ = idx[ccm], lo_[ccm], hi_[ccm]
    if idx.size:
        kk = k[idx]
        ton, toff, v, r, r2, v2 = (x[idx] for x in (t_on, t_off, v_on, r_on, r_off, v_off))
        cap = top[idx] * (1 - 1e-15)
        x = np.clip(lo_, 1e-9 * cap, cap)
        y = np.clip(hi_, x * (1 + 1e-12), cap)
        x = np.minimum(x, y * (1 - 1e-12))

        both = FluxCoil(kk.curve, np.concatenate([kk.scale, kk.scale]))
        vs, rs = np.concatenate([v, -v2]), np.concatenate([r, r2])
        ts = np.concatenate([ton, toff])

        def resid(x, y):   # both segment times in one pass, relative to their targets
            t = time(both, np.concatenate([x, y]), np.concatenate([y, x]), vs, rs) / ts - 1.0
            return t[:x.size], t[x.size:]

        f1, f2 = resid(x, y)
        ok_all = np.zeros(idx.size, bool)
        for _ in range(iterations) if np.all(np.isfinite(f1 + f2)) else ():
            lx, ly = kk.incremental(x), kk.incremental(y)
            j11, j12 = -lx / (v - r * x) / ton, ly / (v - r * y) / ton
            j21, j22 = -lx / (v2 + r2 * x) / toff, ly / (v2 + r2 * y) / toff
            det = j11 * j22 - j12 * j21
            with np.errstate(divide="ignore", invalid="ignore"):
                dx = (-f1 * j22 + f2 * j12) / det
                dy = (-j11 * f2 + j21 * f1) / det
            norm = np.abs(f1) + np.abs(f2)
            step = np.ones_like(x)
            nx, ny = x + dx, y + dy
            for _h in range(20):   # halve until inside the domain and the residual falls
                inside = (nx > 0) & (ny > nx) & (ny < cap)
                g1, g2 = resid(np.where(inside, nx, x), np.where(inside, ny, y))
                better = inside & (np.abs(g1) + np.abs(g2) < norm)
                if np.all(better | (norm < 1e-13)):
                    break
                step = np.where(better, step, 0.5 * step)
                nx = np.where(better, nx, x + step * dx)
                ny = np.where(better, ny, y + step * dy)
            x = np.where(better, nx, x)
            y = np.where(better, ny, y)
            f1 = np.where(better, g1, f1)
            f2 = np.where(better, g2, f2)
            ok_all = np.abs(f1) + np.abs(f2) < 1e-11
            if np.all(ok_all | ~better):
                break
        a[idx[ok_all]], b[idx[ok_all]] = x[ok_all], y[ok_all]
        solved[idx[ok_all]] = True
    # the rest: discontinuous conduction, decided exactly from zero current (the flux map
    # of a period is a contraction: its fixed point is unique)
    rest = np.flatnonzero(~solved)
    dcm = np.zeros(n, bool)
    tz = np.full(n, np.inf)
    if rest.size:
        kr = k[rest]
        b0 = current(kr, t_on[rest], 0.0, v_on[rest], r_on[rest])
        tz[rest] = time(kr, b0, 0.0, -v_off[rest], r_off[rest])
        dcm[rest] = tz[rest] <= t_off[rest]
        a[rest], b[rest] = 0.0, b0
        cont = rest[~dcm[rest]]
        if cont.size:   # continuous after all: the slow, sure way
            a[cont], b[cont] = _bisect_orbit(k[cont], t_on[cont], t_off[cont], v_on[cont],
                                             r_on[cont], r_off[cont], v_off[cont], b[cont])
    cond = np.where(dcm, tz, t_off)
    end = np.where(dcm, 0.0, a)
    with np.errstate(invalid="ignore"):
        q, sq = integral(FluxCoil(k.curve, np.concatenate([s, s])), np.concatenate([a, b]),
                         np.concatenate([b, end]), np.concatenate([v_on, -v_off]),
                         np.concatenate([r_on, r_off]), (1, 2))
    q_on, q_off, s_on, s_off = q[:n], q[n:], sq[:n], sq[n:]
    q_on = np.where(full, b * t_on, q_on)
    s_on = np.where(full, b * b * t_on, s_on)
    q_off = np.where(full, 0.0, q_off)
    s_off = np.where(full, 0.0, s_off)
    return Orbit(*(x.reshape(shape) for x in (a, b, dcm, cond, q_on, s_on, q_off, s_off)))
