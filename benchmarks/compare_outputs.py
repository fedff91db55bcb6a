"""Record every user-visible output of every example x bundled board, and compare two records.

A refactor that must not change a number is checked with this script: record the outputs
with the old code, record them with the new, compare byte for byte.

    python benchmarks/compare_outputs.py record OUT_DIR      # with the code under test installed
    python benchmarks/compare_outputs.py compare OLD_DIR NEW_DIR
    python benchmarks/compare_outputs.py record OUT_DIR --quick   # the figures only (below)

What is recorded, through the command line (typer's CliRunner, in-process), for each
example x board:
- `design --json` (stdout), the `--header` file and the `--plot` PNG;
- `simulate --csv` at two points: the lowest supply with a hot coil, the highest with a
  cold coil (both with the resistance and inductance factors of a tolerance corner);
- `tune --json` (stdout, with the run's own elapsed time masked) and its `--plot` PNG;
- every command's exit code.
Plots are compared byte for byte too: matplotlib writes no timestamp into our PNGs.
A design whose checks fail writes no header; that absence is recorded as well.

``--quick`` records only the figures: `design --json` and its `--header` for every
example x board (current-mode variants too) and `tune --json` -- no plots, no simulate
CSVs (both read the Design those figures come from), in about a third of the time: for
a change inside the design's or the sweep's arithmetic.
"""
from __future__ import annotations

import hashlib
import json
import re
import sys
import tempfile
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
EXAMPLES = sorted((ROOT / "examples").glob("*.toml"))
BOARDS = sorted(p.stem for p in (ROOT / "boards").glob("*.toml"))
#: Current-mode variants of the examples without an [armature] (no example holds in
#: current mode): the same file with these lines added to [hold].
CURRENT_MODES = {"hyst": 'mode = "current"\ncontrol = "hysteretic"\n',
                 "offt": 'mode = "current"\ncontrol = "off_time"\n'}


def _variants(out: Path) -> list[Path]:
    """The examples, and their current-mode variants written into ``out``/variants."""
    folder = out / "variants"
    folder.mkdir(exist_ok=True)
    paths = list(EXAMPLES)
    for drive in EXAMPLES:
        text = drive.read_text()
        if "[armature]" in text:
            continue
        for tag, lines in CURRENT_MODES.items():
            path = folder / f"{drive.stem}-{tag}.toml"
            path.write_text(text.replace("[hold]\n", "[hold]\n" + lines, 1))
            paths.append(path)
    return paths


def _drive_points(drive: Path) -> list[tuple[str, str, str, str]]:
    """(supply, coil temperature, r factor, l factor) pairs from the drive file's own limits."""
    import tomllib

    data = tomllib.loads(drive.read_text())
    supply, ambient = data["supply"], data["ambient"]
    return [(str(supply["min"]), "120 degC", "1.07", "0.85"),
            (str(supply["max"]), str(ambient["min"]), "0.93", "1.15")]


def _record_one(job: tuple[Path, str, Path, bool]) -> dict[str, str]:
    from typer.testing import CliRunner

    from coildrive.cli import app

    drive, board, out, quick = job
    runner = CliRunner()
    tag = f"{drive.stem}@{board}"
    codes: dict[str, str] = {}
    with tempfile.TemporaryDirectory() as tmp:
        t = Path(tmp)

        def run(name: str, args: list[str]) -> str:
            res = runner.invoke(app, args, catch_exceptions=False)
            codes[f"{tag}/{name}"] = str(res.exit_code)
            # an error names its file: the two records' checkouts differ, their messages not
            return res.stdout.replace(str(ROOT), "<ROOT>").replace(str(out), "<OUT>")

        plot = [] if quick else ["--plot", str(t / "d.png")]
        stdout = run("design", ["design", str(drive), "--board", board, "--json",
                                "--header", str(t / "h.h"), *plot])
        (out / f"{tag}.design.json").write_text(stdout)
        for src, dst in (("h.h", "header.h"), ("d.png", "design.png")):
            if (t / src).exists():
                (out / f"{tag}.{dst}").write_bytes((t / src).read_bytes())
        for k, (supply, temp, rf, lf) in enumerate([] if quick else _drive_points(drive)):
            run(f"simulate{k}", ["simulate", str(drive), "--board", board, "--supply", supply,
                                 "--coil-temp", temp, "--r-factor", rf, "--l-factor", lf,
                                 "--hold-time", "5 ms", "--csv", str(t / f"s{k}.csv")])
            if (t / f"s{k}.csv").exists():
                (out / f"{tag}.simulate{k}.csv").write_bytes((t / f"s{k}.csv").read_bytes())
        if drive.parent.name == "variants":  # tune sweeps voltage-mode holds only
            return codes
        plot = [] if quick else ["--plot", str(t / "t.png")]
        stdout = run("tune", ["tune", str(drive), "--board", board, "--json", *plot])
        stdout = re.sub(r'"(elapsed_s|seconds)": [0-9.e+-]+', r'"\1": 0', stdout)
        (out / f"{tag}.tune.json").write_text(stdout)
        if (t / "t.png").exists():
            (out / f"{tag}.tune.png").write_bytes((t / "t.png").read_bytes())
    return codes


def record(out: Path, workers: int = 2, quick: bool = False) -> None:
    out.mkdir(parents=True, exist_ok=True)
    jobs = [(d, b, out, quick) for d in _variants(out) for b in BOARDS]
    codes: dict[str, str] = {}
    with ProcessPoolExecutor(workers) as pool:
        for part in pool.map(_record_one, jobs):
            codes.update(part)
    (out / "exit-codes.json").write_text(json.dumps(codes, indent=1, sort_keys=True) + "\n")
    print(f"recorded {len(list(out.iterdir()))} files for {len(jobs)} example x board pairs in {out}")


def compare(old: Path, new: Path) -> int:
    names = sorted({p.name for p in old.iterdir() if p.is_file()}
                   | {p.name for p in new.iterdir() if p.is_file()})
    bad = []
    for name in names:
        a, b = old / name, new / name
        if not a.exists() or not b.exists():
            bad.append(f"{name}: only in {'new' if b.exists() else 'old'}")
        elif a.read_bytes() != b.read_bytes():
            bad.append(f"{name}: differs (sha256 {hashlib.sha256(a.read_bytes()).hexdigest()[:12]}"
                       f" -> {hashlib.sha256(b.read_bytes()).hexdigest()[:12]})")
    for line in bad:
        print(line)
    print(f"{len(names)} files compared, {len(bad)} differ")
    return 1 if bad else 0


if __name__ == "__main__":
    if len(sys.argv) in (3, 4) and sys.argv[1] == "record" and sys.argv[3:] in ([], ["--quick"]):
        record(Path(sys.argv[2]), quick=sys.argv[3:] == ["--quick"])
    elif len(sys.argv) == 4 and sys.argv[1] == "compare":
        sys.exit(compare(Path(sys.argv[2]), Path(sys.argv[3])))
    else:
        sys.exit(__doc__)
