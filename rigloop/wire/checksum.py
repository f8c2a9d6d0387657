"""CRC-16/CCITT-FALSE, the serial line checksum.

Parameters (Rocksoft model): width 16, poly 0x1021, init 0xFFFF, not reflected,
xorout 0x0000; check value for ASCII "123456789" is 0x29B1. In Greg Cook's
"Catalogue of parametrised CRC algorithms" this is CRC-16/IBM-3740 (alias
CRC-16/CCITT-FALSE). ``binascii.crc_hqx`` computes exactly this CRC given init
0xFFFF. A microcontroller computes it bit by bit in a few lines (see docs/protocol.md):

    crc = 0xFFFF
    for each byte b:
        crc ^= b << 8
        repeat 8 times: crc = ((crc << 1) ^ 0x1021 if crc & 0x8000 else crc << 1) & 0xFFFF
"""

from __future__ import annotations

import binascii


def crc16(data: bytes) -> int:
    """CRC-16/CCITT-FALSE of ``data`` (0..0xFFFF)."""
    return binascii.crc_hqx(bytes(data), 0xFFFF)


def crc16_hex(data: bytes) -> str:
    """The checksum as the 4 upper-case hex digits written after ``*`` on a line."""
    return f"{crc16(data):04X}"
