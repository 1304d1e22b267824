"""`tunetrace ports`: pyserial's port listing, shown as a table or JSON."""

from __future__ import annotations

import json
import subprocess
import sys

from serial.tools.list_ports_common import ListPortInfo

from monitor.commands import ports


def test_rows_from_real_listing_are_complete():
    rows = ports.port_rows(include_all=True)
    for row in rows:
        assert set(row) == {"device", "description", "usb_id", "serial", "maker", "location"}


def test_table_shows_usb_ids():
    info = ListPortInfo("/dev/ttyACM7", skip_link_detection=True)
    info.vid, info.pid = 0x2E8A, 0x000A
    info.description = "Weigh bridge ADC"
    info.serial_number = "E66118"
    row = {"device": info.device, "description": info.description,
           "usb_id": f"{info.vid:04X}:{info.pid:04X}", "serial": info.serial_number,
           "maker": "", "location": "1-1.2:1.0"}
    table = ports.format_table([row])
    header, line = table.splitlines()
    assert header.split()[:2] == ["PORT", "DESCRIPTION"]
    assert "2E8A:000A" in line and "/dev/ttyACM7" in line and "E66118" in line


def test_cli_json_is_a_list():
    proc = subprocess.run([sys.executable, "-m", "monitor", "ports", "--json", "--all"],
                          capture_output=True, text=True, timeout=30)
    assert proc.returncode == 0
    assert isinstance(json.loads(proc.stdout), list)
