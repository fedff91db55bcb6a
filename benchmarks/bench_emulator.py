"""Virtual bench device speed, measured side by side in one run (not a timed test).

The device computes each actuation's physics once per setting (then caches it), and its
byte stream must keep up with the line. Printed, for each drive:

1. the model actuation (20 ms hold) at the design's settings, per compute: target below
   the automatic period (so a fresh setting never stalls a real-time stream by more than
   one period);
2. the same with a hold duty too low to keep an armature seated (it drops out during the
   hold: the armature is integrated through every PWM period) -- reported, no target;
3. a cached actuation: plan + encode + stream of one recording, against the time that
   recording takes on the line: target ratio < 0.1 (the emulator spends under a tenth of
   real time).

Run: ``python benchmarks/bench_emulator.py``.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from coildrive.bench.device import DeviceOptions, VirtualDevice  # noqa: E402
from coildrive.config import load_drive  # noqa: E402
from coildrive.design import design  # noqa: E402


def best(fn, runs: int = 3) -> float:
    times = []
    for _ in range(runs):
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return min(times)


def main() -> None:
    for name in ("demo-valve", "locker-latch-12v"):
        d = design(load_drive(ROOT / "examples" / f"{name}.toml"))
        dev = VirtualDevice(d.drive, DeviceOptions(), design=d)
        key = (dev.peak_time, dev.duty, dev.frequency, 0.02)

        def fresh(k=key):
            dev._cache.clear()
            dev._waveform(k)
        t_model = best(fresh)
        low = (dev.peak_time, dev.duty * 0.3, dev.frequency, 0.02)
        t_low = best(lambda: fresh(low), runs=1)
        # one cached actuation streamed in full, device time far ahead of the wall clock
        dev2 = VirtualDevice(d.drive, DeviceOptions(first_actuation=0.0), design=d)
        dev2._waveform(key)
        t = time.perf_counter()
        wire = dev2.read(dev2.period * 0.999)
        t_stream = time.perf_counter() - t
        line_s = len(wire) * dev2.byte_time
        print(f"{name}: model actuation {t_model * 1e3:.1f} ms (target < period "
              f"{dev.period * 1e3:.0f} ms: {'ok' if t_model < dev.period else 'MISSED'}); "
              f"duty x0.3 {t_low * 1e3:.0f} ms (no target); stream {len(wire)} bytes = "
              f"{line_s * 1e3:.0f} ms of line in {t_stream * 1e3:.1f} ms, ratio "
              f"{t_stream / line_s:.3f} (target < 0.1: {'ok' if t_stream / line_s < 0.1 else 'MISSED'})")


if __name__ == "__main__":
    main()
