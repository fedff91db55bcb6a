"""The bench link: stream coil current from a board over a serial line.

:mod:`.protocol` is the binary frame layout, the host encoder and the streaming decoder
(pure bytes in, messages out); :mod:`.textline` reads the plain text line mode of
printf-style firmware; :mod:`.framing` holds COBS and the CRC. The wire format is
specified in ``docs/protocol.md``.
"""

from .framing import CobsError, cobs_decode, cobs_encode, crc16
from .messages import (Command, Event, EventKind, Info, Message, Opcode, Reply, ReplyStatus,
                       Samples)
from .protocol import (DecoderStats, FrameDecoder, FrameEncoder, FrameType, encode_frame,
                       encode_message)
from .textline import TextLineDecoder, format_text

__all__ = [
    "CobsError", "cobs_decode", "cobs_encode", "crc16",
    "Command", "Event", "EventKind", "Info", "Message", "Opcode", "Reply", "ReplyStatus", "Samples",
    "DecoderStats", "FrameDecoder", "FrameEncoder", "FrameType", "encode_frame", "encode_message",
    "TextLineDecoder", "format_text",
]
