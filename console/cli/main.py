"""The ``benchjog`` command line: argparse subcommands, one ``cmd_<name>`` each.

Subcommands live in ``console/cli/cmd_*.py`` modules; each has ``register(subparsers)``
that adds its parsers with ``set_defaults(func=cmd_<name>)``; console/cli/commands.py
lists them with their one-line summaries. Only the modules of the commands named on
the command line are imported: the others get a parser with their summary alone, so
``benchjog --help`` and ``benchjog solve ...`` import one module or none. ``main`` turns the known
errors into one stderr line and an exit code (console/exit_codes.py), never a traceback.

Start-up: registering the parsers imports only argparse-level code; a command's heavy
imports (numpy through the solver, rich, the planner, the interlock, Textual) happen
inside the command's function, so ``--version`` and ``--help`` load none of them
(tests/test_cli_startup.py checks which modules load; tests/perf/bench_startup.py times it).
"""

from __future__ import annotations

import os
import sys

from benchjog.console import exit_codes

TYPE_CHECKING = False  # typing.TYPE_CHECKING without importing typing at start-up
if TYPE_CHECKING:
    import argparse
    from collections.abc import Sequence



def _parser_class():
    """argparse's parser with usage errors as one line on stderr, exit 2 (made on first
    use: ``benchjog --version`` does not import argparse at all)."""
    import argparse

    class _Parser(argparse.ArgumentParser):
        def error(self, message: str):  # type: ignore[override]
            self.exit(exit_codes.BAD_INPUT, f"benchjog: {message} (see benchjog --help)\n")

    return _Parser


def version() -> str:
    from benchjog import __version__
    return __version__


def build_parser(argv: Sequence[str] | None = None) -> argparse.ArgumentParser:
    """The whole parser, or (``argv`` given) one whose subcommands other than those
    named in ``argv`` carry only their summary: the overview and every usage message
    read the same, and nothing else is needed to parse ``argv``."""
    import importlib

    from benchjog.console.cli.commands import COMMANDS
    from benchjog.console.cli.common import add_verbosity_options, baud_rate

    _Parser = _parser_class()
    parser = _Parser(prog="benchjog", description=(
        "Jog, teach and run a small bench robot arm (planar 2R or SCARA). With no "
        "command: the console on the built-in simulated arm."))
    parser.add_argument("--version", action="version", version=f"benchjog {version()}")
    parser.add_argument("--print-completion", metavar="SHELL", choices=COMPLETION_SHELLS,
                        help="print a shell completion script (bash, zsh or tcsh) and exit; "
                        "see the README, 'Shell completion'")
    add_verbosity_options(parser)
    parser.add_argument("--arm", metavar="FILE", help="arm file (TOML) or built-in arm name")
    parser.add_argument("--port", metavar="URL", help="serial port or pyserial URL of the controller")
    parser.add_argument("--baud", type=baud_rate, default=115200, help="baud rate (default 115200)")
    parser.add_argument("--journal", metavar="FILE", default=None,
                        help="append the motion journal here (default: a new file in the "
                        "user's state directory, ~/.local/state/benchjog/journal on Linux; "
                        "rotated at 50 MB / 30 days)")
    parser.add_argument("--trace", metavar="FILE", default=None,
                        help="serial: write every protocol line sent and received, timestamped")
    parser.add_argument("--cell", metavar="DIR", default=None,
                        help="console: the cell folder holding points.toml and program.toml "
                        "(default $BENCHJOG_CELL, else ~/.local/share/benchjog/cell on Linux)")
    parser.add_argument("--points", metavar="FILE", default=None,
                        help="console: the points file to teach into (default: the cell's "
                        "points.toml)")
    parser.add_argument("--program", metavar="FILE", default=None,
                        help="console: the program file to build (default: the cell's "
                        "program.toml)")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    wanted = _modules_named(argv)
    registered: set[str] = set()
    for name, module, words in COMMANDS:
        if module in registered:
            continue                      # it registered all of its commands, in order
        if wanted is None or module in wanted:
            importlib.import_module(module).register(sub)
            registered.add(module)
        else:
            sub.add_parser(name, help=words, add_help=False)
    return parser


def _modules_named(argv: Sequence[str] | None) -> set[str] | None:
    """The command modules ``argv`` needs, or None for all of them (no ``argv``, or a
    completion script, which describes every command). A word that merely looks like
    a command (an option's value) only costs one module more."""
    if argv is None or any(len(a) > 4 and "--print-completion".startswith(a.split("=")[0])
                           for a in argv):
        return None
    from benchjog.console.cli.commands import COMMANDS

    words = set(argv)
    return {module for name, module, _ in COMMANDS if name in words}


COMPLETION_SHELLS = ("bash", "zsh", "tcsh")


def main(argv: Sequence[str] | None = None) -> int:
    argv = list(sys.argv[1:] if argv is None else argv)
    with _closed_pipe_is_quiet():
        if argv == ["--version"]:  # the quickest answer: no parser to build
            print(f"benchjog {version()}")
            return exit_codes.OK
        parser = build_parser(argv)
        try:
            args = parser.parse_args(argv)
        except SystemExit as done:  # --help, --version, a usage error
            return done.code if isinstance(done.code, int) else exit_codes.BAD_INPUT
        if getattr(args, "print_completion", None):
            import shtab  # only here: a static script, generated from the parser itself

            print(shtab.complete(parser, args.print_completion))
            return exit_codes.OK
        _setup_logging(args)
        return _run(parser, args)


def _run(parser: argparse.ArgumentParser, args: argparse.Namespace) -> int:
    func = getattr(args, "func", None)
    try:
        if func is None:
            return _console_or_overview(parser, args)
        return int(func(args))
    except BrokenPipeError:
        raise  # _closed_pipe_is_quiet ends it quietly
    except KeyboardInterrupt:
        print("benchjog: interrupted", file=sys.stderr)
        return exit_codes.REFUSED
    except Exception as exc:  # noqa: BLE001 - known errors become one line
        from benchjog.console.errors import known_error_code

        code = known_error_code(exc)
        if code is None:
            if os.environ.get("BENCHJOG_DEBUG"):
                raise
            # A bug, not the user's mistake: still one line, and nothing half done (the
            # gate and the files clean up on their way out); the traceback on request.
            text = str(exc).strip().splitlines()
            print(f"benchjog: internal error: {type(exc).__name__}"
                  f"{': ' + text[0] if text else ''} (a bug: please report it; "
                  "BENCHJOG_DEBUG=1 shows the traceback)", file=sys.stderr)
            return exit_codes.INTERNAL
        print(f"benchjog: {exc}", file=sys.stderr)
        return code


def _setup_logging(args: argparse.Namespace) -> None:
    """stdlib logging on stderr: info with -v, debug with -vv, errors only with --quiet.
    Without either, logging is not even imported (start-up time); a warning then still
    reaches stderr through Python's last-resort handler."""
    verbose = getattr(args, "verbose", 0) or 0
    if not verbose and not getattr(args, "quiet", False):
        return
    import logging

    if getattr(args, "quiet", False):
        level = logging.ERROR
    else:
        level = (logging.WARNING, logging.INFO)[verbose] if verbose < 2 else logging.DEBUG
    root = logging.getLogger("benchjog")
    root.setLevel(level)
    if not any(getattr(h, "benchjog_stderr", False) for h in root.handlers):

        class StderrHandler(logging.StreamHandler):
            """Writes to whatever ``sys.stderr`` is when a record comes, not the stream
            of the moment it was made (a caller or a test may swap it)."""

            benchjog_stderr = True

            @property
            def stream(self):  # type: ignore[override]
                return sys.stderr

            @stream.setter
            def stream(self, value) -> None:  # StreamHandler.__init__ assigns it
                pass

        handler = StderrHandler()
        handler.setFormatter(logging.Formatter("benchjog: %(levelname)s: %(message)s"))
        root.addHandler(handler)
    root.propagate = False


class _closed_pipe_is_quiet:
    """A reader that stops early (``benchjog check prog.toml | head -1``) is not an error:
    once stdout's pipe is closed, what is left to print is dropped and the command ends
    with its own exit status; nothing is said about it and no traceback is printed.
    (Python's documented recipe for SIGPIPE: point stdout at devnull so the final flush
    at exit cannot fail; the process is not killed by the signal, so a motion in
    progress still ends through the interlock.)"""

    def __enter__(self):
        self._saved = sys.stdout
        if self._saved is not None:
            sys.stdout = _PipeGuard(self._saved)
        return self

    def __exit__(self, exc_type, exc, tb):
        guard, sys.stdout = sys.stdout, self._saved
        if isinstance(guard, _PipeGuard):
            try:
                guard.flush()
            except BrokenPipeError:
                pass
            if guard.broken:
                _stdout_to_devnull(self._saved)
        if exc_type is BrokenPipeError:
            _stdout_to_devnull(self._saved)
            raise SystemExit(exit_codes.OK)
        return False


def _stdout_to_devnull(stream) -> None:
    try:
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, stream.fileno())
        os.close(devnull)
    except (OSError, ValueError, AttributeError):  # not a real file (a test's capture)
        pass


class _PipeGuard:
    """Wraps stdout: a write or flush into a closed pipe marks it broken and drops the
    rest instead of raising in the middle of a command."""

    def __init__(self, stream):
        self._stream = stream
        self.broken = False

    def write(self, text: str) -> int:
        if not self.broken:
            try:
                return self._stream.write(text)
            except BrokenPipeError:
                self.broken = True
        return len(text)

    def flush(self) -> None:
        if not self.broken:
            try:
                self._stream.flush()
            except BrokenPipeError:
                self.broken = True

    def __getattr__(self, name: str):
        return getattr(self._stream, name)


def _console_or_overview(parser: argparse.ArgumentParser, args: argparse.Namespace) -> int:
    """The console when there is a terminal to draw it on; otherwise (a script, CI, a
    pipe) the command overview."""
    if not (sys.stdin.isatty() and sys.stdout.isatty()):
        parser.print_help()
        print("benchjog: no terminal here, so the console did not open; the commands are "
              "listed above", file=sys.stderr)
        return exit_codes.OK
    from benchjog.console.paths import cell_dir
    from benchjog.console.tui.app import run_console  # Textual loads only when the console opens

    if not (args.points and args.program):
        cell = cell_dir(args.cell)
        try:
            cell.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            from benchjog.console.errors import UsageError

            raise UsageError(f"cell folder {cell}: {exc.strerror or exc}") from None
        args.points = args.points or str(cell / "points.toml")
        args.program = args.program or str(cell / "program.toml")

    guard = sys.stdout
    if isinstance(guard, _PipeGuard):  # the console owns its terminal: hand Textual the real one
        sys.stdout = guard._stream
    try:
        return run_console(args)
    finally:
        sys.stdout = guard


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
