"""Throughput of the bench-link frame decoder against a 3 Mbaud serial line.

Run: ``python benchmarks/bench_decoder.py``. Builds a stream of SAMPLES frames (plus an
EVENT per actuation) with the encoder, decodes it in chunks of 4 KiB as a reader thread
would, and prints MB/s and the ratio to the line rate of 3 Mbaud with 8N1 framing
(10 bits per byte: 300 kB/s). Three waveforms: a coil-current-like actuation pattern
(zeros while the switch is off), mid-scale codes with no zero byte, and all-zero codes
(the worst case for COBS: a block per zero byte).
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))   # run from a checkout

from coildrive.bench.protocol import EventKind, FrameDecoder, FrameEncoder  # noqa: E402

LINE_RATE = 3e6 / 10      # bytes/s: 3 Mbaud, 8N1 = 10 bits on the line per byte
TARGET_RATIO = 30


def actuation_codes(n: int, rng: np.random.Generator) -> np.ndarray:
    """12-bit codes shaped like repeated actuations: rise, PWM hold, decay, off (zeros)."""
    period = 4000
    t = np.arange(n) % period
    rise = 3000 * (1 - np.exp(-t / 150.0))
    hold = 1200 + 150 * np.sign(np.sin(2 * np.pi * t / 40.0))
    decay = 1200 * np.exp(-(t - 2500) / 80.0)
    wave = np.where(t < 600, rise, np.where(t < 2500, hold, np.where(t < 3200, decay, 0.0)))
    noisy = wave + rng.normal(0, 3, n) * (wave > 0)
    return np.clip(np.round(noisy), 0, 4095).astype("<u2")


def build_stream(codes: np.ndarray, per_frame: int) -> tuple[bytes, int]:
    enc = FrameEncoder()
    parts = []
    frames = 0
    for start in range(0, len(codes) - per_frame + 1, per_frame):
        if start % 4000 < per_frame:
            parts.append(enc.event(EventKind.ON, start))
            frames += 1
        parts.append(enc.samples(start, codes[start:start + per_frame]))
        frames += 1
    return b"".join(parts), frames


def measure(stream: bytes, chunk: int, repeat: int) -> tuple[float, int]:
    """Best of ``repeat`` decoding runs: (seconds, samples decoded)."""
    best = float("inf")
    samples = 0
    for _ in range(repeat):
        dec = FrameDecoder()
        start = time.perf_counter()
        for k in range(0, len(stream), chunk):
            dec.feed(stream[k:k + chunk])
        dec.finish()
        best = min(best, time.perf_counter() - start)
        stats = dec.stats
        if stats.errors or stats.malformed_frames:
            raise SystemExit(f"decoder reported errors on a clean stream: {stats}")
        samples = stats.samples
    return best, samples


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--samples", type=int, default=2_000_000, help="ADC samples per stream")
    parser.add_argument("--chunk", type=int, default=4096, help="bytes per feed() call")
    parser.add_argument("--repeat", type=int, default=3, help="runs per case (best is kept)")
    args = parser.parse_args()
    rng = np.random.default_rng(1)
    cases = {
        "actuation waveform": actuation_codes(args.samples, rng),
        "mid-scale, no zero byte": np.full(args.samples, 0x0811, dtype="<u2"),
        "all zeros (COBS worst case)": np.zeros(args.samples, dtype="<u2"),
    }
    print(f"line rate at 3 Mbaud 8N1: {LINE_RATE / 1e6:.3f} MB/s; target >= {TARGET_RATIO}x")
    print(f"{'case':30s} {'frame':>6s} {'MB':>7s} {'MB/s':>8s} {'x line':>8s} {'Msamples/s':>11s}")
    worst = float("inf")
    for name, codes in cases.items():
        for per_frame in (64, 255, 510):
            stream, _ = build_stream(codes, per_frame)
            seconds, samples = measure(stream, args.chunk, args.repeat)
            rate = len(stream) / seconds
            worst = min(worst, rate / LINE_RATE)
            print(f"{name:30s} {per_frame:6d} {len(stream) / 1e6:7.2f} {rate / 1e6:8.2f} "
                  f"{rate / LINE_RATE:8.1f} {samples / seconds / 1e6:11.2f}")
    verdict = "meets" if worst >= TARGET_RATIO else "MISSES"
    print(f"slowest case: {worst:.1f}x the line rate ({verdict} the {TARGET_RATIO}x target)")


if __name__ == "__main__":
    main()
