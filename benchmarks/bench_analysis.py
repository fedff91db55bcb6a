"""Analysis speed target: 10^7 samples cut into actuations and measured in under 2 s.

The capture is synthetic (:func:`coildrive.bench.synth.synth_capture`): the pinch-valve
example on its 1 MS/s board, actuations of 20 ms hold with 5 ms idle between them and
one code of noise, until there are at least 10^7 samples. Both ways of finding the
phases are timed: from the event records and from the waveform alone. Also timed:
writing the capture file and reading it back (not part of the target).

Run: ``python benchmarks/bench_analysis.py``.
"""

from __future__ import annotations

import os
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from coildrive.bench.analysis import analyse  # noqa: E402
from coildrive.bench.capture_file import read_capture, write_capture  # noqa: E402
from coildrive.bench.synth import synth_design_capture  # noqa: E402
from coildrive.config import load_drive  # noqa: E402
from coildrive.design import design  # noqa: E402

TARGET_S = 2.0
SAMPLES = 10_000_000


def best_of(runs: int, fn):
    times, out = [], None
    for _ in range(runs):
        t0 = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t0)
    return min(times), out


def main() -> None:
    os.environ.setdefault("OMP_NUM_THREADS", "1")
    d = design(load_drive(ROOT / "examples" / "pinch-valve-48v.toml"))
    one = synth_design_capture(d, actuations=1, hold_time=0.02, idle_time=0.005)
    count = int(SAMPLES / (len(one) - 0.005 * one.meta.sample_rate_hz)) + 1
    t0 = time.perf_counter()
    cap = synth_design_capture(d, actuations=count, hold_time=0.02, idle_time=0.005,
                               noise_codes=1.0, seed=1)
    t_synth = time.perf_counter() - t0
    print(f"capture: {len(cap):,} samples, {count} actuations (synthesised in {t_synth:.2f} s)")
    kwargs = dict(pull_in_current=d.drive.pull_in.current, dropout_current=d.drive.release.current,
                  hold_frequency=d.hold.frequency_hz)
    for label, use_events in (("from events", True), ("from the waveform", False)):
        t, a = best_of(3, lambda: analyse(cap, use_events=use_events, **kwargs))
        print(f"analysis {label}: {t:.3f} s for {len(a.actuations)} actuations "
              f"(target < {TARGET_S:g} s; ratio to target {t / TARGET_S:.2f})")
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "bench.cdcap"
        t_write, _ = best_of(1, lambda: write_capture(path, cap))
        t_read, back = best_of(3, lambda: read_capture(path))
        size = path.stat().st_size
    print(f"capture file: {size / 1e6:.0f} MB written in {t_write:.2f} s, read in {t_read:.2f} s "
          f"({len(back):,} samples)")


if __name__ == "__main__":
    main()
