"""The `cobs` package's C COBS decoder in the frame decoder, against our Python one (the
reference): the same bytes out, and the same messages and counters on damaged streams.

COBS rules: S. Cheshire and M. Baker, "Consistent Overhead Byte Stuffing", IEEE/ACM
Trans. Networking 7(2), 1999 (the block-by-block decoder ``reference_cobs_decode`` in
test_protocol.py follows them). The speed of the two is measured side by side in
benchmarks/bench_decoder.py, not here.
"""

from __future__ import annotations

import subprocess
import sys

from hypothesis import given, settings
from hypothesis import strategies as st

from conftest import EXAMPLES, ROOT
from coildrive.bench import FrameDecoder, FrameEncoder
from coildrive.bench.framing import c_cobs_decoder, cobs_decode_or_none
from test_protocol import reference_cobs_decode
from test_protocol_fuzz import damage, damage_frame, feed_in_chunks, sent_stream

FUZZ = settings(max_examples=200, deadline=None)


C_DECODE = c_cobs_decoder()


def test_the_c_decoder_is_installed_and_the_default():
    # `cobs` is a dependency (pyproject.toml); the fallback to ours is for a broken install
    assert C_DECODE is not None, "the cobs package is not installed"
    assert FrameDecoder()._cobs is C_DECODE
    assert FrameDecoder(cobs_decode_or_none)._cobs is cobs_decode_or_none


@settings(max_examples=600, deadline=None)
@given(st.one_of(
    st.lists(st.sampled_from([1, 1, 1, 2, 3, 0xFE, 0xFF, 7, 0x80]), min_size=1, max_size=1100),
    st.lists(st.integers(1, 255), min_size=1, max_size=1100),
).map(bytes))
def test_c_and_python_cobs_agree_with_the_block_rules(piece):
    # Pieces as the decoder sees them: non-empty, no zero byte (it cut the stream there).
    ours = cobs_decode_or_none(piece)
    ours = None if ours is None else bytes(ours)
    assert C_DECODE(piece) == ours == reference_cobs_decode(piece)


@FUZZ
@given(sent_stream(), st.lists(damage, min_size=25, max_size=25),
       st.binary(max_size=40), st.integers(0, 60), st.lists(st.integers(0, 20000), max_size=12))
def test_decoder_gives_identical_results_with_either_cobs(sent, ops, garbage, cut_end, cuts):
    start_seq, messages = sent
    enc = FrameEncoder(start_seq)
    frames = [enc.encode(m) for m in messages]
    stream = garbage + b"".join(damage_frame(f, op) for f, op in zip(frames, ops))
    stream = stream[:max(0, len(stream) - cut_end)]
    fast, ref = FrameDecoder(C_DECODE), FrameDecoder(cobs_decode_or_none)
    got = feed_in_chunks(fast, stream, cuts) + fast.finish()
    want = feed_in_chunks(ref, stream, cuts) + ref.finish()
    assert got == want
    assert [m.seq for m in got] == [m.seq for m in want]
    assert fast.stats == ref.stats


def _loaded_after(code: str, *args: str) -> str:
    """Run ``code`` in a fresh interpreter; the `cobs` and bench-decoder modules it loaded."""
    code += ("\nloaded = sorted(m for m in sys.modules if m.split('.')[0] == 'cobs'"
             " or m == 'coildrive.bench.protocol')\n"
             "print('LOADED ' + ','.join(loaded) if loaded else 'CLEAN', file=sys.stderr)\n")
    r = subprocess.run([sys.executable, "-c", code, *args], capture_output=True, text=True, cwd=ROOT,
                       timeout=120, env={"PYTHONPATH": str(ROOT), "PATH": ""})
    return r.stderr.strip().splitlines()[-1]


def test_design_does_not_import_the_decoder_or_cobs():
    # CLI start-up time: `design` never decodes frames, so it pays for neither.
    code = ("import sys; from coildrive.cli import app\n"
            "try:\n    app(['design', sys.argv[1], '--json'])\nexcept SystemExit:\n    pass")
    assert _loaded_after(code, str(EXAMPLES / "demo-valve.toml")) == "CLEAN"


def test_cobs_is_imported_by_the_first_decoder_only():
    # modules that import the protocol without decoding (the C encoder's generator, the
    # capture file reader) do not load the C extension
    code = "import sys, coildrive.codegen.stream, coildrive.bench.capture_file"
    assert _loaded_after(code) == "LOADED coildrive.bench.protocol"
    code = "import sys; from coildrive.bench.protocol import FrameDecoder; FrameDecoder()"
    assert _loaded_after(code).startswith("LOADED cobs,")
