"""The plot's own colours: a dark slate ground, raw traces faint and thin, filtered strong.

Colours are RGBA floats in 0..1. Raw colours are the channel hue pre-mixed
toward the panel ground (opaque, so a pixel read back is exactly that colour
and the trace stays faint without alpha blending).
"""

from __future__ import annotations

Color = tuple[float, float, float, float]


def _hex(code: str) -> Color:
    code = code.lstrip("#")
    r, g, b = (int(code[i:i + 2], 16) / 255.0 for i in (0, 2, 4))
    return (r, g, b, 1.0)


def mix(a: Color, b: Color, amount: float) -> Color:
    """Colour `amount` (0..1) of the way from `a` to `b`, opaque."""
    return tuple(a[i] + (b[i] - a[i]) * amount for i in range(3)) + (1.0,)  # type: ignore[return-value]


PANEL = _hex("#161b24")         # the canvas and its plot areas
FRAME = _hex("#39475a")         # plot area outlines
GRID = _hex("#263040")          # grid lines
TEXT = _hex("#a9b6c8")          # tick labels and titles
READOUT = _hex("#f1e9d2")       # cursor readout and cursor line
CUTOFF = _hex("#f1e9d2")        # cutoff / centre markers
NYQUIST = _hex("#ff6b5e")       # the Nyquist limit
PROTOTYPE = _hex("#b9a6ff")     # analog prototype response overlay
GUIDE = _hex("#5b6b80")         # -3 dB guide

# Filtered (strong) colour per channel, in channel order; the list repeats.
TRACE_COLOURS: tuple[Color, ...] = tuple(_hex(c) for c in (
    "#ff9b42",  # ember
    "#34d1bf",  # lagoon
    "#e86bd8",  # orchid
    "#b8e34a",  # moss
    "#5fa8ff",  # glacier
    "#ffd447",  # brass
    "#ff6f91",  # coral
    "#8cf5c0",  # spearmint
))

RAW_WIDTH = 1.0        # pixels
FILTERED_WIDTH = 2.0   # pixels
RAW_MIX = 0.55         # how far raw colours are pulled toward the panel ground


def filtered_colour(channel: int) -> Color:
    """Strong colour of channel `channel`'s filtered trace."""
    return TRACE_COLOURS[channel % len(TRACE_COLOURS)]


def raw_colour(channel: int) -> Color:
    """Faint colour of channel `channel`'s raw trace (opaque, pre-mixed with PANEL)."""
    return mix(filtered_colour(channel), PANEL, RAW_MIX)


def to_bytes(colour: Color) -> tuple[int, int, int]:
    """The 8-bit RGB a renderer writes for `colour` (for reading pixels back)."""
    return tuple(int(round(c * 255)) for c in colour[:3])  # type: ignore[return-value]
