"""Is this serial capture readable text? Scoring what a line setting turned the bytes into.

At the wrong baud rate or parity a station's text arrives as noise: bytes above 0x7F, control
characters, no line ends. ``readability`` scores a sample so ``leakfleet capture --try`` can
rank the settings it tried (a hint, shown with its numbers, never silently applied).
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["COMMON_SETTINGS", "Readability", "readability"]

#: (baud rate, byte size, parity, stop bits) in the order they are tried: the usual defaults
#: of industrial instruments first (common practice)
COMMON_SETTINGS: tuple[tuple[int, int, str, float], ...] = (
    (9600, 8, "N", 1), (19200, 8, "N", 1), (38400, 8, "N", 1), (57600, 8, "N", 1),
    (115200, 8, "N", 1), (4800, 8, "N", 1), (2400, 8, "N", 1), (1200, 8, "N", 1),
    (9600, 7, "E", 1), (19200, 7, "E", 1), (9600, 8, "E", 1), (19200, 8, "E", 1),
)  # fmt: skip

_TEXT = set(range(0x20, 0x7F)) | {0x09, 0x0A, 0x0D}
_FRAMING = {0x02, 0x03, 0x04, 0x06, 0x15}  # STX, ETX, EOT, ACK, NAK: framing, not noise


@dataclass(frozen=True, slots=True)
class Readability:
    bytes: int
    text_share: float  # printable ASCII, tab, CR, LF and framing bytes / all bytes
    line_ends: int
    score: float  # 0 (noise or nothing) .. 1 (clean text with lines)

    @property
    def verdict(self) -> str:
        if self.bytes == 0:
            return "silent"
        if self.score >= 0.9:
            return "readable"
        if self.score >= 0.6:
            return "mostly readable"
        return "noise"


def readability(data: bytes) -> Readability:
    if not data:
        return Readability(0, 0.0, 0, 0.0)
    good = sum(1 for b in data if b in _TEXT or b in _FRAMING)
    share = good / len(data)
    ends = data.count(b"\n") + data.count(b"\r") - data.count(b"\r\n")
    # text without a single line end in a long sample is suspect (wrong settings often give
    # printable bytes by chance, but rarely a regular line end)
    line_factor = 1.0 if ends or len(data) < 80 else 0.7
    return Readability(len(data), share, ends, share * line_factor)
