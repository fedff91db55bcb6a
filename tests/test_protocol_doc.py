"""docs/protocol.md and the code agree: the worked examples and the COBS table are read
from the page and checked against the encoder and the decoder."""

from __future__ import annotations

import re

import numpy as np
import pytest

from coildrive.bench import (Command, Event, EventKind, FrameDecoder, Info, Opcode, Samples,
                             cobs_decode, cobs_encode, crc16)
from coildrive.bench.protocol import frame_payload
from conftest import ROOT
from crc_reference import crc_ccitt_false

DOC = (ROOT / "docs" / "protocol.md").read_text(encoding="utf-8")

# The messages the page's examples describe in words (section 8).
EXAMPLES = {
    "samples": (Samples(1000, np.array([0, 1, 256, 4095], dtype="<u2")), 7),
    "event": (Event(EventKind.ON, 1004), 8),
    "command": (Command(Opcode.SET_HOLD_DUTY, 16384), 0),
    # amps_per_code travels as binary32: the example's value is the binary32 nearest to it.
    "info": (Info(200000, 1, 12, float(np.float32(0.000402832031)), 0, "lab-m32 v1.2"), 0),
}


def hex_bytes(text: str) -> bytes:
    """``"01 02 ... FE"`` style hex: ``a ... b`` stands for every byte from a to b."""
    tokens = text.replace("`", "").split()
    out = bytearray()
    k = 0
    while k < len(tokens):
        if k + 2 < len(tokens) and tokens[k + 1] == "...":
            out += bytes(range(int(tokens[k], 16), int(tokens[k + 2], 16) + 1))
            k += 3
        else:
            out.append(int(tokens[k], 16))
            k += 1
    return bytes(out)


def doc_examples() -> dict[str, dict[str, bytes]]:
    found = {}
    for block in re.findall(r"```text\n(.*?)```", DOC, re.S):
        fields = dict(re.findall(r"^(\w+):\s*(.+)$", block, re.M))
        if "example" in fields:
            name = fields.pop("example").strip()
            found[name] = {k: hex_bytes(v) for k, v in fields.items()}
    return found


def test_the_page_has_every_example():
    assert set(doc_examples()) == set(EXAMPLES)


@pytest.mark.parametrize("name", sorted(EXAMPLES))
def test_worked_example_bytes_match_the_encoder(name):
    message, seq = EXAMPLES[name]
    doc = doc_examples()[name]
    frame_type, payload = frame_payload(message)
    header = bytes([frame_type, seq & 0xFF, seq >> 8])
    crc = crc16(header + payload).to_bytes(2, "little")
    assert doc["payload"] == payload, f"{name}: payload on the page differs from the encoder"
    assert doc["crc"] == crc, f"{name}: CRC on the page differs"
    # CRC RevEng catalogue model of CRC-16/CCITT-FALSE, independent of binascii.
    assert doc["crc"] == crc_ccitt_false(header + payload).to_bytes(2, "little")
    assert doc["frame"] == header + payload + crc
    assert doc["wire"] == cobs_encode(doc["frame"]) + b"\x00"
    decoded = FrameDecoder().feed(doc["wire"])
    assert decoded == [message] and decoded[0].seq == seq


def cobs_table() -> list[tuple[bytes, bytes]]:
    section = DOC.split("<!-- cobs-examples -->", 1)[1].split("<!-- /cobs-examples -->", 1)[0]
    rows = []
    for line in section.splitlines():
        cells = [c.strip() for c in line.strip().strip("|").split("|")]
        if len(cells) != 2 or cells[0].startswith("data") or set(cells[0]) <= set("-"):
            continue
        data = b"" if "empty" in cells[0] else hex_bytes(re.sub(r"\(.*?\)", "", cells[0]))
        rows.append((data, hex_bytes(cells[1])))
    return rows


def test_cobs_table_matches_the_encoder():
    rows = cobs_table()
    assert len(rows) == 9
    for data, encoded in rows:
        assert cobs_encode(data) == encoded, data.hex(" ")
        assert cobs_decode(encoded) == data


def test_page_states_the_crc_parameters():
    for fact in ("CRC-16/CCITT-FALSE", "`0x1021`", "`0xFFFF`", "`0x29B1`", "little-endian"):
        assert fact in DOC, fact
