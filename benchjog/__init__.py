"""benchjog: jog, teach and run a small bench robot arm (planar 2R or SCARA).

One namespace for the three packages that live at the top of the repository:
``benchjog.kinematics`` (pure math), ``benchjog.drivers`` (the driver layer and the
interlock) and ``benchjog.console`` (the command line, the Textual app, the cell's files).
"""

__version__ = "0.2.0"
