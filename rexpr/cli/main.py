"""The ``rexpr`` command: one subcommand per module in this package."""

from __future__ import annotations

import argparse
import os
import sys
from typing import Callable

from rexpr.errors import RexprError

EXIT_OK, EXIT_DISAGREE, EXIT_INVALID, EXIT_INTERNAL = 0, 1, 2, 3

# name -> module; each module has ``add_arguments(parser)`` and ``run(args) -> int``.
_COMMANDS = {
    "check": "rexpr.cli.check",
    "compile": "rexpr.cli.compile",
    "functions": "rexpr.cli.functions",
    "plan": "rexpr.cli.plan",
    "diff": "rexpr.cli.diff",
    "serve": "service.cli",
    "demo": "rexpr.cli.demo",
}


def _build_parser() -> argparse.ArgumentParser:
    import importlib

    parser = argparse.ArgumentParser(prog="rexpr", description="Write a filter once; know where it means the same.")
    parser.add_argument("--version", action="version", version=f"rexpr {_version()}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name, module_name in _COMMANDS.items():
        try:
            module = importlib.import_module(module_name)
        except ImportError as exc:  # an optional part (e.g. the service extra) is not installed
            command = sub.add_parser(name, help=f"(unavailable: {exc.name} is not installed)")
            command.set_defaults(run=_missing(name, exc))
            continue
        command = sub.add_parser(name, help=module.__doc__.splitlines()[0] if module.__doc__ else None,
                                 description=module.__doc__)
        module.add_arguments(command)
        command.set_defaults(run=module.run)
    return parser


def _missing(name: str, exc: ImportError) -> Callable[[argparse.Namespace], int]:
    def run(args: argparse.Namespace) -> int:
        print(f"rexpr {name} needs {exc.name}, which is not installed; install the extra: "
              f"pip install -e '.[service]'", file=sys.stderr)
        return EXIT_INVALID

    return run


def _version() -> str:
    from rexpr import __version__

    return __version__


def main(argv: list[str] | None = None) -> int:
    parser = _build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:  # argparse already printed its message
        return EXIT_INVALID if exc.code not in (0, None) else EXIT_OK
    run: Callable[[argparse.Namespace], int] | None = getattr(args, "run", None)
    if run is None:
        parser.print_help()
        return EXIT_INVALID
    try:
        return run(args)
    except RexprError as exc:
        if getattr(args, "json", False):
            import json

            print(json.dumps({"error": exc.to_dict()}, ensure_ascii=False))
        print(exc.render(), file=sys.stderr)
        return EXIT_INVALID
    except KeyboardInterrupt:
        print("interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        return _reader_went_away()
    except Exception as exc:  # noqa: BLE001 - the last line of defence: no raw traceback for users
        if os.environ.get("REXPR_DEBUG"):
            raise
        print(f"internal error: {type(exc).__name__}: {exc}\n(set REXPR_DEBUG=1 for the traceback; "
              "please report it)", file=sys.stderr)
        return EXIT_INTERNAL


def _reader_went_away() -> int:
    """The reader of stdout closed it (``rexpr diff | head``): stop quietly, as a command killed by
    SIGPIPE would, with exit status 128 + 13 (common practice, no source). stdout is pointed at
    the null device so the interpreter's final flush does not raise again (the recipe in
    Python's ``signal`` documentation, "Note on SIGPIPE")."""
    try:
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
    except OSError:
        pass
    return 141


if __name__ == "__main__":
    sys.exit(main())
