"""Command line: ``tumble COMMAND ...``. A thin layer over the science modules.

Each sub-command lives in its own module here with two functions,
``add_parser(subparsers)`` and ``run(args) -> int``; this module only wires
them together and turns errors into exit codes:

- 0: success;
- 2: bad input (a one-line message on stderr naming the file, row or column);
- 1: internal error (``--debug`` shows the traceback).

Science modules are imported inside ``run`` so that ``tumble --help`` and
``tumble --version`` stay fast.
"""

from __future__ import annotations

import argparse
import importlib
import importlib.util
import sys

from tumble import __version__

__all__ = ["main", "build_parser", "COMMANDS"]

#: Sub-command name -> module (under tumble.cli) that implements it.
COMMANDS = {
    "inspect": "inspect_cmd",
    "scan": "scan_cmd",
    "classify": "classify_cmd",
    "relax": "relax_cmd",
    "survey": "survey_cmd",
    "simulate": "simulate_cmd",
    "report": "report_cmd",
}


class _Parser(argparse.ArgumentParser):
    """argparse with a one-line usage error and exit code 2 (bad input)."""

    def error(self, message):  # pragma: no cover - exercised through main()
        self.exit(2, f"{self.prog}: error: {message}\n")


def build_parser() -> argparse.ArgumentParser:
    """The full argument parser (used by ``main`` and by the docs check)."""
    parser = _Parser(
        prog="tumble",
        description="Principal-axis rotation or tumbling? Asteroid light-curve analysis.",
    )
    parser.add_argument("--version", action="version", version=f"tumble {__version__}")
    parser.add_argument("--debug", action="store_true", help="show full tracebacks on internal errors")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    for name, module in COMMANDS.items():
        if importlib.util.find_spec(f"tumble.cli.{module}") is None:
            continue  # command not built yet in this version
        mod = importlib.import_module(f"tumble.cli.{module}")
        mod.add_parser(sub)
    return parser


def main(argv: list[str] | None = None) -> int:
    """Run the command line; returns the exit code (0 ok, 2 bad input, 1 internal error)."""
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:  # --help, --version, usage errors
        return int(exc.code or 0)
    if args.command is None:
        parser.print_help()
        return 2
    from tumble.exceptions import TumbleError

    try:
        return int(args.run(args) or 0)
    except TumbleError as exc:
        msg = " ".join(str(exc).split())
        print(f"tumble {args.command}: error: {msg}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print(f"tumble {args.command}: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:  # e.g. `tumble inspect ... | head`
        return 0
    except Exception as exc:  # internal error: one line unless --debug
        if getattr(args, "debug", False):
            raise
        print(
            f"tumble {args.command}: internal error: {type(exc).__name__}: {' '.join(str(exc).split())} "
            "(run with --debug for the traceback)",
            file=sys.stderr,
        )
        return 1
