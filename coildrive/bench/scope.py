"""Oscilloscope captures: a CSV of time and coil current, read into a :class:`Capture`.

Many engineers first measure a coil with a scope and a current probe. This module reads
the CSV a scope exports into the same in-memory :class:`~coildrive.bench.capture_file.Capture`
that a bench-link capture gives, so ``check`` and ``fit`` work on either without caring
where the samples came from.

What it takes (see ``docs/bench.md``, *Oscilloscope captures*):

* lines before the data (a preamble of ``key,value`` lines, a row of column names, a row
  of units): the data start at the first row whose data columns all hold numbers;
* columns separated by ``,``, ``;`` or tabs; with ``;`` or tabs a decimal comma is read;
* time in seconds (any SI prefix: a unit in the column name, ``Time (ms)``, or in a
  units row) or as a sample index (a column in ``Sequence``/``index`` units, or named
  ``X``/``index``/``sample``) with the sample interval from the preamble
  (``Sample Interval``, ``Increment``, ``Sample Rate`` ...) or ``sample_interval``; no
  time column at all: one row per sample at ``sample_interval``;
* the coil current in A (any prefix), or in V from a current probe's output, turned into
  A by ``current_scale`` (A per V: ``"10 A/V"`` or ``"100 mV/A"``);
* optionally the switch or gate state (``switch``: high = on; it gives the phases), the
  switch-node voltage (``node``: its peak is reported) and the supply (``supply``: the
  operating point's bus voltage).

The time column must be uniform, as a scope samples it: each row's time is placed on the
grid ``t0 + k dt`` (``dt`` fitted over the whole record); a row off the grid by more than
a quarter of ``dt`` or a time that goes back is refused, naming the line. Rows missing
from the grid (a gap) become missing sample indices, exactly like frames lost on the
bench link: the analysis counts them and never bridges them. Nothing is resampled:
interpolating across a gap or onto a new grid would invent the very edges (the pull-in
rise, the hold ripple, the release) that ``check`` measures. A row repeated with the same
time and the same values is dropped (some exports write the record boundary twice); the
same time with different values is refused. A current cell that holds no value (empty,
``nan``, ``inf``, or an over-range marker of 1e30 and above) is a missing sample.

The currents become codes of a fine 16-bit scale (``amps_per_code`` = the largest
current / :data:`CODES_FULL_SCALE`: a 0.002 % step, far below any scope's own
resolution) clipped at zero like a converter's, so the analysis reads them exactly as it
reads a board's ADC.

Parsing uses the standard :mod:`csv` module for the fields and numpy for the numbers.
Anything it cannot read is one :class:`~coildrive.errors.InputError` naming the file,
the line and the column.
"""

from __future__ import annotations

import csv
import gc
import math
import os
import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..errors import InputError, unreadable
from .capture_file import Capture, CaptureEvent, CaptureMeta, read_capture
from .messages import EventKind

#: Roles a column can play, as ``--columns`` names them.
ROLES = ("time", "current", "switch", "node", "supply")
#: Codes of the largest current (16-bit codes; headroom to 65535 for rounding).
CODES_FULL_SCALE = 60000
#: A value at or above this magnitude marks an over-range sample (scopes write a huge
#: number such as 9.9e37 there: from memory); it is a missing sample.
OVERRANGE = 1e30
#: Largest distance of a row's time from the fitted sample grid, in sample intervals.
GRID_TOLERANCE = 0.25
#: Gap without current that separates actuations in a switch-state column (s, at least).
MIN_IDLE_S = 1e-3
#: Largest file read, bytes (a few million rows: every field is held in memory while read).
MAX_BYTES = 128 << 20
#: Data rows searched for settings written beside the data.
KEY_ROWS = 100

_MISSING = {"", "nan", "-nan", "+nan", "inf", "-inf", "+inf", "-", "--", "---", "null", "none"}
_TIME_UNITS = {"s": 1.0, "ms": 1e-3, "us": 1e-6, "\u00b5s": 1e-6, "\u03bcs": 1e-6, "ns": 1e-9,
               "ps": 1e-12, "sec": 1.0, "secs": 1.0, "second": 1.0, "seconds": 1.0}
_INDEX_UNITS = {"sequence", "index", "idx", "sample", "samples", "pt", "pts", "point", "points", "#", "n"}
_INDEX_NAMES = {"x", "index", "idx", "sample", "samples", "no", "no.", "n", "#", "point", "points", "sequence"}
_PREFIX = {"": 1.0, "p": 1e-12, "n": 1e-9, "u": 1e-6, "\u00b5": 1e-6, "\u03bc": 1e-6, "m": 1e-3,
           "k": 1e3, "M": 1e6}
_AMP_WORDS = {"a", "amp", "amps", "ampere", "amperes"}
_VOLT_WORDS = {"v", "volt", "volts"}
_INTERVAL_KEYS = {"sampleinterval", "samplinginterval", "sampleperiod", "samplingperiod",
                  "increment", "xincrement", "timestep", "dt", "timeinterval", "horizontalinterval"}
_RATE_KEYS = {"samplerate", "samplingrate", "samplefrequency", "samplingfrequency"}
_VUNIT_KEYS = {"verticalunits", "verticalunit", "yunits", "yunit"}
_HUNIT_KEYS = {"horizontalunits", "horizontalunit", "xunits", "xunit"}
# matched in this order, a column to one role only ("switch_voltage" is the node, not
# the switch state)
_ROLE_WORDS = {
    "time": ("time", "zeit", "temps"),
    "current": ("current", "curr", "amps", "ibus", "icoil", "i_coil", "coil_i"),
    "node": ("node", "drain", "vds", "switch_voltage", "vsw", "sw_node"),
    "supply": ("supply", "vbus", "bus", "vin", "vbat", "battery"),
    "switch": ("switch_on", "gate", "state", "switch", "drive", "pwm"),
}


@dataclass(frozen=True)
class ScopeOptions:
    """How to read a scope CSV. ``columns`` maps roles (:data:`ROLES`) to a column name or
    1-based number (text, as given); ``current_scale`` A per unit of the current column
    (per V for a probe; negative for a probe clamped the other way round);
    ``sample_interval`` s between rows (when the file does not say it)."""

    columns: dict = field(default_factory=dict)
    current_scale: float | None = None
    sample_interval: float | None = None

    @property
    def given(self) -> bool:
        """True when any option is set (the file is then read as a scope CSV)."""
        return bool(self.columns) or self.current_scale is not None or self.sample_interval is not None


# --------------------------------------------------------------------------- options
def parse_columns(text: str | None, option: str = "--columns") -> dict:
    """``"time=1,current=CH2,switch=CH3"`` -> ``{"time": "1", "current": "CH2", ...}``.

    Names are matched without regard to case or to a unit in brackets; numbers count
    from 1."""
    if text is None:
        return {}
    out: dict = {}
    for part in [p.strip() for p in text.split(",") if p.strip()]:
        role, sep, col = part.partition("=")
        role, col = role.strip().lower(), col.strip()
        if not sep or not col:
            raise InputError(option, "", f"{part!r} is not ROLE=COLUMN, e.g. \"time=1,current=CH2\"")
        if role not in ROLES:
            raise InputError(option, "", f"{role!r} is not a role, expected one of {', '.join(ROLES)}")
        if role in out:
            raise InputError(option, "", f"{role!r} is given twice")
        out[role] = col
    if out and "current" not in out:
        raise InputError(option, "", "names no current column, e.g. \"current=CH1\"")
    return out


_SCALE = re.compile(r"^\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*(?:([a-zA-Z\u00b5\u03bc]*)\s*/\s*([a-zA-Z\u00b5\u03bc]*))?\s*$")


def _prefixed(unit: str, base: str) -> float | None:
    if unit.endswith(base) and unit[:-len(base)] in _PREFIX:
        return _PREFIX[unit[:-len(base)]]
    return None


def parse_current_scale(text: str | None, option: str = "--current-scale") -> float | None:
    """A probe's scale as A per V: ``"10"``, ``"10 A/V"``, ``"100 mV/A"`` -> 10.0."""
    if text is None:
        return None
    m = _SCALE.match(text)
    bad = f"{text!r} is not a probe scale, expected A per V such as 10, \"10 A/V\" or \"100 mV/A\""
    if not m:
        raise InputError(option, "", bad)
    number = float(m[1])
    num, den = m[2], m[3]
    if num is not None:
        a_num, v_den = _prefixed(num, "A"), _prefixed(den, "V")
        v_num, a_den = _prefixed(num, "V"), _prefixed(den, "A")
        if a_num is not None and v_den is not None:
            number *= a_num / v_den
        elif v_num is not None and a_den is not None and number != 0:
            number = a_den / (number * v_num)
        else:
            raise InputError(option, "", bad)
    if not (math.isfinite(number) and number != 0):
        raise InputError(option, "", f"{text!r} must be a finite, non-zero scale")
    return number


# --------------------------------------------------------------------------- detection
def looks_like_scope_csv(data: bytes) -> bool:
    """True when ``data`` is not text-mode bench lines (``index,adc``, events, info):
    fewer than half of its first 50 content lines are text-mode records."""
    from .textline import TextLineDecoder

    head = data[:65536]
    if b"\x00" in head:
        return False
    lines = [ln for ln in head.split(b"\n")[:200] if ln.strip() and not ln.strip().startswith(b"#")][:50]
    if not lines:
        return False
    dec = TextLineDecoder()
    dec.feed(b"\n".join(lines) + b"\n")
    st = dec.stats
    return st.frames * 2 < len(lines)


def read_any_capture(path: str | os.PathLike, options: ScopeOptions | None = None) -> Capture:
    """A capture file, text-mode lines, or a scope CSV, as one :class:`Capture`.

    A scope CSV is recognised by its content (or forced by any of ``options``); the
    others go to :func:`coildrive.bench.capture_file.read_capture`."""
    options = options or ScopeOptions()
    source = str(path)
    try:
        with open(path, "rb") as fh:
            head = fh.read(65536)
    except OSError as err:
        raise unreadable(source, err, "a capture file") from None
    if options.given or (not head.startswith(b'{"format"') and looks_like_scope_csv(head)):
        return read_scope_csv(path, options)
    return read_capture(path)


# --------------------------------------------------------------------------- reading
def _norm(text: str) -> str:
    return re.sub(r"[\s_\-:.()\[\]/]", "", text.lower())


def _split_name(cell: str) -> tuple[str, str | None]:
    """``"Time (ms)"`` -> ``("Time", "ms")``; ``"CH1[V]"`` -> ``("CH1", "V")``; a name
    ending in ``_s``/``_a``/``_v`` (``time_s``, ``current_a``) gives that unit."""
    cell = cell.strip()
    m = re.match(r"^(.*?)\s*[\(\[]\s*([^\)\]]*)\s*[\)\]]\s*$", cell)
    if m:
        return m[1].strip(), m[2].strip()
    m = re.match(r"^(.*?)_(s|ms|us|ns|a|ma|v|mv)$", cell, re.IGNORECASE)
    if m and m[1]:
        return cell, m[2] if m[2].lower() not in ("a", "v") else m[2].upper()
    return cell, None


def _unit_kind(unit: str | None) -> tuple[str | None, float]:
    """``(kind, scale to SI)`` of a unit: kind ``"time"``, ``"index"``, ``"current"``,
    ``"voltage"`` or ``None`` (unknown or none)."""
    if not unit:
        return None, 1.0
    u = unit.strip()
    low = u.lower()
    if low in _INDEX_UNITS:
        return "index", 1.0
    if u in _TIME_UNITS or low in _TIME_UNITS:
        return "time", _TIME_UNITS.get(u, _TIME_UNITS.get(low, 1.0))
    if low in _AMP_WORDS:
        return "current", 1.0
    if low in _VOLT_WORDS:
        return "voltage", 1.0
    for base, kind in (("A", "current"), ("V", "voltage"), ("s", "time")):
        scale = _prefixed(u, base)
        if scale is not None:
            return kind, scale
    return None, 1.0


def _decode(raw: bytes, source: str) -> str:
    if b"\x00" in raw[:65536]:
        raise InputError(source, "", "holds binary bytes: not a CSV of scope samples")
    for enc in ("utf-8-sig", "latin-1"):
        try:
            return raw.decode(enc)
        except UnicodeDecodeError:
            continue
    raise InputError(source, "", "is not text")  # pragma: no cover - latin-1 decodes anything


def _delimiter(lines: list[str]) -> str:
    """The separator of the data rows: the candidate found the same (non-zero) number of
    times on most of the last content lines."""
    tail = [ln for ln in lines[-200:] if ln.strip()][-50:]
    best, score = ",", -1
    for d in ("\t", ";", ","):   # a table of ; or tabs may hold decimal commas: they first
        counts = [ln.count(d) for ln in tail]
        if not counts:
            continue
        common = max(set(counts), key=counts.count)
        s = counts.count(common) if common > 0 else 0
        if s > score:
            best, score = d, s
    return best


_NUMERIC = re.compile(r"^\s*[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?\s*$")


def _is_number(cell: str) -> bool:
    return bool(_NUMERIC.match(cell))


def _is_value(cell: str) -> bool:
    """A number, or a cell that stands for a missing sample."""
    return _is_number(cell) or cell.strip().lower() in _MISSING


@dataclass
class _Table:
    rows: list[list[str]]
    lines: list[int]          # 1-based line number of each row
    data_start: int           # first data row
    data_cols: list[int]      # 0-based positions holding data
    names: dict               # position -> (name, unit or None)
    keys: dict                # normalised preamble key -> value text


def _table(text: str, source: str) -> _Table:
    lines = text.splitlines()
    delim = _delimiter(lines)
    decimal_comma = False
    if delim in (";", "\t"):
        sample = [ln for ln in lines[-50:] if ln.strip()]
        decimal_comma = any(re.search(r"\d,\d", ln) for ln in sample) and not any(
            re.search(r"\d\.\d", ln) for ln in sample)
    rows: list[list[str]] = []
    numbers: list[int] = []
    reader = csv.reader(lines, delimiter=delim)
    try:
        for row in reader:
            rows.append([c.replace(",", ".") for c in row] if decimal_comma else row)
            numbers.append(reader.line_num)
    except csv.Error as err:
        raise InputError(source, f"line {reader.line_num}", f"cannot be split into columns ({err})") from None
    content = [k for k, r in enumerate(rows) if any(r)]
    if not content:
        raise InputError(source, "", "is empty: no scope samples")
    # data positions: numeric in most of the last content rows
    tail = [rows[k] for k in content[-60:]]
    width = max(len(r) for r in tail)
    cols = [j for j in range(width)
            if sum(1 for r in tail if j < len(r) and _is_number(r[j])) >= 0.8 * len(tail)]
    if not cols:
        raise InputError(source, "", "is not a capture: no column of numbers (expected a coildrive "
                         "capture file, text-mode index,adc lines, or a scope CSV of time and current)")
    start = next((k for k in content if all(j < len(rows[k]) and _is_number(rows[k][j]) for j in cols)),
                 content[-1])
    header = [k for k in content if k < start]
    names: dict = {}
    name_row = None
    for k in reversed(header):     # the last row naming the data columns
        r = rows[k]
        if all(j < len(r) and r[j].strip() and not _is_number(r[j]) for j in cols):
            name_row = k
            if k - 1 in header and all(j < len(rows[k - 1]) and rows[k - 1][j].strip()
                                       and not _is_number(rows[k - 1][j]) for j in cols):
                # two rows of text over the data: names, then units
                units = [_unit_kind(r[j])[0] for j in cols]
                if any(u is not None for u in units):
                    name_row = k - 1
            break
    if name_row is not None:
        units_row = rows[name_row + 1] if name_row + 1 < start and name_row + 1 in header else None
        for j in cols:
            name, unit = _split_name(rows[name_row][j])
            if unit is None and units_row is not None and j < len(units_row) and units_row[j].strip():
                unit = units_row[j].strip()
            names[j] = (name, unit)
    keys: dict = {}
    # settings sit above the data or beside its first rows
    for k in [k for k in content if k < start] + [k for k in content if k >= start][:KEY_ROWS]:
        r = rows[k]
        for j, cell in enumerate(r):
            if j in cols and k >= start:
                continue
            key = _norm(cell)
            if not key or _is_number(cell):
                continue
            value = r[j + 1].strip() if j + 1 < len(r) and r[j + 1].strip() else None
            if value is None and k + 1 < len(rows) and k + 1 < start and j < len(rows[k + 1]):
                value = rows[k + 1][j].strip() or None
            if value is not None and key not in keys:
                keys[key] = value
    return _Table(rows, numbers, start, cols, names, keys)


def _pick(table: _Table, options: ScopeOptions, source: str) -> dict:
    """Role -> 0-based column position."""
    cols = table.data_cols
    if options.columns:
        out = {}
        for role, spec in options.columns.items():
            out[role] = _find_column(table, spec, role, source)
        return out
    out: dict = {}
    for role, words in _ROLE_WORDS.items():
        for j in cols:
            name, unit = table.names.get(j, ("", None))
            low = name.lower()
            if j in out.values() or role in out:
                continue
            if any(low == w or low.startswith(w) or w in low.split() or w in low.split("_") for w in words):
                out[role] = j
    if "time" not in out:
        first = table.names.get(cols[0], ("", None))
        kind = _unit_kind(first[1])[0]
        if kind in ("time", "index") or first[0].strip().lower() in _INDEX_NAMES or len(cols) >= 2:
            out["time"] = cols[0]
    if "current" not in out:
        amps = [j for j in cols if j not in out.values() and _unit_kind(table.names.get(j, ("", None))[1])[0] == "current"]
        rest = [j for j in cols if j not in out.values()]
        if len(amps) == 1:
            out["current"] = amps[0]
        elif len(rest) == 1:
            out["current"] = rest[0]
        else:
            shown = ", ".join(table.names.get(j, (str(j + 1), None))[0] or str(j + 1) for j in rest)
            raise InputError(source, f"line {table.lines[table.data_start]}",
                             f"{len(rest)} data columns ({shown}) and none named as the coil current: "
                             "say which with --columns, e.g. \"time=1,current=2\"")
    return out


def _find_column(table: _Table, spec: str, role: str, source: str) -> int:
    if spec.isdigit():
        j = int(spec) - 1
        if j < 0 or j not in table.data_cols:
            raise InputError(source, "--columns", f"{role}={spec}: column {spec} holds no data "
                             f"(data columns: {', '.join(str(c + 1) for c in table.data_cols)})")
        return j
    want = _norm(_split_name(spec)[0])
    for j in table.data_cols:
        if _norm(table.names.get(j, ("", None))[0]) == want:
            return j
    shown = ", ".join(f"{j + 1}={table.names[j][0]}" if j in table.names else str(j + 1) for j in table.data_cols)
    raise InputError(source, "--columns", f"{role}={spec}: no data column of that name (columns: {shown})")


def _column(table: _Table, j: int, source: str, what: str, missing_ok: bool) -> np.ndarray:
    """Floats of data column ``j`` (nan where a cell holds no value); an unreadable cell
    is an error naming its line and column."""
    rows = table.rows[table.data_start:]
    cells = [r[j] if j < len(r) else "" for r in rows]
    try:
        values = np.asarray(cells, dtype=np.float64)     # the usual case: every cell a number
    except ValueError:
        cells = [c.strip() for c in cells]
        clean = ["nan" if c.lower() in _MISSING else c for c in cells]
        try:
            values = np.asarray(clean, dtype=np.float64)
        except ValueError:
            values = None
    if values is None:
        name = table.names.get(j, (None, None))[0]
        col = f"column {j + 1}" + (f" ({name})" if name else "")
        k = next((k for k, c in enumerate(clean) if not _is_number(c) and c != "nan"), 0)
        raise InputError(source, f"line {table.lines[table.data_start + k]}, {col}",
                         f"{cells[k]!r} is not a number ({what} expected)")
    values[np.abs(values) >= OVERRANGE] = np.nan
    if not missing_ok:
        bad = np.flatnonzero(~np.isfinite(values))
        if bad.size:
            k = int(bad[0])
            raise InputError(source, f"line {table.lines[table.data_start + k]}, column {j + 1}",
                             f"{cells[k]!r} holds no value ({what} expected on every row)")
    return values


def _interval_from_keys(table: _Table, source: str) -> float | None:
    for key, value in table.keys.items():
        if key in _INTERVAL_KEYS or key in _RATE_KEYS:
            m = re.match(r"^\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*(\S*)\s*$", value)
            if not m:
                continue
            number = float(m[1])
            if key in _RATE_KEYS:
                number = 1.0 / number if number > 0 else float("nan")
            else:
                kind, scale = _unit_kind(m[2])
                number *= scale if kind == "time" else 1.0
            if not (math.isfinite(number) and number > 0):
                raise InputError(source, key, f"{value!r} is not a sample interval")
            return number
    return None


def _grid(t: np.ndarray, lines: list[int], source: str) -> tuple[np.ndarray, float]:
    """Integer sample positions of times ``t`` (s) on a uniform grid, and its interval."""
    d = np.diff(t)
    pos = d[d > 0]
    if pos.size == 0:
        raise InputError(source, f"line {lines[0]}", "the time column does not advance: no sample interval")
    dt = float(np.median(pos))
    k = np.round((t - t[0]) / dt).astype(np.int64)
    if k[-1] > 0:  # refine the interval over the whole record (rounded time stamps)
        dt = float((t[-1] - t[0]) / k[-1])
        k = np.round((t - t[0]) / dt).astype(np.int64)
    off = np.abs(t - t[0] - k * dt) / dt
    bad = np.flatnonzero(off > GRID_TOLERANCE)
    if bad.size:
        j = int(bad[0])
        raise InputError(source, f"line {lines[j]}", f"time {t[j]:.9g} s is {off[j]:.2f} sample intervals off the "
                         f"uniform grid of {dt:.6g} s: not a uniformly sampled record (coildrive "
                         "does not resample: that would invent the edges it measures)")
    back = np.flatnonzero(np.diff(k) < 0)
    if back.size:
        j = int(back[0]) + 1
        raise InputError(source, f"line {lines[j]}", f"time {t[j]:.9g} s goes back from {t[j - 1]:.9g} s: "
                         "two records in one file? Export one record per file")
    jump = np.flatnonzero(np.diff(k) > k.size)
    if jump.size:
        j = int(jump[0]) + 1
        raise InputError(source, f"line {lines[j]}", f"time jumps from {t[j - 1]:.9g} s to {t[j]:.9g} s, a gap "
                         f"longer than the whole record ({k.size} rows): not one record")
    return k, dt


def _switch_events(state_v: np.ndarray, index: np.ndarray, fs: float) -> tuple[list[CaptureEvent], list[str]]:
    """ON, PEAK_END, OFF events from a switch/gate column (high = on), with hysteresis
    between 30 % and 70 % of its low and high levels; actuations are separated by an off
    time longer than the larger of ``MIN_IDLE_S`` and three times the median off-time.
    ON at the first sample of a rise, OFF at the first sample of the last fall (when the
    record shows the idle after it), PEAK_END one usual hold on-time (the median of the
    hold's pulses) before the first fall: a hold starts with an on-time, which the gate
    cannot tell from the peak."""
    notes: list[str] = []
    v = state_v
    ok = np.isfinite(v)
    if np.count_nonzero(ok) < 4:
        return [], ["the switch column holds no values: phases found from the waveform"]
    lo, hi = np.percentile(v[ok], [1.0, 99.0])
    if not hi > lo:
        return [], ["the switch column never changes: phases found from the waveform"]
    up, down = lo + 0.7 * (hi - lo), lo + 0.3 * (hi - lo)
    # hysteresis: each sample takes the state of the last sample beyond a threshold
    beyond = np.where(ok & ((v >= up) | (v <= down)), np.arange(v.size), -1)
    np.maximum.accumulate(beyond, out=beyond)
    state = np.where(beyond >= 0, v[np.maximum(beyond, 0)] >= up, False)
    edges = np.flatnonzero(np.diff(state.astype(np.int8))) + 1
    rises = np.array([e for e in edges if state[e]], np.int64)
    falls = np.array([e for e in edges if not state[e]], np.int64)
    if rises.size == 0:
        return [], ["the switch column never turns on: phases found from the waveform"]
    # off-time before each rise (samples), and the usual one (the hold's PWM off-time)
    before = np.searchsorted(falls, rises) - 1
    idle = np.where(before >= 0, index[rises] - index[falls[np.maximum(before, 0)]], -1)
    typical = float(np.median(idle[idle > 0])) if np.any(idle > 0) else 0.0
    gap = max(MIN_IDLE_S * fs, 3.0 * typical)
    starts = [int(r) for r, d in zip(rises, idle) if d < 0 or d > gap]
    if state[0]:
        notes.append("the record starts with the switch on: that actuation is left out")
    events: list[CaptureEvent] = []
    for n, on in enumerate(starts):
        nxt = starts[n + 1] if n + 1 < len(starts) else None
        events.append(CaptureEvent(int(index[on]), int(EventKind.ON)))
        inside = falls[(falls > on) & ((falls < nxt) if nxt is not None else True)]
        if inside.size:
            # the hold starts with a PWM on-time that the gate cannot tell from the peak:
            # the hold starts one usual hold on-time before the first switch-off
            pulses = rises[(rises > inside[0]) & (rises < inside[-1])]
            ends = falls[np.searchsorted(falls, pulses)] if pulses.size else pulses
            on_time = float(np.median(index[ends] - index[pulses])) if pulses.size >= 3 else 0.0
            events.append(CaptureEvent(int(round(index[inside[0]] - on_time)), int(EventKind.PEAK_END)))
        ended = nxt is not None or (not state[-1] and inside.size
                                    and index[-1] - index[inside[-1]] > gap)
        if inside.size and ended:
            events.append(CaptureEvent(int(index[inside[-1]]), int(EventKind.OFF)))
    return events, notes


def read_scope_csv(path: str | os.PathLike, options: ScopeOptions | None = None) -> Capture:
    """Read a scope CSV (see the module docstring) into a :class:`Capture` (``link`` =
    ``"scope"``, sense position ``"coil"``: the probe reads the coil current always)."""
    # a row is a list of strings: millions of small containers that the cyclic garbage
    # collector would scan again and again (they hold no cycles); it halves the time
    enabled = gc.isenabled()
    gc.disable()
    try:
        return _read_scope_csv(path, options)
    finally:
        if enabled:
            gc.enable()


def _read_scope_csv(path: str | os.PathLike, options: ScopeOptions | None) -> Capture:
    options = options or ScopeOptions()
    source = str(path)
    try:
        size = Path(path).stat().st_size
        if size > MAX_BYTES:
            raise InputError(source, "", f"is {size / 2**20:.0f} MiB, more than the {MAX_BYTES >> 20} MiB "
                             "read at most: export a shorter record")
        raw = Path(path).read_bytes()
    except OSError as err:
        raise unreadable(source, err, "a CSV of scope samples") from None
    table = _table(_decode(raw, source), source)
    roles = _pick(table, options, source)
    notes: list[str] = []
    # blank rows are skipped; a short last row (the export was cut off) is dropped
    need = max(roles.values()) + 1
    data = [(ln, r) for ln, r in zip(table.lines[table.data_start:], table.rows[table.data_start:])
            if any(r)]
    if data and len(data[-1][1]) < need:
        notes.append(f"line {data[-1][0]} is cut short: left out")
        data.pop()
    for ln, r in data:
        if len(r) < need:
            raise InputError(source, f"line {ln}", f"has {len(r)} column(s), the data needs {need}")
    table.lines[table.data_start:] = [ln for ln, _ in data]
    table.rows[table.data_start:] = [r for _, r in data]
    lines = table.lines[table.data_start:]
    n_rows = len(lines)
    if n_rows < 16:
        raise InputError(source, "", f"holds {n_rows} data row(s): too few for a scope record")

    # ---- time
    interval = options.sample_interval or _interval_from_keys(table, source)
    if "time" in roles:
        j = roles["time"]
        name, unit = table.names.get(j, ("", None))
        kind, scale = _unit_kind(unit)
        if kind is None:
            unit = table.keys.get(next((k for k in table.keys if k in _HUNIT_KEYS), ""), None)
            kind, scale = _unit_kind(unit)
        t = _column(table, j, source, "a time", missing_ok=False)
        integers = bool(np.all(t == np.round(t))) and bool(np.all(np.diff(t) >= 1))
        if kind == "index" or (kind is None and (name.strip().lower() in _INDEX_NAMES or
                                                 (integers and interval is not None))):
            if interval is None:
                raise InputError(source, f"column {j + 1}" + (f" ({name})" if name else ""),
                                 "counts samples, and the file states no sample interval: give "
                                 "--sample-interval, e.g. \"1 us\"")
            t = (t - t[0]) * interval
            time_from = f"sample index x {interval:.6g} s"
        else:
            if kind not in (None, "time"):
                raise InputError(source, f"column {j + 1} ({name})", f"is in {unit!r}, expected a time unit (s, ms, us, ns)")
            if kind is None:
                notes.append(f"the time column {name or j + 1} states no unit: read as seconds")
            t = t * scale
            time_from = "time column"
    else:
        if interval is None:
            raise InputError(source, "--columns", "no time column: give --sample-interval, e.g. \"1 us\"")
        t = np.arange(n_rows) * float(interval)
        time_from = f"one row per sample at {interval:.6g} s"

    # ---- current
    jc = roles["current"]
    cname, cunit = table.names.get(jc, ("", None))
    ckind, cscale = _unit_kind(cunit)
    if ckind is None:
        cunit = table.keys.get(next((k for k in table.keys if k in _VUNIT_KEYS), ""), None)
        ckind, cscale = _unit_kind(cunit)
    amps = _column(table, jc, source, "a current", missing_ok=True)
    label = f"column {jc + 1}" + (f" ({cname})" if cname else "")
    if options.current_scale is not None:
        # volts of a probe times A per V; on a column already in A a plain factor (-1 flips
        # a probe clamped the other way round)
        amps = amps * cscale * options.current_scale
        scale_note = (f"in {cunit} x {options.current_scale:.6g}" if ckind == "current"
                      else f"x {options.current_scale:.6g} A/V")
    elif ckind == "voltage":
        raise InputError(source, label, f"is in {cunit}: a current probe's output; give --current-scale "
                         "(the probe's A per V, e.g. \"10 A/V\" or \"100 mV/A\")")
    elif ckind == "current":
        amps = amps * cscale
        scale_note = f"in {cunit}"
    else:
        scale_note = "no unit: read as A"
        notes.append(f"the current {label} states no unit: read as A (give --current-scale for a probe's volts)")

    # ---- grid: drop repeated rows, refuse conflicting ones and off-grid times
    k, dt = _grid(t, lines, source)
    same = np.flatnonzero(np.diff(k) == 0)
    drop = np.zeros(k.size, bool)
    others = [roles[r] for r in ("switch", "node", "supply") if r in roles]
    other_cols = {j: _column(table, j, source, "a number", missing_ok=True) for j in others}
    for p in same:
        def eq(x):
            return (x[p] == x[p + 1]) or (np.isnan(x[p]) and np.isnan(x[p + 1]))
        if eq(amps) and all(eq(v) for v in other_cols.values()):
            drop[p + 1] = True
        else:
            raise InputError(source, f"line {lines[p + 1]}", f"repeats the time {t[p + 1]:.9g} s of line "
                             f"{lines[p]} with other values: not one uniformly sampled record")
    if drop.any():
        notes.append(f"{int(drop.sum())} repeated row(s) dropped")
    missing = ~np.isfinite(amps)
    if missing.any():
        notes.append(f"{int(missing.sum())} current value(s) missing or over range (first at line "
                     f"{lines[int(np.flatnonzero(missing)[0])]}): left out as missing samples")
    keep = ~drop & ~missing
    index = k[keep]
    gaps = int(index[-1] - index[0] + 1 - index.size) - int(missing.sum()) if index.size else 0
    if gaps > 0:
        steps = np.flatnonzero(np.diff(k[~drop]) > 1)
        first = lines[int(np.flatnonzero(~drop)[steps[0] + 1])] if steps.size else lines[0]
        notes.append(f"{gaps} sample(s) missing from the time grid (first gap before line {first}): "
                     "counted as missing, not bridged")
    index = index - index[0]
    values = amps[keep]
    if values.size < 16:
        raise InputError(source, label, "holds fewer than 16 readable current values")
    top, bottom = float(values.max()), float(values.min())
    if -bottom > 2.0 * max(top, 0.0) and -bottom > 0:
        raise InputError(source, label, f"reads mostly negative current ({bottom:.4g} A down, {top:.4g} A up): "
                         "the probe is clamped the other way round; give a negative --current-scale")
    if not top > 0:
        top = 1.0
    apc = top / CODES_FULL_SCALE
    code = np.clip(np.floor(values / apc), 0, 0xFFFF).astype(np.uint16)
    fs = 1.0 / dt

    meta: dict = {"sample_rate_hz": fs, "adc_bits": 16, "amps_per_code": apc, "zero_code": 0,
                  "sense_position": "coil", "link": "scope"}
    extra: dict = {"rows": n_rows, "time": time_from, "current": f"{label} {scale_note}",
                   "repeated_rows_dropped": int(drop.sum()), "values_missing": int(missing.sum()),
                   "samples_missing": max(gaps, 0), "notes": notes}
    events: list[CaptureEvent] = []
    if "switch" in roles:
        sw = other_cols[roles["switch"]][keep]
        events, more = _switch_events(sw, index, fs)
        notes.extend(more)
        extra["phases"] = "switch column" if events else "waveform"
    if "supply" in roles:
        sup = other_cols[roles["supply"]][keep]
        busy = values > 0.25 * top
        pick = sup[busy & np.isfinite(sup)] if np.any(busy & np.isfinite(sup)) else sup[np.isfinite(sup)]
        if pick.size:
            v = float(np.median(pick))
            if v > 0:
                meta["supply_v"] = v
                extra["supply"] = "median of the supply column while current flows"
    if "node" in roles:
        node = other_cols[roles["node"]][keep]
        if np.any(np.isfinite(node)):
            extra["switch_node_peak_v"] = float(np.nanmax(np.abs(node)))
            extra["switch_node_lowest_v"] = float(np.nanmin(node))
    meta["extra"] = extra
    return Capture(index.astype(np.int64), code, tuple(events), (), CaptureMeta(**meta), source=source)


__all__ = ["ROLES", "ScopeOptions", "parse_columns", "parse_current_scale", "looks_like_scope_csv",
           "read_any_capture", "read_scope_csv"]
