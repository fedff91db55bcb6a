"""Current-mode hold in the design: file keys, thresholds, checks, header, simulate.

Checks against the outside:

* the switching frequency at every corner against the hysteretic switching times
  written out here from the corner's own JSON figures (RL charge
  ``tau_on ln((A - I_lo)/(A - I_hi))`` and discharge ``tau_off ln((I_hi + B)/(I_lo + B))``
  between the thresholds, from memory) -- not through the package's loop code;
* the generated header compiled with gcc -std=c99 -Wall -Wextra -Werror -pedantic;
* copper resistance in the corners follows IEC 60028 (alpha = 0.00393 /K).
"""

from __future__ import annotations

import dataclasses
import json
import math
import subprocess

import numpy as np
import pytest

from coildrive.config import load_drive
from coildrive.design.corners import corner_grid
from coildrive.design.hold_current import lsb_current, settle
from coildrive.design import design
from coildrive.errors import InputError
from coil_span import cold_and_settled
from conftest import BOARDS, EXAMPLES, drive_path, require_tool, run_cli

DEMO_TEXT = drive_path("zener-valve").read_text()  # a plain Zener path, fixed peak


def _drive_file(tmp_path, extra: str, name: str = "cm.toml", board: str | None = None):
    # the supply up to 27 V: at 28 V the fixture's cold coil ends its peak too close to the
    # ADC's full scale for the over-current trip's headroom (adc_over_current fails)
    text = DEMO_TEXT.replace('frequency = "25 kHz"', 'frequency = "25 kHz"\nmode = "current"\n' + extra)
    text = text.replace('max = "28 V"', 'max = "27 V"')
    if board:
        text = text.replace('board = "lab-m32-zener"', f'board = "{board}"')
    path = tmp_path / name
    path.write_text(text)
    return path


# --------------------------------------------------------------------------- file keys
def test_current_mode_keys_parse(tmp_path):
    d = load_drive(_drive_file(tmp_path, 'control = "off_time"\noff_time = "12 us"\nmin_frequency = "18 kHz"\n'
                               'max_frequency = "60 kHz"\nsense_delay = "1 us"'))
    h = d.hold
    assert (h.mode, h.control) == ("current", "off_time")
    assert h.off_time == pytest.approx(12e-6) and h.sense_delay == pytest.approx(1e-6)
    assert (h.min_frequency, h.max_frequency) == (18e3, 60e3)


@pytest.mark.parametrize("extra, fragment", [
    ('control = "bang"', "hold.control: 'bang' is not one of"),
    ('control = "off_time"\nband = "5 mA"', "hold.band: is for control = \"hysteretic\""),
    ('off_time = "5 us"', "hold.off_time: is for control = \"off_time\""),
    ('min_frequency = "30 kHz"\nmax_frequency = "20 kHz"', "hold.max_frequency: 20000 Hz is not above"),
    ('band = "5 V"', "hold.band: '5 V' is a voltage"),
])
def test_bad_current_mode_keys(tmp_path, extra, fragment):
    with pytest.raises(InputError) as err:
        load_drive(_drive_file(tmp_path, extra))
    assert fragment in str(err.value)


def test_current_keys_rejected_in_voltage_mode(tmp_path):
    path = tmp_path / "v.toml"
    path.write_text(DEMO_TEXT.replace('frequency = "25 kHz"', 'frequency = "25 kHz"\nband = "5 mA"'))
    with pytest.raises(InputError) as err:
        load_drive(path)
    assert 'hold.band: is only used with mode = "current"' in str(err.value)


def test_new_keys_at_default_keep_the_input_hash(tmp_path):
    base = load_drive(drive_path("zener-valve")).input_hash()
    path = tmp_path / "zener-valve.toml"  # the drive's name (file stem) is part of the hash
    path.write_text(DEMO_TEXT.replace("[release]", "[switch]\nrise_time = 0\nfall_time = 0\n[release]"))
    assert load_drive(path).input_hash() == base, "defaults left out of the hash"
    path.write_text(DEMO_TEXT.replace("[release]", '[switch]\nrise_time = "40 ns"\n[release]'))
    assert load_drive(path).input_hash() != base, "a real value changes it"


# --------------------------------------------------------------------------- design
@pytest.fixture(scope="module")
def hysteretic(tmp_path_factory):
    path = _drive_file(tmp_path_factory.mktemp("cm"), "")
    return load_drive(path), path


def _corner_frequency(c: dict, drive, lo: float, hi: float) -> float:
    """Hysteretic switching frequency from a corner's JSON figures (coil-path sense)."""
    sw, sense = drive.switch.on_resistance, drive.board.sense.resistance
    r_on = c["resistance_ohm"] + sw + sense
    r_off = c["resistance_ohm"] + sense
    a = c["supply_v"] / r_on
    b = (drive.freewheel.diode_drop + drive.freewheel.zener_voltage) / r_off
    ind = c["inductance_h"]
    t_on = ind / r_on * math.log((a - lo) / (a - hi))
    t_off = ind / r_off * math.log((hi + b) / (lo + b))
    return 1.0 / (t_on + t_off)


def test_hysteretic_design_figures_against_the_formula(hysteretic):
    drive, path = hysteretic
    r = run_cli("design", str(path), "--json")
    assert r.returncode == 0, r.stderr + r.stdout[-2000:]
    d = json.loads(r.stdout)
    cm = d["current_mode"]
    assert d["hold"]["mode"] == "current" and cm["control"] == "hysteretic"
    lsb = 3.3 / 4096 / (0.1 * 20)  # V_ref / 2^bits / (R_sense x gain) of lab-m32-zener
    assert cm["code_current_a"] == pytest.approx(lsb, rel=1e-12)
    lo, hi = cm["lower_code"] * lsb, cm["upper_code"] * lsb
    # the range covers the coil from switched on cold to settled (here the frequency falls
    # as the coil warms: the extremes are the two ends)
    freqs = [_corner_frequency(c, drive, lo, hi) for c in cold_and_settled(d)]
    assert cm["min_frequency_hz"] == pytest.approx(min(freqs), rel=1e-9)
    assert cm["max_frequency_hz"] == pytest.approx(max(freqs), rel=1e-9)
    assert d["hold"]["frequency_hz"] == pytest.approx(_corner_frequency(d["nominal"], drive, lo, hi), rel=1e-9)
    assert cm["allowed_min_frequency_hz"] <= cm["min_frequency_hz"] <= cm["max_frequency_hz"] <= \
        cm["allowed_max_frequency_hz"]
    for c in d["corners"]:
        # IEC 60028: R(T) = R_20 (1 + 0.00393 (T - 20)), R_20 = 22 ohm x tolerance factor
        r20 = c["resistance_ohm"] / (1 + 0.00393 * (c["coil_temp_c"] - 20))
        assert min(abs(r20 - 22 * f) for f in (0.93, 1.07)) < 1e-9
        assert lo < c["hold_mean_current_a"] < hi
        assert c["hold_ripple_a"] == pytest.approx(hi - lo, rel=1e-9)
    assert d["hold"]["min_mean_current_a"] >= drive.hold.current
    for key in ("frequency_hz", "duty", "min_mean_current_a", "max_mean_current_a", "ripple_a"):
        assert isinstance(d["hold"][key], float), key
    names = {c["name"]: c for c in d["checks"]}
    for name in ("current_mode_sense", "current_mode_regulated", "current_mode_frequency",
                 "current_mode_thresholds", "hold_current_met", "coil_temperature"):
        assert names[name]["ok"], names[name]
    assert "audible_frequency" not in names, "the switching range check replaces it"


def test_lower_code_is_the_smallest_that_holds(hysteretic):
    drive, _ = hysteretic
    dz = design(drive)
    cm = dz.hold.current_mode
    grid = corner_grid(drive)
    lsb = lsb_current(drive)
    band = cm.band_codes
    for lower, holds in ((cm.lower_code, True), (cm.lower_code - 1, False)):
        temp, lp, ss = settle(drive, grid.supply, grid.ambient, grid.r_factor, grid.l_factor,
                              lower * lsb, (lower + band) * lsb, 0.0, 0.0)
        assert bool(np.all(ss.mean >= drive.hold.current)) is holds, (lower, ss.mean.min())


def test_current_mode_runs_cooler_than_fixed_duty(hysteretic):
    drive, _ = hysteretic
    cm = design(drive)
    vm = design(dataclasses.replace(drive, hold=dataclasses.replace(drive.hold, mode="voltage")))
    # a regulated current does not rise with the supply: less heat at the high-supply corners
    assert cm.hold.coil_temp_c < vm.hold.coil_temp_c
    assert cm.hold.max_mean_current_a < vm.hold.max_mean_current_a
    assert cm.timer == vm.timer, "timer and compare are the fixed-duty fallback"


def test_hysteretic_needs_coil_path_sense(tmp_path):
    path = _drive_file(tmp_path, "", board="fast-32bit-clamp")
    r = run_cli("design", str(path), "--json")
    assert r.returncode == 1
    checks = {c["name"]: c for c in json.loads(r.stdout)["checks"]}
    assert not checks["current_mode_sense"]["ok"]
    assert "under the switch" in checks["current_mode_sense"]["detail"]
    path = _drive_file(tmp_path, 'control = "off_time"', "off.toml", board="fast-32bit-clamp")
    r = run_cli("design", str(path), "--json")
    checks = {c["name"]: c for c in json.loads(r.stdout)["checks"]}
    assert checks["current_mode_sense"]["ok"], checks["current_mode_sense"]


def test_switching_range_check_fails_outside(tmp_path):
    path = _drive_file(tmp_path, 'band = "2 mA"\nmax_frequency = "40 kHz"')
    r = run_cli("design", str(path), "--json")
    assert r.returncode == 1
    d = json.loads(r.stdout)
    check = next(c for c in d["checks"] if c["name"] == "current_mode_frequency")
    assert not check["ok"] and "widen hold.band" in check["detail"]
    assert d["current_mode"]["max_frequency_hz"] > 40e3
    assert not d["current_mode"]["sized_from_frequency"]


def test_unreachable_threshold_fails_regulation(tmp_path):
    path = _drive_file(tmp_path, 'band = "10 mA"')
    text = path.read_text().replace('current = "0.22 A"', 'current = "0.5 A"', 1)
    text = text.replace('current = "0.55 A"', 'current = "0.6 A"')
    path.write_text(text.replace('min = "20 V"', 'min = "12 V"'))
    d = json.loads(run_cli("design", str(path), "--json").stdout)
    check = next(c for c in d["checks"] if c["name"] == "current_mode_regulated")
    assert not check["ok"] and "never reaches the threshold" in check["detail"]
    assert d["hold"]["duty"] == 1.0
    assert not next(c for c in d["checks"] if c["name"] == "hold_current_met")["ok"]


@pytest.mark.parametrize("extra, macros", [
    ("", ("HOLD_HYSTERETIC", "HOLD_LOWER_CODE", "HOLD_UPPER_CODE")),
    ('control = "off_time"', ("HOLD_OFF_TIME", "HOLD_PEAK_CODE", "HOLD_OFF_PRESCALER", "HOLD_OFF_TICKS")),
])
def test_header_has_thresholds_and_compiles(tmp_path, extra, macros):
    require_tool("gcc")
    path = _drive_file(tmp_path, extra)
    header = tmp_path / "cm.h"
    r = run_cli("design", str(path), "--header", str(header), "--prefix", "CM", "--json")
    assert r.returncode == 0, r.stderr
    cm = json.loads(r.stdout)["current_mode"]
    want = {"HOLD_LOWER_CODE": cm["lower_code"], "HOLD_UPPER_CODE": cm["upper_code"],
            "HOLD_PEAK_CODE": cm["upper_code"], "HOLD_OFF_TICKS": cm["off_ticks"],
            "HOLD_OFF_PRESCALER": cm["off_prescaler"], "HOLD_HYSTERETIC": 1, "HOLD_OFF_TIME": 1}
    prints = "".join(f'    printf("{m} %lu\\n", (unsigned long)CM_{m});\n' for m in macros)
    src = tmp_path / "main.c"
    src.write_text(f'#include <stdio.h>\n#include "cm.h"\nint main(void)\n{{\n{prints}    return 0;\n}}\n')
    exe = tmp_path / "main"
    cc = subprocess.run(["gcc", "-std=c99", "-Wall", "-Wextra", "-Werror", "-pedantic", str(src), "-o",
                         str(exe)], capture_output=True, text=True, cwd=tmp_path)
    assert cc.returncode == 0, cc.stderr
    out = subprocess.run([str(exe)], capture_output=True, text=True, check=True).stdout.split()
    got = dict(zip(out[::2], map(int, out[1::2])))
    assert got == {m: want[m] for m in macros}
    assert "fixed-duty fallback" in header.read_text()


def test_voltage_header_has_no_current_mode_macros():
    from coildrive.codegen.header import generate_header
    text = generate_header(design(load_drive(drive_path("zener-valve"))), "P")
    assert "HOLD_HYSTERETIC" not in text and "Current-mode" not in text and "fallback" not in text


def test_simulate_current_mode_stays_in_the_band(tmp_path):
    path = _drive_file(tmp_path, "")
    csv = tmp_path / "w.csv"
    r = run_cli("simulate", str(path), "--supply", "24", "--coil-temp", "60", "--csv", str(csv),
                "--hold-time", "3 ms")
    assert r.returncode == 0, r.stderr
    a = np.loadtxt(csv, delimiter=",", skiprows=1)
    t, i = a[:, 0], a[:, 1]
    assert np.all(np.diff(t) > 0), "time strictly increasing"
    d = design(load_drive(path))
    cm = d.hold.current_mode
    hold = (t > d.pull_in.peak_time_s + 1.5e-3) & (t < d.pull_in.peak_time_s + 2.9e-3)
    assert np.all(i[hold] >= cm.lower_a * (1 - 1e-9)) and np.all(i[hold] <= cm.upper_a * (1 + 1e-9))
    assert i[hold].min() == pytest.approx(cm.lower_a, rel=1e-6) and i[hold].max() == pytest.approx(cm.upper_a, rel=1e-6)


def test_tune_and_monte_carlo_refuse_current_mode(tmp_path):
    path = _drive_file(tmp_path, "")
    r = run_cli("tune", str(path))
    assert r.returncode == 2 and "hold.mode" in r.stderr and len(r.stderr.strip().splitlines()) == 1
    r = run_cli("design", str(path), "--samples", "100")
    assert r.returncode == 2 and "--samples" in r.stderr


def test_bundled_boards_design_both_controls(tmp_path):
    """Every bundled board: the current-mode design runs and names its failing checks."""
    for board in sorted(p.stem for p in BOARDS.glob("*.toml")):
        for extra in ("", 'control = "off_time"'):
            d = design(load_drive(_drive_file(tmp_path, extra, f"{board}.toml", board)))
            assert d.hold.mode == "current"
            assert all(c.detail for c in d.checks)


def test_a_cold_start_sets_the_over_current_and_release(tmp_path):
    """A current-mode hold's corners carry the coil at its settled heat, but a coil switched
    on cold draws the most current in the peak and decays the slowest: the over-current
    trip's healthy maximum is the cold coil's peak-end current, the RL step ``V/R_on (1 -
    e^{-t R_on/L})`` written afresh at that corner (copper R(T) by IEC 60028, alpha =
    0.00393 /K; R_on = coil + switch + sense), and the release is taken there too: both
    corners say ``(cold)``, and the hot corners' figures are below."""
    import re

    text = (EXAMPLES / "relay-12v.toml").read_text().replace('[hold]', '[hold]\nmode = "current"', 1)
    text = text.replace('board = "tiny-8bit-diode"', f'board = "{BOARDS / "tiny-8bit-diode.toml"}"')
    path = tmp_path / "relay-cm.toml"
    path.write_text(re.sub(r"(?m)^(compensate|regulation) = .*\n", "", text))
    d = json.loads(run_cli("design", str(path), "--json").stdout)
    adc, rel = d["adc"], d["release"]
    m = re.match(r"([\d.]+) V, (-?[\d.]+) degC, coil (-?[\d.]+) degC \(cold\), R([-+][\d.]+)%, L([-+][\d.]+)%",
                 adc["healthy_max_corner"])
    assert m, adc["healthy_max_corner"]
    v, amb, coil, r_pct, l_pct = (float(x) for x in m.groups())
    drv = load_drive(path)
    r_on = (40.0 * (1 + 0.00393 * (coil - 20.0)) * (1 + r_pct / 100) + drv.switch.on_resistance
            + drv.board.sense.resistance)
    ell = 0.180 * (1 + l_pct / 100)
    t_peak = d["pull_in"]["longest_peak_s"]   # the longest real peak (the driver's switch lead)
    i_end = v / r_on * -np.expm1(-t_peak * r_on / ell)
    assert adc["healthy_max_current_a"] == pytest.approx(i_end, rel=1e-9)
    assert max(c["peak_end_current_a"] for c in d["corners"]) < i_end     # the hot corners'
    assert "(cold)" in rel["worst_corner"]
    assert max(c["release_time_s"] for c in d["corners"]) < rel["time_s"]
