"""Message codecs for rigs, with no I/O: msgpack frames (ZeroMQ) and text lines (serial).

Both encodings carry one message set and decode into the same values:

  requests (rig -> rigloop)   OpenSession, TrialReport, CloseSession, QueryState, Ping
  replies  (rigloop -> rig)   DecisionReply, Ack, StateReply, Pong, ErrorReply

  messages.py  the values, limits, ERROR_CODES, MessageError
  fields.py    each message's fields (name, serial key, kind), shared by both codecs
  packed.py    msgpack: decode_request / encode_reply (and the rig's side)
  text.py      line syntax: escaping, scalars, checksum placement
  lines.py     line <-> message for every verb
  decoder.py   LineDecoder: feed bytes, iterate requests or per-line errors
  checksum.py  CRC-16/CCITT-FALSE

The protocol is documented in docs/protocol.md.
"""

from .checksum import crc16, crc16_hex
from .decoder import LineDecoder, LineStatistics
from .lines import (
    format_reply_line,
    format_request_line,
    parse_reply_line,
    parse_request_line,
    serial_key,
)
from .messages import (
    ERROR_CODES,
    MAX_FRAME,
    MAX_LINE,
    REPLY_TYPES,
    REQUEST_TYPES,
    Ack,
    CloseSession,
    DecisionReply,
    ErrorReply,
    MessageError,
    OpenSession,
    Ping,
    Pong,
    QueryState,
    Reply,
    Request,
    RequestId,
    StateReply,
    TrialReport,
)
from .packed import decode_reply, decode_request, encode_reply, encode_request

__all__ = [
    "ERROR_CODES",
    "MAX_FRAME",
    "MAX_LINE",
    "REPLY_TYPES",
    "REQUEST_TYPES",
    "Ack",
    "CloseSession",
    "DecisionReply",
    "ErrorReply",
    "LineDecoder",
    "LineStatistics",
    "MessageError",
    "OpenSession",
    "Ping",
    "Pong",
    "QueryState",
    "Reply",
    "Request",
    "RequestId",
    "StateReply",
    "TrialReport",
    "crc16",
    "crc16_hex",
    "decode_reply",
    "decode_request",
    "encode_reply",
    "encode_request",
    "format_reply_line",
    "format_request_line",
    "parse_reply_line",
    "parse_request_line",
    "serial_key",
]
