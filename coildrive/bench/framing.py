"""Byte stuffing and error detection of the bench link: COBS and CRC-16/CCITT-FALSE.

COBS (Consistent Overhead Byte Stuffing, S. Cheshire and M. Baker, IEEE/ACM Trans.
Networking 7(2), 1999) removes every zero byte from a frame so that a single ``0x00``
can delimit frames on the wire. A frame is cut into blocks; each block is a *code* byte
``n`` (1..255) followed by ``n - 1`` non-zero data bytes. A code below ``0xFF`` means
"a zero byte follows these data bytes" (except after the last block, where the zero is
the implicit one every frame ends with and is dropped); ``0xFF`` means "254 data bytes,
no zero follows". The overhead is one byte per started run of 254 bytes.

The CRC is CRC-16/CCITT-FALSE: polynomial 0x1021, initial value 0xFFFF, no reflection
of input or output, final XOR 0x0000; check value 0x29B1 over the ASCII bytes
``123456789`` (CRC RevEng catalogue). :func:`binascii.crc_hqx` with ``0xFFFF`` as the
start value computes exactly this variant.

>>> cobs_encode(b"\\x11\\x00\\x22")
b'\\x02\\x11\\x02"'
>>> cobs_decode(b'\\x02\\x11\\x02"')
b'\\x11\\x00"'
>>> hex(crc16(b"123456789"))
'0x29b1'
"""

from __future__ import annotations

import binascii
import functools
import re
from typing import Callable

CRC_INIT = 0xFFFF
"""Initial register value of CRC-16/CCITT-FALSE."""

CRC_POLY = 0x1021
"""Generator polynomial x^16 + x^12 + x^5 + 1 (normal, non-reflected form)."""

CRC_CHECK = 0x29B1
"""CRC-16/CCITT-FALSE of ``b"123456789"`` (the catalogue check value)."""

MAX_BLOCK = 254
"""Most data bytes one COBS block carries (code ``0xFF``)."""


_ONES = re.compile(b"\x01+")
_ZEROS = bytes(1 << 16)


class CobsError(ValueError):
    """Bytes that are not a valid COBS encoding (a zero byte, or a block past the end)."""


def crc16(data: bytes | bytearray | memoryview, crc: int = CRC_INIT) -> int:
    """CRC-16/CCITT-FALSE of ``data`` (an int 0..0xFFFF).

    Parameters
    ----------
    data : the bytes to check.
    crc : register value to continue from; the default starts a new CRC.
    """
    return binascii.crc_hqx(data, crc)


def cobs_encoded_size(length: int) -> int:
    """Bytes of the COBS encoding of ``length`` bytes at most (delimiter not included).

    ``length + 1`` up to 254 bytes, one more per further started run of 254; the
    bound is reached when ``data`` has no zero byte.
    """
    return length + max(1, -(-length // MAX_BLOCK))


def cobs_encode(data: bytes | bytearray | memoryview) -> bytes:
    """COBS-encode ``data`` (no zero byte in the result; the delimiter is not added).

    A frame that ends with a full 254-byte block ends with that ``0xFF`` block: no
    empty ``0x01`` block is appended (some encoders append one; :func:`cobs_decode`
    accepts both forms).

    Parameters
    ----------
    data : any bytes, zeros included.

    Returns
    -------
    bytes of values 0x01..0xFF, ``len(data) + 1`` long up to 254 bytes of input.
    """
    out = bytearray()
    pieces = bytes(data).split(b"\x00")
    last = len(pieces) - 1
    for number, piece in enumerate(pieces):
        start = 0
        size = len(piece)
        while size - start >= MAX_BLOCK:
            out.append(0xFF)
            out += piece[start:start + MAX_BLOCK]
            start += MAX_BLOCK
            if number == last and start == size:
                # The frame ends right after a full block: the implicit zero is dropped
                # by the receiver anyway, so no empty 0x01 block is needed.
                return bytes(out)
        out.append(size - start + 1)
        out += piece[start:]
    return bytes(out)


def cobs_decode(data: bytes | bytearray | memoryview) -> bytes:
    """Decode one COBS-encoded frame (without its delimiter).

    Raises
    ------
    CobsError
        on a zero byte inside the frame, an empty input, or a block that runs past the end.
    """
    result = cobs_decode_or_none(bytes(data))
    if result is None:
        raise CobsError("not a valid COBS encoding (a zero byte, nothing, or a block past the end)")
    return bytes(result)


@functools.cache
def c_cobs_decoder() -> Callable[[bytes], bytes | None] | None:
    """The ``cobs`` package's C decoder as ``piece -> bytes | None`` (like
    :func:`cobs_decode_or_none`), or ``None`` when the package is not installed.

    Imported on the first call, so that commands which never decode frames do not pay
    for it. On the frame decoder's pieces (non-empty, no zero byte) it gives exactly what
    :func:`cobs_decode_or_none` gives (tests/test_protocol_cobs.py), 3.5x as fast on
    all-zero 64-sample frames; the whole frame decoder gains 1.05x to 1.9x, 1.2x on that
    worst case (benchmarks/bench_decoder.py).
    (An empty input, which the decoder never passes, decodes to ``b""`` there and to
    ``None`` here.)
    """
    try:
        from cobs.cobs import DecodeError, decode
    except ImportError:  # a dependency (pyproject.toml): a broken install falls back to ours
        return None

    def c_cobs_decode_or_none(piece: bytes) -> bytes | None:
        try:
            return decode(piece)
        except DecodeError:
            return None

    return c_cobs_decode_or_none


def cobs_decode_or_none(data: bytes) -> bytearray | None:
    """Decode one COBS-encoded frame, or ``None`` if it is not valid. Never raises.

    Works in place on a copy: every code byte is replaced by the zero it stands for and
    the first code byte is removed (the blocks are then joined by those zeros). A code
    byte that follows an ``0xFF`` block stands for no zero and is removed instead. One
    short loop step per block keeps zero-rich frames (small ADC codes) fast.
    """
    n = len(data)
    if n == 0 or 0 in data:
        return None
    out = bytearray(data)
    i = 0
    if 0xFF not in data:
        # No 0xFF byte at all, so no 0xFF code: the tight loop. A run of 0x01 codes (a
        # run of zeros in the data: idle ADC codes) is all code bytes, cleared in one
        # slice found by a regular expression (C speed) instead of one step per byte.
        while i < n:
            code = out[i]
            if code == 1:
                end = _ONES.match(data, i).end()
                out[i:end] = _ZEROS[:end - i]
                i = end
                continue
            out[i] = 0
            i += code
        if i != n:
            return None
        del out[0]
        return out
    after_full: list[int] = []
    while i < n:
        code = out[i]
        if code == 1:
            end = _ONES.match(data, i).end()
            out[i:end] = _ZEROS[:end - i]
            i = end
            continue
        out[i] = 0
        i += code
        if code == 0xFF:
            after_full.append(i)
    if i != n:
        return None
    for position in reversed(after_full):
        if position < n:
            del out[position]
    del out[0]
    return out
