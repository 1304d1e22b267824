"""The simulated weigh-station board, served as the pyserial URL scheme `sim://`.

`monitor.sources` adds this package to `serial.protocol_handler_packages`, so
`serial.serial_for_url("sim://?rate=250&seed=1")` opens `protocol_sim.Serial`
and the demo takes the same serial code path as a real board.
"""
