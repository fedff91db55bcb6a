"""A live capture from the virtual bench device: throughput, losses and the reader's CPU.

Run: ``python benchmarks/bench_capture.py [--seconds 30] [--hold-time "200 ms"]``.

For two drive/board pairs — the demo (``lab-m32-zener``, 921600 Bd) and the bundled
board with the highest line rate (``fast-32bit-clamp``, 3 Mbaud, with
``pinch-valve-48v``) — it starts ``coildrive emulate`` (a subprocess serving a
pseudo-terminal at the board's baud rate, pacing its bytes at 10 bits per byte) and
captures from it for ``--seconds`` with :class:`coildrive.bench.link.DeviceLink` into a
capture file, in this process, as ``coildrive capture`` does. It prints, side by side:

* bytes/s received against the line rate (baud / 10 at 8N1): the emulator sends only
  while it streams a recorded actuation (PAUSE events stand for the idle between), so
  the ratio is the line's occupancy, not a limit of the reader;
* frames, samples, lost frames (target 0), CRC errors and malformed frames (target 0:
  the emulator is run without line damage);
* the reader's CPU share: CPU time of this process (the reader thread and the capture
  file's flusher; the main thread only sleeps) over the wall time. Below 100 % the
  reader keeps up with the line; the lower, the more room on a slow host.
"""

from __future__ import annotations

import argparse
import os
import queue
import signal
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))   # run from a checkout

from coildrive.bench.capture_file import read_capture  # noqa: E402
from coildrive.bench.link import DeviceLink  # noqa: E402
from coildrive.config import load_drive  # noqa: E402

PAIRS = [("demo-valve", None), ("pinch-valve-48v", "fast-32bit-clamp")]
LOST_TARGET = 0


def emulate(drive: Path, board: str | None, hold_time: str) -> tuple[subprocess.Popen, str]:
    args = [sys.executable, "-m", "coildrive", "emulate", str(drive), "--hold-time", hold_time]
    if board:
        args += ["--board", board]
    proc = subprocess.Popen(args, cwd=ROOT, stdout=subprocess.PIPE, stderr=subprocess.DEVNULL,
                            text=True, env={**os.environ, "PYTHONPATH": str(ROOT)})
    first: queue.Queue = queue.Queue()
    threading.Thread(target=lambda: first.put(proc.stdout.readline()), daemon=True).start()
    return proc, first.get(timeout=60).strip()


def run(name: str, board: str | None, seconds: float, hold_time: str, folder: Path) -> dict:
    drive_path = ROOT / "examples" / f"{name}.toml"
    drive = load_drive(drive_path, board)
    baud = drive.board.link.baud
    proc, path = emulate(drive_path, board, hold_time)
    out = folder / f"{name}.cdcap"
    try:
        cpu0, wall0 = time.process_time(), time.monotonic()
        with DeviceLink(path, baud=baud, capture=out, meta={"board": drive.board.name}) as link:
            link.wait(seconds)
            st = link.stats()
        cpu, wall = time.process_time() - cpu0, time.monotonic() - wall0
    finally:
        proc.send_signal(signal.SIGTERM)
        proc.wait(60)
        proc.stdout.close()
    cap = read_capture(out)
    return {"drive": name, "board": drive.board.name, "baud": baud, "line": baud / 10.0,
            "stats": st, "cpu_share": cpu / wall, "file_samples": len(cap),
            "file_lost": cap.lost_frames, "file_crc": cap.crc_errors, "error": st.error}


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seconds", type=float, default=30.0, help="capture length per board, s")
    parser.add_argument("--hold-time", default="200 ms",
                        help="hold of the emulator's actuations (longer: a busier line)")
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        rows = [run(name, board, args.seconds, args.hold_time, Path(tmp)) for name, board in PAIRS]
    print(f"{'drive / board':38} {'baud':>8} {'bytes/s':>9} {'/ line':>7} {'frames':>8} "
          f"{'samples':>10} {'lost':>5} {'CRC':>4} {'bad':>4} {'reader CPU':>10}")
    ok = True
    for r in rows:
        st = r["stats"]
        print(f"{r['drive'] + ' / ' + r['board']:38} {r['baud']:>8} {st.bytes_per_s:>9.0f} "
              f"{st.bytes_per_s / r['line']:>7.1%} {st.frames:>8} {st.samples:>10} "
              f"{st.lost_frames:>5} {st.crc_errors:>4} {st.malformed:>4} {r['cpu_share']:>10.1%}")
        if r["error"]:
            print(f"  error: {r['error']}")
        if st.lost_frames > LOST_TARGET or st.crc_errors or st.malformed or r["error"]:
            ok = False
        if r["file_samples"] != st.samples:
            print(f"  the file holds {r['file_samples']} samples, the link delivered {st.samples}")
            ok = False
    print(f"lost frames target {LOST_TARGET}: {'met' if ok else 'MISSED'}")
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
