"""What a written figure file is: its format from its first bytes, a PNG's pixel size and brightness.

File signatures: PNG (ISO/IEC 15948, section 5.2: the 8 bytes 89 50 4E 47 0D 0A 1A 0A, then the IHDR
chunk with width and height as big-endian 32-bit integers at bytes 16–23), PDF (ISO 32000-1, 7.5.2:
the header "%PDF-"), SVG (W3C SVG 1.1: an XML document whose root element is <svg>).
"""

from __future__ import annotations

import struct
from pathlib import Path

import numpy as np

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"


def figure_format(path) -> str:
    """'png', 'pdf' or 'svg' from the file's bytes (not its name); 'unknown' otherwise."""
    head = Path(path).read_bytes()[:1024]
    if head.startswith(PNG_SIGNATURE):
        return "png"
    if head.startswith(b"%PDF-"):
        return "pdf"
    text = head.decode("utf-8", errors="replace").lstrip()
    if text.startswith("<?xml") and "<svg" in text or text.startswith("<svg"):
        return "svg"
    return "unknown"


def png_size(path) -> tuple[int, int]:
    """(width, height) in pixels from a PNG's IHDR chunk."""
    data = Path(path).read_bytes()[:24]
    assert data[:8] == PNG_SIGNATURE and data[12:16] == b"IHDR", f"{path}: not a PNG"
    return struct.unpack(">II", data[16:24])


def mean_brightness(path) -> float:
    """Mean of R, G and B over a PNG (0 black .. 1 white), read by matplotlib."""
    from matplotlib.image import imread

    return float(np.mean(imread(path)[..., :3]))


def assert_all_in_format(paths, fmt: str) -> None:
    """Every path has the suffix ``.fmt`` and holds that format."""
    paths = [Path(p) for p in paths]
    assert paths, "no figures"
    for p in paths:
        assert p.suffix == f".{fmt}", p
        assert figure_format(p) == fmt, (p, figure_format(p))
