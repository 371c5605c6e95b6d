"""The ``saed`` command: parsing, one-line messages, exit codes.

Subcommands live in ``saed/cli/cmd_<name>.py``; each module defines ``NAME``,
``HELP``, ``add_arguments(parser)`` and ``run(args) -> int``, and is found
automatically. Library errors (:class:`saed.errors.SaedError`) become one line
on stderr and exit status 2; ``--debug`` re-raises them with the traceback.
"""

from __future__ import annotations

import argparse
import importlib
import logging
import pkgutil
import sys

from saed import __version__
from saed.errors import SaedError

__all__ = ["main"]

logger = logging.getLogger("saed")


class _Parser(argparse.ArgumentParser):
    """An ArgumentParser whose errors are one line and exit status 2."""

    def error(self, message):  # noqa: D401 - argparse API
        self.exit(2, f"{self.prog}: error: {one_line(message)} (see {self.prog} --help)\n")


def one_line(text: str) -> str:
    r"""`text` with every non-printable character escaped (a value quoted from a file may hold a line
    break, a record separator or a control code): an error message stays one line.

    >>> one_line("center_px 'a\x1eb' is not a number")
    "center_px 'a\\x1eb' is not a number"
    """
    return "".join(ch if ch.isprintable() else repr(ch)[1:-1] for ch in text)


def _command_names() -> list[str]:
    """Names of the subcommands, from the cmd_*.py file names (nothing imported)."""
    import saed.cli as pkg

    return [info.name[4:] for info in pkgutil.iter_modules(pkg.__path__) if info.name.startswith("cmd_")]


def _commands(only: str | None = None):
    mods = [importlib.import_module(f"saed.cli.cmd_{name}") for name in _command_names() if only in (None, name)]
    return sorted(mods, key=lambda m: getattr(m, "ORDER", 50))


def _command_in(argv: list[str]) -> str | None:
    """The subcommand named in `argv` (the first word that is not a global option), if it is one of ours."""
    for word in argv:
        if word in ("-v", "--verbose", "--debug") or (word.startswith("-v") and set(word[1:]) == {"v"}):
            continue
        return word if not word.startswith("-") and word in _command_names() else None
    return None


def build_parser(only: str | None = None) -> argparse.ArgumentParser:
    """The whole parser; with `only`, just that subcommand (start-up imports only what the command needs)."""
    parser = _Parser(prog="saed", description="Index selected-area electron diffraction patterns: phase, zone axis, orientation.")
    parser.add_argument("--version", action="version", version=f"saed {__version__}")
    parser.add_argument("--debug", action="store_true", help="show the full traceback on errors")
    parser.add_argument("-v", "--verbose", action="count", default=0, help="more log messages on stderr")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    for mod in _commands(only):
        p = sub.add_parser(mod.NAME, help=mod.HELP, description=getattr(mod, "DESCRIPTION", mod.HELP))
        p.add_argument("--debug", action="store_true", default=argparse.SUPPRESS, help="show the full traceback on errors")
        mod.add_arguments(p)
        p.set_defaults(_run=mod.run, _files=getattr(mod, "FILES", None), _labels=_labels(p))
    return parser


def _labels(p: argparse.ArgumentParser) -> dict:
    """Each argument's name as the user types it: the metavar of a positional, the long option otherwise."""
    out = {}
    for a in p._actions:
        if a.option_strings:
            out[a.dest] = max(a.option_strings, key=len)
        elif isinstance(a.metavar, str):
            out[a.dest] = a.metavar
    return out


def _run(args) -> int:
    """Run the command; one declaring FILES = (inputs, outputs) is checked first and writes all or nothing."""
    files = getattr(args, "_files", None)
    if files is None:
        status = int(args._run(args) or 0)
    else:
        from saed.cli.common import check_outputs_not_inputs
        from saed.files import all_or_nothing

        check_outputs_not_inputs(args, *files)
        with all_or_nothing():
            status = int(args._run(args) or 0)
    sys.stdout.flush()  # a full disk or closed pipe on stdout is reported here, not at exit
    return status


def _silence_stdout() -> None:
    """After stdout failed: send what is still buffered nowhere, so the exit flush cannot fail again."""
    import os

    try:
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
    except (OSError, ValueError):
        pass


def _stdout_broken() -> bool:
    try:
        sys.stdout.flush()
    except (OSError, ValueError):
        return True
    return False


def main(argv: list[str] | None = None) -> int:
    """Run ``saed`` with `argv` (default: the program's own arguments) and return the exit status."""
    try:
        return _main(sys.argv[1:] if argv is None else list(argv))
    finally:
        if argv is None:  # the program itself (console script, python -m saed), not a caller in this process
            _quick_exit_collection()


def _quick_exit_collection() -> None:
    """Spare the exit its garbage collection passes: the interpreter's shutdown runs full collections
    over every object left, and after numpy and scipy are imported that is about 0.1 s of a cold
    ``saed index`` (issue 15.13). Frozen objects are skipped by them; what is not in a reference cycle
    is still freed as the modules are torn down, the rest goes back to the system with the process.
    atexit handlers still run and stdout/stderr are still flushed. Every file saed writes is closed
    before its command returns (saed.files), so no output waits for a collection. Only for the program
    itself: a caller of main() in its own process keeps its collector as it was.
    """
    import gc

    gc.freeze()


def _main(words: list[str]) -> int:
    only = _command_in(words)
    if only is None and words and words[0] == "--version":
        print(f"saed {__version__}")
        return 0
    parser = build_parser(only)
    args = parser.parse_args(words)
    logging.basicConfig(level=logging.WARNING - 10 * min(args.verbose, 2), format="saed: %(message)s", stream=sys.stderr)
    if not getattr(args, "command", None):
        parser.print_help(sys.stderr)
        return 2
    try:
        return _run(args)
    except SaedError as exc:
        if args.debug:
            raise
        print(f"saed {args.command}: error: {one_line(str(exc))}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print(f"saed {args.command}: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        if _stdout_broken():
            _silence_stdout()
        return 0
    except OSError as exc:  # a write the library could not name better (stdout on a full disk, ...)
        if args.debug:
            raise
        what = f"{exc.filename}: {exc.strerror or exc}" if exc.filename else \
            f"cannot write the output ({exc.strerror or exc})"
        if _stdout_broken():
            _silence_stdout()
        print(f"saed {args.command}: error: {one_line(what)}", file=sys.stderr)
        return 2
    except MemoryError:
        if args.debug:
            raise
        print(f"saed {args.command}: error: out of memory (try a smaller image, --max-g or fewer phases)", file=sys.stderr)
        return 2
