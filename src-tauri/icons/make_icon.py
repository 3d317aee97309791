"""Draws fieldcage's app icon (our own design): a mesh cage seen from above on
dark ink, with a leaf inside. Writes icons/icon.png as an RGBA PNG with the
standard library only. Run: python3 icons/make_icon.py"""
import math
import struct
import zlib
from pathlib import Path

SIZE = 512
INK = (18, 18, 18, 255)
PAPER = (255, 253, 244, 255)
MOSS = (47, 93, 30, 255)
LEAF = (120, 170, 60, 255)
CLEAR = (0, 0, 0, 0)


def pixel(x, y):
    cx = cy = SIZE / 2
    # Rounded-square tile.
    r = 96
    dx = max(abs(x - cx) - (SIZE / 2 - r), 0)
    dy = max(abs(y - cy) - (SIZE / 2 - r), 0)
    if dx * dx + dy * dy > r * r:
        return CLEAR
    d = math.hypot(x - cx, y - cy)
    # Cage rim.
    if 176 <= d <= 196:
        return PAPER
    if d < 176:
        # A leaf: the intersection of two discs.
        in_leaf = math.hypot(x - (cx - 40), y - (cy + 40)) < 110 and math.hypot(x - (cx + 40), y - (cy - 40)) < 110
        midrib = abs((x - cx) - (y - cy)) < 5 and d < 150
        if in_leaf and not midrib:
            return LEAF
        # Mesh.
        if (x % 32) < 4 or (y % 32) < 4:
            return PAPER
        return MOSS
    return INK


def png(width, height, rows):
    def chunk(kind, data):
        return struct.pack(">I", len(data)) + kind + data + struct.pack(">I", zlib.crc32(kind + data) & 0xFFFFFFFF)

    raw = b"".join(b"\x00" + bytes(c for px in row for c in px) for row in rows)
    return (
        b"\x89PNG\r\n\x1a\n"
        + chunk(b"IHDR", struct.pack(">IIBBBBB", width, height, 8, 6, 0, 0, 0))
        + chunk(b"IDAT", zlib.compress(raw, 9))
        + chunk(b"IEND", b"")
    )


rows = [[pixel(x + 0.5, y + 0.5) for x in range(SIZE)] for y in range(SIZE)]
Path(__file__).with_name("icon.png").write_bytes(png(SIZE, SIZE, rows))
