"""Firmware in the loop: build a generated driver folder for this computer.

:func:`build_firmware` takes the folder ``firmware-driver`` wrote, adds the bench-link
encoder (``firmware-stream``'s, rendered for the drive's board, unless the folder has one)
and a port of the driver's hooks to the host (``codegen_templates/driver/host_shim.c.j2``),
and compiles them with the system C compiler into a shared library in a cache folder
(one library per distinct set of sources and flags). :class:`coildrive.bench.firmware_device.FirmwareDevice`
loads it with ctypes.
"""

from __future__ import annotations

import hashlib
import os
import shutil
import subprocess
import sys
from pathlib import Path

from ..design.result import Design
from ..errors import InputError
from ..fileio import write_atomic
from .driver import DriverView, template_env
from .stream import render_stream_encoder

#: Compilers tried in this order after ``$CC``.
COMPILERS = ("cc", "gcc", "clang")
#: Frames buffered by the host build's encoder: the emulator sends them at the line rate,
#: and its clock waits for the line, so the ring only has to bridge one poll.
STREAM_BLOCKS = 64


def find_compiler() -> str:
    """The C compiler to use: ``$CC``, else the first of :data:`COMPILERS` on PATH."""
    wanted = os.environ.get("CC")
    for name in ([wanted] if wanted else []) + list(COMPILERS):
        path = shutil.which(name)
        if path:
            return path
    raise InputError("--firmware", "", "no C compiler found (set CC, or install cc, gcc or clang): "
                     "firmware in the loop compiles the generated driver for this computer")


def cache_root() -> Path:
    """``$XDG_CACHE_HOME/coildrive/firmware`` (``~/.cache/coildrive/firmware``)."""
    base = os.environ.get("XDG_CACHE_HOME") or str(Path.home() / ".cache")
    return Path(base) / "coildrive" / "firmware"


def driver_prefix(folder: Path) -> str:
    """The prefix of the one ``<prefix>_driver.c`` in ``folder``."""
    if not folder.is_dir():
        raise InputError(str(folder), "", "is not a folder (expected what firmware-driver --out wrote)")
    found = sorted(p.name[: -len("_driver.c")] for p in folder.glob("*_driver.c"))
    if len(found) != 1:
        raise InputError(str(folder), "", f"holds {len(found)} *_driver.c files, expected one "
                         "(the folder firmware-driver --out wrote)")
    prefix = found[0]
    for name in (f"{prefix}_driver.h", f"{prefix}_drive.h"):
        if not (folder / name).is_file():
            raise InputError(str(folder), "", f"has {prefix}_driver.c but no {name}")
    return prefix


def build_firmware(folder: Path, design: Design, cache: Path | None = None) -> Path:
    """Compile the driver in ``folder`` (for ``design``'s board) with its host port and
    the stream encoder; return the shared library's path (reused when already built).

    The build runs the hold the design declares (``check`` predicts the same: the compare
    and peak the firmware looks up at the bench supply); with an armature the peak is not
    ended at the seat, as ``check`` predicts the designed peak (the seat end is tested on
    the host, see tests/test_driver_c.py).

    Raises
    ------
    InputError
        naming ``--firmware`` (no compiler, a build error) or the folder.
    """
    prefix = driver_prefix(Path(folder))
    view = DriverView(design, prefix)
    env = template_env()
    generated = {f"{view.lower}_host_port.c": env.get_template("host_shim.c.j2").render(v=view, d=design)}
    own_stream = (Path(folder) / f"{view.lower}_stream.c").is_file()
    if not own_stream:
        generated.update(render_stream_encoder(view.lower, blocks=STREAM_BLOCKS, board=design.drive.board))
    sources = {p.name: p.read_text() for p in sorted(Path(folder).glob(f"{prefix}_*.[ch]"))}
    if f"#define {view.macro}_LATCH " in sources.get(f"{prefix}_drive.h", ""):
        raise InputError(str(folder), "", "has a latching coil's driver, this drive is not a latching coil "
                         "([hold] mode \"latch\"): run firmware-driver for this drive")
    boosted = f"#define {view.macro}_BOOST_PEAK " in sources.get(f"{prefix}_drive.h", "")
    if boosted != view.boost:   # the coil model switches the boost on the driver's word
        raise InputError(str(folder), "", "has a driver generated for a drive " + ("with" if boosted else "without")
                         + " supply.boost, this drive has " + ("none" if boosted else "one")
                         + ": run firmware-driver for this drive")
    flags = [f"-D{view.macro}_STREAM_SINGLE_CONTEXT"]
    if view.armature:
        flags.append(f"-D{view.macro}_DRIVER_SEAT_END=0")      # check predicts the designed peak
    units = [f"{prefix}_driver.c", f"{view.lower}_host_port.c", f"{view.lower}_stream.c"]
    return _compile(Path(folder), sources, generated, units, flags, cache,
                    own={f"{prefix}_driver.c"} | ({f"{view.lower}_stream.c"} if own_stream else set()))


def build_latch_firmware(folder: Path, design, cache: Path | None = None) -> Path:
    """Compile the latching coil's driver in ``folder`` (``firmware-driver`` of a
    ``[hold] mode = "latch"`` drive; ``design`` its
    :class:`~coildrive.design.latch.LatchDesign`) with its host port
    (``codegen_templates/driver/latch_host_shim.c.j2``); return the shared library's path.
    The emulator streams the samples and the driver's events itself (no encoder built).

    Raises
    ------
    InputError
        naming ``--firmware`` (no compiler, a build error) or the folder (a driver
        generated for a drive that is not a latching coil).
    """
    from .latch_driver import LatchDriverView

    prefix = driver_prefix(Path(folder))
    view = LatchDriverView(design, prefix)
    sources = {p.name: p.read_text() for p in sorted(Path(folder).glob(f"{prefix}_*.[ch]"))}
    if f"#define {view.macro}_LATCH " not in sources.get(f"{prefix}_drive.h", ""):
        raise InputError(str(folder), "", "has a driver generated for a drive that is not a latching coil, "
                         "this drive's [hold] mode is \"latch\": run firmware-driver for this drive")
    generated = {f"{view.lower}_host_port.c": template_env().get_template("latch_host_shim.c.j2")
                 .render(v=view, d=design)}
    return _compile(Path(folder), sources, generated, [f"{prefix}_driver.c", f"{view.lower}_host_port.c"],
                    [], cache, own={f"{prefix}_driver.c"})


def _compile(folder: Path, sources: dict[str, str], generated: dict[str, str], units: list[str],
             flags: list[str], cache: Path | None, own: set[str]) -> Path:
    """Build ``units`` (those in ``own`` from ``folder``, the rest from ``generated``) into
    a shared library in the cache, keyed by every source, the compiler and the flags."""
    compiler = find_compiler()
    flags = ["-std=c99", "-O2", "-shared", "-fPIC", *flags]
    key = hashlib.sha256(repr((sorted(sources.items()), sorted(generated.items()), compiler, flags,
                               sys.platform)).encode()).hexdigest()[:20]
    out = (cache or cache_root()) / key
    lib = out / ("firmware.dll" if sys.platform == "win32" else "libfirmware.so")
    if lib.is_file():
        return lib
    try:
        out.mkdir(parents=True, exist_ok=True)
        for name, text in generated.items():
            write_atomic(out / name, text)
    except OSError as err:
        raise InputError(str(out), "", f"cannot write the build cache: {err.strerror}") from None
    paths = [str((folder if name in own else out) / name) for name in units]
    tmp = out / f"{lib.name}.{os.getpid()}.tmp"
    r = subprocess.run([compiler, *flags, "-I", str(folder), "-I", str(out), *paths, "-o", str(tmp)],
                       capture_output=True, text=True, timeout=300)
    if r.returncode != 0:
        first = next((line for line in r.stderr.splitlines() if "error" in line), r.stderr.strip()[:200])
        raise InputError("--firmware", "", f"{Path(compiler).name} could not build {folder}: {first}")
    os.replace(tmp, lib)
    return lib
