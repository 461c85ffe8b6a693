"""The benchjog reference controller firmware (MicroPython), and its HELLO probe.

``core.py`` is the whole controller logic and runs unchanged on MicroPython and CPython
(``benchjog emulate`` runs it); ``hw_io.py``, ``hw_servo.py`` and ``hw_stepdir.py`` are
the board's hardware layers, ``main.py`` its entry and ``config.py`` the template of the
file the user edits. ``benchjog firmware`` writes them to a folder for a board.
"""
