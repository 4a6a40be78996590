"""Crafted image files for the hostile-input tests: headers that declare more than the file holds.

Each maker writes a small file whose header claims a huge image (a decoder that trusts it would allocate the
declared size). Layouts follow the formats' published specifications: PNG (ISO/IEC 15948, IHDR), baseline
TIFF 6.0 (one IFD), JPEG (ITU-T T.81, SOF0 frame header), BMP (BITMAPINFOHEADER).
"""

from __future__ import annotations

import struct
import zlib
from pathlib import Path


def _chunk(kind: bytes, data: bytes) -> bytes:
    return struct.pack(">I", len(data)) + kind + data + struct.pack(">I", zlib.crc32(kind + data) & 0xFFFFFFFF)


def png_bomb(path: Path, width: int, height: int, *, bit_depth: int = 8, colour_type: int = 0,
             rows: int = 64) -> Path:
    """A valid PNG start (IHDR + a few compressed zero rows) declaring ``width`` x ``height``."""
    ihdr = struct.pack(">IIBBBBB", width, height, bit_depth, colour_type, 0, 0, 0)
    channels = {0: 1, 2: 3, 4: 2, 6: 4}[colour_type]
    row = b"\0" + b"\0" * (width * channels * bit_depth // 8)
    comp = zlib.compressobj(9)
    data = b"".join(comp.compress(row) for _ in range(rows)) + comp.flush(zlib.Z_SYNC_FLUSH)
    path.write_bytes(b"\x89PNG\r\n\x1a\n" + _chunk(b"IHDR", ihdr) + _chunk(b"IDAT", data) + _chunk(b"IEND", b""))
    return path


def tiff_bomb(path: Path, width: int, height: int, *, bits: int = 8) -> Path:
    """A little-endian baseline TIFF with one strip of 16 bytes, declaring ``width`` x ``height``."""
    entries = [
        (256, 4, 1, width), (257, 4, 1, height), (258, 3, 1, bits), (259, 3, 1, 1), (262, 3, 1, 1),
        (273, 4, 1, 8), (277, 3, 1, 1), (278, 4, 1, height), (279, 4, 1, 16),
    ]
    ifd_offset = 8 + 16
    ifd = struct.pack("<H", len(entries))
    for tag, typ, count, value in entries:
        ifd += struct.pack("<HHI", tag, typ, count) + (struct.pack("<HH", value, 0) if typ == 3
                                                       else struct.pack("<I", value))
    ifd += struct.pack("<I", 0)
    path.write_bytes(b"II*\0" + struct.pack("<I", ifd_offset) + b"\0" * 16 + ifd)
    return path


def jpeg_bomb(path: Path, width: int, height: int) -> Path:
    """SOI, one quantisation table, an SOF0 frame header declaring ``width`` x ``height`` (grey), then EOI."""
    dqt = b"\xff\xdb" + struct.pack(">H", 67) + b"\x00" + bytes([1] * 64)
    sof = b"\xff\xc0" + struct.pack(">HBHHB", 11, 8, height, width, 1) + b"\x01\x11\x00"
    path.write_bytes(b"\xff\xd8" + dqt + sof + b"\xff\xd9")
    return path


def bmp_bomb(path: Path, width: int, height: int) -> Path:
    """A 24-bit BMP header declaring ``width`` x ``height`` followed by a few bytes of pixels."""
    pixels = b"\0" * 64
    info = struct.pack("<IiiHHIIiiII", 40, width, height, 1, 24, 0, 0, 2835, 2835, 0, 0)
    head = b"BM" + struct.pack("<IHHI", 14 + 40 + len(pixels), 0, 0, 54)
    path.write_bytes(head + info + pixels)
    return path
