"""The planner's path names, the IK branch names and line-tolerance bounds, importable without numpy: the
command line states them in its help before any math is loaded (``benchjog --help``
stays fast). kinematics/planner.py takes them from here."""

JOINT = "joint"                      # joint-interpolated move
LINE = "line"                        # straight tool line
PATHS = (JOINT, LINE)
BRANCHES = ("elbow-down", "elbow-up")  # the values of kinematics.model.Branch
LINE_TOLERANCE_MM = 0.05             # straight lines: default chordal tolerance
LINE_TOLERANCE_MIN_MM = 0.0001       # below this a tolerance means nothing on a bench arm
LINE_TOLERANCE_MAX_MM = 5.0          # (counts are ~0.01 deg: ~0.04 mm at 250 mm reach)
TOUCH_SPEED_PCT = 25.0               # calibration and commissioning motions (a choice made here)
