"""A moving armature's boosted peak with a bouncing seat (``[supply] boost``, ``[armature]``
with ``restitution``): the bounces in the peak and in the hold, and the conversion after
the threshold flown where the armature is in flight (a rebound's motional term drives the
current up, past the open coil's rise: coildrive/model/armature_boost.py
``window_flight``, coildrive/design/boost_armature.py ``_end``).

Outside reference: scipy's ``solve_ivp`` (DOP853, rtol 1e-11) of the circuit and armature
written afresh in the *current* (``L(x) = L_c / (1 + beta x)``, ``L' = dL/dx``)::

    boost:     L(x) di/dt = u - (R + R_b) i - i L'(x) v      C_b du/dt = -i
    hold on:   L(x) di/dt = V - R i - i L'(x) v
    hold off:  L(x) di/dt = -(R_off i + V_off) - i L'(x) v   (while i > 0)
    m dv/dt = preload + rate (stroke - x) + load + i^2 L'(x) / 2 - c v

resting on the open stop until the force beats spring + load; at the seat the speed turns
into ``-e v`` (``e`` the restitution) until a rebound is slower than 1e-3 of the first
impact speed (the model's rule, ``coildrive.model.armature.REST_FRACTION``), then at rest
there. Checked: the threshold's moment and the last seat (the hold carrying the bounces
on), and the most current over the conversion after a threshold that comes between two
bounces, within 1e-6.

The scenario (the fast valve of examples/fast-valve-boost-armature-12v.toml with a
restitution of 0.4) is invented.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from armature_equations import boosted_events, boosted_loop, boosted_rhs
from conftest import EXAMPLES, run_cli
from test_boost_armature import BETA, BOOST, DUTY, EXAMPLE, LC, PERIOD, POINT

from coildrive.model.armature import SEATED, TRIPPED, ArmatureParams
from coildrive.model.armature_boost import boost_params, boosted_pull_in, window_flight
from coildrive.model.armature_runs import pull_in

E = 0.4                  # the seat's restitution
REST = 1e-3              # a rebound below this fraction of the first impact speed rests


def reference(g: dict, boost: tuple, trip: float, duty: float, period: float, t_end: float,
              window: float = 0.0, r_e: float | None = None) -> dict:
    """solve_ivp (DOP853) of the module docstring's equations: ``trip`` (s), the last
    ``seat`` (s, at rest), ``bounces``, ``impacts`` ((s, m/s) each), and over ``window`` s
    after the trip with the boost still on the most current while the armature flies
    (``top``, A) and over the whole window (``top_all``) -- the pieces' dense output, 4000
    points each, and their ends -- and the moment it came to rest in it (``rest``, s).
    ``r_e``: an eddy resistance across the inductance (``armature_equations.boosted_loop``):
    the threshold and the most current on the terminal current; ``boost`` with ``C_b = 0``:
    an ideal boost."""
    from scipy.integrate import solve_ivp

    v_b = boost[0]
    s = g["stroke"]
    rhs = boosted_rhs(g, boost, r_e=r_e)
    loop = boosted_loop(g, boost, r_e=r_e)

    opts = dict(method="DOP853", rtol=1e-11, atol=1e-14)

    start, at_trip = boosted_events(g, trip, loop)

    st = {"state": "open", "impact": None, "bounces": 0, "top": 0.0, "top_all": 0.0, "left": -1.0}

    def seat(t, y):   # (at the moment of a rebound the speed: not a root there)
        return y[1] if t > st["left"] else y[2]
    seat.terminal, seat.direction = True, -1

    def run(mode, t, y, stop, tripping=False, watch=False):
        """On in ``mode`` from ``t`` to ``stop`` (or the threshold), bounces and all."""
        while t < stop:
            free = st["state"] == "free"
            events = [seat] if free else ([start] if st["state"] == "open" else [])
            if tripping:
                events = events + [at_trip]
            sol = solve_ivp(rhs(mode, free), (t, stop), y, events=events, dense_output=watch, **opts)
            if watch:
                tt = np.linspace(t, float(sol.t[-1]), 4000)
                top = max(float(np.max(loop("boost", sol.sol(tt))[1])), float(loop("boost", sol.y[:, -1])[1]))
                st["top_all"] = max(st["top_all"], top)
                if free:
                    st["top"] = max(st["top"], top)
            t, y = float(sol.t[-1]), list(sol.y[:, -1])
            y[0] = max(y[0], 0.0) if r_e is None else y[0]   # (an eddy term: the flux outlasts it)
            if tripping and sol.t_events[-1].size:
                return t, y, True
            if sol.status == 1 and st["state"] == "open":
                st["state"] = "free"
            elif sol.status == 1 and free:   # the seat: a bounce or at rest
                speed = -y[2]
                st["impact"] = st["impact"] or speed
                st.setdefault("impacts", []).append((t, speed))
                y[1] = 0.0
                if E * speed >= REST * st["impact"]:
                    y[2] = E * speed
                    st["left"] = t
                    st["bounces"] += 1
                else:
                    y[2] = 0.0
                    st["state"] = "seated"
                    st["seat"] = t
        return t, y, False

    t, y, _ = run("boost", 0.0, [0.0, s, 0.0, v_b], t_end, tripping=True)
    out = {"trip": t}
    if window > 0:
        saved = {k: (list(v) if isinstance(v, list) else v) for k, v in st.items()}
        run("boost", t, list(y), t + window, watch=True)
        out.update(top=st["top"], top_all=st["top_all"], rest=st.get("seat", math.inf))
        st.clear()
        st.update(saved)
    k = 0
    while st["state"] != "seated" and t < t_end:
        for mode, stop in (("on", out["trip"] + (k + duty) * period), ("off", out["trip"] + (k + 1) * period)):
            t, y, _ = run(mode, t, y, stop)
        k += 1
    out.update(seat=st.get("seat", math.inf), bounces=st["bounces"], impacts=st.get("impacts", []))
    return out


def _params(**change) -> ArmatureParams:
    return ArmatureParams.make(**{**POINT, "restitution": E, **change})


def test_bounces_into_the_hold_match_scipy_on_the_equations_written_afresh():
    """A threshold in flight: the hold carries the armature onto the seat, bouncing; the
    threshold's moment and the last seat (at rest) against solve_ivp (DOP853)."""
    p = _params()
    pin = boosted_pull_in(boost_params(p, *BOOST), p, 1.0, DUTY, PERIOD, 0.02, rtol=1e-9)
    ref = reference(POINT, BOOST, 1.0, DUTY, PERIOD, 0.02)
    assert pin.status[0] == SEATED and ref["bounces"] > 2
    assert pin.bounces[0] == ref["bounces"]
    assert pin.trip_time[0] == pytest.approx(ref["trip"], rel=1e-6)           # scipy solve_ivp
    assert pin.seat_time[0] == pytest.approx(ref["seat"], rel=1e-6)           # scipy solve_ivp


def test_the_conversion_after_a_threshold_between_bounces_against_scipy():
    """A threshold 0.1 % over the current's hump before the first impact comes between two
    later bounces (at the hump itself it does not: the hump the run keeps at its accepted
    steps lies 2.3e-4 under the crest solve_ivp's dense output gives, and the crest crosses
    it; the run's threshold event finds such a crest inside a step): the conversion after it (one 20 kHz period) is flown, bounces and all, until the
    armature rests on the seat -- the moment and the most current over the flight within
    1e-6 of solve_ivp's -- and from the rest on the open coil's rise bounds the current: the
    two together at or above solve_ivp's most current over the whole conversion."""
    from coildrive.model.rl import rise_current

    p = _params()
    pb = boost_params(p, *BOOST)
    trip = float(pull_in(pb).hump_current[0]) * 1.001
    pin = pull_in(pb, trip=trip, rtol=1e-10)
    assert pin.status[0] == TRIPPED and pin.trip_state[1, 0] < 0.02 * POINT["stroke"]   # among the bounces
    flown, top, t_rest, y = window_flight(pb, pin, PERIOD, rtol=1e-10)
    ref = reference(POINT, BOOST, trip, DUTY, PERIOD, 0.02, window=PERIOD)
    assert flown[0] and ref["trip"] < ref["rest"] < ref["trip"] + PERIOD
    assert pin.trip_time[0] == pytest.approx(ref["trip"], rel=1e-6)           # scipy solve_ivp
    assert t_rest[0] == pytest.approx(ref["rest"], rel=1e-6)                  # scipy solve_ivp
    assert top[0] == pytest.approx(ref["top"], rel=1e-6)                      # scipy solve_ivp
    i_rest = pb.current(y[0], y[1])
    bound = rise_current(ref["trip"] + PERIOD - t_rest, i_rest, pb.v_on, pb.r_on, pb.l_open)
    assert max(float(top[0]), float(bound[0])) >= ref["top_all"] * (1 - 1e-9)


def test_design_of_a_bouncing_armature(tmp_path):
    """``coildrive design --json`` of the example with a bouncing seat (a real subprocess):
    seated at every corner (in the hold: the bounces outlast the peak), later than the
    inelastic seat (a system file's channel with one is designed too:
    tests/test_system_boost_armature.py)."""
    board = EXAMPLES.parent / "boards" / "lab-m32-zener.toml"
    text = EXAMPLE.read_text().replace('board = "lab-m32-zener"', f'board = "{board}"').replace(
        'damping = "1 N*s/m"', f'damping = "1 N*s/m"\nrestitution = {E}')
    path = tmp_path / "bounce.toml"
    path.write_text(text)
    r = run_cli("design", str(path), "--json")
    assert r.returncode == 0, r.stderr
    d = json.loads(r.stdout)
    a = d["armature"]
    assert a["seated_corners"] == a["corners"] and a["seated_in_peak_corners"] < a["corners"]
    assert d["pull_in"]["time_s"] == a["seat_time_s"] <= a["seat_window_s"]
    seats = next(c for c in d["checks"] if c["name"] == "armature_seats")
    assert seats["ok"] and "in the hold after the threshold" in seats["detail"]
    plain = json.loads(run_cli("design", str(EXAMPLE), "--json", cwd=EXAMPLES).stdout)
    assert a["seat_time_s"] > plain["armature"]["seat_time_s"]        # the bounces take time


R_E = 200.0              # an eddy resistance across the inductance, ohm


@pytest.mark.parametrize("boost,trip", [(BOOST, 1.325), ((BOOST[0], 0.0, BOOST[2]), 1.375)],
                         ids=["capacitor", "ideal"])
def test_the_conversion_after_a_threshold_between_bounces_with_an_eddy_term_against_scipy(boost, trip):
    """An eddy term (200 ohm) with the bouncing seat: a threshold on the terminal current
    just above its hump before the first impact comes between two bounces; the conversion
    after it is flown, bounces and all, on the branch behind the loop's Thevenin pair --
    the threshold's moment, the rest and the most terminal current over the flight within
    1e-6 of solve_ivp's (the boost capacitor, and an ideal boost whose terminal current the
    flight tracks through the magnetising current) -- and from the rest on the open branch's
    rise bounds the rest of it (handbook RL step on the Thevenin pair ``V_b R_e/(R + R_e)``,
    ``R R_e/(R + R_e)``, written here afresh; the terminal current ``(V_b + R_e i)/(R + R_e)``):
    the two together at or above solve_ivp's most terminal current over the conversion."""
    p = _params(eddy=R_E)
    pb = boost_params(p, *boost)
    assert pull_in(pb).hump_current[0] < trip
    pin = pull_in(pb, trip=trip, rtol=1e-10)
    assert pin.status[0] == TRIPPED and pin.trip_state[1, 0] < 0.02 * POINT["stroke"]   # among the bounces
    flown, top, t_rest, y = window_flight(pb, pin, PERIOD, rtol=1e-10)
    ref = reference(POINT, boost, trip, DUTY, PERIOD, 0.02, window=PERIOD, r_e=R_E)
    assert flown[0] and ref["trip"] < ref["rest"] < ref["trip"] + PERIOD
    assert pin.trip_time[0] == pytest.approx(ref["trip"], rel=1e-6)           # scipy solve_ivp
    assert t_rest[0] == pytest.approx(ref["rest"], rel=1e-6)                  # scipy solve_ivp
    assert top[0] == pytest.approx(ref["top"], rel=1e-6)                      # scipy solve_ivp
    r, v_b = POINT["r_on"] + boost[2], boost[0]
    r_th = r * R_E / (r + R_E)
    l_open = LC / (1 + BETA * POINT["stroke"])
    i_m = v_b / r + (float(pb.current(y[0], y[1])[0]) - v_b / r) * math.exp(
        -(ref["trip"] + PERIOD - t_rest[0]) * r_th / l_open)
    bound = (v_b + R_E * i_m) / (r + R_E)
    assert ref["top"] < ref["top_all"] <= max(float(top[0]), bound) * (1 + 1e-9)


def test_bounces_with_an_eddy_term_into_the_hold_match_scipy():
    """An eddy term (200 ohm) and the bouncing seat: a threshold in flight, the hold carrying
    the armature onto the seat, bouncing; the threshold's moment, the bounces and the last
    seat against solve_ivp (DOP853) of the equations written afresh."""
    p = _params(eddy=R_E)
    pin = boosted_pull_in(boost_params(p, *BOOST), p, 1.3, DUTY, PERIOD, 0.02, rtol=1e-9)
    ref = reference(POINT, BOOST, 1.3, DUTY, PERIOD, 0.02, r_e=R_E)
    assert pin.status[0] == SEATED and ref["bounces"] > 2
    assert pin.bounces[0] == ref["bounces"]
    assert pin.trip_time[0] == pytest.approx(ref["trip"], rel=1e-6)           # scipy solve_ivp
    assert pin.seat_time[0] == pytest.approx(ref["seat"], rel=1e-6)           # scipy solve_ivp


def test_a_bouncing_armature_with_an_eddy_term_designs_simulates_and_emulates(tmp_path):
    """The example with a bouncing seat and a 1 kohm eddy term: ``design --json`` (a real
    subprocess) seats it at every corner, later than without the bounces, its most current
    at the end of the peak at least the threshold; ``simulate`` shows the bounces (the
    position back at 0 more than once) and the magnetising current; the virtual device's
    capture passes ``check`` (plumbing: it shares the design's physics)."""
    from test_emulator_device import emulated_passes_check

    from coildrive.config import load_drive
    from coildrive.design import design

    board = EXAMPLES.parent / "boards" / "lab-m32-zener.toml"
    plain = EXAMPLE.read_text().replace('board = "lab-m32-zener"', f'board = "{board}"').replace(
        "inductance_tolerance = 0.10", 'inductance_tolerance = 0.10\neddy_resistance = "1 kohm"')
    still, path = tmp_path / "still.toml", tmp_path / "bounce.toml"
    still.write_text(plain)
    path.write_text(plain.replace('damping = "1 N*s/m"', f'damping = "1 N*s/m"\nrestitution = {E}'))
    r = run_cli("design", str(path), "--json")
    assert r.returncode == 0, r.stderr
    d = json.loads(r.stdout)
    a = d["armature"]
    assert a["seated_corners"] == a["corners"]
    assert d["boost"]["end_current_max_a"] >= d["boost"]["threshold_a"]
    assert a["seat_time_s"] > json.loads(run_cli("design", str(still), "--json").stdout)["armature"]["seat_time_s"]
    out = tmp_path / "b.csv"
    r = run_cli("simulate", str(path), "--supply", "9", "--coil-temp", "100", "--hold-time", "0.001",
                "--csv", str(out))
    assert r.returncode == 0, r.stderr
    data = np.genfromtxt(out, delimiter=",", names=True)
    seated = data["position_m"] <= 0.0
    assert np.count_nonzero(seated[1:] & ~seated[:-1]) > 2 and "magnetising_current_a" in data.dtype.names
    dz = design(load_drive(path))
    emulated_passes_check(dz, tmp_path)
