"""Throughput of the bench-link frame decoder against a 3 Mbaud serial line, with the
``cobs`` package's C COBS decoder and with our Python one (the reference), side by side.

Run: ``python benchmarks/bench_decoder.py``. Builds a stream of SAMPLES frames (plus an
EVENT per actuation) with the encoder, decodes it in chunks of 4 KiB as a reader thread
would, and prints MB/s and the ratio to the line rate of 3 Mbaud with 8N1 framing
(10 bits per byte: 300 kB/s). Three waveforms: a coil-current-like actuation pattern
(zeros while the switch is off), mid-scale codes with no zero byte, and all-zero codes
(the worst case for COBS: a block per zero byte). Each case runs both COBS decoders in
the same process, alternating, best of ``--repeat`` in CPU time of this process (the
machine is shared: wall time would count other processes' load); then the COBS step
alone on the worst case (zero-rich 64-sample frames), and a check that both decoders
give the same messages and counters on a damaged stream.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))   # run from a checkout

from coildrive.bench.framing import c_cobs_decoder, cobs_decode_or_none  # noqa: E402
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


def decode_once(stream: bytes, chunk: int, cobs) -> tuple[float, FrameDecoder]:
    dec = FrameDecoder(cobs)
    start = time.process_time()
    for k in range(0, len(stream), chunk):
        dec.feed(stream[k:k + chunk])
    dec.finish()
    return time.process_time() - start, dec


def measure(stream: bytes, chunk: int, repeat: int, decoders: dict) -> dict[str, float]:
    """Best of ``repeat`` decoding runs per COBS decoder, the decoders alternating (so
    both see the same machine load): seconds."""
    best = {name: float("inf") for name in decoders}
    for _ in range(repeat):
        for name, cobs in decoders.items():
            seconds, dec = decode_once(stream, chunk, cobs)
            best[name] = min(best[name], seconds)
            stats = dec.stats
            if stats.errors or stats.malformed_frames:
                raise SystemExit(f"decoder reported errors on a clean stream: {stats}")
    return best


def cobs_alone(per_frame: int, frames: int, repeat: int, decoders: dict) -> dict[str, float]:
    """MB/s of the COBS step alone on all-zero SAMPLES frames (the worst case)."""
    enc = FrameEncoder()
    pieces = [enc.samples(k * per_frame, np.zeros(per_frame, "<u2"))[:-1] for k in range(frames)]
    size = sum(map(len, pieces))
    rates = {}
    for name, cobs in decoders.items():
        best = float("inf")
        for _ in range(repeat):
            start = time.process_time()
            for p in pieces:
                cobs(p)
            best = min(best, time.process_time() - start)
        rates[name] = size / best
    return rates


def same_accounting(decoders: dict, rng: np.random.Generator) -> bool:
    """Both decoders on one damaged stream (drops, bit flips, cuts): equal messages and stats."""
    enc = FrameEncoder()
    frames = [enc.samples(k * 64, np.where(rng.random(64) < 0.5, 0, rng.integers(0, 4096, 64)))
              for k in range(3000)]
    parts = []
    for f in frames:
        op = rng.integers(0, 10)
        if op == 0:
            continue                                       # dropped
        if op == 1:
            f = bytearray(f)
            f[rng.integers(0, len(f))] ^= 1 << int(rng.integers(0, 8))   # a flipped bit
        elif op == 2:
            f = f[:rng.integers(1, len(f))] + b"\x00"     # cut
        parts.append(bytes(f))
    stream = b"".join(parts)
    results = []
    for cobs in decoders.values():
        _, dec = decode_once(stream, 4096, cobs)
        dec2 = FrameDecoder(cobs)
        msgs = dec2.feed(stream) + dec2.finish()
        results.append(([(m.first_index, m.codes.tobytes()) for m in msgs], dec.stats, dec2.stats))
    return all(r == results[0] for r in results)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--samples", type=int, default=1_000_000, help="ADC samples per stream")
    parser.add_argument("--chunk", type=int, default=4096, help="bytes per feed() call")
    parser.add_argument("--repeat", type=int, default=7, help="runs per case (best is kept)")
    args = parser.parse_args()
    rng = np.random.default_rng(1)
    decoders = {"python": cobs_decode_or_none}
    c = c_cobs_decoder()
    if c is not None:
        decoders["cobs C"] = c
    default = next(name for name, f in decoders.items() if f is FrameDecoder()._cobs)
    cases = {
        "actuation waveform": actuation_codes(args.samples, rng),
        "mid-scale, no zero byte": np.full(args.samples, 0x0811, dtype="<u2"),
        "all zeros (COBS worst case)": np.zeros(args.samples, dtype="<u2"),
    }
    print(f"line rate at 3 Mbaud 8N1: {LINE_RATE / 1e6:.3f} MB/s; target >= {TARGET_RATIO}x; "
          f"{args.chunk}-byte feeds; FrameDecoder's default COBS: {default}")
    names = list(decoders)
    head = " ".join(f"{n + ' x line':>14s}" for n in names)
    print(f"{'case':30s} {'frame':>6s} {'MB':>6s} {head} {'C / python':>11s}")
    worst = {n: float("inf") for n in names}
    for name, codes in cases.items():
        for per_frame in (64, 255, 510):
            stream, _ = build_stream(codes, per_frame)
            best = measure(stream, args.chunk, args.repeat, decoders)
            ratios = {n: len(stream) / best[n] / LINE_RATE for n in names}
            for n in names:
                worst[n] = min(worst[n], ratios[n])
            cols = " ".join(f"{ratios[n]:14.1f}" for n in names)
            speedup = f"{best['python'] / best['cobs C']:11.2f}" if "cobs C" in best else ""
            print(f"{name:30s} {per_frame:6d} {len(stream) / 1e6:6.2f} {cols} {speedup}")
    for n in names:
        verdict = "meets" if worst[n] >= TARGET_RATIO else "MISSES"
        print(f"slowest case, {n} COBS: {worst[n]:.1f}x the line rate ({verdict} the {TARGET_RATIO}x target)")
    alone = cobs_alone(64, 20_000, args.repeat, decoders)
    print("COBS step alone, all-zero 64-sample frames: "
          + ", ".join(f"{n} {r / 1e6:.0f} MB/s" for n, r in alone.items())
          + (f" ({alone['cobs C'] / alone['python']:.1f}x)" if "cobs C" in alone else ""))
    if len(decoders) > 1:
        same = same_accounting(decoders, rng)
        print(f"same messages and counters on a damaged stream: {'yes' if same else 'NO'}")
        if not same:
            raise SystemExit(1)


if __name__ == "__main__":
    main()
