"""Seeded fuzz of everything a user hands coildrive: drive and board files, capture files,
raw link bytes (binary frames and text lines).

Every run must end with exit 0, 1 or 2 within :data:`LIMIT_S` seconds, without a
traceback, with ``--json`` output that is one JSON document without NaN or Infinity, and
with a pre-existing output file byte for byte as it was unless the run succeeded and was
asked to replace it. Runs are in-process (typer's CliRunner) for speed, plus a handful of
real subprocesses.

The mutators are our own (seeded ``random.Random``): numbers replaced by extremes (0,
negatives, 1e300, 1e-300, a 400-digit integer, NaN, infinity, deep arrays, wrong units),
lines dropped or doubled, bytes flipped, runs of bytes repeated or cut. Cases that once
failed live in ``tests/fuzz_corpus/`` and are replayed on every run so they stay fixed
(see the README there). Run the file as a script for a longer search::

    python tests/test_fuzz_inputs.py --runs 3000 --seed 7 --save /tmp/found
"""

from __future__ import annotations

import json
import os
import random
import re
import shutil
import signal
import subprocess
import sys
import time
from dataclasses import dataclass
from pathlib import Path

import pytest

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
CORPUS = HERE / "fuzz_corpus"
EXAMPLES = ROOT / "examples"
BOARDS = ROOT / "boards"
LIMIT_S = 5.0
"""Longest a single in-process run may take (s of the process's CPU time: 'within a few
seconds' of work; CPU time, not the wall clock, so a loaded machine does not fail it)."""
SEED = int(os.environ.get("COILDRIVE_FUZZ_SEED", "12"))
RUNS = int(os.environ.get("COILDRIVE_FUZZ_RUNS", "1200"))
"""Generated runs per test session: about a minute on 2 cores with the corpus."""

#: In-range values kept out of the generated runs (none: the design stage takes the whole
#: accepted range within a few seconds since it draws waveforms only for --plot, caps
#: the plot's hold and refuses oversized simulations; the corpus keeps the 1000 H case).
DESIGN_RUNAWAY: dict = {}

EXTREMES = ["0", "-1", "1e300", "-1e300", "1e-300", "-" + "1" + "0" * 400, "nan", "inf", "-inf",
            "[" * 600 + "1" + "]" * 600, '"12 mH"', '"1 ns"', '"5 GHz"', "true", '""', '"x" ', "[1, 2]",
            "{a = 1}", '"0.1 mohm"', '"1000 H"', "1e6", "2147483648", "65536", '"-300 degC"', "0.999999"]


# --------------------------------------------------------------------------- mutators
def in_range_value(section: str, key: str, line: str, rnd: random.Random) -> str | None:
    """A value the file accepts for ``[section] key`` (coildrive.config.BOUNDS): an end of
    its range, or the file's value scaled by up to 100x either way (kept in range). These
    get past the file checks into the design, where a search or a waveform could run away."""
    import math
    import tomllib

    from coildrive.config import BOUNDS
    from coildrive.units import parse_quantity

    bounds = BOUNDS.get(f"{section}.{key}")
    if bounds is None:
        return None
    low, high, dim = bounds
    high = min(high, DESIGN_RUNAWAY.get(f"{section}.{key}", high))
    if rnd.random() < 0.4:
        return repr(float(rnd.choice([low, high])))
    try:
        value = parse_quantity(tomllib.loads(line)[key], dim)
    except Exception:  # noqa: BLE001 - a line already mutated: take the range's middle
        value = (low + high) / 2
    value *= 10 ** rnd.uniform(-2, 2) if value > 0 else 1
    if dim == "temperature":
        value += rnd.uniform(-100, 100)
    return repr(float(min(max(value, low), high))) if math.isfinite(value) else None


def mutate_toml(text: str, rnd: random.Random) -> str:
    lines = text.splitlines()
    if rnd.random() < 0.5:      # values in range: into the design
        section = ""
        sections = []
        for k, ln in enumerate(lines):
            m = re.match(r"^\[([a-z_]+)\]", ln)
            if m:
                section = m.group(1)
            elif re.match(r"^[a-z_]+\s*=", ln):
                sections.append((k, section, ln.split("=", 1)[0].strip()))
        for k, section, key in rnd.sample(sections, min(len(sections), rnd.choice([1, 1, 1, 2, 3]))):
            value = in_range_value(section, key, lines[k], rnd)
            if value is not None:
                lines[k] = f"{key} = {value}"
        return "\n".join(lines) + "\n"
    for _ in range(rnd.choice([1, 1, 1, 2, 3])):
        values = [k for k, ln in enumerate(lines) if re.match(r"^[a-z_]+\s*=", ln)]
        what = rnd.random()
        if what < 0.7 and values:
            k = rnd.choice(values)
            key = lines[k].split("=", 1)[0].rstrip()
            lines[k] = f"{key} = {rnd.choice(EXTREMES)}"
        elif what < 0.8 and lines:
            del lines[rnd.randrange(len(lines))]
        elif what < 0.9 and lines:
            k = rnd.randrange(len(lines))
            lines.insert(k, lines[k])
        else:
            data = bytearray("\n".join(lines).encode())
            for _ in range(rnd.randint(1, 4)):
                if data:
                    data[rnd.randrange(len(data))] = rnd.randrange(32, 127)
            lines = data.decode("utf-8", errors="replace").splitlines()
    return "\n".join(lines) + "\n"


def mutate_bytes(data: bytes, rnd: random.Random, start: int = 0) -> bytes:
    b = bytearray(data)
    for _ in range(rnd.choice([1, 1, 2, 3])):
        what = rnd.random()
        if len(b) <= start + 16:
            break
        if what < 0.45:                                  # flip bytes
            for _ in range(rnd.choice([1, 5, 20, 100])):
                b[rnd.randrange(start, len(b))] = rnd.randrange(256)
        elif what < 0.65:                                # repeat a run in the middle
            p = rnd.randrange(start, len(b) - 8)
            n = rnd.randint(8, 500)
            b[p:p] = b[p:p + n] * rnd.randint(1, 4)
        elif what < 0.8:                                 # cut a run out
            p = rnd.randrange(start, len(b) - 8)
            del b[p:p + rnd.randint(1, 600)]
        elif what < 0.9:                                 # truncate
            del b[rnd.randrange(start, len(b)):]
        else:                                            # insert zeros / 0xFF
            p = rnd.randrange(start, len(b))
            b[p:p] = bytes([rnd.choice([0, 0xFF])]) * rnd.randint(1, 64)
    return bytes(b)


def mutate_capture_header(data: bytes, rnd: random.Random) -> bytes:
    from coildrive.bench.capture_file import HEADER_SIZE

    doc = json.loads(data[:HEADER_SIZE])
    key = rnd.choice(["sample_rate_hz", "adc_bits", "amps_per_code", "zero_code", "sense_position",
                      "supply_v", "coil_temp_c", "peak_time_s", "hold_duty", "hold_frequency_hz",
                      "extra", "board", "has_position_switch", "version", "header_size"])
    doc[key] = rnd.choice(["hot", "x", 1e300, 1e-300, -5, 0, None, True, [1], {"a": 1}, 2**40, 1e6,
                           "key-without-value", 65535])
    text = json.dumps(doc).encode()[:HEADER_SIZE - 1]
    return text.ljust(HEADER_SIZE - 1) + b"\n" + data[HEADER_SIZE:]


# --------------------------------------------------------------------------- seeds
@dataclass
class Seeds:
    """The inputs mutated: bundled files, a capture, raw link bytes of both modes."""

    drives: dict
    boards: dict
    capture: bytes
    text_capture: bytes
    raw: bytes
    raw_text: bytes


def make_seeds(workdir: Path) -> Seeds:
    from coildrive.bench.capture_file import write_capture
    from coildrive.bench.messages import Event, Info, Samples
    from coildrive.bench.protocol import FrameEncoder
    from coildrive.bench.synth import synth_design_capture
    from coildrive.bench.textline import format_text
    from coildrive.config import load_drive
    from coildrive.design import design

    cap = synth_design_capture(design(load_drive(EXAMPLES / "demo-valve.toml")), actuations=2,
                               seed=3, noise_codes=1.0)
    path = workdir / "seed.cdcap"
    write_capture(path, cap)
    info = Info(int(cap.meta.sample_rate_hz), 1, cap.meta.adc_bits, cap.meta.amps_per_code, 0, "fuzz")
    messages: list = [info]
    events = sorted(cap.events, key=lambda e: e.index)
    pos = 0
    for e in events + [None]:
        end = len(cap) if e is None else int(cap.index.searchsorted(e.index))
        for a in range(pos, end, 64):
            messages.append(Samples(int(cap.index[a]), cap.code[a:min(a + 64, end)].copy()))
        pos = max(pos, end)
        if e is not None:
            messages.append(Event(e.kind, e.index, e.value))
    enc = FrameEncoder()
    raw = b"\x00" + b"".join(enc.encode(m) for m in messages)
    text = "".join(format_text(m) for m in messages).encode()
    return Seeds({p.name: p.read_text() for p in sorted(EXAMPLES.glob("*.toml"))},
                 {p.name: p.read_text() for p in sorted(BOARDS.glob("*.toml"))},
                 path.read_bytes(), text, raw, text)


# --------------------------------------------------------------------------- one run
class Hang(Exception):
    """A run took longer than :data:`LIMIT_S`."""


@dataclass
class Case:
    """One fuzz input: the command to run and the files it needs (name -> bytes)."""

    kind: str          # design | simulate | tune | check | fit | replay | replay-text | board
    files: dict
    note: str = ""

    def argv(self, d: Path) -> list[str]:
        main = str(d / next(iter(self.files)))
        demo = str(EXAMPLES / "demo-valve.toml")
        return {
            "design": ["design", main, "--json"],
            "simulate": ["simulate", main, "--supply", "24", "--coil-temp", "40", "--hold-time", "5 ms",
                         "--csv", str(d / "out.csv")],
            "tune": ["tune", main, "--json", "--levels", "2"],
            "board": ["design", demo, "--board", main, "--json"],
            "check": ["check", main, demo, "--json"],
            "fit": ["fit", main, "--board", "lab-m32-zener", "--json"],
            "replay": ["capture", "--replay", main, "--board", "lab-m32-zener", "--out", str(d / "keep.cdcap"),
                       "--csv", str(d / "out.csv")],
            "replay-new": ["capture", "--replay", main, "--board", "lab-m32-zener", "--out", str(d / "new.cdcap"),
                           "--csv", str(d / "new.csv"), "--actuations", "1"],
            "replay-over": ["capture", "--replay", main, "--board", "lab-m32-zener", "--out", str(d / "keep.cdcap"),
                            "--overwrite"],
            "replay-text": ["capture", "--replay", main, "--text", "--board", "lab-m32-zener",
                            "--out", str(d / "keep.cdcap"), "--overwrite"],
        }[self.kind]


KEEP = b"an existing output: must survive any failing run\n"


def _alarm(signum, frame):  # noqa: ARG001 - signal handler signature
    raise Hang()


def run_case(case: Case, d: Path, subprocess_run: bool = False) -> str | None:
    """Run ``case`` in the folder ``d``; ``None`` when every rule held, else what broke."""
    from typer.testing import CliRunner

    from coildrive.cli import app

    for name, data in case.files.items():
        (d / name).write_bytes(data)
    (d / "keep.cdcap").write_bytes(KEEP)
    (d / "out.csv").write_bytes(KEEP)
    argv = case.argv(d)
    clock = time.monotonic if subprocess_run else time.process_time
    t0 = clock()
    if subprocess_run:
        try:
            r = subprocess.run([sys.executable, "-m", "coildrive", *argv], capture_output=True, text=True,
                               timeout=LIMIT_S + 5, cwd=d, env={**os.environ, "PYTHONPATH": str(ROOT)})
        except subprocess.TimeoutExpired:
            return f"no end within {LIMIT_S + 5:g} s (subprocess)"
        code, out, err, exc = r.returncode, r.stdout, r.stderr, None
    else:
        # ITIMER_PROF counts this process's CPU time (user + system), as process_time does
        old = signal.signal(signal.SIGPROF, _alarm)
        signal.setitimer(signal.ITIMER_PROF, LIMIT_S)
        try:
            res = CliRunner().invoke(app, argv)
        except Hang:
            return f"no end within {LIMIT_S:g} s of CPU"
        finally:
            signal.setitimer(signal.ITIMER_PROF, 0)
            signal.signal(signal.SIGPROF, old)
        if isinstance(res.exception, Hang):
            return f"no end within {LIMIT_S:g} s of CPU"
        code, out, err, exc = res.exit_code, res.stdout, res.stderr, res.exception
    took = clock() - t0
    if exc is not None and not isinstance(exc, SystemExit):
        import traceback
        return "traceback: " + "".join(traceback.format_exception(exc)).strip().splitlines()[-1]
    if "Traceback" in err or "Traceback" in out:
        return "traceback on the output: " + err.strip().splitlines()[-1]
    if code not in (0, 1, 2):
        return f"exit {code}"
    if took > LIMIT_S:
        return f"took {took:.1f} s"
    if code == 2 and len([ln for ln in err.splitlines() if ln.startswith("coildrive:")]) != 1:
        return f"exit 2 without exactly one error line: {err[-300:]!r}"
    if "--json" in argv:
        try:
            json.loads(out, parse_constant=lambda name: (_ for _ in ()).throw(ValueError(name)))
        except ValueError as e:
            return f"--json printed no clean JSON document ({e}): {out[:200]!r}"
    replaced = "--overwrite" in argv and code == 0
    if not replaced and (d / "keep.cdcap").read_bytes() != KEEP:
        return "the existing capture was changed"
    if code != 0 and (d / "out.csv").read_bytes() != KEEP:
        return "the existing CSV was changed by a failing run"
    left = [p.name for p in d.iterdir() if p.name.endswith(".tmp")]
    if left:
        return f"temporary files left: {left}"
    return None


def generate(seeds: Seeds, rnd: random.Random) -> Case:
    kind = rnd.choices(["design", "simulate", "tune", "board", "check", "fit", "replay", "replay-new",
                        "replay-over", "replay-text"],
                       weights=[22, 8, 3, 12, 20, 8, 3, 7, 7, 10])[0]
    if kind in ("design", "simulate", "tune"):
        drives = sorted(seeds.drives.items())
        if kind == "tune":
            # tune sweeps a flux-linkage curve with an exact orbit at every setting and
            # corner: ~12 s of one core on the bundled curve (docs/tuning.md), a slow path,
            # not a hang; its inputs are fuzzed through design and simulate, and
            # tests/test_flux_ngspice.py runs tune on a curve end to end
            drives = [(n, t) for n, t in drives if "flux_current" not in t]
        name, text = rnd.choice(drives)
        return Case(kind, {name: mutate_toml(text, rnd).encode()})
    if kind == "board":
        name, text = rnd.choice(sorted(seeds.boards.items()))
        return Case(kind, {"b-" + name: mutate_toml(text, rnd).encode()})
    if kind in ("check", "fit"):
        if rnd.random() < 0.25:
            return Case(kind, {"cap.txt": mutate_bytes(seeds.text_capture, rnd)})
        if rnd.random() < 0.3:
            return Case(kind, {"cap.cdcap": mutate_capture_header(seeds.capture, rnd)})
        return Case(kind, {"cap.cdcap": mutate_bytes(seeds.capture, rnd, start=4096)})
    if kind.startswith("replay") and kind != "replay-text":
        return Case(kind, {"raw.bin": mutate_bytes(seeds.raw, rnd)})
    return Case(kind, {"raw.txt": mutate_bytes(seeds.raw_text, rnd)})


# --------------------------------------------------------------------------- corpus
def corpus_cases() -> list[Case]:
    """The cases kept in tests/fuzz_corpus/: ``KIND__NAME.EXT`` (the file the command reads)."""
    out = []
    for path in sorted(CORPUS.glob("*__*")):
        kind, name = path.name.split("__", 1)
        out.append(Case(kind, {name: path.read_bytes()}, note=path.name))
    return out


def save_case(case: Case, folder: Path, label: str) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    name, data = next(iter(case.files.items()))
    path = folder / f"{case.kind}__{label}-{name}"
    path.write_bytes(data)
    return path


# --------------------------------------------------------------------------- tests
@pytest.fixture(scope="module")
def seeds(tmp_path_factory):
    return make_seeds(tmp_path_factory.mktemp("seeds"))


def _isolated(tmp_path: Path, n: int) -> Path:
    d = tmp_path / f"run{n}"
    d.mkdir()
    return d


def test_corpus_cases_stay_fixed(tmp_path):
    cases = corpus_cases()
    assert cases, "tests/fuzz_corpus/ holds the cases found so far"
    failures = []
    for n, case in enumerate(cases):
        broke = run_case(case, _isolated(tmp_path, n))
        if broke:
            failures.append(f"{case.note}: {broke}")
    assert not failures, "\n".join(failures)


def test_seeded_fuzz_runs_end_cleanly(tmp_path, seeds):
    rnd = random.Random(SEED)
    failures = []
    for n in range(RUNS):
        case = generate(seeds, rnd)
        broke = run_case(case, _isolated(tmp_path, n))
        if broke:
            kept = save_case(case, tmp_path / "found", f"seed{SEED}-run{n}")
            failures.append(f"run {n} ({case.kind}): {broke}; input kept as {kept}")
    assert not failures, "\n".join(failures)


@pytest.mark.slow
def test_a_handful_of_real_subprocesses(tmp_path, seeds):
    rnd = random.Random(SEED + 1)
    failures = []
    for n, kind in enumerate(["design", "check", "replay", "replay-text", "board"]):
        case = generate(seeds, rnd)
        while case.kind != kind:
            case = generate(seeds, rnd)
        broke = run_case(case, _isolated(tmp_path, n), subprocess_run=True)
        if broke:
            failures.append(f"{kind}: {broke}; input kept as {save_case(case, tmp_path / 'found', f'sub{n}')}")
    assert not failures, "\n".join(failures)


# --------------------------------------------------------------------------- a longer search
def _main() -> None:
    import argparse
    import tempfile

    parser = argparse.ArgumentParser(description="A longer seeded fuzz search; prints each failure.")
    parser.add_argument("--runs", type=int, default=1000)
    parser.add_argument("--seed", type=int, default=SEED)
    parser.add_argument("--save", type=Path, default=None, help="keep failing inputs here")
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        s = make_seeds(tmp)
        rnd = random.Random(args.seed)
        bad = 0
        t0 = time.monotonic()
        for n in range(args.runs):
            case = generate(s, rnd)
            d = tmp / f"run{n}"
            d.mkdir()
            broke = run_case(case, d)
            if broke:
                bad += 1
                where = save_case(case, args.save, f"seed{args.seed}-run{n}") if args.save else ""
                print(f"run {n} {case.kind}: {broke} {where}", flush=True)
            shutil.rmtree(d, ignore_errors=True)
        print(f"{args.runs} runs in {time.monotonic() - t0:.0f} s, {bad} failing", flush=True)


if __name__ == "__main__":
    sys.path.insert(0, str(HERE))
    _main()
