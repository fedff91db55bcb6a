"""Analysis of synthetic captures against the closed-form physics that made them.

The synthetic captures (coildrive.bench.synth) sample the model's exact piecewise
waveform as the board's ADC would. The references are computed here from textbook
formulas: the RL step response ``i = V/R (1 - exp(-t R/L))`` inverted for the pull-in
time, the freewheel decay ``L di/dt = -(R i + V_off)`` inverted for the release time,
copper's resistance at temperature (IEC 60028, alpha = 0.00393 /K), and the exact PWM
steady state of coildrive.model.pwm for the hold (that closed form is checked against
scipy's ODE solvers and ngspice in test_reference_scipy.py / test_reference_ngspice.py).

Tolerances follow the sampling: times within one sample period or the time the current
takes to change by one ADC code, whichever is longer (plus the noise over the slope when
noise is added); amplitudes within a relative tolerance.
"""

from __future__ import annotations

import doctest
import math

import numpy as np
import pytest

from conftest import BOARDS, EXAMPLES, drive_path
from coildrive.bench import analysis as analysis_module
from coildrive.bench.analysis import analyse
from coildrive.bench.capture_file import Capture
from coildrive.bench.synth import adc_scaling, synth_capture, synth_design_capture
from coildrive.config import load_drive
from coildrive.design import firmware_setting
from coildrive.design import design
from coildrive.model.pwm import pwm_steady_state
from coildrive.model.rl import rise_current

ALPHA = 0.00393  # IEC 60028, annealed copper at 20 degC


def _fast_board(tmp_path, rate: str = "1 MHz"):
    """The demo's board with a faster ADC (so that the hold ripple is resolved)."""
    text = (BOARDS / "lab-m32-zener.toml").read_text().replace('sample_rate = "200 kHz"',
                                                             f'sample_rate = "{rate}"')
    assert rate in text
    path = tmp_path / "lab-fast.toml"
    path.write_text(text.replace('name = "lab-m32-zener"', 'name = "lab-fast"'))
    return path


def _reference(drive, supply, coil_temp, duty, freq):
    """Textbook figures of the plain RL coil at one point (SI)."""
    c = drive.coil
    r_coil = c.resistance * (1 + ALPHA * (coil_temp - 20)) / (1 + ALPHA * (c.reference_temp - 20))
    sense = drive.board.sense
    fw = drive.freewheel
    r_on = r_coil + drive.switch.on_resistance + sense.resistance
    r_off = r_coil + (sense.resistance if sense.position == "coil" else 0.0) + fw.resistance
    v_off = fw.clamp_voltage - supply if fw.type == "clamp" else fw.diode_drop + fw.zener_voltage
    ind = c.inductance
    i_pull = drive.pull_in.current
    t_pull = ind / r_on * math.log(supply / (supply - i_pull * r_on))
    ss = pwm_steady_state(duty, freq, supply, r_on, r_off, v_off, ind)
    i_off = float(ss.i_max)
    b = v_off / r_off
    t_rel = ind / r_off * math.log((i_off + b) / (drive.release.current + b))
    slope_pull = (supply - r_on * i_pull) / ind
    slope_rel = (r_off * drive.release.current + v_off) / ind
    return dict(pull_in=t_pull, hold_mean=float(ss.mean), ripple=float(ss.ripple), release=t_rel,
                slope_pull=slope_pull, slope_release=slope_rel)


CASES = {
    # name: (example, board override or None, resolves the PWM ripple)
    "coil sense, fast ADC": ("bench-valve", "fast", True),
    "coil sense, 8 samples per PWM period": ("bench-valve", None, False),
    "switch sense, fast ADC": ("pinch-valve-48v", None, True),
}


@pytest.fixture(scope="module")
def fast_board(tmp_path_factory):
    return _fast_board(tmp_path_factory.mktemp("boards"))


def _setup(case, fast_board):
    example, board, _ = CASES[case]
    drive = load_drive(drive_path(example), fast_board if board == "fast" else None)
    return drive, design(drive)


@pytest.mark.parametrize("case", list(CASES))
@pytest.mark.parametrize("noise", [0.0, 1.0])
@pytest.mark.parametrize("use_events", [True, False])
def test_recovers_the_model(case, noise, use_events, fast_board):
    drive, d = _setup(case, fast_board)
    resolved = CASES[case][2]
    temp = 20.0
    cap = synth_design_capture(d, actuations=3, hold_time=0.06, noise_codes=noise, seed=7,
                               coil_temp=temp, events=use_events)
    supply = cap.meta.supply_v
    duty, peak_s = firmware_setting(d, supply)  # what the design's firmware runs there
    ref = _reference(drive, supply, temp, duty, d.hold.frequency_hz)
    a = analyse(cap, pull_in_current=drive.pull_in.current, dropout_current=drive.release.current,
                hold_frequency=d.hold.frequency_hz)
    assert len(a.actuations) == 3, a.notes
    fs = a.sample_rate_hz
    apc = a.amps_per_code
    sigma = max(noise, 1 / math.sqrt(12))

    def time_tol(slope):
        # one sample, or the time of one code, whichever is longer; plus noise over slope
        return max(1 / fs, apc / slope) + 3 * sigma * apc / slope

    for act in a.actuations:
        assert act.phases_from == ("events" if use_events else "waveform")
        assert act.pull_in_time_s == pytest.approx(ref["pull_in"], abs=time_tol(ref["slope_pull"])), \
            "pull-in time: textbook RL step, t = L/R ln(V / (V - I R))"
        peak = peak_s + (0.0 if use_events else duty / d.hold.frequency_hz)
        # from the waveform with noise, the top of a slow rise is found within a few samples
        samples = 3 if (noise and not use_events) else 1
        assert act.peak_duration_s == pytest.approx(peak, abs=samples / fs), "peak duration: the design's"
        assert act.hold_mean_a == pytest.approx(ref["hold_mean"], rel=0.005), \
            "hold mean: exact PWM steady state (coildrive.model.pwm)"
        if resolved:
            assert act.hold_ripple_a == pytest.approx(ref["ripple"], rel=0.03), "hold ripple, p-p"
        else:
            assert act.hold_ripple_a is None
            assert any("samples per period" in n for n in act.notes), act.notes
        if drive.board.sense.position == "coil":
            assert act.release_time_s == pytest.approx(ref["release"], abs=time_tol(ref["slope_release"])), \
                "release time: textbook freewheel decay, t = L/R ln((i0 + V/R) / (i1 + V/R))"
        else:
            assert act.release_time_s is None and act.release_zero_time_s is None
            assert any("invisible" in n for n in act.notes), act.notes
        assert act.seated_time_s is None, "a plain RL coil has no dip"
        assert act.samples_missing == 0 and act.complete


def test_switch_sense_hold_is_read_from_on_time_samples(fast_board):
    """Under the switch the sense reads zero while the switch is off: the samples' plain
    mean would be duty x the coil current; the analysis reports the coil's mean."""
    drive, d = _setup("switch sense, fast ADC", fast_board)
    cap = synth_design_capture(d, actuations=1, hold_time=0.06, coil_temp=20.0)
    a = analyse(cap, hold_frequency=d.hold.frequency_hz)
    act = a.actuations[0]
    duty, _ = firmware_setting(d, cap.meta.supply_v)
    ref = _reference(drive, cap.meta.supply_v, 20.0, duty, d.hold.frequency_hz)
    assert act.hold_duty_measured == pytest.approx(duty, abs=0.01)
    h0 = int(np.searchsorted(cap.index, act.peak_end_index))
    h1 = int(np.searchsorted(cap.index, act.off_index))
    plain = float(np.mean(cap.current[(h0 + h1) // 2:h1]))
    assert plain == pytest.approx(duty * ref["hold_mean"], rel=0.02)
    assert act.hold_mean_a == pytest.approx(ref["hold_mean"], rel=0.005)


def test_discontinuous_hold_under_the_switch_is_flagged(fast_board):
    drive, d = _setup("switch sense, fast ADC", fast_board)
    # a low duty at a low frequency lets the current reach zero every period
    cap = synth_capture(drive, d.pull_in.peak_time_s, 0.05, 2000.0, hold_time=0.06, coil_temp=20.0)
    act = analyse(cap, hold_frequency=2000.0).actuations[0]
    assert act.hold_discontinuous
    assert act.hold_mean_a is None and act.hold_ripple_a is None
    assert any("discontinuous" in n for n in act.notes)


def test_synthetic_codes_follow_the_closed_form(fast_board):
    """The ADC codes of the peak equal floor(i(t) R_sense gain / V_ref 2^bits) of the
    closed-form rise at every sample instant (the interpolation of the model's points
    costs far less than a code)."""
    drive, d = _setup("coil sense, fast ADC", fast_board)
    cap = synth_design_capture(d, actuations=1, hold_time=0.005, idle_time=0.001, on_phase=0.25,
                               coil_temp=20.0)
    fs = cap.meta.sample_rate_hz
    t_on = (math.floor(0.001 * fs) + 0.25) / fs
    c = drive.coil
    assert c.reference_temp == 20.0  # so the copper is at its stated resistance
    r_on = c.resistance + drive.switch.on_resistance + drive.board.sense.resistance
    _, peak_s = firmware_setting(d, cap.meta.supply_v)
    k = np.arange(int(math.ceil(t_on * fs)), int((t_on + peak_s) * fs))
    exact = rise_current(k / fs - t_on, 0.0, cap.meta.supply_v, r_on, c.inductance)
    vpa, apc = adc_scaling(drive)
    x = exact / apc
    clear = np.abs(x - np.round(x)) > 0.05
    assert clear.sum() > 0.9 * k.size
    assert np.array_equal(cap.code[k][clear], np.floor(x[clear]).astype(int))


def test_synth_is_deterministic_and_honours_faults(fast_board):
    drive, d = _setup("coil sense, fast ADC", fast_board)
    a = synth_design_capture(d, noise_codes=1.0, seed=3, hold_time=0.01)
    b = synth_design_capture(d, noise_codes=1.0, seed=3, hold_time=0.01)
    c = synth_design_capture(d, noise_codes=1.0, seed=4, hold_time=0.01)
    assert np.array_equal(a.code, b.code) and a.events == b.events
    assert not np.array_equal(a.code, c.code)
    open_coil = synth_design_capture(d, fault="open", hold_time=0.01)
    assert open_coil.code.max() == 0 and len(open_coil.events) == 3
    an = analyse(open_coil, pull_in_current=drive.pull_in.current)
    assert an.actuations[0].pull_in_time_s is None, "an open coil never reaches the pull-in current"
    assert not analyse(open_coil, use_events=False).actuations, "and shows no actuation at all"
    with pytest.raises(ValueError):
        synth_design_capture(d, fault="melted")


def test_armature_dip_is_found_and_a_stuck_armature_shows_none():
    """With the moving-armature model the current dips while the armature closes; the
    analysis puts the seat at the bottom of the dip (the model's impact)."""
    drive = load_drive(EXAMPLES / "locker-latch-12v.toml")
    d = design(drive)
    cap = synth_design_capture(d, actuations=2, hold_time=0.03, noise_codes=1.0, seed=1, coil_temp=20.0)
    from coildrive.model.waveform import actuation
    duty, peak_s = firmware_setting(d, cap.meta.supply_v)
    w = actuation(drive, cap.meta.supply_v, 20.0, peak_s, duty, d.hold.frequency_hz, 0.03)
    impact = w.events["impact"]
    a = analyse(cap, pull_in_current=drive.pull_in.current)
    fs = a.sample_rate_hz
    for act in a.actuations:
        assert act.dip_confidence > 100
        # the smoothing window of the dip (1 % of the peak's samples) bounds the error
        width = max(3, int(peak_s * fs) // 100)
        assert act.seated_time_s == pytest.approx(impact, abs=width / fs), "seat at the model's impact"
        assert act.dip_depth_a > 0.1
    stuck = synth_design_capture(d, actuations=2, hold_time=0.03, noise_codes=1.0, seed=1,
                                 coil_temp=20.0, fault="stuck")
    for act in analyse(stuck).actuations:
        assert act.seated_time_s is None and act.dip_confidence < 8, "no dip is a result, not an error"
        assert any("no current dip" in n for n in act.notes)


def test_release_bump_detector():
    """A decay with a rise in it (an opening armature) against one without: analytic
    signals built here, sampled at 100 kS/s with a 1 mA code."""
    fs, apc = 1e5, 1e-3
    t = np.arange(6000) / fs
    on, off = 0.005, 0.03
    rise = np.where(t >= on, 1.0 - np.exp(-(t - on) / 0.003), 0.0)
    decay_t = np.maximum(t - off, 0.0)
    top = 1.0 - math.exp(-(off - on) / 0.003)
    decay = (top + 2.0) * np.exp(-decay_t / 0.004) - 2.0
    bump = 0.3 * np.exp(-((t - off - 0.0012) / 0.0003) ** 2)
    for extra, expect in ((bump, True), (0.0, False)):
        i = np.where(t < off, rise, np.maximum(decay + extra, 0.0))
        events = (dict(index=int(on * fs) + 1, kind=1), dict(index=int(0.02 * fs), kind=2),
                  dict(index=int(off * fs) + 1, kind=3))
        from coildrive.bench.capture_file import CaptureEvent
        cap = Capture.from_codes(np.floor(i / apc), sample_rate_hz=fs, amps_per_code=apc,
                                 events=[CaptureEvent(**e) for e in events])
        act = analyse(cap, dropout_current=0.2).actuations[0]
        if expect:
            assert act.release_bump_time_s is not None
            assert 0.0008 < act.release_bump_time_s < 0.0012, "the bump's foot, before its crest"
        else:
            assert act.release_bump_time_s is None


def test_lost_samples_inside_an_actuation_are_reported(fast_board):
    drive, d = _setup("coil sense, fast ADC", fast_board)
    cap = synth_design_capture(d, hold_time=0.01, coil_temp=20.0)
    on = [e.index for e in cap.events if e.kind == 1][0]
    keep = (cap.index < on + 3000) | (cap.index >= on + 3200)
    holed = Capture.from_codes(cap.code[keep], index=cap.index[keep], events=cap.events,
                               **{k: v for k, v in cap.meta.to_json_dict().items()})
    act = analyse(holed, pull_in_current=drive.pull_in.current).actuations[0]
    assert act.samples_missing == 200
    assert any("missing" in n for n in act.notes)


def test_docstring_examples():
    assert doctest.testmod(analysis_module).failed == 0


def test_capture_without_scaling_is_an_input_error():
    from coildrive.errors import InputError
    with pytest.raises(InputError) as err:
        analyse(Capture.from_codes([0, 1, 2], sample_rate_hz=1e3))
    assert "amps_per_code" in str(err.value)


def test_release_to_a_drop_out_near_the_end_of_a_fast_decay():
    """A fast release (35 codes a sample) to a drop-out 8 samples before the current is
    back at zero, after a hold whose PWM is sampled 4 times a period (its ripple reads as
    noise of many codes, so the crossing is denoised by a wide centred average): the
    average runs on into the samples after the release, so the crossing is found
    (hand-worked: (1330 - 300) / 35 = 29.4 samples after the switch-off)."""
    from coildrive.bench.capture_file import CaptureEvent

    fs, apc = 2e5, 1e-3
    hold = np.tile([1300, 1370, 1330, 1350], 1000)                 # 50 kHz PWM, 4 samples a period
    k_on, k_off = 40, 40 + 20 + hold.size                           # little idle: a capture of the hold
    rise = np.linspace(0, 1300, 20, endpoint=False)
    decay = np.maximum(1330.0 - 35.0 * (np.arange(60) + 0.5), 0.0)   # sample k at (k + 0.5) / fs
    codes = np.floor(np.concatenate([np.zeros(k_on), rise, hold, decay, np.zeros(100)]))
    events = [CaptureEvent(index=k_on, kind=1), CaptureEvent(index=k_on + 20, kind=2),
              CaptureEvent(index=k_off, kind=3)]
    cap = Capture.from_codes(codes, sample_rate_hz=fs, amps_per_code=apc, events=events)
    assert analysis_module._levels(cap.code).sigma > 2.0, "the PWM reads as noise: a wide average"
    act = analyse(cap, dropout_current=0.3).actuations[0]
    assert act.release_time_s is not None, act.notes
    # t_off is half a sample before the OFF sample (docs/capture-format.md); +-1 sample
    assert act.release_time_s == pytest.approx((1330 - 300) / 35 / fs, abs=1.0 / fs)


def test_ripple_under_noise_larger_than_it():
    """A scope's noise (sigma 2 mA, on 0.5 mA vertical steps) over a 3.4 mA peak-to-peak
    triangle (hand-made: 25 kHz, 20 samples a period, 6 rising and 14 falling, on 273 mA),
    with idle stretches clipped at zero: the ripple's variance (r^2 / 12 = 0.96 mA^2) is a
    quarter of the noise's, so the noise subtracted must be the hold's own. The height is
    the triangle's by construction (hand-worked); the noise the capture's quietest blocks
    read (idle, clipped) is 10-15 % low, which read this ripple 40 % high."""
    from coildrive.bench.capture_file import CaptureEvent

    fs, apc, r, sigma, step = 5e5, 1e-5, 3.4e-3, 2e-3, 0.5e-3
    tri = np.r_[np.linspace(-r / 2, r / 2, 6, endpoint=False), np.linspace(r / 2, -r / 2, 14, endpoint=False)]
    hold = 0.273 + np.tile(tri, 1000)                               # 40 ms of hold
    rise = np.linspace(0.0, 0.55, 500, endpoint=False)
    decay = np.linspace(0.273, 0.0, 200, endpoint=False)
    idle = np.zeros(5000)
    amps = np.concatenate([idle, rise, hold, decay, idle])
    rng = np.random.default_rng(7)
    amps = np.round((amps + rng.normal(0.0, sigma, amps.size)) / step) * step
    codes = np.floor(np.clip(amps, 0.0, None) / apc)
    k_on = idle.size
    events = [CaptureEvent(index=k_on, kind=1), CaptureEvent(index=k_on + rise.size, kind=2),
              CaptureEvent(index=k_on + rise.size + hold.size, kind=3)]
    cap = Capture.from_codes(codes, sample_rate_hz=fs, amps_per_code=apc, events=events)
    act = analyse(cap, hold_frequency=25e3).actuations[0]
    assert act.hold_ripple_a == pytest.approx(r, rel=0.08), act.notes
