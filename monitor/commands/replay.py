"""`tunetrace replay`."""

from __future__ import annotations

import argparse

from monitor.errors import UserError


def add_arguments(parser: argparse.ArgumentParser) -> None:
    pass


def run(args: argparse.Namespace) -> int:
    raise UserError("'tunetrace replay' is not built yet.", exit_code=1)
