"""Budgets of what a chain file (or any ChainSpec) may ask for, each derived below.

A chain file comes from a user and is read in full before anything runs, so every
size that the file itself claims (its length, its number of stages, the channel names
it lists) has a limit here; a file beyond one is refused in one sentence naming the
limit. Window lengths and the memory of stage histories are budgeted where they are
kept (filters.stages); value ranges of parameters in filters.checks.
"""

from __future__ import annotations

from typing import Any

# Stages in one chain. A board streams up to a few dozen channels and a channel runs a
# handful of stages (median, notch, low-pass, gain): 64 channels x 4 stages = 256.
# Designing the costliest stage (an order-10 band-pass by zoh, about 30 ms here) 256
# times bounds the time to read any file at a few seconds.
MAX_STAGES = 256

# Characters of chain-file text. MAX_STAGES stages of about 4000 characters each (a
# dozen keys and a channels list naming some 300 channels) is 1 million; tomllib reads
# that in well under 2 s.
MAX_CHAIN_CHARS = 1_000_000

# Channels of one stream, and distinct channel names a chain may name. The widest text
# line is 4096 bytes (monitor.framing), at most 2048 one-digit columns; at 4096 channels
# the default ring budget (monitor.ring, 256 MiB) still keeps 4095 samples of history,
# about the fewest the views can use (the plot's 4096 pixel columns).
MAX_CHANNELS = 4096

# Characters of a value echoed in an error message: enough to recognise a name or
# number, short enough that a 50 MB channel name still gives a one-line sentence.
ECHO_CHARS = 40


def shown(value: Any, limit: int = ECHO_CHARS, quote: str = '"') -> str:
    """`value` as text for a message, at most `limit` characters (an ellipsis marks a cut),
    control characters and line breaks escaped so the message stays one line; strings
    between `quote` marks (TOML's double quotes by default)."""
    if isinstance(value, bool):
        text = "true" if value else "false"
    elif isinstance(value, str):
        text = quote + "".join(c if c.isprintable() else f"\\u{ord(c):04x}"
                               for c in value[:limit + 1]) + quote
    elif isinstance(value, int):
        text = str(value) if value.bit_length() <= 4 * limit else (
            f"an integer of {value.bit_length()} bits")
    elif isinstance(value, float):
        text = repr(value)
    elif isinstance(value, dict):
        text = "a table"
    elif isinstance(value, list | tuple):
        flat = all(isinstance(v, str | int | float) for v in value[:4])
        text = ("[" + ", ".join(shown(v, limit, quote) for v in value[:4])
                + (", ..." if len(value) > 4 else "") + "]") if flat else "a list"
    else:
        text = type(value).__name__
    return text if len(text) <= limit else text[:limit - 1] + "\u2026"


__all__ = ["ECHO_CHARS", "MAX_CHAIN_CHARS", "MAX_CHANNELS", "MAX_STAGES", "shown"]
