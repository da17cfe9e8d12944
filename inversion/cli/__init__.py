"""The ``sondage`` command line: argument parsing only; the work is the library's.

Each command lives in its own module ``inversion/cli/_<name>.py`` that defines

* ``HELP``: one line for the command list,
* ``DESCRIPTION``: a paragraph with usage examples,
* ``add_arguments(parser)``: its options,
* ``run(args) -> int``: calls the library with the parsed arguments, returns the exit code.

Commands whose module is present are registered; the others are simply absent, so a command is
added by adding its module.  Exit codes: 0 success, 1 internal error, 2 bad input (run file,
spectrum, options or a user file that cannot be read, or what ``check`` calls an error),
3 an inversion that finished without converging when ``--require-convergence`` asks for it,
130 interrupted.
"""

from __future__ import annotations

import argparse
import importlib
import importlib.util
import logging
import sys
import traceback
import warnings

__all__ = ["main", "build_parser", "COMMANDS", "PROGRAM"]

from .._about import PROGRAM, version

#: Command names in the order they are listed; each maps to ``inversion.cli._<name>``.
COMMANDS = ["check", "simulate", "plan", "invert", "report", "series", "demo"]

log = logging.getLogger("sondage")


def _available_commands():
    """(name, module) for each command whose module exists."""
    for name in COMMANDS:
        module_name = f"{__name__}._{name}"
        if importlib.util.find_spec(module_name) is not None:
            yield name, importlib.import_module(module_name)


def build_parser() -> argparse.ArgumentParser:
    """The argument parser with every available command."""
    parser = argparse.ArgumentParser(
        prog=PROGRAM,
        description="Turn ion-backscattering spectra of thin films into composition depth "
                    "profiles with error bars.",
        epilog=f"Run '{PROGRAM} COMMAND --help' for the options of one command.",
    )
    parser.add_argument("--version", action="version",
                        version=f"{PROGRAM} {version('unknown (not installed)')}")
    chatter = parser.add_mutually_exclusive_group()
    chatter.add_argument("-q", "--quiet", action="store_true",
                         help="print only warnings and errors")
    chatter.add_argument("-v", "--verbose", action="count", default=0,
                         help="print more progress detail (twice for debugging detail)")
    parser.add_argument("--debug", action="store_true",
                        help="show the full traceback when something fails")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", title="commands")
    for name, module in _available_commands():
        p = sub.add_parser(name, help=module.HELP, description=module.DESCRIPTION,
                           formatter_class=argparse.RawDescriptionHelpFormatter)
        module.add_arguments(p)
        p.set_defaults(_run=module.run)
    return parser


def _setup_logging(args) -> None:
    if args.quiet:
        level = logging.WARNING
    elif args.verbose >= 2 or args.debug:
        level = logging.DEBUG
    elif args.verbose == 1:
        level = logging.INFO
    else:
        level = logging.WARNING
    handler = logging.StreamHandler(sys.stderr)
    handler.setFormatter(logging.Formatter(f"{PROGRAM}: %(message)s"))
    for name in ("sondage", "forward", "inversion"):
        logger = logging.getLogger(name)
        logger.handlers[:] = [handler]
        logger.setLevel(level)
        logger.propagate = False


def _show_warning(message, category, filename, lineno, file=None, line=None):
    """Warnings from the physics reach the user as one plain line each."""
    stream = file or sys.stderr
    text = " ".join(str(message).split())
    try:
        stream.write(f"{PROGRAM}: warning: {text}\n")
    except OSError:  # pragma: no cover - closed stream
        pass


def main(argv=None) -> int:
    """Run the command line; return the exit code.

    Parameters
    ----------
    argv : list of str, optional
        Arguments without the program name (default: ``sys.argv[1:]``).
    """
    from forward import InputError

    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:  # --help, --version, usage errors
        return int(exc.code) if isinstance(exc.code, int) else (0 if exc.code is None else 2)
    if getattr(args, "_run", None) is None:
        parser.print_help(sys.stderr)
        return 2
    _setup_logging(args)
    try:
        with warnings.catch_warnings():
            if not args.debug:
                warnings.showwarning = _show_warning
            if args.quiet:
                warnings.simplefilter("ignore")
            return int(args._run(args))
    except InputError as exc:
        if args.debug:
            traceback.print_exc()
        print(f"{PROGRAM}: error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print(f"{PROGRAM}: interrupted", file=sys.stderr)
        return 130
    except OSError as exc:
        if args.debug:
            traceback.print_exc()
        name = f"{exc.filename}: " if getattr(exc, "filename", None) else ""
        reason = exc.strerror or str(exc)
        print(f"{PROGRAM}: error: {name}{' '.join(str(reason).split())}", file=sys.stderr)
        return 2
    except Exception as exc:  # noqa: BLE001 - the last line of defence
        if args.debug:
            traceback.print_exc()
        text = " ".join(f"{type(exc).__name__}: {exc}".split())
        print(f"{PROGRAM}: internal error: {text} (run with --debug for the traceback)",
              file=sys.stderr)
        return 1
