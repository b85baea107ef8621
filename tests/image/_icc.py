"""Build a minimal ICC v2 matrix/TRC RGB profile for tests (ICC.1:2001-04 tag layout).

Used to embed a Display P3 profile in a test photo; the primaries are those of
SMPTE EG 432-1 (P3) with the D65 white, the tone curve a pure gamma so the
oracle can reproduce it exactly.
"""

from __future__ import annotations

import struct

import numpy as np


def _s15f16(v: float) -> bytes:
    return struct.pack(">i", int(round(v * 65536)))


def _xyz_tag(xyz) -> bytes:
    return b"XYZ " + b"\0" * 4 + b"".join(_s15f16(v) for v in xyz)


def _curv_gamma(gamma: float) -> bytes:
    return b"curv" + b"\0" * 4 + struct.pack(">I", 1) + struct.pack(">H", int(round(gamma * 256))) + b"\0\0"


def _desc(text: str) -> bytes:
    ascii_ = text.encode("ascii") + b"\0"
    body = b"desc" + b"\0" * 4 + struct.pack(">I", len(ascii_)) + ascii_
    body += struct.pack(">II", 0, 0) + struct.pack(">HB", 0, 0) + b"\0" * 67
    return body


def _text(text: str) -> bytes:
    return b"text" + b"\0" * 4 + text.encode("ascii") + b"\0"


def rgb_matrix_profile(name: str, primaries_xy, white_xy, gamma: float) -> bytes:
    """ICC v2 display profile bytes for RGB primaries (xy), white (xy) and a gamma TRC."""
    def xy_to_xyz(x, y):
        return np.array([x / y, 1.0, (1 - x - y) / y])

    p = np.stack([xy_to_xyz(*xy) for xy in primaries_xy], axis=1)
    w = xy_to_xyz(*white_xy)
    m = p * np.linalg.solve(p, w)  # columns: XYZ of R, G, B at full drive (D65-relative)
    # Adapt to the D50 PCS with Bradford (ICC.1 Annex E), as matrix profiles store it.
    brad = np.array([[0.8951, 0.2664, -0.1614], [-0.7502, 1.7135, 0.0367], [0.0389, -0.0685, 1.0296]])
    d50 = np.array([0.9642, 1.0, 0.8249])
    cat = np.linalg.inv(brad) @ np.diag((brad @ d50) / (brad @ w)) @ brad
    m50 = cat @ m
    tags = [
        (b"desc", _desc(name)),
        (b"cprt", _text("test profile, no rights reserved")),
        (b"wtpt", _xyz_tag(d50)),
        (b"rXYZ", _xyz_tag(m50[:, 0])),
        (b"gXYZ", _xyz_tag(m50[:, 1])),
        (b"bXYZ", _xyz_tag(m50[:, 2])),
        (b"rTRC", _curv_gamma(gamma)),
        (b"gTRC", _curv_gamma(gamma)),
        (b"bTRC", _curv_gamma(gamma)),
    ]
    offset = 128 + 4 + 12 * len(tags)
    table = b""
    data = b""
    for sig, body in tags:
        while (offset + len(data)) % 4:
            data += b"\0"
        table += sig + struct.pack(">II", offset + len(data), len(body))
        data += body
    size = offset + len(data)
    header = struct.pack(">I", size) + b"none" + bytes([2, 0x10, 0, 0]) + b"mntr" + b"RGB " + b"XYZ "
    header += b"\0" * 12 + b"acsp" + b"\0" * 4 + b"\0" * 4 + b"\0" * 8 + b"\0" * 8 + b"\0" * 4
    header += _s15f16(0.9642) + _s15f16(1.0) + _s15f16(0.8249) + b"\0" * 4
    header = header.ljust(128, b"\0")
    return header + struct.pack(">I", len(tags)) + table + data


P3_PRIMARIES_XY = ((0.680, 0.320), (0.265, 0.690), (0.150, 0.060))
"""SMPTE EG 432-1:2010 P3 primaries (as Display P3 uses them)."""
D65_XY = (0.3127, 0.3290)
"""D65 white chromaticity, CIE 015:2018 (four decimals, as IEC 61966-2-1 uses)."""
