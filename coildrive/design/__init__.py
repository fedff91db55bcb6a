"""The design stage: a drive file's inputs in, one :class:`Design` result out.

Modules, in the order data flows through them:

* ``corners``: the corner grid and the nominal point;
* ``timer``: the prescaler/period solver;
* ``evaluate``: a voltage-mode setting at many points (self-heating, rise, PWM steady
  state, release);
* ``envelope``, ``regulation``, ``peak``, ``turnoff``, ``firmware``: the operating
  envelope (coil temperature as its own axis), the hold the firmware runs, the peak by
  time and force, every turn-off, and what the firmware runs at a given supply;
* ``thermal_cycle``: the coil over an on/off cycle (``[duty]``, a heat capacity): the
  hottest coil over the cycle, the on-time to the coil's limit, the freewheel's average
  power;
* ``holds``: the hold strategies behind one interface -- ``hold_voltage`` (fixed duty and
  the supply table) and ``hold_current`` (current mode);
* ``figures``, ``checks``, ``mechanics``: what every strategy builds the same way;
* ``result``: the Design and its parts (plain data);
* ``core``: :func:`design`, :func:`actuation`, :func:`design_waveforms` and
  :func:`design_thermal_curves`;
* ``montecarlo``: the tolerance Monte Carlo of a chosen setting;
* ``report``, ``plot``: the terminal tables and the PNG (they read a Design only).

Imports run one way: ``coildrive.model`` and the shared modules below, the outputs
(``codegen``, ``cli``), ``bench`` and ``tune`` above.
"""

from .core import actuation, design, design_thermal_curves, design_waveforms, firmware_setting
from .result import (ARMATURE_CORNER_KEYS, ELEMENT_NAMES, ActuationPoint, AdcThresholds,
                     ArmatureResult, Check, Corner, CurrentModeResult, Design, DutyTable, PeakTable,
                     HoldResult, PullInResult, ReleaseResult, SplitDecayResult,
                     ThermalCycleResult, Thresholds, TimerResult)

__all__ = ["ARMATURE_CORNER_KEYS", "ELEMENT_NAMES", "ActuationPoint", "AdcThresholds",
           "ArmatureResult", "Check", "Corner", "CurrentModeResult", "Design", "DutyTable", "PeakTable",
           "HoldResult", "PullInResult", "ReleaseResult", "SplitDecayResult", "ThermalCycleResult",
           "Thresholds", "TimerResult", "actuation", "design", "design_thermal_curves",
           "design_waveforms", "firmware_setting"]
