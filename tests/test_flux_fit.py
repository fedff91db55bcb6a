"""``fit --flux-curve``: the coil's flux-linkage curve from a capture's switch-on rise.

Synthetic captures come from the model (tests/test_flux_ngspice.py checks the model's
rise against ngspice), through the board's ADC: the fit must give the curve back within
2 % (the issue's figure), and the fitted curve must predict the rise at a supply it was
not fitted at within 2 %. A linear coil through the curve fit gives back its R and L.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from conftest import EXAMPLES, run_cli
from coildrive.bench.capture_file import write_capture
from coildrive.bench.flux_fit import fit_flux
from coildrive.bench.synth import synth_capture
from coildrive.config import load_drive
from coildrive.model import flux
from coildrive.model.circuit import loop
from coildrive.model.rl import rise_time

EXAMPLE = EXAMPLES / "saturating-valve-24v.toml"


def _capture(drive, supply=24.0, coil_temp=20.0, peak=0.02):
    return synth_capture(drive, peak, 0.3, 25e3, supply=supply, coil_temp=coil_temp,
                         hold_time=0.002, actuations=2)


def test_recovers_a_known_curve_and_predicts_another_supply(tmp_path):
    d = load_drive(EXAMPLE)
    fit = fit_flux(_capture(d), d.board, 24.0, 20.0)
    known = flux.curve(d.coil.flux_current, d.coil.flux_linkage)
    i = np.array(fit.current_a)
    ref = known.psi(i)
    # the known curve back within 2 % at every table point past zero
    assert np.all(np.abs(np.array(fit.flux_wb[1:]) - ref[1:]) <= 0.02 * ref[1:]), (fit.flux_wb, ref)
    assert fit.resistance_ohm == pytest.approx(22.0, rel=0.005)
    assert fit.residual < 0.01 and i[-1] > 0.9
    # the fitted [coil] section pasted into the drive file predicts the rise at 20 V
    text = EXAMPLE.read_text()
    start, end = text.index("[coil]"), text.index("resistance_tolerance")
    fitted = text[:start] + fit.coil_section().replace(
        "# resistance_tolerance, inductance_tolerance: keep your part's figures\n", "") + text[end:]
    path = tmp_path / "fitted.toml"
    path.write_text(fitted.replace('board = "fast-32bit-clamp"', 'board = "fast-32bit-clamp"'))
    f = load_drive(path)
    for target in (0.3, 0.55, 0.8):
        a, b = loop(d, 20.0, 20.0), loop(f, 20.0, 20.0)
        t_true = float(rise_time(target, 0.0, a.v_on, a.r_on, a.inductance))
        t_fit = float(rise_time(target, 0.0, b.v_on, b.r_on, b.inductance))
        assert t_fit == pytest.approx(t_true, rel=0.02), (target, t_fit, t_true)


def test_linear_coil_gives_back_its_r_and_l():
    d = load_drive(EXAMPLES / "demo-valve.toml")
    lp = loop(d, 24.0, 20.0)
    tau = float(lp.inductance / lp.r_on)
    fit = fit_flux(_capture(d, peak=12 * tau), d.board, 24.0, 20.0)
    slopes = np.diff(fit.flux_wb) / np.diff(fit.current_a)
    assert np.allclose(slopes, d.coil.inductance, rtol=0.02), (slopes, d.coil.inductance)
    assert fit.resistance_ohm == pytest.approx(d.coil.resistance, rel=0.01)


def test_cli_prints_a_coil_section_and_json(tmp_path):
    d = load_drive(EXAMPLE)
    path = tmp_path / "rise.cdcap"
    write_capture(path, _capture(d))
    r = run_cli("fit", str(path), "--board", "fast-32bit-clamp", "--supply", "24", "--coil-temp",
                "20", "--flux-curve")
    assert r.returncode == 0, r.stderr
    assert "flux_current = [0," in r.stdout and "flux_linkage = [" in r.stdout
    j = run_cli("fit", str(path), "--board", "fast-32bit-clamp", "--supply", "24", "--flux-curve",
                "--json")
    doc = json.loads(j.stdout)
    assert len(doc["current_a"]) == len(doc["flux_wb"]) and doc["residual"] < 0.01
    short = tmp_path / "short.cdcap"
    write_capture(short, synth_capture(d, 0.002, 0.3, 25e3, supply=24.0, hold_time=0.002))
    bad = run_cli("fit", str(short), "--board", "fast-32bit-clamp", "--supply", "24", "--flux-curve")
    assert bad.returncode == 2 and "does not settle" in bad.stderr, bad.stderr
    ok = run_cli("fit", str(short), "--board", "fast-32bit-clamp", "--supply", "24", "--flux-curve",
                 "--resistance", "22 ohm", "--coil-temp", "20")
    assert ok.returncode == 0, ok.stderr


def test_plot_data_are_the_fit_and_the_files_coil(tmp_path):
    from coildrive.bench.flux_plot import flux_plot_data

    d = load_drive(EXAMPLE)
    fit = fit_flux(_capture(d), d.board, 24.0, 20.0)
    fitted = flux.FluxCurve(fit.current_a, fit.flux_wb)
    # beside a linear coil's file: its inductance as a constant
    lin = load_drive(EXAMPLES / "demo-valve.toml").coil
    data = flux_plot_data(fit, lin)
    i = data.current_a
    assert i[0] == 0.0 and i[-1] > fit.current_a[-1]          # runs past the measured range
    assert data.measured_range_a == (0.0, fit.current_a[-1])
    assert np.allclose(data.fitted.flux_wb, fitted.psi(i))
    assert np.allclose(data.fitted.incremental_h, fitted.incremental(i))
    # dpsi/di of the plotted psi: the finite difference of the plotted curve itself
    mid = 0.5 * (i[1:] + i[:-1])
    assert np.allclose(np.diff(data.fitted.flux_wb) / np.diff(i), fitted.incremental(mid), rtol=1e-3)
    assert data.reference.flux_wb is None and np.all(data.reference.incremental_h == lin.inductance)
    # the measured points are the rises' own: on the fitted curve within the residual
    assert len(data.measured) == fit.actuations
    for mi, mpsi in data.measured:
        inside = mi <= fit.current_a[-1]
        assert np.all(np.abs(mpsi[inside] - fitted.psi(mi[inside])) <= 0.02 * fit.flux_wb[-1])
    # beside a file with a curve: that curve and its slope
    data = flux_plot_data(fit, d.coil)
    known = flux.curve(d.coil.flux_current, d.coil.flux_linkage)
    assert np.allclose(data.reference.flux_wb, known.psi(data.current_a))
    assert np.allclose(data.reference.incremental_h, known.incremental(data.current_a))


def test_cli_plot_writes_a_png(tmp_path):
    d = load_drive(EXAMPLE)
    path = tmp_path / "rise.cdcap"
    write_capture(path, _capture(d))
    out = tmp_path / "curve.png"
    args = ("fit", str(path), "--board", "fast-32bit-clamp", "--supply", "24", "--coil-temp", "20",
            "--flux-curve")
    plain = run_cli(*args)
    r = run_cli(*args, "--plot", str(out), "--drive", str(EXAMPLES / "demo-valve.toml"))
    assert r.returncode == 0, r.stderr
    assert out.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n" and f"wrote plot {out}" in r.stderr
    assert r.stdout == plain.stdout                              # the [coil] section unchanged
    bad = run_cli("fit", str(path), "--board", "fast-32bit-clamp", "--supply", "24",
                  "--plot", str(tmp_path / "no.png"))
    assert bad.returncode == 2 and "--plot" in bad.stderr and not (tmp_path / "no.png").exists()
