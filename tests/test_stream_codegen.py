"""Rendering the firmware-side encoder and the firmware-stream command (no compiler needed)."""

from __future__ import annotations

import re

import pytest
import typer
from typer.testing import CliRunner

from coildrive.cli.stream_cmd import firmware_stream
from coildrive.codegen.stream import (StreamView, board_sampling, crc16_table, memory_use,
                                      render_stream_encoder, wire_bytes_per_sample)
from coildrive.config import load_board
from coildrive.errors import InputError
from conftest import BOARDS
from crc_reference import crc_model

runner = CliRunner()


def test_crc_table_is_the_catalogue_polynomial():
    # Entry n is the register after byte n from a zero start: the CRC RevEng catalogue's
    # CRC-16/XMODEM (poly 0x1021, init 0, no reflection) of that one byte.
    xmodem = dict(width=16, poly=0x1021, init=0, refin=False, refout=False, xorout=0)
    assert crc16_table() == [crc_model(bytes([n]), **xmodem) for n in range(256)]


def test_table_variant_renders_the_table():
    source = render_stream_encoder(crc_table=True)["coil_stream.c"]
    entries = re.findall(r"0x([0-9A-F]{4})u", source.split("crc_table[256] COIL_STREAM_FLASH = {", 1)[1].split("};", 1)[0])
    assert [int(e, 16) for e in entries] == crc16_table()


def test_prefix_names_everything():
    files = render_stream_encoder("Valve_2")
    assert set(files) == {"valve_2_stream.h", "valve_2_stream.c"}
    text = "\n".join(files.values())
    assert "valve_2_stream_push(" in text and "VALVE_2_EVENT_ON" in text
    assert "coil_" not in text and "COIL_" not in text


def test_board_sampling_macros():
    board = load_board(BOARDS / "lab-m32-zener.toml")
    sampling = board_sampling(board)
    # 3.3 V / 2**12 per code, over 0.1 ohm x 20 = 2 V/A (the board file's values).
    assert sampling.amps_per_code == pytest.approx(3.3 / 4096 / 2.0, rel=1e-12)
    assert (sampling.rate_numerator, sampling.rate_denominator, sampling.adc_bits) == (200000, 1, 12)
    header = render_stream_encoder(board=board)["coil_stream.h"]
    assert "#define COIL_STREAM_RATE_NUMERATOR     200000UL" in header
    assert "COIL_STREAM_AMPS_PER_CODE      0.000402832031f" in header
    assert "RATE_NUMERATOR" not in render_stream_encoder()["coil_stream.h"]


@pytest.mark.parametrize("kwargs, option", [
    (dict(prefix="9lives"), "--prefix"),
    (dict(prefix="a-b"), "--prefix"),
    (dict(prefix="_x"), "--prefix"),
    (dict(samples_per_frame=0), "--samples-per-frame"),
    (dict(samples_per_frame=511), "--samples-per-frame"),
    (dict(blocks=6), "--blocks"),
    (dict(blocks=256), "--blocks"),
    (dict(event_slots=1), "--event-slots"),
])
def test_bad_options_name_the_option(kwargs, option):
    with pytest.raises(InputError) as err:
        render_stream_encoder(**kwargs)
    assert err.value.source == option


def _app() -> typer.Typer:
    app = typer.Typer()
    app.command()(firmware_stream)
    return app


def test_command_writes_both_files(tmp_path):
    out = tmp_path / "gen" / "fw"
    r = runner.invoke(_app(), [str(out), "--prefix", "valve", "--samples-per-frame", "32",
                               "--board", "lab-m32-zener", "--crc-table"])
    assert r.exit_code == 0, r.output
    assert sorted(p.name for p in out.iterdir()) == ["valve_stream.c", "valve_stream.h"]
    assert (out / "valve_stream.h").read_text() == render_stream_encoder(
        "valve", samples_per_frame=32, crc_table=True,
        board=load_board(BOARDS / "lab-m32-zener.toml"))["valve_stream.h"]
    assert "wrote" in r.stderr and r.stdout == ""


def test_command_bad_input_is_one_line_exit_2(tmp_path):
    r = runner.invoke(_app(), [str(tmp_path), "--blocks", "3"])
    assert r.exit_code == 2
    assert r.stderr.strip().splitlines() == ["coildrive: --blocks: 3 is not a power of two (2, 4, 8, ... 128)"]
    blocker = tmp_path / "file"
    blocker.write_text("x")
    r = runner.invoke(_app(), [str(blocker)])
    assert r.exit_code == 2 and "is not a folder" in r.stderr
    assert list(tmp_path.iterdir()) == [blocker], "nothing written on bad input"


def _small_board(tmp_path, **keys) -> str:
    """The tiny 8-bit board file with extra top-level keys (ram, flash)."""
    text = (BOARDS / "tiny-8bit-diode.toml").read_text()
    extra = "".join(f"{k} = {v!r}\n".replace("'", '"') for k, v in keys.items())
    path = tmp_path / "small.toml"
    path.write_text(extra + text)
    return str(path)


def test_board_ram_and_flash_keys(tmp_path):
    board = load_board(_small_board(tmp_path, ram="2 KiB", flash="32 kB"))
    assert (board.ram, board.flash) == (2048, 32000)
    assert load_board(_small_board(tmp_path, ram=1024)).ram == 1024
    assert load_board(BOARDS / "tiny-8bit-diode.toml").ram == 0, "not given: no check"
    for bad in ("2 KB", "1.5 B", "-3"):
        with pytest.raises(InputError) as err:
            load_board(_small_board(tmp_path, ram=bad))
        assert err.value.key == "ram" and "KiB" in err.value.message


def test_memory_use_of_the_default_encoder():
    # The measured figure: the default encoder takes 1,544 bytes of an AVR's RAM
    # (tests/test_cross_compile.py checks every figure against avr-nm/arm-none-eabi-nm).
    avr, arm = memory_use(StreamView())
    assert (avr.family, avr.ram) == ("8-bit AVR", 1544)
    assert arm.ram >= avr.ram, "Cortex-M pads the blocks and events to 4 bytes"
    table_avr, table_arm = memory_use(StreamView(crc_table=True))
    assert table_avr.ram == avr.ram + 512 and table_arm.ram == arm.ram, "const is RAM on AVR only"
    assert table_avr.flash == avr.flash + 512 and table_arm.flash == arm.flash + 512


def test_link_rate_per_sample():
    # 64 codes: 3 header + 4 index + 128 codes + 2 CRC = 137 bytes, COBS adds 1, delimiter 1.
    assert wire_bytes_per_sample(64) == pytest.approx(139 / 64)
    assert wire_bytes_per_sample(1) == 13.0, "11 raw bytes, COBS 12, delimiter 13"


def test_command_prints_memory_and_warns_near_the_board_limit(tmp_path):
    board = _small_board(tmp_path, ram="2 KiB", flash="32 KiB")
    r = runner.invoke(_app(), [str(tmp_path / "out"), "--board", board])
    assert r.exit_code == 0, r.output
    lines = r.stderr.splitlines()
    assert lines[2].startswith("memory: 8-bit AVR RAM 1,544 B, flash ")
    # Cortex-M layout 1,616 B is 78.9 % of 2,048 B: above 75 %.
    assert "warning: the stream encoder takes 1,616 B of the board's 2,048 B ram (78.9 %" in r.stderr
    # 15 kS/s x 139/64 B = 32,578 B/s against 115200 baud / 10 bits = 11,520 B/s.
    assert "needs 32,578 B/s" in r.stderr and "carries 11,520 B/s" in r.stderr
    r = runner.invoke(_app(), [str(tmp_path / "out2"), "--board", board, "--blocks", "4"])
    assert r.exit_code == 0 and "above 75 %" not in r.stderr


def test_command_refuses_an_encoder_that_does_not_fit(tmp_path):
    board = _small_board(tmp_path, ram="2 KiB")
    r = runner.invoke(_app(), [str(tmp_path / "out"), "--board", board, "--crc-table"])
    assert r.exit_code == 2
    assert r.stderr.strip().splitlines() == [
        f"coildrive: {board}: ram: the stream encoder needs 2,056 B of the board's 2,048 B ram "
        "(100.4 %, 8-bit AVR): use --crc-bitwise, fewer --blocks or a smaller --samples-per-frame"]
    assert not (tmp_path / "out").exists(), "nothing written"
    r = runner.invoke(_app(), [str(tmp_path / "out"), "--board", _small_board(tmp_path, flash="2 KiB")])
    assert r.exit_code == 2 and ": flash: the stream encoder needs 2,750 B" in r.stderr
