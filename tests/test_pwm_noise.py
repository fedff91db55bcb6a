"""The noise `check` reads off a capture whose hold's PWM is sampled 4 times a period.

Sampled so coarsely, a PWM's second differences at one-sample lag are as large as its
ripple: read as noise, they made the zero level and the denoising of a clean capture
several codes wide. The reference is the emulated device's known Gaussian noise
(``--noise`` codes, one sigma) plus a truncating ADC's quantisation noise
(``1/sqrt(12)`` code, the uniform error over one step: a textbook figure, from memory):
a clean PWM capture must read that, within 6 % (the capture's noise: its zero level and
the denoising of its crossings).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from conftest import drive_path
from test_emulator_device import capture_of, run as run_device

from coildrive.bench import analysis
from coildrive.bench.check import check_capture, prepare_capture
from coildrive.bench.device import DeviceOptions, VirtualDevice
from coildrive.config import load_drive
from coildrive.design import design as make_design


@pytest.fixture(scope="module")
def pwm_at_4(tmp_path_factory):
    """The plain Zener test valve with a 50 kHz hold on a 200 kHz ADC: 4 samples a period."""
    tmp = tmp_path_factory.mktemp("pwm4")
    path = tmp / "v.toml"
    path.write_text(drive_path("zener-valve").read_text().replace('frequency = "25 kHz"', 'frequency = "50 kHz"'))
    d = make_design(load_drive(path))
    assert d.drive.board.adc.sample_rate / d.hold.frequency_hz == pytest.approx(4.0)
    return d, tmp


@pytest.mark.parametrize("noise", [0.0, 0.5, 1.0, 2.0])
def test_a_clean_pwm_capture_reads_its_true_noise(pwm_at_4, noise):
    d, tmp = pwm_at_4
    dev = VirtualDevice(d.drive, DeviceOptions(noise_codes=noise, seed=3, supply=24.0, coil_temp=40.0), design=d)
    msgs, _ = run_device(dev, 0.05 + 2 * dev.period, step=0.05)
    cap = prepare_capture(capture_of(msgs, tmp / f"n{noise}.cdcap"), d.drive.board)
    true = math.hypot(noise, 1.0 / math.sqrt(12.0))   # the device's noise and the ADC's quantisation
    spp = d.drive.board.adc.sample_rate / d.hold.frequency_hz
    sigma = analysis._levels(np.asarray(cap.code), samples_per_period=spp).sigma
    assert sigma == pytest.approx(true, rel=0.06), "the capture's noise (zero level, denoising)"
    k = int(np.searchsorted(cap.index, next(e.index for e in cap.events if e.kind == 2))) + 2000
    hold = np.asarray(cap.code)[k:k + 512]          # the settled hold: 128 PWM periods
    assert analysis._block_noise(hold) > 2.5, "at one sample's lag the PWM's ripple reads as noise"
    assert analysis._block_noise(hold, 4) == pytest.approx(true, rel=0.1), "a period apart it does not"
    rep = check_capture(cap, d, coil_temp=40.0)
    assert rep.ok, [(i.name, i.status, i.detail) for i in rep.items if i.status == "FAIL"]
    a = analysis.analyse(cap, pull_in_current=d.drive.pull_in.current, hold_frequency=d.hold.frequency_hz)
    assert a.zero_threshold_a == pytest.approx((max(3, math.ceil(6.0 * sigma))) * a.amps_per_code)
