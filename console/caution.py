"""The safety caution the console and the command line show (README, Safety)."""

CAUTION = ("Software interlock only, not a safety-rated function: keep the hardware e-stop "
           "within reach; safeguarding per ISO 10218 / ISO 13849 and local rules comes first.")
