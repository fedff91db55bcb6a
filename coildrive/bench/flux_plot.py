"""Plot of ``fit --flux-curve``: the fitted flux-linkage curve and its incremental inductance.

:func:`flux_plot_data` gathers the arrays (plain numpy: the tests check them against
the fit); :func:`plot_flux` draws them (matplotlib on Agg, imported only for
``--plot``). Two panels against the coil current:

* the flux linkage ``psi(i)``: the fitted curve (its PCHIP interpolant, as the design
  reads the table), the table's points, and the measured ``(i, psi)`` samples of each
  rise used;
* the incremental inductance ``L_d(i) = dpsi/di`` of the fitted curve, beside what the
  drive file had: its ``coil.inductance`` as a horizontal line (a linear coil), or its
  own curve's ``L_d`` when it has one.

Both panels run a little past the measured range (above it the design extends the curve
straight) and shade the current range the capture covered. A second fitted curve (the
seated one) is drawn dashed over its own measured range when given. Units: A, Wb, H.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..config import Coil
from ..model.flux import FluxCurve
from .flux_fit import FluxFit

#: How far past the measured range the plot runs (share of the range).
PAST_RANGE = 0.15
#: Currents on the plotted grid.
GRID_POINTS = 301


@dataclass(frozen=True)
class Curve:
    """One curve on the plot: its label, ``psi`` in Wb and ``L_d`` in H on the grid
    (``psi`` is ``None`` for a linear file value shown only as an inductance)."""

    label: str
    flux_wb: np.ndarray | None
    incremental_h: np.ndarray


@dataclass(frozen=True)
class FluxPlotData:
    """What :func:`plot_flux` draws. ``current_a`` is the grid (A, from 0); ``fitted`` the
    fitted curve on it; ``seated`` the seated curve (or ``None``; NaN past its range); ``reference`` the drive
    file's coil (or ``None``); ``table_current_a``/``table_flux_wb`` the fitted table's
    points; ``measured`` each rise's measured ``(current A, flux Wb)`` points;
    ``measured_range_a`` the current range the capture covered (A)."""

    current_a: np.ndarray
    fitted: Curve
    seated: Curve | None
    reference: Curve | None
    table_current_a: np.ndarray
    table_flux_wb: np.ndarray
    measured: tuple[tuple[np.ndarray, np.ndarray], ...]
    measured_range_a: tuple[float, float]


def _curve(label: str, current, flux, grid) -> Curve:
    c = FluxCurve(current, flux)
    return Curve(label, c.psi(grid), c.incremental(grid))


def flux_plot_data(fit: FluxFit, reference: Coil | None = None, reference_name: str = "drive file",
                   seated=None) -> FluxPlotData:
    """The arrays of the plot of ``fit`` (and of ``seated``, a second fitted curve with
    ``current_a`` and ``flux_wb`` tables), beside
    the ``reference`` coil of a drive file (its curve, or its linear ``inductance``)."""
    top = fit.current_a[-1]
    if seated is not None:
        top = max(top, seated.current_a[-1])
    grid = np.linspace(0.0, top * (1.0 + PAST_RANGE), GRID_POINTS)
    fitted = _curve(f"fitted (rise at {fit.supply_v:.4g} V)", fit.current_a, fit.flux_wb, grid)
    seated_curve = None
    if seated is not None:   # drawn over its own measured range only (NaN past it)
        c = _curve("seated (from the release)", seated.current_a, seated.flux_wb, grid)
        past = grid > seated.current_a[-1]
        seated_curve = Curve(c.label, np.where(past, np.nan, c.flux_wb), np.where(past, np.nan, c.incremental_h))
    ref = None
    if reference is not None:
        if reference.flux_current:
            ref = _curve(f"{reference_name}: its curve", reference.flux_current,
                         reference.flux_linkage, grid)
        else:
            ind = float(reference.inductance)
            ref = Curve(f"{reference_name}: inductance {ind * 1e3:.4g} mH", None, np.full(grid.shape, ind))
    return FluxPlotData(grid, fitted, seated_curve, ref, np.asarray(fit.current_a),
                        np.asarray(fit.flux_wb), fit.samples, (0.0, float(fit.current_a[-1])))


def plot_flux(data: FluxPlotData) -> bytes:
    """PNG bytes of the two panels (see the module docstring)."""
    from ..plotting import agg_figure, png_bytes

    fig = agg_figure(figsize=(10, 4.8), dpi=110)
    ax_psi = fig.add_subplot(1, 2, 1)
    ax_ld = fig.add_subplot(1, 2, 2)
    i = data.current_a
    lo, hi = data.measured_range_a
    for ax in (ax_psi, ax_ld):
        ax.axvspan(lo, hi, color="tab:green", alpha=0.08, label="measured range")
        ax.axvline(hi, color="tab:green", lw=0.8, ls=":")
        ax.set_xlabel("coil current (A)")
        ax.grid(True, alpha=0.3)
    for k, (mi, mpsi) in enumerate(data.measured):
        ax_psi.plot(mi, mpsi * 1e3, ".", ms=2, color="0.6", label="measured" if k == 0 else None)
    ax_psi.plot(i, data.fitted.flux_wb * 1e3, color="tab:blue", lw=1.5, label=data.fitted.label)
    ax_psi.plot(data.table_current_a, data.table_flux_wb * 1e3, "o", ms=4, color="tab:blue",
                label="fitted table")
    ax_ld.plot(i, data.fitted.incremental_h * 1e3, color="tab:blue", lw=1.5, label=data.fitted.label)
    if data.seated is not None:
        ax_psi.plot(i, data.seated.flux_wb * 1e3, color="tab:purple", ls="--", lw=1.3,
                    label=data.seated.label)
        ax_ld.plot(i, data.seated.incremental_h * 1e3, color="tab:purple", ls="--", lw=1.3,
                   label=data.seated.label)
    if data.reference is not None:
        if data.reference.flux_wb is not None:
            ax_psi.plot(i, data.reference.flux_wb * 1e3, color="k", ls="-.", lw=1.0,
                        label=data.reference.label)
        ax_ld.plot(i, data.reference.incremental_h * 1e3, color="k", ls="-.", lw=1.0,
                   label=data.reference.label)
    ax_psi.set_ylabel("flux linkage psi (mWb)")
    ax_psi.set_title("flux linkage")
    ax_ld.set_ylabel("incremental inductance dpsi/di (mH)")
    ax_ld.set_title("incremental inductance")
    ax_ld.set_ylim(bottom=0.0)
    ax_psi.legend(fontsize=7, loc="lower right")
    ax_ld.legend(fontsize=7, loc="upper right")
    return png_bytes(fig)
