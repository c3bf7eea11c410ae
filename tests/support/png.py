"""PNG facts read by hand, per the PNG specification (W3C PNG 2nd ed. / ISO/IEC 15948; also
RFC 2083): an 8-byte signature (§5.2), then the IHDR chunk whose data start with width and
height as 4-byte big-endian integers (§11.2.2)."""

from __future__ import annotations

import struct

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"


def png_size(data: bytes) -> tuple[int, int]:
    """Width and height from the IHDR chunk, read by hand."""
    assert data[:8] == PNG_SIGNATURE
    length, kind = struct.unpack(">I4s", data[8:16])
    assert kind == b"IHDR" and length == 13
    width, height = struct.unpack(">II", data[16:24])
    return width, height
