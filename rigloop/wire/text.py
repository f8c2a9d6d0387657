"""Syntax of the serial line protocol: escaping, fields, scalars and the checksum.

A line is ``VERB key=value key=value ...`` in printable ASCII, optionally ending in
``*XXXX`` (CRC-16/CCITT-FALSE of every byte before the ``*``, 4 hex digits). A value is
bare (no spaces) or in double quotes (spaces allowed). In keys and values ``%XX``
stands for the byte 0xXX; the decoded bytes are UTF-8. A literal ``%``, ``"`` or ``*``
and any byte outside printable ASCII must be written that way. This module knows no
message types; ``lines.py`` maps verbs and keys to the message values.
"""

from __future__ import annotations

import math
import re
import string
from dataclasses import dataclass

from .checksum import crc16_hex
from .messages import INT_MAX, INT_MIN, MessageError, Scalar

_PRINT = {chr(c) for c in range(0x21, 0x7F)}
WHOLE_OK = frozenset(_PRINT - set('%"*'))  # a bare value
PART_OK = frozenset(WHOLE_OK - set(":,@|"))  # one part of a structured value
TEXT_OK = frozenset((_PRINT | {" "}) - set('%"*|'))  # inside quotes
KEY_OK = frozenset(string.ascii_letters + string.digits + "_-")  # one segment of a key

INT_RE = re.compile(r"[-+]?[0-9]{1,20}")
FLOAT_RE = re.compile(r"[-+]?(?:[0-9]{1,40}\.[0-9]{0,40}|\.[0-9]{1,40}|[0-9]{1,40})(?:[eE][-+]?[0-9]{1,3})?")
_VERB_RE = re.compile(r" *([A-Za-z]{1,16})")
_FIELD_RE = re.compile(r' +([A-Za-z0-9_.%-]{1,200})=("[^"]*"|[^ "]*)')
_ESC_RE = re.compile(r"%([0-9A-Fa-f]{2})")
NONFINITE_RE = re.compile(r"[-+]?(?:nan|inf|infinity)", re.IGNORECASE)  # how C and Python print them
_CHECK_RE = re.compile(rb"\*([0-9A-Fa-f]{4}) *\Z")


@dataclass(frozen=True, slots=True)
class Value:
    """One field's value as written: ``raw`` without its quotes, and whether quoted."""

    raw: str
    quoted: bool


# --------------------------------------------------------------------------- escaping


def esc(text: str, ok: frozenset[str]) -> str:
    """``text`` with every character outside ``ok`` written as %XX of its UTF-8 bytes."""
    if all(ch in ok for ch in text):
        return text
    out = []
    for ch in text:
        if ch in ok:
            out.append(ch)
        else:
            out.extend(f"%{b:02X}" for b in ch.encode("utf-8", "replace"))
    return "".join(out)


def unesc(raw: str, key: str) -> str:
    """Decode %XX escapes; a stray ``%`` or bytes that are not UTF-8 name ``key``."""
    if "%" not in raw:
        return raw
    out = bytearray()
    i = 0
    while i < len(raw):
        ch = raw[i]
        if ch == "%":
            m = _ESC_RE.match(raw, i)
            if not m:
                raise MessageError("bad_field", f"{key!r} has a '%' not followed by two hex digits", field=key)
            out.append(int(m.group(1), 16))
            i += 3
        else:
            out.append(ord(ch))
            i += 1
    try:
        return out.decode("utf-8")
    except UnicodeDecodeError:
        raise MessageError("bad_field", f"{key!r} decodes to bytes that are not UTF-8", field=key) from None


# --------------------------------------------------------------------------- lines


def split_line(line: bytes, *, require_checksum: bool, max_line: int) -> tuple[str, list[tuple[str, Value]]]:
    """One line (terminator optional) -> (upper-case verb, [(key as written, value)]).

    Checks, in order: length, printable ASCII, checksum, syntax. Raises MessageError.
    """
    line = bytes(line).rstrip(b"\r\n")
    if len(line) > max_line:
        raise MessageError("too_large", f"line is longer than {max_line} bytes; it was discarded")
    for col, b in enumerate(line, 1):
        if not 0x20 <= b < 0x7F:
            raise MessageError("bad_message", f"line holds byte 0x{b:02X} at column {col}; lines are printable ASCII")
    star = line.find(b"*")
    if star >= 0:
        m = _CHECK_RE.match(line, star)
        if not m:
            raise MessageError(
                "bad_message", f"'*' at column {star + 1} must start a 4-digit checksum at the end of the line (write a literal * as %2A)"
            )
        said, body = m.group(1).decode().upper(), line[:star]
        got = crc16_hex(body)
        if said != got:
            raise MessageError("checksum", f"checksum mismatch: the line says {said} but its bytes give {got}")
    elif require_checksum:
        raise MessageError("checksum", "line has no checksum; this port requires '*XXXX' (CRC-16/CCITT-FALSE) at the end")
    else:
        body = line
    text = body.decode("ascii")
    m = _VERB_RE.match(text)
    if not m:
        raise MessageError("bad_message", "a line must start with a verb such as PING or TRIAL")
    verb = m.group(1).upper()
    pos = m.end()
    fields = []
    while pos < len(text):
        m = _FIELD_RE.match(text, pos)
        if not m:
            if text[pos:].strip(" ") == "":
                break
            raise MessageError("bad_message", f"expected ' key=value' at column {pos + 1} after {verb}")
        raw = m.group(2)
        quoted = raw.startswith('"')
        fields.append((m.group(1), Value(raw[1:-1] if quoted else raw, quoted)))
        pos = m.end()
    return verb, fields


def join_line(verb: str, fields: list[tuple[str, str]], *, checksum: bool) -> bytes:
    """(verb, [(key, encoded value)]) -> the line with its checksum and ``\\n``."""
    body = " ".join([verb] + [f"{k}={v}" for k, v in fields]).encode("ascii")
    if checksum:
        body += b"*" + crc16_hex(body).encode("ascii")
    return body + b"\n"


# --------------------------------------------------------------------------- scalars


def fmt_float(x: float) -> str:
    """``repr`` of the float: the shortest text that reads back as the same float."""
    return repr(float(x))


def fmt_str(s: str) -> str:
    """A string field: bare when it has no spaces, else quoted; escapes as needed."""
    if s == "" or " " in s:
        return '"' + esc(s, TEXT_OK) + '"'
    return esc(s, WHOLE_OK)


def looks_typed(raw: str) -> bool:
    return raw in ("true", "false", "nil") or bool(INT_RE.fullmatch(raw) or FLOAT_RE.fullmatch(raw)
                                                   or NONFINITE_RE.fullmatch(raw))


def fmt_scalar(v: Scalar) -> str:
    """A self-typed value (ids, extras, state): true/false/nil, int, float repr, or a
    string, quoted when it would otherwise read as one of the others."""
    if v is None:
        return "nil"
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        return fmt_float(v)
    if looks_typed(v):
        return '"' + esc(v, TEXT_OK) + '"'
    return fmt_str(v)


def read_scalar(val: Value, key: str) -> Scalar:
    """Inverse of ``fmt_scalar``: the type is read from the text as written; quoted
    text is always a string."""
    raw = val.raw
    if val.quoted:
        return unesc(raw, key)
    if raw == "true":
        return True
    if raw == "false":
        return False
    if raw == "nil":
        return None
    if INT_RE.fullmatch(raw):
        n = int(raw)
        if not INT_MIN <= n <= INT_MAX:
            raise MessageError("bad_field", f"{key!r} must be a whole number in [-2**63, 2**64) (got {raw})", field=key)
        return n
    if FLOAT_RE.fullmatch(raw) or NONFINITE_RE.fullmatch(raw):
        return read_float(raw, key)
    return unesc(raw, key)


def read_float(raw: str, key: str) -> float:
    """A decimal number; NaN and the infinities are refused naming ``key`` (a string
    that reads like one is written escaped, e.g. ``%6Ean``)."""
    if NONFINITE_RE.fullmatch(raw):
        raise MessageError("bad_field", f"{key!r} must be a finite number; NaN and infinities are refused "
                                        f"(got {_short(raw)})", field=key)
    if not FLOAT_RE.fullmatch(raw):
        raise MessageError("bad_field", f"{key!r} must be a decimal number (got {_short(raw)})", field=key)
    x = float(raw)
    if not math.isfinite(x):
        raise MessageError("bad_field", f"{key!r} must be a finite number (got {_short(raw)})", field=key)
    return x


def read_int(raw: str, key: str) -> int:
    if not INT_RE.fullmatch(raw):
        raise MessageError("bad_field", f"{key!r} must be a whole number (got {_short(raw)})", field=key)
    return int(raw)


def read_flag(raw: str, key: str) -> bool:
    if raw not in ("0", "1"):
        raise MessageError("bad_field", f"{key!r} must be 0 or 1 (got {_short(raw)})", field=key)
    return raw == "1"


def _short(raw: str, limit: int = 24) -> str:
    return repr(raw) if len(raw) <= limit else repr(raw[: limit - 3] + "...")
