"""The duty search of live tuning: where between the design duty and the floor does the
armature drop out, and what hold current does that drop-out mean?

:func:`search_dropout` steps the duty down in coarse steps until an actuation drops out,
then bisects between the last held and the first dropped duty; it knows nothing of the
device (it calls ``actuate``). :func:`repeat_result` turns the bracket into a drop-out
current, from the measured settled hold current where the capture gives one.

Units: SI (A, Hz); duty as a fraction 0..1.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from typing import Callable

from ..config import Drive
from .failures import LiveFailure
from .live_model import BenchPoint, hold_figures


@dataclass(frozen=True)
class RepeatResult:
    """One downward search: the lowest duty that held, the highest that dropped out, the
    drop-out duty (their middle) and the drop-out current (A) there."""

    number: int
    held_duty: float
    dropped_duty: float
    dropout_duty: float
    dropout_current_a: float
    equivalent_current_a: float
    current_basis: str
    actuations: int

    def to_dict(self) -> dict:
        return dataclasses.asdict(self)


def search_dropout(actuate: Callable[[float, str], object], d0: float, floor: float,
                   floor_factor: float, coarse_step: float, quantum: float) -> tuple[float, float, int]:
    """``(held duty, dropped duty, actuations)``: the bracket around the drop-out duty.

    ``actuate(duty, step)`` runs one actuation (``step`` is ``"coarse"`` or
    ``"bisect"``) and returns what it did (``.duty`` as the device set it and
    ``.judgement.dropped``). Coarse steps of ``coarse_step x d0`` go down from the design
    duty ``d0`` to ``floor`` (``floor_factor`` x ``d0``; no drop-out there is a
    :class:`LiveFailure`), then bisection until the bracket is ``quantum`` wide or the
    device cannot set a duty in between.
    """
    step = coarse_step * d0
    held, dropped = d0, None
    d = d0 - step
    count = 0
    while dropped is None:
        d = max(d, floor)
        act = actuate(d, "coarse")
        count += 1
        if act.judgement.dropped:
            dropped = act.duty
        else:
            held = act.duty
            if d <= floor + 1e-12:
                raise LiveFailure("no_dropout", f"no drop-out down to duty {act.duty:.4f} "
                                  f"({floor_factor:g} x the design duty): the armature stays seated -- stuck "
                                  "closed, latching (residual magnetism), or the drop-out signature does "
                                  "not show on this board; the device was stopped")
            d -= step
    while held - dropped > quantum:
        mid = 0.5 * (held + dropped)
        act = actuate(mid, "bisect")
        count += 1
        if act.duty >= held or act.duty <= dropped:
            break  # the device cannot set a duty in between: its own resolution
        if act.judgement.dropped:
            dropped = act.duty
        else:
            held = act.duty
    return held, dropped, count


def repeat_result(drive: Drive, point: BenchPoint, frequency: float, repeat: int, held: float,
                  dropped: float, count: int, actuations: list) -> RepeatResult:
    """One search's result: the drop-out duty (the middle of the bracket) and current.

    The current is the measured settled hold current at the last held duty times the
    model's force/mean ratio to the drop-out duty; without a measured settled current,
    the model's force current at the drop-out duty. ``actuations`` are all so far.
    """
    estimate = 0.5 * (held + dropped)
    eq = float(hold_figures(drive, point, estimate, frequency).force_a[0])
    measured = [a for a in actuations if a.repeat == repeat and not a.judgement.dropped
                and a.duty == held]
    got = measured[-1].judgement.settled_hold_a if measured else None
    if got is not None:
        hf = hold_figures(drive, point, [held, estimate], frequency)
        current = got * float(hf.force_a[1] / hf.mean_a[0])
        basis = (f"measured settled hold current at duty {held:.4f} ({got:.4g} A, "
                 f"{measured[-1].judgement.settled_how}), times the model's force/mean ratio to the drop-out duty")
    else:
        why = measured[-1].judgement.settled_how if measured else "no held actuation in this search"
        current, basis = eq, f"the model's force current at the drop-out duty (no measured hold current: {why})"
    return RepeatResult(number=repeat, held_duty=float(held), dropped_duty=float(dropped),
                        dropout_duty=float(estimate), dropout_current_a=float(current),
                        equivalent_current_a=eq, current_basis=basis, actuations=count)
