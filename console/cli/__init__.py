"""The command line: ``benchjog`` and its subcommands (``main.main`` is the entry)."""
