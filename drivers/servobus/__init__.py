"""The smart-servo bus road: Protocol 2.0 packets (packet.py), the control-table subset
(table.py), a bus link (bus.py), the driver (driver.py), the arm file's ``[bus]`` keys
(config.py), a bus emulation on a pty (emulator.py) and a ping probe (probe.py)."""
