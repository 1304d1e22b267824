"""`tunetrace ports`: the serial ports on this machine, from pyserial's port listing."""

from __future__ import annotations

import argparse
import json


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--json", action="store_true", help="print a JSON list")
    parser.add_argument("--all", action="store_true",
                        help="include ports without a description (legacy ttyS* ports)")


def port_rows(include_all: bool = False) -> list[dict[str, str]]:
    """One dict per port: device, description, usb_id (VID:PID), serial, maker, location."""
    from serial.tools import list_ports

    rows = []
    for port in sorted(list_ports.comports(include_links=True), key=lambda p: p.device):
        if not include_all and port.description in ("", "n/a") and port.vid is None:
            continue
        rows.append({
            "device": port.device,
            "description": "" if port.description == "n/a" else port.description,
            "usb_id": f"{port.vid:04X}:{port.pid:04X}" if port.vid is not None else "",
            "serial": port.serial_number or "",
            "maker": port.manufacturer or "",
            "location": port.location or "",
        })
    return rows


def format_table(rows: list[dict[str, str]]) -> str:
    """The rows as an aligned text table."""
    heads = {"device": "PORT", "description": "DESCRIPTION", "usb_id": "USB ID",
             "serial": "SERIAL", "maker": "MAKER", "location": "LOCATION"}
    widths = {k: max(len(h), *(len(r[k]) for r in rows)) for k, h in heads.items()}
    lines = ["  ".join(h.ljust(widths[k]) for k, h in heads.items()).rstrip()]
    for r in rows:
        lines.append("  ".join(r[k].ljust(widths[k]) for k in heads).rstrip())
    return "\n".join(lines)


def run(args: argparse.Namespace) -> int:
    rows = port_rows(args.all)
    if args.json:
        print(json.dumps(rows, indent=2))
    elif rows:
        print(format_table(rows))
    else:
        print("No serial ports found. Plug the board in (or try --all); "
              "sim:// runs the simulated board.")
    return 0
