"""Where benchjog keeps things on the user's machine (documented in the README, "Files").

- State (the motion journal): the user's state directory from platformdirs, e.g.
  ``~/.local/state/benchjog/`` on Linux (``$XDG_STATE_HOME`` honoured), ``~/Library/
  Application Support/benchjog`` on macOS. ``--journal FILE`` writes elsewhere.
- The cell: the console's points and program files, ``points.toml`` and
  ``program.toml`` in the cell folder: ``--cell DIR``, else ``$BENCHJOG_CELL``, else the
  user's data directory's ``benchjog/cell`` (``~/.local/share/benchjog/cell`` on Linux).
  Never silently the shell's current folder.
- Lock files stay beside the file they lock (``points.toml.lock``): a lock elsewhere
  would not be seen by another user's console on a shared file. They are removed when
  the console lets go of the file.
"""

from __future__ import annotations

import os
from pathlib import Path

APP = "benchjog"


def state_dir() -> Path:
    import platformdirs

    return Path(platformdirs.user_state_dir(APP))


def journal_dir() -> Path:
    return state_dir() / "journal"


def cell_dir(given: str | os.PathLike[str] | None = None) -> Path:
    """The cell folder: ``given`` (``--cell``), ``$BENCHJOG_CELL``, or the default."""
    if given:
        return Path(given).expanduser()
    env = os.environ.get("BENCHJOG_CELL")
    if env:
        return Path(env).expanduser()
    import platformdirs

    return Path(platformdirs.user_data_dir(APP)) / "cell"
