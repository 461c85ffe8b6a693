"""Exit status of every command (CONTRACT.md)."""

OK = 0
REFUSED = 1      # refused, cancelled, no usable solution, problems found
BAD_INPUT = 2    # usage, unreadable or invalid file, non-numeric or non-finite number
LINK_FAILED = 3  # the link or the controller failed
INTERNAL = 70    # a bug in benchjog (sysexits EX_SOFTWARE): one line, BENCHJOG_DEBUG=1 for the traceback
