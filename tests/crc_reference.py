"""A CRC computed straight from the CRC RevEng catalogue's parameter model, bit by bit.

The catalogue (CRC RevEng, "Catalogue of parametrised CRC algorithms") describes every
CRC by width, poly, init, refin, refout and xorout; this function follows that model
literally and serves as the reference the fast implementations are checked against.
"""

from __future__ import annotations


def crc_model(data: bytes, width: int, poly: int, init: int, refin: bool, refout: bool,
              xorout: int) -> int:
    """CRC of ``data`` for the given catalogue parameters."""
    top = 1 << (width - 1)
    mask = (1 << width) - 1
    reg = init
    for byte in data:
        if refin:
            byte = int(f"{byte:08b}"[::-1], 2)
        reg ^= byte << (width - 8)
        for _ in range(8):
            reg = ((reg << 1) ^ poly) & mask if reg & top else (reg << 1) & mask
    if refout:
        reg = int(f"{reg:0{width}b}"[::-1], 2)
    return reg ^ xorout


# CRC RevEng catalogue: CRC-16/CCITT-FALSE (listed as CRC-16/IBM-3740), check=0x29B1.
CCITT_FALSE = dict(width=16, poly=0x1021, init=0xFFFF, refin=False, refout=False, xorout=0x0000)


def crc_ccitt_false(data: bytes) -> int:
    """CRC-16/CCITT-FALSE by the parameter model."""
    return crc_model(data, **CCITT_FALSE)
