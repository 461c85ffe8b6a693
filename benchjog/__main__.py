"""``python -m benchjog``: the same as the ``benchjog`` command."""

import sys

from benchjog.console.cli.main import main

if __name__ == "__main__":
    sys.exit(main())
