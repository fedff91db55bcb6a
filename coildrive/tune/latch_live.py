"""A latching coil's pulses tuned live on the bench: the shortest set pulse that latches and
the shortest reset pulse that lets go, and the pulses to use from them.

The procedure (:class:`LatchLiveTuner`, over a :class:`~coildrive.bench.link.DeviceLink`-like
object, on the live hold tune's link session, :class:`coildrive.tune.live.LiveTuner`):

1. QUERY_INFO. Latching is read from the position switch (SWITCH 1: latched, 0: let go);
   a device without one is refused (the current's signature of a pulse that latches is
   not built). Both pulses are set to the design's lengths (SET_PULSE_TIME,
   ``docs/protocol.md``; a device that does not take it is refused).
2. The check at the design lengths: a set pulse, then a reset pulse; the reset must open
   the switch (else the latch does not latch, or does not let go, at its design lengths:
   the procedure ends). The device fires set and reset in turn: a pulse of the other kind
   than asked (at the start) is logged and the next one fired.
3. For each pulse, ``repeats`` searches: its length halved (whole scheduler ticks) from the
   design length until it no longer latches (set) or lets go (reset), then bisection
   between the shortest that worked and the longest that did not until they are less than
   ``resolution`` x the design length (at least one tick) apart. Testing a set length is
   a set pulse of that length, then a reset pulse of the design length (it must let a
   latched coil go); testing a reset length is a set pulse of the design length (it must
   latch), then the reset pulse of that length. The coil is left let go.
4. Safety, as the live hold tune: any sample above 1.25 x the highest current a pulse can
   reach (:func:`coildrive.design.latch.highest_pulse_current`) or at the ADC's full
   scale stops the device (over-current); a pulse whose highest current stays below a
   quarter of the model's current at the bench point for that length is an open coil.
   STOP goes out on every exit path, Ctrl-C included.

The recommendation (:func:`recommend_pulses`), per pulse: the longest of the repeats'
shortest lengths that worked, scaled to the design's worst corner by the model's own
requirement (the worst corner's time to the pulse's current -- with a moving armature its
seat time -- over that time at the bench point, :func:`coildrive.design.latch.bench_pulse`:
the live hold tune's corner factor, for a time), times the margin (``--margin``, else
``pull_in.margin`` and ``reset.margin``), in whole ticks as the design rounds; never below
the length the design sizes at that margin (its force margin and settle time included),
since a shorter one fails the design's own pulse check. Both lengths run in
:func:`coildrive.design.latch.design_latch` (its ``fixed`` lengths, as the offline tune's
steps): that design's verdict, interval and header.

Units: SI (s, A, V), temperatures in degC.
"""

from __future__ import annotations

import dataclasses
import math
import time
from dataclasses import dataclass, field
from typing import Callable

import numpy as np

from ..config import Drive
from ..errors import InputError
from .failures import LiveFailure
from .live import LiveTuner, Progress, SessionResult, check_bench_options
from .live_model import BenchPoint, bench_point

#: Pulse order and the ON event's value of each (``docs/protocol.md``, section 4.2).
PULSES = ("set", "reset")
#: Highest sample over the model's current at the bench point that still counts as an open coil.
OPEN_FRACTION = 0.25
#: Over-current limit over the highest current a pulse can reach (the live hold tune's 1.25).
OVER_CURRENT_FACTOR = 1.25


@dataclass(frozen=True)
class LatchLiveOptions:
    """What the live search of a latch's pulses does: ``repeats`` searches per pulse;
    ``supply`` V / ``coil_temp`` degC of the bench (``None``: the device's events, else the
    drive's nominal supply / reference temperature, as the live hold tune); ``resolution``
    a fraction of each pulse's design length; ``margin`` on the worst pulse times
    (``None``: ``pull_in.margin`` and ``reset.margin``); ``timeout`` s of slack per pulse;
    ``detect`` ``"auto"`` or ``"switch"``."""

    repeats: int = 3
    supply: float | None = None
    coil_temp: float | None = None
    resolution: float = 0.01
    margin: float | None = None
    timeout: float = 10.0
    detect: str = "auto"

    def check(self) -> None:
        """Raise :class:`InputError` naming the option for a value out of range."""
        check_bench_options(self)
        if not 0 < self.resolution <= 0.5:
            raise InputError("--resolution", "", f"{self.resolution:g} is out of range, expected a fraction "
                             "of the design length in (0, 0.5]")
        if self.margin is not None and not self.margin >= 1.0:
            raise InputError("--margin", "", f"{self.margin:g} is below 1, expected a factor >= 1 on the "
                             "worst pulse times")
        if self.detect == "signature":
            raise InputError("--detect", "", "a latching coil's live tune reads latching from the position "
                             "switch; the current's signature of a pulse that latches is not built")
        if self.detect not in ("auto", "switch"):
            raise InputError("--detect", "", f"{self.detect!r} is not one of auto, switch")


@dataclass(frozen=True)
class PulseActuation:
    """One pulse fired: what it tested (``pulse``, ``step``: ``"design"``, ``"halve"``,
    ``"bisect"``, ``"partner"`` -- the other pulse at its design length -- or
    ``"alignment"``), the length asked for and in force (s), the switch before and after
    (1 latched, 0 let go, ``None`` not known), the highest current (A) and the verdict."""

    number: int
    pulse: str
    repeat: int
    step: str
    length_requested_s: float
    length_s: float
    switch_before: int | None
    switch_after: int | None
    switch_at_s: float | None
    peak_current_a: float
    worked: bool
    on_index: int

    def to_dict(self) -> dict:
        return dataclasses.asdict(self)


@dataclass(frozen=True)
class PulseSearch:
    """One search of one pulse: the shortest length that worked and the longest that did
    not (s; ``None`` when even one tick worked), and the pulses it fired."""

    pulse: str
    repeat: int
    worked_s: float
    failed_s: float | None
    actuations: int

    def to_dict(self) -> dict:
        return dataclasses.asdict(self)


@dataclass(frozen=True)
class PulseRecommendation:
    """One pulse's recommended length: ``ticks`` (s ``time_s``) = the longer of the bench's
    (``bench_s`` x ``corner_factor`` x ``margin``, in ticks: ``bench_ticks``) and the
    design's at that margin (``model_ticks``); ``governed_by`` which; the model's time to
    the pulse's current at the bench point and at the worst corner (s)."""

    pulse: str
    ticks: int
    time_s: float
    governed_by: str
    bench_s: float
    bench_spread_s: float
    model_bench_s: float
    model_worst_s: float
    worst_corner: str
    corner_factor: float
    margin: float
    margin_source: str
    bench_ticks: int
    model_ticks: int
    design_ticks: int

    def to_dict(self) -> dict:
        return dataclasses.asdict(self)


@dataclass
class LatchLiveResult(SessionResult):
    """Everything the live tune of a latch found (plain data; docs/tuning.md for the JSON):
    the bisection's resolution per pulse (s), the pulses fired, the searches, the
    recommendation per pulse and ``recommended``, the
    :class:`~coildrive.design.latch.LatchDesign` that runs the recommended pulses (the
    header's source)."""

    resolution_s: dict = field(default_factory=dict)
    actuations: list[PulseActuation] = field(default_factory=list)
    searches: list[PulseSearch] = field(default_factory=list)
    pulses: list[PulseRecommendation] = field(default_factory=list)
    recommended: object = None

    @property
    def ok(self) -> bool:
        """A recommendation whose design passes, and the device acknowledged the STOP."""
        return (self.failure is None and self.recommended is not None and self.recommended.ok
                and self.stopped)


def check_latch_live(drive: Drive) -> None:
    """Raise :class:`InputError` (naming the key) for latch pulses the live tune does not
    step: a supply-compensated table (one length per pulse is stepped on the bench; the
    offline tune sweeps a table), pulses from the boost (each ends at its current
    threshold, not after a length)."""
    if drive.pull_in.compensate:
        raise InputError(drive.source, "pull_in.compensate", "coildrive tune --port steps one fixed length per "
                         "latch pulse; a supply-compensated pulse table is swept by coildrive tune without --port")
    if drive.supply.boosted:
        raise InputError(drive.source, "supply.boost", "coildrive tune --port steps timed pulses; pulses from "
                         "the boost end at their current threshold: coildrive tune without --port sweeps it")


def search_shortest(test: Callable[[float, str], tuple[float, bool]], design_s: float, tick_s: float,
                    quantum_s: float) -> tuple[float, float | None, int]:
    """``(shortest length that worked, longest that did not or None, pulses tested)``.

    ``test(length, step)`` fires the pulse at ``length`` s (``step``: ``"halve"`` or
    ``"bisect"``) and returns ``(length in force, worked)``. The length is halved from the
    design length ``design_s`` (which worked) in whole ticks of ``tick_s`` until it does not
    work (one tick that works ends the search), then bisected until the bracket is at most
    ``quantum_s`` wide or the device cannot set a length in between."""
    worked, failed, count = design_s, None, 0
    while failed is None:
        n = max(1, int(round(worked / tick_s)) // 2)
        got, ok = test(n * tick_s, "halve")
        count += 1
        if ok:
            worked = got
            if n <= 1:
                return worked, None, count
        else:
            failed = got
    while worked - failed > quantum_s * (1 + 1e-9):
        n = int(round((worked + failed) / (2 * tick_s)))
        got, ok = test(n * tick_s, "bisect")
        count += 1
        if got >= worked or got <= failed:
            break   # the device cannot set a length in between: its own resolution
        if ok:
            worked = got
        else:
            failed = got
    return worked, failed, count


def recommend_pulses(drive: Drive, design, point: BenchPoint, bench: dict[str, float],
                     spread: dict[str, float], margin: float | None = None):
    """``(per-pulse recommendations, the design that runs them)`` from the bench's shortest
    lengths that worked (``bench``: pulse -> s, the longest over the repeats; module
    docstring for the rule)."""
    from ..design.latch import bench_pulse, design_latch
    from ..design.peak import whole_ticks
    from .latch import with_margin

    rate = drive.board.tick.rate
    sized = design_latch(with_margin(drive, margin))   # the design's own lengths at that margin
    out, fixed = [], {}
    for p, q in zip(design.latch.pulses, sized.latch.pulses):
        m = p.margin if margin is None else margin
        src = "--margin" if margin is not None else ("pull_in.margin" if p.name == "set" else "reset.margin")
        at_bench, _ = bench_pulse(drive, p.name, point.supply_v, point.coil_temp_c)
        k = p.worst_time_s / at_bench
        need = bench[p.name] * k * m
        n_bench = whole_ticks(need, rate)
        n_model = q.ticks
        n = max(n_bench, n_model)
        out.append(PulseRecommendation(
            pulse=p.name, ticks=n, time_s=n / rate,
            governed_by="bench" if n_bench >= n_model else "model (the design's length at that margin)",
            bench_s=bench[p.name], bench_spread_s=spread[p.name], model_bench_s=at_bench,
            model_worst_s=p.worst_time_s, worst_corner=p.worst_corner, corner_factor=k, margin=m,
            margin_source=src, bench_ticks=n_bench, model_ticks=n_model, design_ticks=p.ticks))
        fixed[p.name] = n
    return out, design_latch(with_margin(drive, margin), fixed)


class LatchLiveTuner(LiveTuner):
    """The live procedure of a latch's pulses over ``link`` (module docstring). ``design``
    is the :class:`~coildrive.design.latch.LatchDesign` of the drive; :meth:`run` returns a
    :class:`LatchLiveResult` with every failure (and Ctrl-C) in ``result.failure``, the
    device sent STOP."""

    def __init__(self, link, design, options: LatchLiveOptions | None = None,
                 progress: Progress | None = None, clock: Callable[[], float] = time.monotonic):
        self.design = design
        self.drive: Drive = design.drive
        self.options = options or LatchLiveOptions()
        self.options.check()
        check_latch_live(self.drive)
        self._open_session(link, progress, clock)
        self.result = LatchLiveResult(drive=self.drive, design=design, options=self.options)
        self._rate = float(self.drive.board.tick.rate)
        self._switch: int | None = None      # the latch as the switch last said
        self._asked = {name: None for name in PULSES}
        self._saturates = False              # the note that the pulses saturate the ADC, once
        self._window_end = None              # one past the last sample index the last pulse was read to

    # ------------------------------------------------------------------ one pulse
    def _set_length(self, name: str, length: float) -> float:
        """SET_PULSE_TIME; the length in force (s, the device's reply)."""
        from ..bench.messages import PULSE_RESET_BIT, Opcode

        us = int(round(length * 1e6))
        if self._asked[name] is not None and self._asked[name][0] == us:
            return self._asked[name][1]
        r = self._command(Opcode.SET_PULSE_TIME, us | (PULSE_RESET_BIT if name == "reset" else 0))
        got = r.value * 1e-6 if r.value else length
        self._asked[name] = (us, got)
        return got

    def _fire_pulse(self, name: str, length: float, repeat: int, step: str) -> PulseActuation:
        """Pulse ``name`` at ``length`` s: fired (a pulse of the other kind first when the
        device's turn is that one, logged as ``"alignment"``), captured and judged."""
        in_force = self._set_length(name, length)
        for _ in range(2):
            act = self._one_pulse(name, length, in_force, repeat, step)
            if act.pulse == name:
                return act
        raise LiveFailure("link", f"the device fired two {act.pulse} pulses in a row when a {name} pulse was "
                          "asked for: it does not alternate set and reset")

    def _one_pulse(self, name: str, length: float, in_force: float, repeat: int, step: str) -> PulseActuation:
        from ..bench.messages import EventKind

        res = self.result
        design_len = {p.name: p.time_s for p in self.design.latch.pulses}
        longest = max(in_force, *(v[1] for v in self._asked.values() if v is not None))
        self._full_scale(longest)
        release = self._release_window()
        self._pump(0)   # (only what came before this pulse's START: its own events come after)
        late = [e for e in self._events if self._window_end is not None and e[2] == int(EventKind.SWITCH)
                and e[1] >= self._window_end]
        if late:   # a change the last window missed: that pulse's verdict is not known
            raise LiveFailure("link", f"the position switch changed to {late[-1][3]} after pulse "
                              f"{len(res.actuations)}'s recording window: its verdict is not known (a slow "
                              "switch or armature: the device was stopped)")
        mark, _ = self._fire(0)
        cap, on_index, on_value = self._gather(mark, longest, release, (EventKind.ON, EventKind.OFF, EventKind.SWITCH),
                                               None)
        offs = [e.index for e in cap.events if e.kind == int(EventKind.OFF)]
        self._window_end = (offs[0] if offs else on_index) + int(math.ceil(release * float(self._info.sample_rate_hz)))
        fired = PULSES[on_value] if on_value in (0, 1) else name
        if fired != name:
            step, length, in_force = "alignment", design_len[fired], self._asked[fired][1]
        amps = cap.current
        fs = float(self._info.sample_rate_hz)
        switches = [e for e in cap.events if e.kind == int(EventKind.SWITCH)]
        before = self._switch
        after = int(switches[-1].value) if switches else before
        at = (switches[-1].index - on_index) / fs if switches else None
        self._switch = after
        worked = after == (1 if fired == "set" else 0)
        act = PulseActuation(number=len(res.actuations) + 1, pulse=fired, repeat=repeat, step=step,
                             length_requested_s=float(length), length_s=float(in_force), switch_before=before,
                             switch_after=after, switch_at_s=at, peak_current_a=float(np.max(amps)) if amps.size else 0.0,
                             worked=bool(worked), on_index=int(on_index))
        res.actuations.append(act)
        _, i_model = _model_current(self.drive, res.point, fired, in_force)
        if act.peak_current_a < OPEN_FRACTION * i_model:
            raise LiveFailure("open_coil", f"open coil: pulse {act.number} ({fired}, {in_force * 1e3:.4g} ms) "
                              f"reached only {act.peak_current_a * 1e3:.3g} mA, below {OPEN_FRACTION:g} x the "
                              f"model's {i_model * 1e3:.4g} mA at the bench point (open coil, a loose wire, or no "
                              "supply); the device was stopped")
        if self.progress is not None:
            self._expected_total = max(self._expected_total, len(res.actuations))
            self.progress(len(res.actuations), self._expected_total,
                          f"{fired} {in_force * 1e3:.4g} ms: {'worked' if worked else 'did not'}")
        return act

    def _release_window(self) -> float:
        """s after a pulse's OFF its recording is read for: 1.5 x the longest decay to zero
        + 2 ms, and with a moving armature twice the worst seat time and its travel back
        open on top (the armature of a cut set pulse may reach the seat after the OFF)."""
        lt = self.design.latch
        out = 1.5 * max(p.decay_time_s for p in lt.pulses) + 0.002
        if self.drive.armature is not None:
            out += 2.0 * max(p.seat_time_s or 0.0 for p in lt.pulses) + max(p.open_time_s or 0.0 for p in lt.pulses)
        return out

    def _full_scale(self, longest: float) -> None:
        """A reading at the ADC's full scale stops the device unless the model at the bench
        point expects one of the pulses (at most ``longest`` s) to reach past
        1 / :data:`OVER_CURRENT_FACTOR` of the scale: the board's ADC then cannot show the
        pulse's top, and only the over-current limit (if inside the scale) still stops it."""
        apc, zero = self._scaling()
        top = (2**self._info.adc_bits - 1 - zero) * apc
        expect = max(_model_current(self.drive, self.result.point, n, longest)[1] for n in PULSES)
        if OVER_CURRENT_FACTOR * expect >= top:
            self._full_code = 2**self._info.adc_bits   # (never read)
            note = (f"the longest pulses reach {expect:.4g} A at the bench point (the model), past the ADC's full "
                    f"scale {top:.4g} A: a full-scale reading does not stop the tune; the over-current limit "
                    f"{self.result.over_current_a:.4g} A " + ("does" if self._limit_code < 2**self._info.adc_bits - 1
                                                            else "lies beyond the scale and cannot"))
            if not self._saturates:
                self._saturates = True
                self.result.notes.append(note)
        else:
            self._full_code = 2**self._info.adc_bits - 1

    def _test(self, name: str, length: float, repeat: int, step: str) -> tuple[float, bool]:
        """Test pulse ``name`` at ``length`` s with its partner at its design length (module
        docstring): ``(length in force, worked)``."""
        des = {p.name: p.time_s for p in self.design.latch.pulses}
        if name == "set":
            act = self._fire_pulse("set", length, repeat, step)
            back = self._fire_pulse("reset", des["reset"], repeat, "partner")
            if self._switch != 0:
                raise LiveFailure("stuck", f"the reset pulse at its design length ({back.length_s * 1e3:.4g} ms, "
                                  f"pulse {back.number}) did not let the latch go; the device was stopped")
            return act.length_s, act.worked
        first = self._fire_pulse("set", des["set"], repeat, "partner")
        if self._switch != 1:
            raise LiveFailure("stuck", f"the set pulse at its design length ({first.length_s * 1e3:.4g} ms, pulse "
                              f"{first.number}) did not latch; the device was stopped")
        act = self._fire_pulse("reset", length, repeat, step)
        return act.length_s, act.worked

    # ------------------------------------------------------------------ the procedure
    def run(self) -> LatchLiveResult:
        """Run the procedure (module docstring); STOP on every exit."""
        return self._session(self._procedure)

    def _procedure(self) -> None:
        from ..design.latch import highest_pulse_current

        res, o = self.result, self.options
        res.point = bench_point(self.drive, o.supply, o.coil_temp)
        self._query_info(OVER_CURRENT_FACTOR * highest_pulse_current(self.drive), 0.0)
        if res.detection != "switch":
            raise LiveFailure("refused", "the device reports no position switch (INFO flag clear): the "
                              "live tune of a latch reads latching from it (the current's signature of a "
                              "pulse that latches is not built); coildrive emulate of a latch without "
                              "[armature] gives one with --threshold-switch")
        des = {p.name: p.time_s for p in self.design.latch.pulses}
        for name in PULSES:
            self._set_length(name, des[name])
        tick = 1.0 / self._rate
        res.resolution_s = {n: max(o.resolution * des[n], tick) for n in PULSES}
        self._expected_total = 2 + 2 * o.repeats * 2 * 8
        self._fire_pulse("set", des["set"], 0, "design")
        self._fire_pulse("reset", des["reset"], 0, "design")
        if self._switch != 0:
            raise LiveFailure("stuck", "at the design lengths the reset pulse did not let go (no SWITCH 0): "
                              "the latch does not latch, or does not let go, on this bench; the device "
                              "was stopped")
        if o.supply is None or o.coil_temp is None:   # the device's events of those pulses
            res.point = bench_point(self.drive, o.supply, o.coil_temp, self._supply_codes or None,
                                    self._info.adc_bits, self._temperatures or None)
        for name in PULSES:
            for k in range(1, o.repeats + 1):
                worked, failed, count = search_shortest(
                    lambda length, step, name=name, k=k: self._test(name, length, k, step), des[name], tick,
                    res.resolution_s[name])
                res.searches.append(PulseSearch(name, k, worked, failed, count))
                if failed is None:
                    res.notes.append(f"the {name} pulse worked at one tick ({tick * 1e3:.4g} ms) in search "
                                     f"{k}: its bench threshold is below the tick")
        if self._switch != 0:   # leave the coil let go
            self._fire_pulse("reset", des["reset"], 0, "partner")
        bench = {n: max(s.worked_s for s in res.searches if s.pulse == n) for n in PULSES}
        spread = {n: bench[n] - min(s.worked_s for s in res.searches if s.pulse == n) for n in PULSES}
        res.pulses, res.recommended = recommend_pulses(self.drive, self.design, res.point, bench, spread,
                                                       o.margin)


def _model_current(drive: Drive, point: BenchPoint | None, name: str, length: float) -> tuple[float, float]:
    """The model's time to pulse ``name``'s current and its current ``length`` s in, at the
    bench point (s, A; ``nan`` without a point)."""
    if point is None:
        return math.nan, math.nan
    from ..design.latch import bench_pulse

    return bench_pulse(drive, name, point.supply_v, point.coil_temp_c, length)
