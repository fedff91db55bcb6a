"""The tuning stage: the lowest safe hold, offline from the model and live on the bench.

* ``sweep``: the offline sweep over realisable PWM frequencies x hold levels x corners
  (``coildrive tune DRIVE``); ``report`` and ``plot`` show it;
* ``live``: live tuning over a device link (``coildrive tune DRIVE --port``), in three
  parts -- ``live_model`` (the model at the bench point and the scaling to the worst
  corner), ``dropout`` (the judge: did the armature drop out in a captured actuation?),
  ``search`` (the duty search) -- driven by ``live.LiveTuner`` (the device steps);
  ``live_report`` shows it.
* ``latch``: a latching coil's offline sweep of its timed pulses' lengths (``coildrive tune
  LATCH.toml``; every step is the latch design with that length); ``latch_boost``: pulses
  from the boost, a sweep of each pulse's threshold ``current_margin`` instead (every step
  the latch design at that margin); ``latch_table``: supply-compensated pulses, a sweep of
  the time margin every entry of a pulse's table keeps (every step the latch design at that
  margin); ``latch_report`` shows all three.

Imports run one way: ``design``, ``bench`` and ``model`` below, ``cli`` above.
"""
