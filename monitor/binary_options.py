"""Command-line options for binary frames and the framer/decoder pair they describe.

Imported by the CLI at startup (through monitor.commands.common): numpy and
the decoder are imported inside the functions.

A binary stream is described by --framing (cobs, slip or sync), --layout (the
payload as a Python struct format), --fields (one name per value, units in
brackets), --crc, and the device time and counter fields named by the same
--time-column and --counter-column options text streams use, with
--time-unit, --time-bits and --counter-bits for their width and wrap. The
simulated board (`sim://?format=cobs`) describes itself: its layout, fields,
CRC, time and counter need no options.
"""

from __future__ import annotations

import argparse
from dataclasses import dataclass
from typing import Any

from monitor.crc import CRC_NAMES
from monitor.errors import UserError
from monitor.framing_binary import DEFAULT_SYNC_WORD, FRAMINGS

BINARY_ONLY = ("layout", "fields", "crc", "sync_word")


def sync_word(text: str) -> bytes:
    """argparse type: the sync word as hex digits, e.g. A55A."""
    try:
        value = bytes.fromhex(text.replace("0x", "").replace(" ", ""))
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not hex bytes (e.g. A55A)") from None
    if not 1 <= len(value) <= 8:
        raise argparse.ArgumentTypeError(f"{text!r} must be 1 to 8 bytes of hex (e.g. A55A)")
    return value


def add_binary_options(parser: argparse.ArgumentParser) -> None:
    """--framing and what a binary frame holds; the device time options serve text too."""
    parser.add_argument("--framing", choices=FRAMINGS, default=None,
                        help="how frames are marked: text lines (default), cobs (zero-"
                             "delimited COBS), slip (RFC 1055) or sync (sync word + length)")
    parser.add_argument("--layout", metavar="STRUCT",
                        help="binary payload as a Python struct format with explicit byte "
                             "order, e.g. '<HI8f' (uint16, uint32, 8 float32, little-endian)")
    parser.add_argument("--fields", metavar="NAMES",
                        help="comma-separated names of the --layout values, units in "
                             "brackets, e.g. seq,t_us,load[kg],current[A],...")
    parser.add_argument("--crc", choices=CRC_NAMES, default=None,
                        help="checksum after each binary payload (default none); "
                             "frames that fail it are counted bad")
    parser.add_argument("--sync-word", type=sync_word, metavar="HEX", default=None,
                        help=f"sync word of --framing sync (default "
                             f"{DEFAULT_SYNC_WORD.hex().upper()}); a one-byte length follows it")
    parser.add_argument("--time-unit", choices=("s", "ms", "us"), default=None,
                        help="unit of the --time-column values (default s)")
    parser.add_argument("--time-bits", type=int, choices=(16, 32), default=None,
                        help="the device time wraps at 2^BITS ticks (binary default: the "
                             "field's width; text default: no wrap)")
    parser.add_argument("--counter-bits", type=int, choices=(8, 16, 32), default=None,
                        help="the counter wraps at 2^BITS (binary default: the field's "
                             "width; text default: no wrap)")


@dataclass(frozen=True)
class BinaryFraming:
    """A validated binary framer and decoder, made before the port opens."""

    framing: str
    framer: Any
    decoder: Any

    def source(self, byte_source: Any, declared_rate: float | None) -> Any:
        """The FramedSource that reads `byte_source` through this framer and decoder."""
        from monitor.pipeline import FramedSource

        return FramedSource(byte_source, self.framer, self.decoder, declared_rate)


def _sim_options(source: str) -> Any:
    from monitor.sim.protocol_sim import SimOptions

    try:
        return SimOptions(source)
    except ValueError as exc:
        raise UserError(f"{str(exc).rstrip('.')}.") from None


def binary_framing(args: argparse.Namespace, source: Any) -> BinaryFraming | None:
    """The binary framer and decoder `args` ask for, or None for text lines.

    source: the SOURCE string (a sim:// URL says its own format) or a block source.
    Raises UserError with one sentence naming the option to fix.
    """
    framing = getattr(args, "framing", None)
    sim = _sim_options(source) if isinstance(source, str) and source.startswith("sim://") \
        else None
    if sim is not None:
        if framing is not None and framing != sim.format:
            raise UserError(f"--framing {framing} disagrees with format={sim.format} in the "
                            f"sim:// URL; give only one of them.")
        framing = sim.format
    if framing in (None, "text"):
        given = [name for name in BINARY_ONLY if getattr(args, name, None) is not None]
        if given:
            option = "--" + given[0].replace("_", "-")
            raise UserError(f"{option} describes binary frames; add --framing cobs, slip "
                            f"or sync, or leave {option} out for text lines.")
        return None
    if sim is None or getattr(args, "layout", None) is not None:
        _check_field_options(args)
    options = _decoder_options(args, sim)
    from monitor.decoding_binary import BinaryDecoder
    from monitor.framing_binary import make_framer

    try:
        decoder = BinaryDecoder(**options)
        framer = make_framer(framing, frame_length=decoder.frame_size, check=decoder.crc_ok,
                             sync_word=getattr(args, "sync_word", None) or DEFAULT_SYNC_WORD)
    except ValueError as exc:
        raise UserError(f"cannot decode {framing} frames: {str(exc).rstrip('.')}.") from None
    from monitor.ring import MAX_CHANNELS

    width = len(decoder.schema.channels)
    if width > MAX_CHANNELS:
        raise UserError(f"--layout holds {width} channel values, more than the {MAX_CHANNELS} "
                        f"channels a stream may have; describe fewer.")
    return BinaryFraming(framing, framer, decoder)


def text_time_options(args: argparse.Namespace) -> dict[str, Any]:
    """TextDecoder's clock and sequence when --time-unit, --time-bits or --counter-bits
    say how the text columns count (else None: seconds, no wrap, as before)."""
    from monitor.devicetime import DeviceClock, SequenceCounter

    _check_field_options(args)
    unit, time_bits = getattr(args, "time_unit", None), getattr(args, "time_bits", None)
    counter_bits = getattr(args, "counter_bits", None)
    return {"clock": DeviceClock(unit or "s", time_bits) if unit or time_bits else None,
            "sequence": SequenceCounter(counter_bits) if counter_bits else None}


def _check_field_options(args: argparse.Namespace) -> None:
    """UserError for --time-unit/--time-bits without --time-column (same for the counter)."""
    pairs = (("time_unit", "time_column"), ("time_bits", "time_column"),
             ("counter_bits", "counter_column"))
    for option, needs in pairs:
        if getattr(args, option, None) is not None and getattr(args, needs, None) is None:
            flag, column = "--" + option.replace("_", "-"), "--" + needs.replace("_", "-")
            raise UserError(f"{flag} needs {column} naming the column it describes.")


def _decoder_options(args: argparse.Namespace, sim: Any) -> dict[str, Any]:
    """BinaryDecoder keyword arguments from the options (and the sim board's defaults)."""
    layout = getattr(args, "layout", None)
    fields_text = getattr(args, "fields", None)
    time_field = getattr(args, "time_column", None)
    counter_field = getattr(args, "counter_column", None)
    time_unit = getattr(args, "time_unit", None)
    crc = getattr(args, "crc", None)
    if sim is not None and layout is None:
        from monitor.sim import binary as sim_binary

        layout, fields = sim_binary.sim_layout(sim.channels)
        time_field = time_field or sim_binary.SIM_TIME_FIELD
        time_unit = time_unit or sim_binary.SIM_TIME_UNIT
        counter_field = counter_field or sim_binary.SIM_COUNTER_FIELD
        crc = crc or sim.crc
    else:
        if layout is None:
            raise UserError("binary frames need --layout, the payload as a struct format "
                            "such as '<HI8f'.")
        if not fields_text:
            raise UserError("binary frames need --fields, one comma-separated name per "
                            f"value of --layout {layout}.")
        fields = [name.strip() for name in fields_text.split(",")]
    return {
        "layout": layout, "fields": fields, "crc": crc or "none",
        "time_field": time_field, "time_unit": time_unit,
        "time_bits": getattr(args, "time_bits", None),
        "counter_field": counter_field, "counter_bits": getattr(args, "counter_bits", None),
    }
