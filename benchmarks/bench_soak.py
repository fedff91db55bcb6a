"""Soak: a long capture from ``coildrive emulate`` over a damaged line (not in the suite).

``coildrive emulate`` serves the demo valve on a pseudo-terminal at the board's baud
rate, losing (``--drop-bytes``) and changing (``--corrupt-bytes``) bytes on the line and
adding ADC noise (``--noise``); ``coildrive capture`` records it for ``--minutes``. Then
the emulator is stopped first (SIGTERM), so that the capture reads the line to its end
and exits on the end of file. Reported:

* frames received, lost frames, CRC errors and malformed frames as the capture file
  counts them, and the frames the emulator damaged on the line (its ``--line-log``, one
  row per damaged frame with its sequence number). Every damaged frame must show on the
  host as exactly one lost frame (docs/protocol.md section 5), and so must an intact frame
  that a damaged delimiter ran into. The host cannot see damage before the first intact
  frame it read (the capture opens the port a moment after the emulator starts, and
  pyserial empties the port's buffer on opening) or after the last, so the check counts
  the damaged frames between those two, found by decoding the bytes the capture received
  (its ``--raw`` file): lost must equal that count exactly;
* the capture process's resident memory sampled every 5 s (must stay flat: growth from
  the first to the last minute) and its CPU time as a fraction of the wall time.

Run: ``python benchmarks/bench_soak.py --minutes 10`` (default 10; 1 proves it works).
"""

from __future__ import annotations

import argparse
import os
import re
import signal
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from coildrive.bench.capture_file import read_capture  # noqa: E402

DRIVE = ROOT / "examples" / "demo-valve.toml"
TICK = os.sysconf("SC_CLK_TCK")


def _rss_kib(pid: int) -> int:
    with open(f"/proc/{pid}/status") as handle:
        for line in handle:
            if line.startswith("VmRSS:"):
                return int(line.split()[1])
    return 0


def _cpu_s(pid: int) -> float:
    with open(f"/proc/{pid}/stat") as handle:
        fields = handle.read().rsplit(")", 1)[1].split()
    return (int(fields[11]) + int(fields[12])) / TICK     # utime + stime


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--minutes", type=float, default=10.0)
    parser.add_argument("--drop-bytes", default="2e-5")
    parser.add_argument("--corrupt-bytes", default="2e-5")
    parser.add_argument("--noise", default="2")
    args = parser.parse_args()
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    cli = [sys.executable, "-m", "coildrive"]
    with tempfile.TemporaryDirectory() as tmp:
        out = Path(tmp) / "soak.cdcap"
        raw = Path(tmp) / "soak.raw"
        line_log = Path(tmp) / "line.csv"
        emu = subprocess.Popen(cli + ["emulate", str(DRIVE), "--line-log", str(line_log),
                                      "--drop-bytes", args.drop_bytes,
                                      "--corrupt-bytes", args.corrupt_bytes, "--noise", args.noise,
                                      "--seed", "5", "--period", "0.25 s"],
                               stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env)
        port = emu.stdout.readline().strip()
        cap = subprocess.Popen(cli + ["capture", port, "--drive", str(DRIVE), "--out", str(out),
                                      "--raw", str(raw)],
                               stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True, env=env)
        t0 = time.monotonic()
        end = t0 + args.minutes * 60
        rss: list[tuple[float, int]] = []
        cpu_at_start = None
        while time.monotonic() < end:
            time.sleep(min(5.0, max(0.0, end - time.monotonic())))
            if cap.poll() is not None:
                break
            if cpu_at_start is None:
                cpu_at_start = (time.monotonic(), _cpu_s(cap.pid))
            rss.append((time.monotonic() - t0, _rss_kib(cap.pid)))
        cpu_end = (time.monotonic(), _cpu_s(cap.pid)) if cap.poll() is None else None
        emu.send_signal(signal.SIGTERM)             # the device goes first: the host reads to EOF
        _, emu_err = emu.communicate(timeout=60)
        _, cap_err = cap.communicate(timeout=60)
        got = read_capture(out)
        size = out.stat().st_size
        expected, between, raw_lost = _expected_lost(raw.read_bytes(), line_log.read_text())
    line = re.search(r"line: (\d+) frames sent, (\d+) damaged on the line \((\d+) bytes dropped, "
                     r"(\d+) changed\)", emu_err)
    unread = re.search(r"note: (\d+) bytes dropped while nobody read", emu_err)
    if line is None:
        sys.exit(f"the emulator printed no line statistics:\n{emu_err[-2000:]}")
    sent, damaged, dropped, changed = (int(g) for g in line.groups())
    wall = args.minutes * 60
    first = [kib for t, kib in rss if t <= 60] or [rss[0][1]]
    last = [kib for t, kib in rss if t >= rss[-1][0] - 60] or [rss[-1][1]]
    print(f"soak {args.minutes:g} min at the board's baud, drop {args.drop_bytes}/byte, "
          f"corrupt {args.corrupt_bytes}/byte, noise {args.noise} codes")
    print(f"emulator: {sent:,} frames sent, {damaged:,} damaged on the line ({dropped:,} bytes "
          f"dropped, {changed:,} changed), {int(unread.group(1)) if unread else 0:,} bytes dropped unread")
    print(f"capture:  {len(got):,} samples, {got.lost_frames:,} lost frames, {got.crc_errors:,} CRC errors, "
          f"{got.malformed_frames:,} malformed, {len(got.events):,} events, file {size / 1e6:.1f} MB")
    verdict = "equal" if got.lost_frames == expected == raw_lost else "NOT EQUAL"
    print(f"damaged between the first and the last frame the host read: {between:,} "
          f"(+ {expected - between} intact frames run into by a damaged delimiter) = {expected:,}; "
          f"lost on the host {got.lost_frames:,} in the capture file, {raw_lost:,} decoding its "
          f"raw bytes again ({verdict})")
    print(f"capture RSS: first minute {max(first) / 1024:.1f} MiB, last minute {max(last) / 1024:.1f} MiB "
          f"(growth {(max(last) - max(first)) / 1024:+.1f} MiB over {rss[-1][0] / 60:.1f} min)")
    if cpu_at_start and cpu_end:
        frac = (cpu_end[1] - cpu_at_start[1]) / (cpu_end[0] - cpu_at_start[0])
        print(f"capture CPU: {frac * 100:.1f} % of one core over {wall / 60:g} min")
    print("capture's last line: " + cap_err.strip().splitlines()[-1])
    exact(args)


def _expected_lost(raw: bytes, line_log: str) -> tuple[int, int, int]:
    """The lost frames the host must count: ``(expected, damaged between, lost on
    decoding raw again)``.

    ``raw`` is what the capture read, ``line_log`` the emulator's damaged frames (frame
    number = sequence number unwrapped: the emulator numbers every frame from 0). The
    sequence numbers the host decoded, unwrapped, give the first and last frame it saw;
    every damaged frame strictly between them is lost, and so is an intact frame run into
    by the damaged delimiter of the frame before it."""
    from coildrive.bench.protocol import FrameDecoder

    dec = FrameDecoder()
    seqs = [m.seq for m in dec.feed(raw) + dec.finish() if m.seq is not None]
    first = last = seqs[0]                 # the first frames sent are numbered below 65536
    for prev, seq in zip(seqs, seqs[1:]):
        last += (seq - prev) % 65536
    rows = [line.split(",") for line in line_log.splitlines()[1:] if line]
    damaged = {int(frame): bool(int(delim)) for frame, _, _, delim in rows}
    between = sum(1 for f in damaged if first < f < last)
    swallowed = sum(1 for f, delim in damaged.items()
                    if delim and (f + 1) not in damaged and first < f + 1 < last)
    return between + swallowed, between, dec.stats.lost_frames


def exact(args) -> None:
    """The same device and line damage, its bytes fed straight to the host's decoder (no
    pty: nothing flushed on open, nothing cut at close): lost must equal damaged exactly."""
    from coildrive.bench.device import DeviceOptions, VirtualDevice
    from coildrive.bench.protocol import FrameDecoder
    from coildrive.config import load_drive
    from coildrive.design import design

    d = design(load_drive(DRIVE))
    dev = VirtualDevice(d.drive, DeviceOptions(drop_bytes=float(args.drop_bytes),
                                               corrupt_bytes=float(args.corrupt_bytes),
                                               noise_codes=float(args.noise), seed=5, period=0.25,
                                               keep_sent=True),
                        design=d)
    dec = FrameDecoder()
    seconds = min(60.0, args.minutes * 60)
    t = 0.0
    while t < seconds:
        t += 0.05
        dec.feed(dev.read(t))
    dec.finish()
    st, ds = dev.stats, dec.stats
    # a frame whose delimiter was dropped or changed runs into the next one: that intact
    # frame is lost with it (docs/protocol.md section 5), so it counts too
    swallowed = sum(1 for a, b in zip(dev.sent, dev.sent[1:]) if a.delimiter_damaged and not b.damaged)
    expected = st.frames_damaged + swallowed
    verdict = "equal" if ds.lost_frames == expected else "NOT EQUAL"
    print(f"without the pty, {seconds:g} s of device time: {st.frames_sent:,} frames sent, "
          f"{st.frames_damaged:,} damaged + {swallowed} intact ones run into by a damaged delimiter "
          f"= {expected:,}; lost on the host {ds.lost_frames:,} ({verdict})")


if __name__ == "__main__":
    main()
